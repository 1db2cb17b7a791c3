"""Star-list surveys: both estimates for every star, journaled as each finishes, a table and a report.

:func:`run_survey` reads a star list (:mod:`vsini.starlist`), measures each star with
:func:`vsini.compare.measure_star` on an executor (:mod:`vsini.executors`: this process, local worker
processes or a Dask cluster), records every finished star in an SQLite journal beside the results
(:mod:`vsini.journal`), and at the end writes the results table (:func:`vsini.report.write_results`)
and, when asked, the report folder (:func:`vsini.report.write_report`). A killed or crashed run is
continued with ``resume=True``: stars already in the journal are not measured again.

Nothing here prints. Progress goes to an object with the :class:`Progress` methods (the command line
passes :class:`vsini.console.ConsoleProgress`); by default it goes nowhere.

The formats, options, flags and the adoption rule are described in ``docs/survey.md``.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Protocol

import numpy as np

from .errors import InputError
from .executors import EXECUTORS, WorkerSettings, run_tasks
from .journal import Journal, journal_path, plain
from .report import COLUMN_DESCRIPTIONS, table_format, write_report, write_results
from .starlist import INPUT_UNITS, OPTION_COLUMNS, parse_option, read_starlist

__all__ = [
    "DEFAULT_OPTIONS",
    "Progress",
    "NullProgress",
    "SurveySummary",
    "run_survey",
    "results_table",
    "demo_folder",
    "run_demo",
]

#: Survey-wide options (``defaults`` of :func:`run_survey`) and their default values. The
#: star-list columns of the same names override them per star.
DEFAULT_OPTIONS = {
    "resolution": None,
    "limb_darkening": 0.6,
    "lines": None,
    "teff": None,
    "logg": None,
    "rv": None,
    "macroturbulence": "free",
    "method": "both",
    "mc": 0,
    "lsf": None,
    "seed": 0,
}

_FIGURE_DIR = "stars"


class Progress(Protocol):
    """What :func:`run_survey` reports while it runs (implemented by :class:`vsini.console.ConsoleProgress`)."""

    def start(self, total: int, done: int = 0) -> None:
        """The run begins: ``total`` stars in the list, ``done`` of them already in the journal."""

    def advance(self, star: str, status: str, detail: str = "") -> None:
        """One star finished: ``status`` is 'measured', 'limit' or 'failed'; ``detail`` its flags or error."""

    def stage(self, text: str) -> None:
        """A step after the stars (writing the table, the report)."""

    def finish(self, summary: SurveySummary) -> None:
        """The run is over."""


class NullProgress:
    """A :class:`Progress` that reports nothing (the default below the command line)."""

    def start(self, total, done=0):
        """Nothing."""

    def advance(self, star, status, detail=""):
        """Nothing."""

    def stage(self, text):
        """Nothing."""

    def finish(self, summary):
        """Nothing."""


@dataclass(frozen=True)
class SurveySummary:
    """Counts and files of a finished survey.

    Attributes
    ----------
    total : int
        Stars in the list.
    measured, limits, failed : int
        Stars with an adopted value, with only an upper limit, and with nothing measured
        (unreadable file, no usable line, both methods failed). They add up to ``total``.
    flagged : int
        Measured or limit stars carrying at least one flag.
    resumed : int
        Stars taken from the journal of an earlier run instead of being measured again.
    elapsed_s : float
        Wall-clock time of this call.
    results : Path
    journal : Path
    report : Path or None
        ``index.html`` of the report folder.
    outputs : tuple of Path
        Every results file written (``results`` first).
    """

    total: int
    measured: int
    limits: int
    failed: int
    flagged: int
    resumed: int
    elapsed_s: float
    results: Path
    journal: Path
    report: Path | None = None
    outputs: tuple = ()

    def line(self):
        """The one-line summary: ``30 stars: 24 measured, 5 upper limits, 1 failed; 9 flagged``."""
        text = (f"{self.total} star{'s' if self.total != 1 else ''}: {self.measured} measured, {self.limits} upper "
                f"limit{'s' if self.limits != 1 else ''}, {self.failed} failed; {self.flagged} flagged")
        if self.resumed:
            text += f" ({self.resumed} from the journal of an earlier run)"
        return text

    def __str__(self):
        return self.line()


# --------------------------------------------------------------------------------------------- options


def _normalise_defaults(defaults):
    """Check and parse the survey-wide options; returns (options for the tasks, LSF object, JSON-ready copy)."""
    defaults = dict(defaults or {})
    unknown = sorted(set(defaults) - set(DEFAULT_OPTIONS))
    if unknown:
        raise InputError(f"survey options: unknown option(s) {', '.join(map(repr, unknown))}; "
                         f"known: {', '.join(DEFAULT_OPTIONS)}")
    opts = {**DEFAULT_OPTIONS, **{k: v for k, v in defaults.items() if v is not None}}
    parsed = {}
    for name in OPTION_COLUMNS:
        try:
            parsed[name] = parse_option(name, opts[name])
        except ValueError as e:
            raise InputError(f"survey option {e}") from None
    if parsed["macroturbulence"] is None:
        parsed["macroturbulence"] = "free"
    method = opts["method"]
    if method not in ("both", "fit", "fourier"):
        raise InputError(f"survey option method = {method!r}: use 'both', 'fit' or 'fourier'")
    mc = opts["mc"]
    if not isinstance(mc, (int, np.integer)) or isinstance(mc, bool) or mc < 0:
        raise InputError(f"survey option mc = {mc!r}: give a whole number of Monte Carlo realisations >= 0")
    seed = opts["seed"]
    if not isinstance(seed, (int, np.integer)) or isinstance(seed, bool) or seed < 0:
        raise InputError(f"survey option seed = {seed!r}: give a whole number >= 0")
    parsed.update(method=method, mc=int(mc))
    lsf = opts["lsf"]
    if lsf is not None and not hasattr(lsf, "transform"):
        from .model import load_lsf

        lsf = load_lsf(lsf)
    if parsed["resolution"] is None and lsf is None:
        raise InputError("survey options: give the resolving power (resolution, --resolution) or a tabulated "
                         "line-spread function (lsf, --lsf); a star-list column 'resolution' can then override it")
    record = dict(parsed, seed=int(seed), lsf=getattr(lsf, "source", None) if lsf is not None else None)
    return parsed, int(seed), lsf, plain(record)


def _kernel_meta(options, lsf):
    ld = options["limb_darkening"]
    macro = options["macroturbulence"]
    if lsf is not None:
        instrument = f"tabulated line-spread function ({Path(str(lsf.source)).name or 'in memory'})"
    else:
        instrument = f"Gaussian, FWHM = c/R, R = {options['resolution']:g}"
    return {
        "rotation": "limb-darkened rotation profile of a rigid sphere (Gray 2005, ch. 18)",
        "limb_darkening": f"linear, epsilon = {ld}" if isinstance(ld, float) else f"quadratic a,b = {ld}",
        "instrument": instrument,
        "macroturbulence": ("radial-tangential (Gray 2005), zeta fitted" if macro == "free" else
                            "none" if macro == "off" else f"radial-tangential (Gray 2005), zeta fixed at {macro} km/s"),
        "intrinsic": "Gaussian, thermal + 1 km/s microturbulent width at teff (5800 K when not given)",
        "row_overrides": "star-list columns " + ", ".join(OPTION_COLUMNS) + " override these per star",
    }


def _adoption_rule():
    from . import compare

    doc = compare.__doc__ or ""
    head = "Adoption rule\n-------------\n"
    return " ".join(doc.split(head, 1)[1].split()) if head in doc else ""


# --------------------------------------------------------------------------------------------- the run


def run_survey(starlist_path, output_path, *, defaults, jobs=None, executor="local", scheduler=None, resume=False,
               report_dir=None, progress=None, also=(), max_in_flight=None):
    """Measure every star of a star list with both methods; journal, table and report.

    Parameters
    ----------
    starlist_path : path-like
        CSV or ECSV star list (columns in ``docs/survey.md``).
    output_path : path-like
        Results table; the format follows the extension (``.ecsv``, ``.csv``, ``.fits``, ``.tex``, ``.txt``).
        The journal is written beside it (:func:`vsini.journal.journal_path`).
    defaults : dict
        Survey-wide options, keys of :data:`DEFAULT_OPTIONS`: ``resolution``, ``limb_darkening``,
        ``lines``, ``teff``, ``logg``, ``rv``, ``macroturbulence`` ('free', a value or 'off'),
        ``method``, ``mc``, ``lsf`` (path or :class:`~vsini.model.TabulatedLSF`), ``seed``. None values
        mean the default.
    jobs : int, optional
        Local worker processes (default: all CPUs); 1 measures in this process.
    executor : {'local', 'dask', 'serial'}
    scheduler : str or distributed.Client, optional
        Dask scheduler address, for ``executor='dask'``.
    resume : bool
        Continue the run recorded in the journal: finished stars are not measured again. The options
        must be the same. False starts a new journal (an old one is replaced).
    report_dir : path-like, optional
        Write per-star figures, survey figures and ``index.html`` here.
    progress : Progress, optional
    also : sequence of path-like
        More results files to write (other formats) from the same table.
    max_in_flight : int, optional
        Stars submitted ahead (default: twice the number of workers).

    Returns
    -------
    SurveySummary

    Raises
    ------
    InputError
        Fatal problems only: the star list cannot be read or lacks a required column, an option is
        invalid, an output extension is unknown, the journal cannot be resumed with these options.
        A problem with one star never raises: it gets a failed row.
    """
    start = time.perf_counter()
    progress = progress or NullProgress()
    if executor not in EXECUTORS:
        raise InputError(f"executor {executor!r} is not known; use one of {', '.join(EXECUTORS)}")
    output_path = Path(output_path)
    outputs = [output_path, *(Path(p) for p in also)]
    for p in outputs:
        table_format(p)  # unknown extensions fail before any star is measured
    starlist = read_starlist(starlist_path)
    options, seed, lsf, record = _normalise_defaults(defaults)
    from . import __version__

    jpath = journal_path(output_path)
    meta = {"options": record, "star_list": str(starlist_path), "vsini_version": __version__}
    report_dir = Path(report_dir).resolve() if report_dir is not None else None  # workers may run elsewhere
    settings = WorkerSettings(lsf=lsf, figure_dir=str(report_dir / _FIGURE_DIR) if report_dir else "")
    with Journal.open(jpath, meta=meta, resume=resume) as journal:
        done = journal.finished()
        total = len(starlist)
        for index, star in journal.stars().items():
            if index < total and star != starlist.star_name(index):
                raise InputError(f"{jpath}: cannot resume: row {index + 1} of the journal is star {star!r} but the "
                                 f"star list has {starlist.star_name(index)!r}; resume with the same star list "
                                 "(rows may only be appended) or start again without resume")
        resumed = sum(1 for i in done if i < total)
        progress.start(total, resumed)
        tasks = (starlist.task(i, options, seed) for i in range(total) if i not in done)
        for task, payload in run_tasks(tasks, settings, executor=executor, jobs=jobs, scheduler=scheduler,
                                       max_in_flight=max_in_flight):
            payload["row"]["star"] = task.star
            journal.record(task.index, task.star, payload["status"], payload)
            row = payload["row"]
            detail = row.get("error", "") if payload["status"] == "failed" else row.get("flags", "")
            progress.advance(task.star, payload["status"], detail)
        progress.stage("writing the results table")
        table, figures = results_table(starlist, journal)
    counts = _counts(table)
    created = datetime.now(timezone.utc).isoformat(timespec="seconds")
    table.meta.update({
        "vsini_version": __version__,
        "created": created,
        "star_list": str(starlist_path),
        "options": record,
        "kernel": _kernel_meta(options, lsf),
        "adoption_rule": _adoption_rule(),
        "note": ("Empty (masked) values: not measured, the flags say why. Upper limits are in "
                 "vsini_fit_upper_limit, vsini_fourier_upper_limit and, with vsini_adopted_is_limit = True, "
                 "in vsini_adopted. Velocities in km/s, uncertainties one sigma."),
        "summary": counts,
        "flags": _flag_meanings(table),
    })
    for p in outputs:
        write_results(table, p)
    index = None
    summary_args = dict(total=len(table), resumed=resumed, results=output_path, journal=jpath, outputs=tuple(outputs),
                        **counts)
    if report_dir is not None:
        progress.stage("writing the report")
        line = SurveySummary(elapsed_s=0.0, **summary_args).line()
        files = [(p.name, _relative(p, report_dir)) for p in outputs]
        index = write_report(table, report_dir, figures=figures, figure_dir=_FIGURE_DIR,
                             title=f"vsini survey of {Path(starlist_path).name}", summary=line, files=files)
    summary = SurveySummary(elapsed_s=time.perf_counter() - start, report=index, **summary_args)
    progress.finish(summary)
    return summary


def _relative(path, folder):
    import os

    try:
        return os.path.relpath(Path(path).resolve(), Path(folder).resolve())
    except ValueError:  # pragma: no cover - another drive on Windows
        return str(Path(path).resolve())


def _counts(table):
    method = np.ma.filled(np.ma.asarray(table["adopted_method"]), "none")
    limit = np.ma.filled(np.ma.asarray(table["vsini_adopted_is_limit"]), False).astype(bool)
    flags = np.ma.filled(np.ma.asarray(table["flags"]), "")
    failed = method == "none"
    return {
        "measured": int(np.sum(~failed & ~limit)),
        "limits": int(np.sum(~failed & limit)),
        "failed": int(np.sum(failed)),
        "flagged": int(np.sum(~failed & (np.char.str_len(flags.astype(str)) > 0))),
    }


def _flag_meanings(table):
    from .flags import FLAGS

    used = sorted({f for text in np.ma.filled(np.ma.asarray(table["flags"]), "") for f in str(text).split()})
    return {f: FLAGS.get(f, "") for f in used}


# --------------------------------------------------------------------------------------------- the table


def _kind_of(value):
    """'bool', 'int', 'float', 'str' or None (missing) for one JSON value."""
    if value is None:
        return None
    if isinstance(value, bool):
        return "bool"
    if isinstance(value, int):
        return "int"
    if isinstance(value, float):
        return "float"
    return "str"


def _column_kind(kinds):
    """The column type for the set of value kinds seen in it."""
    kinds = kinds - {None}
    if not kinds:
        return "float"
    if len(kinds) == 1:
        return next(iter(kinds))
    return "float" if kinds <= {"int", "float"} else "str"


def results_table(starlist, journal):
    """Build the results table from the journal (row order of the star list) and the star list's columns.

    Parameters
    ----------
    starlist : StarList
    journal : Journal

    Returns
    -------
    (astropy.table.Table, list of str)
        The table (result columns with units and descriptions, then the star list's columns; a star-list
        column whose name is also a result column is renamed ``input_NAME``) and the per-star figure stems.

    Notes
    -----
    The journal is read twice, one row at a time: once for the column types and once to fill
    preallocated arrays, so memory grows with the size of the table only, not with Python objects per row.
    """
    from astropy.table import Column, MaskedColumn, Table

    from .compare import RESULT_COLUMNS

    n = len(starlist)
    order = list(RESULT_COLUMNS)
    seen = {}
    present = np.zeros(n, dtype=bool)
    for index, payload in journal.payloads():
        if index >= n:
            continue
        present[index] = True
        row = dict(payload["row"], warnings="; ".join(payload.get("warnings", [])))
        for key, value in row.items():
            if key not in seen:
                seen[key] = set()
                if key not in order:
                    order.append(key)
            seen[key].add(_kind_of(value))
    if "warnings" not in order:
        order.append("warnings")
    kinds = {k: _column_kind(seen.get(k, set())) for k in order}
    for k in ("star", "flags", "error", "adopted_method", "warnings"):
        kinds[k] = "str"
    kinds["vsini_adopted_is_limit"] = "bool"
    kinds["n_lines"] = "int"
    arrays = {}
    for k in order:
        if kinds[k] == "str":
            arrays[k] = [""] * n
        elif kinds[k] == "bool":
            arrays[k] = np.zeros(n, dtype=bool)
        elif kinds[k] == "int":
            arrays[k] = np.zeros(n, dtype=np.int64)
        else:
            arrays[k] = np.full(n, np.nan)
    figures = [""] * n
    for index, payload in journal.payloads():
        if index >= n:
            continue
        row = dict(payload["row"], warnings="; ".join(payload.get("warnings", [])))
        figures[index] = payload.get("figure", "") or ""
        for k, value in row.items():
            kind = kinds[k]
            if value is None:
                continue
            if kind == "str":
                arrays[k][index] = str(value)
            elif kind == "float":
                arrays[k][index] = float(value)
            else:
                arrays[k][index] = value
    for index in np.flatnonzero(~present):  # not measured (an interrupted run): a failed row
        arrays["star"][index] = starlist.star_name(index)
        arrays["adopted_method"][index] = "none"
        arrays["error"][index] = "not measured in this run (interrupted); run again with resume"
    from .compare import RESULT_COLUMNS as UNITS

    table = Table()
    for k in order:
        values = arrays[k]
        unit = UNITS.get(k)
        desc = COLUMN_DESCRIPTIONS.get(k)
        if kinds[k] == "float":
            bad = ~np.isfinite(values)
            table[k] = MaskedColumn(values, mask=bad, unit=unit, description=desc) if bad.any() else \
                Column(values, unit=unit, description=desc)
        else:
            table[k] = Column(values, unit=unit, description=desc)
    taken = set(table.colnames)
    for name in starlist.table.colnames:
        if name == "star":
            continue
        col = starlist.table[name]
        out = name if name not in taken else f"input_{name}"
        table[out] = col.copy()
        if table[out].unit is None and name in INPUT_UNITS and col.dtype.kind in "fiu":
            table[out].unit = INPUT_UNITS[name]
        table[out].description = table[out].description or f"from the star list ({name})"
    return table, figures


# --------------------------------------------------------------------------------------------- demo


def demo_folder():
    """The folder of the demo data: the installed package data ``vsini.demo_data``, else ``demo/`` of a source tree.

    Raises
    ------
    InputError
        If neither is found.
    """
    candidates = []
    try:
        from importlib.resources import files

        candidates.append(Path(str(files("vsini.demo_data"))))
    except (ModuleNotFoundError, TypeError):
        pass
    candidates.append(Path(__file__).resolve().parent.parent / "demo")
    for folder in candidates:
        if (folder / "starlist.csv").is_file():
            return folder
    raise InputError("the demo data (demo/starlist.csv) is not installed with this copy of vsini; "
                     "reinstall the package or run from a source tree")


#: Survey-wide options of the demo: the Halcyon Echelle Spectrograph (invented) and solar-type lines.
DEMO_OPTIONS = {"resolution": 60000.0, "lines": "fgk-optical", "limb_darkening": 0.6, "macroturbulence": "free",
                "method": "both", "mc": 0, "seed": 1}


def run_demo(out_dir, *, jobs=None, progress=None, executor="local", resume=False):
    """Run the survey and the report on the demo star list (the fictional Lantern cluster).

    Parameters
    ----------
    out_dir : path-like
        Receives ``results.ecsv``, ``results.csv``, ``results.fits``, ``results.tex``, the report
        (``index.html``, survey figures, ``stars/`` with a figure per star) and the journal.
    jobs : int, optional
    progress : Progress, optional
    executor : str
    resume : bool

    Returns
    -------
    SurveySummary
    """
    from importlib.resources import as_file

    from .datafiles import data_path
    from .model import load_lsf

    folder = demo_folder()
    out_dir = Path(out_dir)
    with as_file(data_path("lsf_example.ecsv")) as path:  # the Halcyon spectrograph's profile
        lsf = load_lsf(path)
    options = dict(DEMO_OPTIONS, lsf=lsf)
    return run_survey(folder / "starlist.csv", out_dir / "results.ecsv", defaults=options, jobs=jobs,
                      executor=executor, resume=resume, report_dir=out_dir, progress=progress,
                      also=[out_dir / "results.csv", out_dir / "results.fits", out_dir / "results.tex"])
