"""Command-line tests of ``vsini inclination sensitivity | infer | deproject`` (typer's CliRunner).

The sub-application is tested directly (``vsini.cli_inclination.inclination_app``); the main app registers it
as ``vsini inclination``. Input tables are simulated here with explicit seeds (isotropic axes, invented stars).
"""

import json

import numpy as np
import pytest
from astropy.table import Table
from typer.testing import CliRunner

from vsini.cli_inclination import inclination_app
from vsini.deprojection import deproject
from vsini.inclination import infer_inclination

runner = CliRunner()

FAST_SENSITIVITY = ["--veq", "40", "--inclinations", "30,90", "--resolution", "30000", "--lines", "5000:0.5"]
STAR = ["--vsini", "3", "--vsini-err", "0.3", "--period", "10", "--period-err", "0.2", "--radius", "1",
        "--radius-err", "0.05"]


def invoke(*args):
    return runner.invoke(inclination_app, [str(a) for a in args])


def assert_one_line_error(result, text):
    assert result.exit_code == 2, result.output
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("vsini: error:") and text in lines[0], result.stderr


# --------------------------------------------------------------------------------------------- sensitivity


def test_sensitivity_json_table_and_plot(tmp_path):
    out, fig = tmp_path / "sens.ecsv", tmp_path / "sens.png"
    res = invoke("sensitivity", *FAST_SENSITIVITY, "--json", "-o", out, "--plot", fig)
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert [d["inclination_deg"] for d in data] == [30.0, 90.0]
    assert list(data[0])[:5] == ["inclination_deg", "vsini_true", "vsini_fit", "vsini_fourier", "q2_q1"]
    assert data[1]["vsini_true"] == pytest.approx(40.0)
    assert data[1]["vsini_fit"] == pytest.approx(40.0, rel=1e-4)  # rigid sphere: the standard kernel is exact
    assert data[0]["vsini_fit_limit"] is None  # NaN written as null
    t = Table.read(out)
    assert len(t) == 2 and "fourier_bias" in t.colnames and t.meta["v_eq_kms"] == 40.0
    assert fig.stat().st_size > 0


def test_sensitivity_text_output_warns_for_differential_rotation():
    res = invoke("sensitivity", *FAST_SENSITIVITY, "--alpha", "0.3")
    assert res.exit_code == 0, res.output
    assert "alpha = 0.3" in res.stdout and "caution: q2/q1 below the rigid range" in res.stdout


def test_sensitivity_roche_star_from_mass_and_radius():
    res = invoke("sensitivity", "--omega", "0.9", "--mass", "3", "--radius", "2.5", "--inclinations", "90",
                 "--resolution", "20000", "--lines", "5000:0.5", "--json")
    assert res.exit_code == 0, res.output
    (row,) = json.loads(res.stdout)
    assert row["vsini_fit"] < row["vsini_true"]  # gravity darkening (Townsend, Owocki & Howarth 2004)


@pytest.mark.parametrize(
    "args, text",
    [
        (["--veq", "40", "--inclinations", "0,abc"], "--inclinations: cannot read"),
        (["--veq", "40", "--inclinations", ","], "--inclinations: no value given"),
        (["--veq", "40", "--inclinations", "0,30"], "(0, 90]"),
        (["--veq", "40", "--omega", "0.9"], "exclude each other"),
        (["--veq", "40", "--mass", "2"], "used only with --omega"),
        ([], "give --veq"),
        (["--omega", "0.9"], "needs mass_msun and radius_rsun"),
        (["--veq", "40", "--lines", "5000:2"], "depth between 0 and 1"),
        (["--veq", "40", "--limb-darkening", "x"], "limb darkening: cannot read"),
    ],
)
def test_sensitivity_bad_input_is_one_line_exit_2(args, text):
    assert_one_line_error(invoke("sensitivity", *args), text)


# --------------------------------------------------------------------------------------------- infer


def test_infer_json_matches_the_library(tmp_path):
    fig = tmp_path / "post.pdf"
    res = invoke("infer", *STAR, "--json", "--plot", fig)
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    post = infer_inclination(3.0, 0.3, 10.0, 0.2, 1.0, 0.05)
    for key in ("inclination_deg", "inclination_lo_deg", "inclination_hi_deg", "cos_i_median"):
        assert data[key] == pytest.approx(getattr(post, key), rel=1e-12)
    assert data["flags"] == [] and data["is_limit"] is False
    assert fig.stat().st_size > 0


def test_infer_text_and_upper_limit():
    res = invoke("infer", "--vsini", "2", "--limit", "--period", "10", "--period-err", "0.2", "--radius", "1",
                 "--radius-err", "0.05")
    assert res.exit_code == 0, res.output
    assert "upper limit" in res.stdout and "vsini_limit" in res.stdout
    res = invoke("infer", *STAR)
    assert res.exit_code == 0 and "inclination:" in res.stdout and "flags: none" in res.stdout


def _survey_tables(tmp_path):
    results = Table(
        {
            "star": ["Alpha Fict", "Beta Fict", "Gamma Fict", "Delta Fict"],
            "vsini_adopted": [3.0, 2.0, 4.0, np.nan],
            "vsini_adopted_err": [0.3, 0.0, 0.4, np.nan],
            "vsini_adopted_is_limit": [False, True, False, False],
            "flags": ["", "unresolved", "", "failed"],
        }
    )
    stars = Table(
        {
            "star": ["Alpha Fict", "Beta Fict", "Gamma Fict", "Delta Fict"],
            "period_days": [10.0, 12.0, 8.0, 5.0],
            "radius_rsun": [1.0, 1.1, 0.9, 1.0],
        }
    )
    paths = tmp_path / "results.ecsv", tmp_path / "stars.csv"
    results.write(paths[0])
    stars.write(paths[1])
    return paths


def test_infer_table_mode(tmp_path):
    res_path, star_path = _survey_tables(tmp_path)
    out = tmp_path / "incl.ecsv"
    res = invoke("infer", "--results", res_path, "--starlist", star_path, "-o", out, "--json")
    assert res.exit_code == 0, res.output
    rows = json.loads(res.stdout)
    assert [r["star"] for r in rows] == ["Alpha Fict", "Beta Fict", "Gamma Fict", "Delta Fict"]
    assert "vsini_limit" in rows[1]["flags"] and rows[3]["flags"] == ["missing_input"]
    assert rows[3]["inclination_deg"] is None and rows[1]["vsini_flags"] == ["unresolved"]
    t = Table.read(out)
    assert len(t) == 4 and t["inclination_deg"][0] == pytest.approx(rows[0]["inclination_deg"])
    res = invoke("infer", "--results", res_path, "--starlist", star_path)
    assert res.exit_code == 0 and "Gamma Fict" in res.stdout


@pytest.mark.parametrize(
    "args, text",
    [
        (["--vsini", "3", "--period", "10"], "missing --vsini-err"),
        ([*STAR, "--results", "r.ecsv"], "exclude each other"),
        (["--results", "r.ecsv"], "needs both --results and --starlist"),
        ([*STAR, "-o", "x.ecsv"], "--output writes the table"),
        (["--vsini", "3", "--vsini-err", "0", "--period", "10", "--period-err", "0", "--radius", "1",
          "--radius-err", "0"], "vsini_err_kms must be positive"),
        (["--vsini", "3", "--vsini-err", "0.3", "--period", "-10", "--period-err", "0", "--radius", "1",
          "--radius-err", "0"], "period_days must be positive"),
    ],
)
def test_infer_bad_input_is_one_line_exit_2(args, text):
    assert_one_line_error(invoke("infer", *args), text)


def test_infer_table_mode_bad_files(tmp_path):
    res_path, star_path = _survey_tables(tmp_path)
    assert_one_line_error(invoke("infer", "--results", tmp_path / "none.ecsv", "--starlist", star_path),
                          "no such results table file")
    assert_one_line_error(invoke("infer", "--results", res_path, "--starlist", star_path, "--plot", "p.png"),
                          "--plot draws one star")
    bad = tmp_path / "bad.csv"
    bad.write_text("star,period_days\nAlpha Fict,10\n")
    assert_one_line_error(invoke("infer", "--results", res_path, "--starlist", bad), "lacks column(s) radius_rsun")


# --------------------------------------------------------------------------------------------- deproject


@pytest.fixture(scope="module")
def sample_table(tmp_path_factory):
    # 300 invented stars, v ~ N(150, 30) km/s, isotropic axes (cos i uniform; Chandrasekhar & Munch 1950),
    # values below 20 km/s reported as upper limits "< 20", one row without a value
    rng = np.random.default_rng(2024)
    v = rng.normal(150.0, 30.0, 300)
    y = v * np.sqrt(1.0 - rng.uniform(size=v.size) ** 2)
    limit = y < 20.0
    y[limit] = 20.0
    y[5] = np.nan
    t = Table({"star": [f"Fict {k:03d}" for k in range(y.size)], "vsini_adopted": y,
               "vsini_adopted_is_limit": [str(b) for b in limit]})  # CSV-style booleans as text
    path = tmp_path_factory.mktemp("survey") / "results.csv"
    t.write(path)
    return path, y, limit


def test_deproject_json_table_and_plot(tmp_path, sample_table):
    path, y, limit = sample_table
    out, fig = tmp_path / "fv.ecsv", tmp_path / "fv.png"
    res = invoke("deproject", path, "--bins", "12", "--bootstrap", "20", "--seed", "3", "--json", "-o", out,
                 "--plot", fig)
    assert res.exit_code == 0, res.output
    s = json.loads(res.stdout)
    ok = np.isfinite(y)
    assert s["n_stars"] == 299 and s["n_skipped"] == 1 and s["n_limits"] == int(limit[ok].sum())
    assert s["n_bins"] == 12 and s["n_bootstrap"] == 20
    lib = deproject(y[ok], upper_limits=limit[ok], bins=12, n_bootstrap=20, rng=3)
    assert s["mean_v_kms"] == pytest.approx(lib.mean_v_kms, rel=1e-12)
    assert s["mean_v_lo_kms"] <= s["mean_v_kms"] <= s["mean_v_hi_kms"]
    assert s["mean_v_kms"] == pytest.approx(150.0, rel=0.05)  # recovers the input distribution's mean
    t = Table.read(out)
    assert len(t) == 12 and np.sum(t["f_pdf"] * (t["v_hi"] - t["v_lo"])) == pytest.approx(1.0)
    assert fig.stat().st_size > 0


def test_deproject_text_output(sample_table, tmp_path):
    res = invoke("deproject", sample_table[0], "--bootstrap", "0")
    assert res.exit_code == 0, res.output
    assert "mean equatorial velocity" in res.stdout and "1 rows without v sin i skipped" in res.stdout
    # the same values in ECSV with a real boolean column give the same result
    t = Table.read(sample_table[0])
    t["vsini_adopted_is_limit"] = [str(x) == "True" for x in t["vsini_adopted_is_limit"]]
    t.write(tmp_path / "results.ecsv")
    res2 = invoke("deproject", tmp_path / "results.ecsv", "--bootstrap", "0")
    assert res2.exit_code == 0 and res2.stdout.splitlines()[:2] == res.stdout.splitlines()[:2]


def test_deproject_bad_input_is_one_line_exit_2(tmp_path):
    assert_one_line_error(invoke("deproject", tmp_path / "missing.ecsv"), "no such results table file")
    nocol = tmp_path / "nocol.csv"
    nocol.write_text("star,vsini\nA,1\n")
    assert_one_line_error(invoke("deproject", nocol), "no vsini_adopted column")
    few = tmp_path / "few.csv"
    few.write_text("star,vsini_adopted\nA,10\nB,20\n")
    assert_one_line_error(invoke("deproject", few), "need at least 10 v sin i values")
    text = tmp_path / "text.csv"
    text.write_text("star,vsini_adopted\nA,fast\nB,slow\n")
    assert_one_line_error(invoke("deproject", text), "not numeric")
    empty = tmp_path / "empty.csv"
    empty.write_text("star,vsini_adopted\n")
    assert_one_line_error(invoke("deproject", empty), "has no rows")
    garbage = tmp_path / "garbage.fits"
    garbage.write_bytes(b"\x00\x01 not a table " * 50)
    assert_one_line_error(invoke("deproject", garbage), "cannot read the results table as a table")


# --------------------------------------------------------------------------------------------- shared helpers


def test_guard_turns_a_bug_into_one_line_exit_3(monkeypatch):
    import typer

    from vsini._cli_common import guarded, json_safe

    app = typer.Typer()

    @app.command()
    @guarded
    def boom():
        raise RuntimeError("something broke")

    monkeypatch.delenv("VSINI_DEBUG", raising=False)
    res = runner.invoke(app, [])
    assert res.exit_code == 3 and "unexpected RuntimeError: something broke" in res.stderr
    monkeypatch.setenv("VSINI_DEBUG", "1")
    res = runner.invoke(app, [])
    assert isinstance(res.exception, RuntimeError)  # the traceback is kept for debugging
    assert json_safe({"a": [np.float64(np.nan), np.int64(2), (np.inf, "x")]}) == {"a": [None, 2, [None, "x"]]}
