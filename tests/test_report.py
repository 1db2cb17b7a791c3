"""Results tables and the report folder (issue 5, items 2 and 8): every format read back with astropy."""

from __future__ import annotations

import math
from html.parser import HTMLParser
from pathlib import Path
from urllib.parse import unquote

import numpy as np
import pytest
from astropy.table import Column, MaskedColumn, Table

from vsini.errors import InputError
from vsini.report import format_value, paper_table, write_report, write_results, write_table

NAN = float("nan")


def results():
    """Three stars as the survey writes them: a value, an upper limit, a failure (NaN = masked)."""
    from vsini.compare import RESULT_COLUMNS

    rows = [
        dict(star="LAN-1", vsini_adopted=24.47, vsini_adopted_err=0.47, vsini_adopted_is_limit=False,
             adopted_method="fit", vsini_fit=24.47, vsini_fit_err=0.47, vsini_fit_upper_limit=NAN,
             vsini_fourier=25.43, vsini_fourier_err=0.9, vsini_fourier_upper_limit=NAN, difference_sigma=-0.94,
             q2_q1=1.77, q2_q1_err=0.05, macroturbulence=4.1, macroturbulence_err=0.8, rv=12.1, n_lines=8,
             snr=140.0, flags="fourier_no_q2", error=""),
        dict(star="LAN-2 <b>&", vsini_adopted=1.81, vsini_adopted_err=NAN, vsini_adopted_is_limit=True,
             adopted_method="fit_limit", vsini_fit=NAN, vsini_fit_err=NAN, vsini_fit_upper_limit=1.81,
             vsini_fourier=NAN, vsini_fourier_err=NAN, vsini_fourier_upper_limit=6.2, difference_sigma=NAN,
             q2_q1=NAN, q2_q1_err=NAN, macroturbulence=3.5, macroturbulence_err=NAN, rv=11.0, n_lines=8,
             snr=180.0, flags="fourier_unresolved unresolved", error=""),
        dict(star="LAN-3", vsini_adopted=NAN, vsini_adopted_err=NAN, vsini_adopted_is_limit=False,
             adopted_method="none", vsini_fit=NAN, vsini_fit_err=NAN, vsini_fit_upper_limit=NAN,
             vsini_fourier=NAN, vsini_fourier_err=NAN, vsini_fourier_upper_limit=NAN, difference_sigma=NAN,
             q2_q1=NAN, q2_q1_err=NAN, macroturbulence=NAN, macroturbulence_err=NAN, rv=NAN, n_lines=0,
             snr=NAN, flags="failed", error="x.fits: file not found; check the path"),
    ]
    t = Table()
    for name, unit in RESULT_COLUMNS.items():
        values = [r.get(name, NAN) for r in rows]  # columns added later to compare: NaN
        if isinstance(values[0], float):
            arr = np.array(values, dtype=float)
            t[name] = MaskedColumn(arr, mask=~np.isfinite(arr), unit=unit)
        else:
            t[name] = Column(values, unit=unit)
    t["notes"] = ["<script>alert(1)</script>", "", "a & b"]
    t["period_days"] = MaskedColumn([2.6, 0.0, 0.0], mask=[False, True, True], unit="d")
    t.meta.update(vsini_version="0.1", created="2031-01-01T00:00:00+00:00", star_list="list.csv",
                  options={"resolution": 60000.0, "lines": "fgk-optical"}, kernel={"instrument": "Gaussian"},
                  flags={"unresolved": "rotation not resolved"}, note="empty = not measured",
                  summary={"measured": 1, "limits": 1, "failed": 1, "flagged": 2})
    return t


@pytest.mark.parametrize("suffix, fmt", [(".ecsv", "ascii.ecsv"), (".csv", "ascii.csv"), (".fits", "fits"),
                                         (".txt", "ascii.fixed_width_two_line")])
def test_machine_readable_formats_read_back(tmp_path, suffix, fmt):
    t = results()
    path = write_results(t, tmp_path / f"results{suffix}")
    back = Table.read(path, format=fmt)
    assert list(back["star"]) == list(t["star"])
    assert back.colnames[: len(t.colnames)] == t.colnames
    fit = np.ma.filled(np.ma.asarray(back["vsini_fit"]).astype(float), np.nan)
    np.testing.assert_allclose(fit[0], 24.47)
    assert np.isnan(fit[1]) and np.isnan(fit[2])  # not measured: masked (text) or NaN (FITS)
    limit = np.ma.filled(np.ma.asarray(back["vsini_fit_upper_limit"]).astype(float), np.nan)
    assert limit[1] == pytest.approx(1.81)
    assert [str(v) for v in back["vsini_adopted_is_limit"]] == ["False", "True", "False"]  # text: strings
    assert list(back["n_lines"]) == [8, 8, 0]
    assert str(back["error"][2]) == "x.fits: file not found; check the path"
    if fmt == "ascii.ecsv":
        assert back["vsini_fit"].unit == "km / s"
        assert back.meta["options"]["resolution"] == 60000.0 and back.meta["flags"]["unresolved"]
    if fmt == "fits":
        assert back["vsini_fit"].unit == "km / s"
        assert back.meta["VSINIVER"] == "0.1" and "fgk-optical" in back.meta["OPTIONS"]
        assert any("unresolved" in c for c in back.meta["comments"])
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temporary file left


def test_aastex_table_reads_back(tmp_path):
    path = write_results(results(), tmp_path / "results.tex")
    text = path.read_text()
    assert r"\begin{deluxetable}" in text and r"\tablecomments" in text and r"$24.47 \pm 0.47$" in text
    assert r"LAN-2 <b>\&" in text and r"fourier\_unresolved unresolved" in text
    back = Table.read(path, format="ascii.aastex")
    assert len(back) == 3 and back.colnames[0] == "Star"
    adopted = [str(v) for v in back[back.colnames[4]]]
    assert adopted == [r"$24.47 \pm 0.47$", "$<1.8$", r"\nodata"]


def test_paper_table_limits_and_missing():
    paper, latexdict = paper_table(results())
    assert list(paper["$v\\sin i$ (fit)"]) == ["$24.47 \\pm 0.47$", "$<1.8$", "\\nodata"]
    assert list(paper["$v\\sin i$ (Fourier)"])[1] == "$<6.2$"
    assert "caption" in latexdict and latexdict["col_align"] == "lcccccl"


@pytest.mark.parametrize(
    "args, kwargs, expected",
    [
        ((24.468, 0.47), {}, "24.47 +- 0.47"),
        ((117.18, 5.37), {}, "117.2 +- 5.4"),
        ((193.7, 15.4), {}, "194 +- 15"),
        ((4.99,), {"limit": True}, "<5.0"),
        ((NAN, 1.0), {}, "..."),
        ((NAN,), {"latex": True}, "\\nodata"),
        ((3.0, NAN), {}, "3.0"),
    ],
)
def test_format_value(args, kwargs, expected):
    """Decimals follow the uncertainty: two significant digits below 1, one above (common practice)."""
    assert format_value(*args, **kwargs) == expected


def test_unknown_extension_and_atomic_failure(tmp_path, monkeypatch):
    with pytest.raises(InputError, match="unknown table extension '.xlsx'"):
        write_results(results(), tmp_path / "results.xlsx")
    path = write_table(results(), tmp_path / "results.ecsv")
    before = path.read_bytes()

    def broken(self, *args, **kwargs):
        Path(args[0]).write_text("half a table")
        raise OSError("disk full")

    monkeypatch.setattr(Table, "write", broken)
    with pytest.raises(OSError, match="disk full"):
        write_table(results(), path)
    assert path.read_bytes() == before  # the old file is intact
    assert sorted(p.name for p in tmp_path.iterdir()) == ["results.ecsv"]


class _Links(HTMLParser):
    def __init__(self):
        super().__init__()
        self.links, self.text = [], []

    def handle_starttag(self, tag, attrs):
        for key, value in attrs:
            if key in ("href", "src"):
                self.links.append(unquote(value))

    def handle_data(self, data):
        self.text.append(data)


def test_report_links_every_figure_and_escapes_text(tmp_path):
    t = results()
    stars = tmp_path / "stars"
    stars.mkdir()
    for stem in ("00001_LAN-1", "00002_LAN-2_b"):
        (stars / f"{stem}.png").write_bytes(b"png")
        (stars / f"{stem}.pdf").write_bytes(b"pdf")
    write_table(t, tmp_path / "results.ecsv")
    index = write_report(t, tmp_path, figures=["00001_LAN-1", "00002_LAN-2_b", ""], summary="3 stars <ok>",
                         files=[("results.ecsv", "results.ecsv")])
    html = index.read_text()
    assert "<script>" not in html and "LAN-2 &lt;b&gt;&amp;" in html and "3 stars &lt;ok&gt;" in html
    parser = _Links()
    parser.feed(html)
    assert "stars/00001_LAN-1.png" in parser.links and "stars/00002_LAN-2_b.pdf" in parser.links
    assert {"comparison.pdf", "comparison.png", "vsini_distribution.pdf", "vsini_distribution.png"} <= set(parser.links)
    for link in parser.links:  # every link resolves to a file of the report
        assert (tmp_path / link).is_file(), link
    text = " ".join(parser.text)
    assert "<1.8" in text and "x.fits: file not found" in text
    assert (tmp_path / "comparison.pdf").read_bytes()[:4] == b"%PDF"


def test_survey_figures_draw_limits():
    import matplotlib.pyplot as plt

    from vsini.plots import plot_survey_comparison, plot_vsini_distribution

    t = results()
    top, bottom = plot_survey_comparison(t)
    assert top.get_xscale() == "log" and bottom.get_ylim()[1] >= 3.0
    labels = [text.get_text() for text in top.get_legend().get_texts()]
    assert any("both methods (1)" in s for s in labels) and "1:1" in labels
    ax = plot_vsini_distribution(t)
    labels = [text.get_text() for text in ax.get_legend().get_texts()]
    assert labels == ["measured (1)", "upper limits (1)"]
    assert any(p.get_hatch() == "////" and p.get_visible() for p in ax.patches)
    plt.close("all")
    empty = t[2:]
    ax = plot_vsini_distribution(empty)
    assert math.isclose(ax.get_xlim()[0], 1.0, rel_tol=0.5)
    plt.close("all")
