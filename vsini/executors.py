"""Where the stars of a survey are measured: in this process, in local worker processes, or on Dask.

Every executor takes an iterator of :class:`~vsini.starlist.StarTask` and yields ``(task, payload)`` as
the stars finish (in any order), keeping only a bounded number of stars in flight (by default twice the
number of workers), so a list of any length is streamed: no executor reads ahead, and no spectrum is held
by the parent process. A star is measured by :func:`measure_task`, which never raises for a problem with
the star: it returns a payload whose row carries the error and flags.

* ``serial``: in this process, one star after another (``jobs=1``).
* ``local``: :class:`concurrent.futures.ProcessPoolExecutor` with ``jobs`` workers. Workers are started with
  the ``forkserver`` method where the platform has it (``spawn`` otherwise), so a parent with threads is
  safe to fork from. If a worker process dies (killed, out of memory, a crash in a compiled library),
  the pool is rebuilt and the stars that were in flight are run again one at a time: the star that kills
  a worker on its own gets a failed row, the others are measured normally.
* ``dask``: a :mod:`dask.distributed` cluster given by its scheduler address (or a ``Client``). dask is
  imported only here, with an install hint when it is missing. Spectrum paths (and the report folder)
  must be readable (writable) from the workers, e.g. on a shared file system.
"""

from __future__ import annotations

import multiprocessing
import os
import sys
import time
import traceback
import warnings
from collections import deque
from dataclasses import dataclass
from pathlib import Path

from .errors import InputError, VsiniError

__all__ = [
    "EXECUTORS",
    "WorkerSettings",
    "measure_task",
    "status_of",
    "crash_payload",
    "run_tasks",
    "default_jobs",
]

#: Names accepted by :func:`run_tasks` (``serial`` is what ``local`` with one job means).
EXECUTORS = ("local", "dask", "serial")
_DASK_HINT = 'executor "dask" needs dask.distributed; install it with: pip install "vsini[dask]"'
# Modules the forkserver imports once, so each worker starts without re-importing them.
_PRELOAD = ["numpy", "scipy", "astropy.table", "lmfit", "matplotlib", "vsini.io", "vsini.fit", "vsini.fourier",
            "vsini.compare", "vsini.executors"]


@dataclass(frozen=True)
class WorkerSettings:
    """What every star shares: the tabulated instrument profile and where per-star figures go.

    Attributes
    ----------
    lsf : vsini.model.TabulatedLSF or None
    figure_dir : str
        Folder for per-star diagnostic figures ("" = no figures).
    """

    lsf: object = None
    figure_dir: str = ""


def default_jobs():
    """Number of local workers by default: the CPUs this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


def status_of(row):
    """'failed' (nothing measured), 'limit' (only an upper limit) or 'measured'."""
    if row.get("adopted_method", "none") == "none":
        return "failed"
    if row.get("vsini_adopted_is_limit"):
        return "limit"
    return "measured"


def crash_payload(task, message):
    """The payload of a star whose measurement could not run at all (worker died, executor error)."""
    from .compare import failed_row

    row = failed_row(task.star, message)
    return {"row": row, "status": "failed", "figure": "", "warnings": [], "elapsed_s": float("nan")}


def figure_name(task):
    """File stem of a star's diagnostic figure: row number and a file-system-safe star name."""
    safe = "".join(c if (c.isalnum() or c in "-_.+") else "_" for c in task.star).strip("._") or "star"
    return f"{task.index + 1:05d}_{safe[:60]}"


def measure_task(task, settings):
    """Measure one star: read its spectrum, run :func:`vsini.compare.measure_star`, draw its figure.

    Parameters
    ----------
    task : StarTask
    settings : WorkerSettings

    Returns
    -------
    dict
        ``row`` (the results row), ``status`` (:func:`status_of`), ``figure`` (file stem relative to the
        figure folder, "" if none), ``warnings`` (messages of warnings raised while measuring; they are
        recorded, not printed), ``elapsed_s`` (the whole star, wall clock), ``figure_s`` (its figure) and
        ``cpu_s`` (processor time of the star in its process), ``peak_rss_kb`` (peak resident memory of the
        process so far; benchmarks use it).

    Notes
    -----
    Never raises for a problem with the star: an unreadable file, a row option that cannot be read, an
    estimator error or an unexpected exception gives a failed row with the message.
    """
    import numpy as np

    from .compare import failed_row, measure_star
    from .io import read_spectrum
    from .starlist import measure_keywords

    start, cpu = time.perf_counter(), time.process_time()
    figure = ""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        measurement = None
        if task.problem:
            row = failed_row(task.star, task.problem)
        else:
            try:
                spectrum = read_spectrum(task.spectrum)
                kwargs = measure_keywords(task.options)
                measurement = measure_star(spectrum, name=task.star, lsf=settings.lsf,
                                           rng=np.random.default_rng(list(task.seed)), **kwargs)
                row = dict(measurement.row)
            except VsiniError as e:
                row = failed_row(task.star, str(e))
            except Exception as e:  # a bug or a library failure: this star only
                where = traceback.extract_tb(e.__traceback__)[-1]
                row = failed_row(task.star, f"unexpected {type(e).__name__}: {e} "
                                            f"({Path(where.filename).name}:{where.lineno})")
        measured_at = time.perf_counter()
        if settings.figure_dir and measurement is not None:
            figure = _draw(task, measurement, settings.figure_dir)
    notes = [f"{w.category.__name__}: {' '.join(str(w.message).split())}" for w in caught]
    if figure.startswith("!"):
        notes.append(figure[1:])
        figure = ""
    end = time.perf_counter()
    try:
        import resource

        peak_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # Linux: kilobytes
    except ImportError:  # pragma: no cover - not on POSIX
        peak_kb = -1
    return {"row": row, "status": status_of(row), "figure": figure, "warnings": notes,
            "elapsed_s": end - start, "figure_s": end - measured_at, "cpu_s": time.process_time() - cpu,
            "peak_rss_kb": peak_kb}


def _draw(task, measurement, folder):
    """Write the star's diagnostic figure (PDF and PNG); its stem, or '!message' if drawing failed."""
    try:
        import matplotlib

        if "matplotlib.pyplot" not in sys.modules:
            matplotlib.use("Agg")
        import matplotlib.pyplot as plt

        from .plots import star_figure

        stem = figure_name(task)
        Path(folder).mkdir(parents=True, exist_ok=True)
        fig = star_figure(measurement)
        try:
            # PNG first (the layout is computed once), then the vector PDF with the layout frozen: half the
            # drawing time of two independent saves, which matters at thousands of stars.
            fig.savefig(Path(folder) / f"{stem}.png", dpi=150)
            fig.set_layout_engine("none")
            fig.savefig(Path(folder) / f"{stem}.pdf")
        finally:
            plt.close(fig)
        return stem
    except Exception as e:  # a figure must never cost a star its result
        return f"!figure not drawn: {type(e).__name__}: {e}"


# --------------------------------------------------------------------------------------------- executors


def run_tasks(tasks, settings, *, executor="local", jobs=None, scheduler=None, max_in_flight=None,
              function=measure_task):
    """Measure ``tasks`` and yield ``(task, payload)`` as each finishes.

    Parameters
    ----------
    tasks : iterator of StarTask
        Consumed lazily: at most ``max_in_flight`` tasks are taken ahead of the finished ones.
    settings : WorkerSettings
    executor : {'local', 'dask', 'serial'}
        ``local`` with ``jobs=1`` runs serially in this process.
    jobs : int, optional
        Local worker processes (default :func:`default_jobs`).
    scheduler : str or distributed.Client, optional
        Dask scheduler address (``tcp://host:8786``) or a connected client; required for ``dask``.
    max_in_flight : int, optional
        Stars submitted but not finished (default: twice the number of workers).
    function : callable
        ``function(task, settings) -> payload``; :func:`measure_task` unless testing.

    Raises
    ------
    InputError
        Unknown executor, ``jobs < 1``, ``dask`` without a scheduler, or dask not installed.
    """
    if executor not in EXECUTORS:
        raise InputError(f"executor {executor!r} is not known; use one of {', '.join(EXECUTORS)}")
    if jobs is not None and (not isinstance(jobs, int) or isinstance(jobs, bool) or jobs < 1):
        raise InputError(f"jobs = {jobs!r}: give a whole number of worker processes >= 1")
    if max_in_flight is not None and max_in_flight < 1:
        raise InputError(f"max_in_flight = {max_in_flight!r} must be >= 1")
    if executor == "dask":
        return _run_dask(tasks, settings, scheduler, max_in_flight, function)
    jobs = default_jobs() if jobs is None else jobs
    if executor == "serial" or jobs == 1:
        return _run_serial(tasks, settings, function)
    return _run_local(tasks, settings, jobs, max_in_flight or 2 * jobs, function)


def _run_serial(tasks, settings, function):
    for task in tasks:
        yield task, function(task, settings)


def _worker_init():
    """Each local worker: headless figures; warnings are recorded by :func:`measure_task`."""
    import matplotlib

    matplotlib.use("Agg")


def _ping():
    """A task that does nothing: checks that the workers start."""
    return True


def _mp_context():
    methods = multiprocessing.get_all_start_methods()
    if "forkserver" in methods:
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(_PRELOAD)
        return ctx
    return multiprocessing.get_context("spawn")  # pragma: no cover - platforms without forkserver


def _run_local(tasks, settings, jobs, limit, function):
    from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
    from concurrent.futures.process import BrokenProcessPool

    ctx = _mp_context()
    source = iter(tasks)
    suspects = deque()  # stars in flight when a worker died: re-run one at a time
    pending = {}
    pool = ProcessPoolExecutor(max_workers=jobs, mp_context=ctx, initializer=_worker_init)
    exhausted = False

    def submit(task, alone):
        pending[pool.submit(function, task, settings)] = (task, alone)

    try:
        try:
            pool.submit(_ping).result()
        except BrokenProcessPool as e:
            raise VsiniError(
                "local worker processes could not start; when run_survey is called from a script, put the call "
                "under `if __name__ == '__main__':` (worker processes import the main module), or use jobs=1"
            ) from e
        while True:
            if suspects:  # after a worker died: one star at a time, so a crash identifies its star
                if not pending:
                    submit(suspects.popleft(), True)
            else:
                while not exhausted and len(pending) < limit:
                    task = next(source, None)
                    if task is None:
                        exhausted = True
                    else:
                        submit(task, False)
            if not pending:
                return
            done, _ = wait(pending, return_when=FIRST_COMPLETED)
            broken = False
            for future in done:
                task, alone = pending.pop(future)
                try:
                    payload = future.result()
                except BrokenProcessPool:
                    broken = True
                    if alone:
                        yield task, crash_payload(task, "the worker process died while measuring this star "
                                                        "(killed, out of memory or crashed)")
                    else:
                        suspects.append(task)
                    continue
                except Exception as e:  # pickling problems and the like: this star only
                    yield task, crash_payload(task, f"could not be run in a worker: {type(e).__name__}: {e}")
                    continue
                yield task, payload
            if broken:
                suspects.extend(task for task, _ in pending.values())
                pending.clear()
                pool.shutdown(wait=False, cancel_futures=True)
                pool = ProcessPoolExecutor(max_workers=jobs, mp_context=ctx, initializer=_worker_init)
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def _run_dask(tasks, settings, scheduler, limit, function):
    try:
        from distributed import Client, as_completed
    except ImportError as e:
        raise InputError(_DASK_HINT) from e
    if scheduler is None:
        raise InputError("executor 'dask' needs the scheduler address (e.g. tcp://10.0.0.5:8786) of a running "
                         "Dask cluster; pass scheduler=... (--scheduler)")
    return _dask_loop(tasks, settings, scheduler, limit, function, Client, as_completed)


def _dask_loop(tasks, settings, scheduler, limit, function, Client, as_completed):  # noqa: N803 - classes
    own = not isinstance(scheduler, Client)
    try:
        client = Client(scheduler) if own else scheduler
    except (OSError, TimeoutError, ValueError) as e:
        raise InputError(f"cannot connect to the Dask scheduler at {scheduler!r} ({e}); "
                         "check the address and that the cluster is running") from e
    try:
        workers = max(1, sum(client.nthreads().values()))
        limit = limit or 2 * workers
        source = iter(tasks)
        running = {}
        queue = as_completed()

        def submit():
            task = next(source, None)
            if task is None:
                return False
            future = client.submit(function, task, settings, pure=False, key=f"vsini-star-{task.index}-{os.getpid()}"
                                   f"-{time.monotonic_ns()}")
            running[future.key] = task
            queue.add(future)
            return True

        while len(running) < limit and submit():
            pass
        for future in queue:
            task = running.pop(future.key)
            try:
                payload = future.result()
            except Exception as e:  # the task died on the cluster (worker lost, KilledWorker, ...)
                payload = crash_payload(task, f"failed on the Dask cluster: {type(e).__name__}: {e}")
            finally:
                future.release()
            yield task, payload
            while len(running) < limit and submit():
                pass
    finally:
        if own:
            client.close()
