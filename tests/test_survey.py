"""Star-list surveys (issue 5): end to end, every executor gives the same table, resume after a kill,
bad-star isolation, fatal errors, progress output and the demo data."""

from __future__ import annotations

import io
import json
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest
from astropy.table import Table

from vsini.console import ConsoleProgress
from vsini.errors import InputError, SpectrumFileError, VsiniError
from vsini.executors import WorkerSettings, run_tasks
from vsini.io import write_spectrum
from vsini.journal import journal_path
from vsini.simulate import simulate_spectrum
from vsini.starlist import StarTask
from vsini.survey import DEFAULT_OPTIONS, demo_folder, run_survey

LINES = [(5247.05, 0.5), (5250.21, 0.55), (5260.39, 0.45), (5264.81, 0.4)]
DEFAULTS = {"resolution": 60000.0, "lines": "5247.05;5250.21;5260.39;5264.81"}
GOOD = ["T-1", "T-2", "T-3"]


@pytest.fixture(scope="module")
def star_list(tmp_path_factory):
    """Three synthetic stars (FITS and CSV), a broken file and a missing one; a pass-through column."""
    folder = tmp_path_factory.mktemp("survey")
    (folder / "spectra").mkdir()
    for k, (vsini, ext) in enumerate([(3.0, "fits"), (12.0, "csv"), (40.0, "fits")]):
        spec = simulate_spectrum(LINES, wave_range=(5240.0, 5272.0), step=0.03, vsini=vsini, resolution=60000.0,
                                 snr=200.0, rng=k, name=GOOD[k], rv=5.0)
        write_spectrum(spec, folder / "spectra" / f"t{k}.{ext}")
    (folder / "spectra" / "bad.fits").write_bytes(b"SIMPLE  =                    T" + b" " * 50 + b"\x00\x01")
    (folder / "list.csv").write_text(
        "star,spectrum,macroturbulence,notes\n"
        "T-1,spectra/t0.fits,off,slow <b>\n"
        "T-2,spectra/t1.csv,,\n"
        "BAD,spectra/bad.fits,,broken file\n"
        "T-3,spectra/t2.fits,off,fast\n"
        "MISSING,spectra/nope.fits,,\n"
    )
    return folder


@pytest.fixture(scope="module")
def serial_run(star_list, tmp_path_factory):
    """The reference run: in this process, with every output format."""
    out = tmp_path_factory.mktemp("serial")
    lines = io.StringIO()
    summary = run_survey(star_list / "list.csv", out / "results.ecsv", defaults=DEFAULTS, jobs=1,
                         progress=ConsoleProgress(lines, bar=False),
                         also=[out / f"results.{ext}" for ext in ("csv", "fits", "tex", "txt")])
    return summary, Table.read(out / "results.ecsv"), lines.getvalue()


@pytest.fixture(scope="module")
def pool_run(star_list, tmp_path_factory):
    """Two local worker processes, with the report folder (figures are drawn by the workers)."""
    out = tmp_path_factory.mktemp("pool")
    return run_survey(star_list / "list.csv", out / "results.ecsv", defaults=DEFAULTS, jobs=2, max_in_flight=2,
                      report_dir=out / "report")


def same_table(a, b):
    """Equal results: strings exactly, numbers to 1e-9 (NaN where NaN). The warnings column is ignored."""
    assert a.colnames == b.colnames
    for name in a.colnames:
        if name == "warnings":
            continue
        x, y = np.ma.asarray(a[name]), np.ma.asarray(b[name])
        if x.dtype.kind in "fc":
            np.testing.assert_allclose(np.ma.filled(x.astype(float), np.nan), np.ma.filled(y.astype(float), np.nan),
                                       rtol=1e-9, equal_nan=True, err_msg=name)
        else:
            assert list(np.ma.filled(x, "")) == list(np.ma.filled(y, "")), name


# --------------------------------------------------------------------------------------------- end to end


def test_end_to_end_and_isolation(serial_run, star_list):
    summary, table, log = serial_run
    assert summary.total == 5 and summary.failed == 2 and summary.measured + summary.limits == 3
    assert summary.line().startswith("5 stars: ") and "2 failed" in summary.line()
    assert list(table["star"]) == ["T-1", "T-2", "BAD", "T-3", "MISSING"]
    method = dict(zip(table["star"], table["adopted_method"], strict=True))
    error = dict(zip(table["star"], np.ma.filled(table["error"], ""), strict=True))
    assert method["BAD"] == method["MISSING"] == "none"
    assert "bad.fits" in error["BAD"] and "file not found" in error["MISSING"]
    assert all(method[s] != "none" and not error[s] for s in GOOD)
    fast = table[list(table["star"]).index("T-3")]
    assert abs(fast["vsini_adopted"] - 40.0) < 3.0  # injected 40 km/s; tolerance ~5 sigma of the fit error
    assert list(np.ma.filled(table["notes"], "")) == ["slow <b>", "", "broken file", "fast", ""]  # passed through
    assert table["macroturbulence"].unit == "km / s" and table.meta["options"]["resolution"] == 60000.0
    assert table.meta["summary"]["failed"] == 2 and "Adoption" not in table.meta["adoption_rule"][:5]
    assert "[5/5] star" in log and "failed (" in log and log.strip().splitlines()[-1].startswith("5 stars:")
    with sqlite3.connect(summary.journal) as db:
        assert db.execute("SELECT COUNT(*) FROM stars").fetchone()[0] == 5


def test_every_output_format_reads_back(serial_run):
    summary, table, _ = serial_run
    formats = {".ecsv": "ascii.ecsv", ".csv": "ascii.csv", ".fits": "fits", ".tex": "ascii.aastex",
               ".txt": "ascii.fixed_width_two_line"}
    assert [p.suffix for p in summary.outputs] == list(formats)
    for path in summary.outputs:
        back = Table.read(path, format=formats[path.suffix])
        names = back["Star"] if path.suffix == ".tex" else back["star"]
        assert [str(s) for s in names] == list(table["star"]), path.name


def test_report_folder(pool_run):
    report = pool_run.report
    html = report.read_text()
    stars = report.parent / "stars"
    pngs = sorted(p.name for p in stars.glob("*.png"))
    assert len(pngs) == 3 and len(list(stars.glob("*.pdf"))) == 3  # a figure per measured star
    for name in pngs:
        assert f"stars/{name}" in html
    for name in ("comparison", "vsini_distribution"):
        assert (report.parent / f"{name}.pdf").is_file() and (report.parent / f"{name}.png").is_file()


def test_local_workers_give_the_same_table(serial_run, pool_run):
    same_table(Table.read(pool_run.results), serial_run[1])


def test_dask_local_cluster_gives_the_same_table(serial_run, star_list, tmp_path):
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as c:
        summary = run_survey(star_list / "list.csv", tmp_path / "results.ecsv", defaults=DEFAULTS,
                             executor="dask", scheduler=c.scheduler_address)
    same_table(Table.read(summary.results), serial_run[1])


# --------------------------------------------------------------------------------------------- durability


class _Interrupt(Exception):
    pass


class _StopAfter:
    """A progress object that 'crashes' the run after k stars have been journaled."""

    def __init__(self, k):
        self.k, self.seen = k, []

    def start(self, total, done=0):
        self.done = done

    def advance(self, star, status, detail=""):
        self.seen.append(star)
        if len(self.seen) >= self.k:
            raise _Interrupt(f"simulated crash after {self.k} stars")

    def stage(self, text):
        pass

    def finish(self, summary):
        pass


def _count_measurements(monkeypatch):
    import vsini.compare

    calls = []
    real = vsini.compare.measure_star

    def counting(spectrum, **kwargs):
        calls.append(kwargs["name"])
        return real(spectrum, **kwargs)

    monkeypatch.setattr(vsini.compare, "measure_star", counting)
    return calls


def test_resume_after_interrupt(serial_run, star_list, tmp_path, monkeypatch):
    out = tmp_path / "results.ecsv"
    stop = _StopAfter(2)
    with pytest.raises(_Interrupt):
        run_survey(star_list / "list.csv", out, defaults=DEFAULTS, jobs=1, progress=stop)
    assert not out.exists()  # nothing half-written
    first = stop.seen
    calls = _count_measurements(monkeypatch)
    again = _StopAfter(99)
    summary = run_survey(star_list / "list.csv", out, defaults=DEFAULTS, jobs=1, resume=True, progress=again)
    assert again.done == 2 and summary.resumed == 2
    assert sorted(again.seen) == sorted(set(serial_run[1]["star"]) - set(first))  # only the others
    assert not set(calls) & set(first)  # finished stars were not measured again
    same_table(Table.read(out), serial_run[1])


def test_resume_after_kill(serial_run, star_list, tmp_path, monkeypatch):
    """A run killed with SIGKILL loses no finished star; resume measures only the rest."""
    out = tmp_path / "results.ecsv"
    script = tmp_path / "run.py"
    script.write_text(textwrap.dedent(f"""
        import time
        import vsini.compare
        from vsini.survey import run_survey

        real = vsini.compare.measure_star

        def slow(spectrum, **kwargs):  # T-3 (4th row) takes long: the kill lands in the middle of the list
            time.sleep(10.0 if kwargs["name"] == "T-3" else 0.2)
            return real(spectrum, **kwargs)

        vsini.compare.measure_star = slow
        if __name__ == "__main__":
            run_survey({str(star_list / "list.csv")!r}, {str(out)!r}, defaults={DEFAULTS!r}, jobs=1)
    """))
    proc = subprocess.Popen([sys.executable, str(script)], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    journal = journal_path(out)
    deadline = time.monotonic() + 120.0
    done = 0
    try:
        while time.monotonic() < deadline and proc.poll() is None:
            if journal.exists():
                try:
                    with sqlite3.connect(journal) as db:
                        done = db.execute("SELECT COUNT(*) FROM stars").fetchone()[0]
                except sqlite3.OperationalError:  # the table is not created yet
                    done = 0
                if done >= 2:
                    break
            time.sleep(0.05)
        os.kill(proc.pid, signal.SIGKILL)
    finally:
        _, err = proc.communicate(timeout=60)
    assert proc.returncode == -signal.SIGKILL, err.decode()
    with sqlite3.connect(journal) as db:
        finished = [row[0] for row in db.execute("SELECT star FROM stars")]
    assert 2 <= len(finished) < 5 and not out.exists()
    calls = _count_measurements(monkeypatch)
    summary = run_survey(star_list / "list.csv", out, defaults=DEFAULTS, jobs=1, resume=True)
    assert summary.resumed == len(finished)
    assert not set(calls) & set(finished)
    same_table(Table.read(out), serial_run[1])


def test_resume_refuses_other_options_or_list(star_list, tmp_path):
    out = tmp_path / "results.ecsv"
    with pytest.raises(_Interrupt):
        run_survey(star_list / "list.csv", out, defaults=DEFAULTS, jobs=1, progress=_StopAfter(1))
    with pytest.raises(InputError, match=r"different options \(resolution\)"):
        run_survey(star_list / "list.csv", out, defaults=dict(DEFAULTS, resolution=50000.0), jobs=1, resume=True)
    other = tmp_path / "other.csv"
    other.write_text("star,spectrum\nZ-9,x.fits\n")
    with pytest.raises(InputError, match="row 1 of the journal is star 'T-1' but the star list has 'Z-9'"):
        run_survey(other, out, defaults=DEFAULTS, jobs=1, resume=True)


def test_dask_missing_gives_install_hint(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed -> ImportError
    with pytest.raises(InputError, match=r'pip install "vsini\[dask\]"'):
        run_tasks(iter([]), WorkerSettings(), executor="dask", scheduler="tcp://127.0.0.1:8786")


# --------------------------------------------------------------------------------------------- workers


def _dies_on_b(task, settings):
    """A task function whose worker process dies on star 'B' (a segfault, an out-of-memory kill)."""
    if task.star == "B":
        os._exit(13)
    return {"row": {"star": task.star}, "status": "measured", "figure": "", "warnings": [], "elapsed_s": 0.0}


def test_dead_worker_costs_only_its_star():
    tasks = [StarTask(index=i, star=s, spectrum="") for i, s in enumerate("ABCDE")]
    results = dict((t.star, p) for t, p in run_tasks(iter(tasks), WorkerSettings(), jobs=2, function=_dies_on_b))
    assert sorted(results) == list("ABCDE")
    assert results["B"]["status"] == "failed" and "worker process died" in results["B"]["row"]["error"]
    assert all(results[s]["status"] == "measured" for s in "ACDE")


def test_in_flight_is_bounded():
    """Tasks are taken from the iterator lazily: never more than max_in_flight ahead of the results."""
    taken = []

    def source():
        for i in range(40):
            taken.append(i)
            yield StarTask(index=i, star=str(i), spectrum="")

    ahead = []
    for n, _ in enumerate(run_tasks(source(), WorkerSettings(), jobs=2, max_in_flight=3, function=_dies_on_b)):
        ahead.append(len(taken) - n)
    assert max(ahead) <= 3 + 1 and len(ahead) == 40


# --------------------------------------------------------------------------------------------- errors


@pytest.mark.parametrize(
    "kwargs, error, match",
    [
        (dict(defaults={"resolution": 6e4, "colour": 1}), InputError, "unknown option"),
        (dict(defaults={}), InputError, "give the resolving power"),
        (dict(defaults={"resolution": -1}), InputError, "must be positive"),
        (dict(defaults=dict(DEFAULTS, method="guess")), InputError, "method = 'guess'"),
        (dict(defaults=dict(DEFAULTS, mc=-1)), InputError, "mc = -1"),
        (dict(defaults=DEFAULTS, executor="cloud"), InputError, "executor 'cloud' is not known"),
        (dict(defaults=DEFAULTS, jobs=0), InputError, "jobs = 0"),
        (dict(defaults=DEFAULTS, executor="dask"), InputError, "needs the scheduler address"),
        (dict(defaults=DEFAULTS, also=["x.xlsx"]), InputError, "unknown table extension"),
        (dict(defaults=dict(DEFAULTS, lsf="no-such-lsf.ecsv")), SpectrumFileError, "not found"),
    ],
)
def test_fatal_errors(star_list, tmp_path, kwargs, error, match):
    with pytest.raises(error, match=match):
        run_survey(star_list / "list.csv", tmp_path / "results.ecsv", **kwargs)


def test_fatal_star_list_errors(tmp_path):
    bad = tmp_path / "list.csv"
    bad.write_text("star,file\nA,a.fits\n")
    with pytest.raises(SpectrumFileError, match="no column 'spectrum'"):
        run_survey(bad, tmp_path / "results.ecsv", defaults=DEFAULTS)
    with pytest.raises(SpectrumFileError, match="star list not found"):
        run_survey(tmp_path / "none.csv", tmp_path / "results.ecsv", defaults=DEFAULTS)
    assert not journal_path(tmp_path / "results.ecsv").exists()


def test_workers_that_cannot_start(tmp_path):
    """A script without the main guard: one clear error instead of every star failing."""
    script = tmp_path / "noguard.py"
    script.write_text(textwrap.dedent("""
        from vsini.executors import WorkerSettings, run_tasks
        from vsini.starlist import StarTask
        list(run_tasks(iter([StarTask(0, "A", "")]), WorkerSettings(), jobs=2))
    """))
    proc = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, timeout=120)
    assert proc.returncode != 0
    assert "if __name__ == '__main__'" in proc.stderr and "VsiniError" in proc.stderr
    assert issubclass(VsiniError, Exception)


# --------------------------------------------------------------------------------------------- progress


class _Summary:
    elapsed_s = 1.5

    def line(self):
        return "2 stars: 1 measured, 0 upper limits, 1 failed; 0 flagged"


def test_console_plain_lines():
    out = io.StringIO()
    p = ConsoleProgress(out)  # not a terminal: plain lines
    p.start(2, done=0)
    p.advance("HX-1", "measured", "few_lines")
    p.advance("HX-2", "failed", "x.fits: file not found")
    p.stage("writing the results table")
    p.finish(_Summary())
    assert out.getvalue().splitlines() == [
        "[1/2] star HX-1: measured (few_lines)", "[2/2] star HX-2: failed (x.fits: file not found)",
        "writing the results table", "2 stars: 1 measured, 0 upper limits, 1 failed; 0 flagged in 1.5 s"]


def test_console_bar():
    out = io.StringIO()
    p = ConsoleProgress(out, bar=True)
    p.start(3, done=1)
    p.advance("HX-2", "measured")
    p.advance("HX-3", "failed", "broken [file]")
    p.finish(_Summary())
    text = out.getvalue()
    assert "resuming: 1 of 3" in text and "3/3" in text and "stars/s" in text and "broken [file]" in text


# --------------------------------------------------------------------------------------------- demo data


def test_demo_data_is_complete():
    folder = demo_folder()
    table = Table.read(folder / "starlist.csv", format="ascii.csv")
    assert len(table) == 30 and all(str(s).startswith("LAN-") for s in table["star"])
    for path in table["spectrum"]:
        assert (folder / path).is_file()
    size = sum(p.stat().st_size for p in folder.rglob("*") if p.is_file())
    assert size < 3e6
    truth = Table.read(folder / "truth.csv", format="ascii.csv")
    assert set(truth["kind"]) == {"fgk", "hot", "diff", "broken"}
    assert DEFAULT_OPTIONS["macroturbulence"] == "free"


def test_journal_payload_is_json(serial_run):
    summary = serial_run[0]
    with sqlite3.connect(summary.journal) as db:
        payloads = [json.loads(p) for (p,) in db.execute("SELECT payload FROM stars")]
    assert {p["status"] for p in payloads} <= {"measured", "limit", "failed"}
    assert all("row" in p and "elapsed_s" in p for p in payloads)
    assert Path(summary.journal).name == "results.ecsv.journal.sqlite"


def test_docs_cover_columns_and_adoption_rule():
    """docs/survey.md documents every result column and copies the adoption rule of vsini.compare."""
    import re

    import vsini.compare
    from vsini.report import COLUMN_DESCRIPTIONS

    docs = (Path(__file__).resolve().parent.parent / "docs" / "survey.md").read_text()
    for name in list(vsini.compare.RESULT_COLUMNS) + ["warnings"]:
        assert f"`{name}`" in docs, name
        assert name in COLUMN_DESCRIPTIONS, name
    for heading in re.findall(r"\*\*(.+?)\*\*", vsini.compare.__doc__.split("Adoption rule", 1)[1]):
        assert f"**{heading}**" in docs, heading


def test_run_demo_wiring(monkeypatch, tmp_path):
    """run_demo surveys the demo list with the Halcyon spectrograph's profile and writes four formats."""
    import vsini.survey

    seen = {}

    def fake(starlist, output, **kwargs):
        seen.update(kwargs, starlist=Path(starlist), output=Path(output))
        return "summary"

    monkeypatch.setattr(vsini.survey, "run_survey", fake)
    assert vsini.survey.run_demo(tmp_path, jobs=2) == "summary"
    assert seen["starlist"] == demo_folder() / "starlist.csv" and seen["output"] == tmp_path / "results.ecsv"
    assert [p.suffix for p in seen["also"]] == [".csv", ".fits", ".tex"] and seen["report_dir"] == tmp_path
    assert seen["defaults"]["resolution"] == 60000.0 and seen["defaults"]["lsf"].source.endswith("lsf_example.ecsv")
    assert seen["jobs"] == 2


def test_two_upper_limits_adopt_the_smaller_and_fourier_limits_hold():
    """Adoption rule 4: with two upper limits the smaller is adopted. The Fourier limit (no zero below the
    frequency where the transform sinks into the noise) must not fall below the injected v sin i of slow
    rotators (truth: the simulator's input; c/R = 6 km/s at R 50 000)."""
    from vsini.compare import adopt, measure_star
    from vsini.simulate import simulate_spectrum

    nan = float("nan")
    value, _, is_limit, how, _, flags = adopt(nan, nan, 9.0, nan, nan, 5.0)
    assert (value, is_limit, how, flags) == (5.0, True, "fourier_limit", ("unresolved",))
    assert adopt(nan, nan, 4.0, nan, nan, 5.0)[3] == "fit_limit"
    lines = "5250.2:0.5;5302.3:0.6;5324.2:0.6;5365.4:0.5;5371.5:0.7;5383.4:0.6"
    for k, (frac, snr) in enumerate([(0.3, 100), (0.6, 100), (0.9, 200), (0.6, 50)]):
        v = frac * 299792.458 / 50000
        spec = simulate_spectrum(lines, wave_range=(5240, 5390), step=5300 / 150000, vsini=v, resolution=50000,
                                 macroturbulence=3.0, snr=snr, rng=200 + k)
        row = measure_star(spec, resolution=50000).row
        if np.isfinite(row["vsini_fourier_upper_limit"]):
            assert row["vsini_fourier_upper_limit"] > v
        if row["vsini_adopted_is_limit"]:
            limits = [x for x in (row["vsini_fit_upper_limit"], row["vsini_fourier_upper_limit"]) if np.isfinite(x)]
            assert row["vsini_adopted"] == min(limits)
