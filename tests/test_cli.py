"""The command line end to end: outputs, JSON keys, one-line errors and exit codes."""

import json

import numpy as np
import pytest
from typer.testing import CliRunner

from vsini.cli import app
from vsini.io import read_spectrum

runner = CliRunner()

LINES = "5250.2:0.5;5302.3:0.6;5324.2:0.6;5365.4:0.5;5371.5:0.7;5383.4:0.6"


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


@pytest.fixture(scope="module")
def spectrum_file(tmp_path_factory):
    path = tmp_path_factory.mktemp("cli") / "star.fits"
    res = run("simulate", "-o", path, "--lines", LINES, "--range", "5240:5390", "--step", "0.03", "--vsini", "25",
              "--resolution", "60000", "--snr", "300", "--seed", "7", "--name", "TEST-1")
    assert res.exit_code == 0, res.output
    return path


def test_simulate_writes_what_the_reader_reads(tmp_path, spectrum_file):
    spec = read_spectrum(spectrum_file)
    assert spec.n_pixels == 5001 and spec.flux_err is not None
    assert spec.wavelength[0] == pytest.approx(5240.0) and spec.wavelength[-1] == pytest.approx(5390.0)
    csv = tmp_path / "star.csv"
    res = run("simulate", "-o", csv, "--lines", "5500:0.5", "--vsini", "0", "--plot", tmp_path / "s.png")
    assert res.exit_code == 0, res.output
    s = read_spectrum(csv)
    assert s.flux_err is None and np.nanmin(s.flux) < 0.9  # noiseless, unbroadened line is deep
    assert (tmp_path / "s.png").stat().st_size > 1000


def test_measure_prints_and_json_has_the_survey_columns(spectrum_file, tmp_path):
    res = run("measure", spectrum_file, "--resolution", "60000")
    assert res.exit_code == 0, res.output
    assert "v sin i (adopted):" in res.output and "Fourier zero:" in res.output
    res = run("measure", spectrum_file, "--resolution", "60000", "--json", "--plot", tmp_path / "m.png")
    assert res.exit_code == 0, res.output
    out = json.loads(res.output)
    for key in ("vsini_fit", "vsini_fit_err", "vsini_fourier", "vsini_fourier_err", "q2_q1", "macroturbulence",
                "n_lines", "flags", "vsini_adopted", "vsini_adopted_err"):
        assert key in out
    assert out["vsini_fit"] == pytest.approx(25.0, rel=0.05)
    assert out["vsini_fourier"] == pytest.approx(25.0, rel=0.1)
    assert (tmp_path / "m.png").stat().st_size > 1000


def test_measure_draws_the_chi2_map(spectrum_file, tmp_path):
    res = run("measure", spectrum_file, "--resolution", "60000", "--method", "fit", "--chi2-map", tmp_path / "c.png",
              "--lines", "5302.3;5324.2;5371.5")
    assert res.exit_code == 0, res.output
    assert (tmp_path / "c.png").stat().st_size > 1000
    res = run("measure", spectrum_file, "--resolution", "60000", "--macroturbulence", "off", "--chi2-map",
              tmp_path / "d.png", "--lines", "5302.3")
    assert res.exit_code == 2 and "--chi2-map needs" in res.output


def test_measure_method_fit_only(spectrum_file):
    res = run("measure", spectrum_file, "--resolution", "60000", "--method", "fit", "--json",
              "--lines", "5302.3;5324.2;5371.5")
    assert res.exit_code == 0, res.output
    out = json.loads(res.output)
    assert out["vsini_fourier"] is None and out["n_lines"] == 3


def test_kernel_writes_table_and_figure(tmp_path):
    from astropy.table import Table

    res = run("kernel", "-o", tmp_path / "k.ecsv", "--vsini", "30", "--resolution", "50000", "--macroturbulence", "3",
              "--plot", tmp_path / "k.pdf")
    assert res.exit_code == 0, res.output
    t = Table.read(tmp_path / "k.ecsv")
    dv = t["velocity"][1] - t["velocity"][0]
    assert float(np.sum(t["kernel"]) * dv) == pytest.approx(1.0, abs=1e-6)
    # first zero of Gray's kernel at eps = 0.6: q1 = 0.660 (Gray 2005; from memory) -> sigma1 = 0.660/30
    assert t.meta["rotation_zeros_s_per_km"][0] == pytest.approx(0.660 / 30, rel=1e-3)


@pytest.mark.parametrize(
    "args,needle",
    [
        (["measure", "missing.fits", "--resolution", "50000"], "not found"),
        (["simulate", "-o", "x.fits", "--lines", "55x"], "cannot read '55x'"),
        (["simulate", "-o", "x.fits", "--range", "abc"], "--range"),
        (["kernel", "-o", "k.ecsv", "--vsini", "-5"], "vsini must be"),
        (["kernel", "-o", "k.xyz"], "unknown table extension"),
        (["measure", "SPECTRUM", "--method", "other"], "--method"),
    ],
)
def test_bad_input_gives_one_line_and_exit_code_2(tmp_path, monkeypatch, spectrum_file, args, needle):
    monkeypatch.chdir(tmp_path)
    args = [str(spectrum_file) if a == "SPECTRUM" else a for a in args]
    res = run(*args)
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.output.strip().splitlines() if ln.startswith("vsini: error")]
    assert len(lines) == 1 and needle in lines[0]
    assert "Traceback" not in res.output


def test_malformed_spectrum_file_is_one_line(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_text("wavelength,flux\n5000,1\n4999,1\n5001,1\n" + "\n".join(f"{5002 + i},1" for i in range(20)))
    res = run("measure", bad, "--resolution", "50000")
    assert res.exit_code == 2
    assert "bad.csv" in res.output and "Traceback" not in res.output


def test_help_texts_read_clearly():
    for cmd in ("simulate", "kernel", "measure"):
        res = run(cmd, "--help")
        assert res.exit_code == 0
        assert "km/s" in res.output


def test_nothing_measured_exits_1_with_reasons(tmp_path):
    """A line-free spectrum is processed, but nothing can be measured: exit code 1 and the reasons."""
    w = np.linspace(5000, 5100, 3000)
    path = tmp_path / "flat.txt"
    np.savetxt(path, np.c_[w, np.ones_like(w) + 1e-3 * np.random.default_rng(1).standard_normal(w.size)])
    res = run("measure", path, "--resolution", "50000")
    assert res.exit_code == 1
    assert "not_measured" in res.output and "no isolated absorption line" in res.output
