"""Result tables in ECSV, CSV, FITS and AASTeX, written atomically through astropy's writers."""

from __future__ import annotations

import os
import secrets
from pathlib import Path

from .errors import InputError

__all__ = ["TABLE_FORMATS", "table_format", "write_table"]

#: File extension -> astropy.table writer format.
TABLE_FORMATS = {
    ".ecsv": "ascii.ecsv",
    ".csv": "ascii.csv",
    ".fits": "fits",
    ".fit": "fits",
    ".tex": "ascii.aastex",
    ".txt": "ascii.fixed_width_two_line",
}


def table_format(path):
    """The astropy writer format for ``path``'s extension (ECSV when there is none)."""
    suffix = Path(path).suffix.lower()
    if suffix == "":
        return "ascii.ecsv"
    if suffix not in TABLE_FORMATS:
        raise InputError(
            f"{path}: unknown table extension {suffix!r}; use one of {', '.join(sorted(TABLE_FORMATS))}"
        )
    return TABLE_FORMATS[suffix]


def write_table(table, path, **write_kwargs):
    """Write ``table`` to ``path`` atomically: a temporary file in the same folder, then a rename.

    A reader never sees a half-written file, and an interrupted write leaves the old file intact. The
    temporary file is flushed to disk before the rename. ``write_kwargs`` go to astropy's writer
    (e.g. ``latexdict`` for ``.tex``).
    """
    path = Path(path)
    fmt = table_format(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.tmp{path.suffix or '.ecsv'}")
    try:
        table.write(tmp, format=fmt, overwrite=True, **write_kwargs)
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path


# --------------------------------------------------------------------------------------------- survey results

__all__ += ["COLUMN_DESCRIPTIONS", "write_results", "paper_table", "write_report", "format_value"]

#: One-line meaning of each results column (written into ECSV and shown in ``docs/survey.md``).
COLUMN_DESCRIPTIONS = {
    "star": "star name from the star list",
    "vsini_adopted": "adopted v sin i (value, or the upper limit when vsini_adopted_is_limit)",
    "vsini_adopted_err": "one-sigma uncertainty of the adopted value (empty for a limit); for the fit, vsini_fit_err and vsini_fit_sys in quadrature",
    "vsini_adopted_is_limit": "True: vsini_adopted is only an upper limit",
    "adopted_method": "which estimate was adopted: fit, fourier, fit_limit, fourier_limit or none",
    "vsini_fit": "profile fit v sin i (empty when only a limit or nothing)",
    "vsini_fit_err": "one-sigma statistical uncertainty of vsini_fit",
    "vsini_fit_sys": "systematic uncertainty of vsini_fit from the assumed intrinsic width (microturbulence +/- 0.5 km/s)",
    "vsini_fit_upper_limit": "profile fit upper limit when rotation is not resolved",
    "vsini_fourier": "Fourier first-zero v sin i (empty when only a limit or nothing)",
    "vsini_fourier_err": "one-sigma uncertainty of vsini_fourier",
    "vsini_fourier_upper_limit": "Fourier upper limit when no zero is usable",
    "difference_sigma": "(fit - Fourier) / combined uncertainty (fit statistical and systematic, Fourier); beyond 3 flags methods_disagree",
    "q2_q1": "ratio of the second to the first Fourier zero (rigid linear limb darkening: 1.72-1.83)",
    "q2_q1_err": "one-sigma uncertainty of q2_q1",
    "macroturbulence": "radial-tangential macroturbulence of the fit (fitted or fixed)",
    "macroturbulence_err": "one-sigma uncertainty of the fitted macroturbulence",
    "macroturbulence_upper_limit": "upper limit of the macroturbulence when the fit cannot resolve it",
    "rv": "radial velocity from the fit",
    "n_lines": "number of lines used",
    "snr": "signal-to-noise ratio per pixel of the spectrum",
    "flags": "space-separated flag words; see the 'flags' metadata and docs/flags.md",
    "error": "why a method or the star failed (empty if none)",
    "warnings": "warnings raised while measuring this star (empty if none)",
}

_FITS_KEYS = {"vsini_version": "VSINIVER", "created": "CREATED", "star_list": "STARLIST", "options": "OPTIONS",
              "kernel": "KERNEL", "summary": "SUMMARY"}


def _fits_meta(meta):
    """Table metadata for a FITS header: short keys, JSON text for nested values, flags as COMMENT cards."""
    import json

    out = {}
    for key, card in _FITS_KEYS.items():
        if key in meta:
            value = meta[key]
            out[card] = value if isinstance(value, (str, int, float, bool)) else json.dumps(value, allow_nan=False,
                                                                                             default=str)
    comments = [f"{k}: {v}" for k, v in meta.get("flags", {}).items()]
    if "note" in meta:
        comments.insert(0, str(meta["note"]))
    out["comments"] = comments
    return out


def format_value(value, err=float("nan"), *, limit=False, latex=False):
    """A value with its uncertainty for a table: ``12.3 +- 0.4``, ``< 4.1`` or ``...``.

    The number of decimals follows the uncertainty (two significant digits below 1, one above; at most 2).
    """
    import math

    if value is None or not math.isfinite(value):
        return r"\nodata" if latex else "..."
    if limit:
        text = f"<{value:.1f}"
        return f"${text}$" if latex else text
    if err is None or not math.isfinite(err) or err <= 0:
        return f"{value:.1f}"
    decimals = int(min(2, max(0, 1 - math.floor(math.log10(err)))))
    pm = r" \pm " if latex else " +- "
    text = f"{value:.{decimals}f}{pm}{err:.{decimals}f}"
    return f"${text}$" if latex else text


def _latex_escape(text):
    table = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_", "{": r"\{",
             "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}"}
    return "".join(table.get(c, c) for c in str(text))


def _floats(table, name):
    import numpy as np

    if name not in table.colnames:
        return np.full(len(table), np.nan)
    return np.ma.filled(np.ma.asarray(table[name]).astype(float), np.nan)


def paper_table(table):
    """The AASTeX table of a survey: formatted values, limits as ``<x``, missing values as ``\\nodata``.

    Returns
    -------
    (Table, dict)
        The table of strings and the ``latexdict`` (caption, column alignment, table comments).
    """
    import numpy as np
    from astropy.table import Table

    fit, fit_e, fit_l = (_floats(table, c) for c in ("vsini_fit", "vsini_fit_err", "vsini_fit_upper_limit"))
    four, four_e, four_l = (_floats(table, c) for c in ("vsini_fourier", "vsini_fourier_err",
                                                         "vsini_fourier_upper_limit"))
    q, q_e = _floats(table, "q2_q1"), _floats(table, "q2_q1_err")
    ad, ad_e = _floats(table, "vsini_adopted"), _floats(table, "vsini_adopted_err")
    is_lim = np.ma.filled(np.ma.asarray(table["vsini_adopted_is_limit"]), False).astype(bool)

    def either(v, e, lim, k):
        return format_value(v[k], e[k], latex=True) if np.isfinite(v[k]) else format_value(lim[k], limit=True,
                                                                                         latex=True)

    out = Table()
    n = len(table)
    out["Star"] = [_latex_escape(s) for s in table["star"]]
    out["$v\\sin i$ (fit)"] = [either(fit, fit_e, fit_l, k) for k in range(n)]
    out["$v\\sin i$ (Fourier)"] = [either(four, four_e, four_l, k) for k in range(n)]
    out["$q_2/q_1$"] = [format_value(q[k], q_e[k], latex=True) for k in range(n)]
    out["$v\\sin i$ (adopted)"] = [format_value(ad[k], ad_e[k], limit=bool(is_lim[k]), latex=True) for k in range(n)]
    out["Method"] = [_latex_escape(m) for m in table["adopted_method"]]
    out["Flags"] = [_latex_escape(f) if f else "" for f in np.ma.filled(np.ma.asarray(table["flags"]), "")]
    latexdict = {
        "caption": r"Projected rotational velocities (km\,s$^{-1}$) from the profile fit and the Fourier first zero",
        "col_align": "lcccccl",
        "tablefoot": (r"\tablecomments{Uncertainties are one sigma. ``$<$'' marks an upper limit (rotation not "
                      r"resolved): the true value is anywhere below it. \nodata: not measured (see Flags). "
                      r"Flag meanings are listed in the machine-readable table.}"),
    }
    return out, latexdict


def write_results(table, path):
    """Write a survey results table in the format of ``path``'s extension, atomically.

    ECSV (default) keeps units, descriptions and the provenance metadata; FITS keeps the metadata as
    header cards (nested values as JSON text); CSV holds the values only; ``.tex`` writes the AASTeX
    paper table of :func:`paper_table`; ``.txt`` a fixed-width text table. Masked values are empty in
    text formats and NaN in FITS.
    """
    fmt = table_format(path)
    if fmt == "ascii.aastex":
        paper, latexdict = paper_table(table)
        return write_table(paper, path, latexdict=latexdict)
    if fmt in ("fits", "ascii.csv", "ascii.fixed_width_two_line"):
        out = table.copy(copy_data=False)
        out.meta.clear()
        if fmt == "fits":
            out.meta.update(_fits_meta(table.meta))
            for name in out.colnames:
                col = out[name]
                if col.dtype.kind in "US" and getattr(col, "mask", None) is not None and col.mask.any():
                    out[name] = col.filled("")
        return write_table(out, path)
    return write_table(table, path)


def _atomic_text(path, text):
    from pathlib import Path

    path = Path(path)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.{secrets.token_hex(4)}.tmp")
    try:
        tmp.write_text(text, encoding="utf-8")
        os.replace(tmp, path)
    except BaseException:
        if tmp.exists():
            tmp.unlink()
        raise
    return path


def write_report(table, folder, *, figures=None, figure_dir="stars", title="vsini survey", summary="", files=()):
    """Survey figures and an ``index.html`` linking the results and every figure.

    Parameters
    ----------
    table : astropy Table
        Survey results (as written by :func:`write_results`).
    folder : path-like
        Report folder (created).
    figures : sequence of str, optional
        Per-star figure stems (relative to ``folder/figure_dir``), aligned with the table's rows; ""
        for a star without a figure. ``STEM.png`` and ``STEM.pdf`` are linked.
    figure_dir : str
    title : str
    summary : str
        One line shown under the title.
    files : sequence of (label, path)
        Other files to link (results tables), paths relative to ``folder``.

    Returns
    -------
    Path
        ``folder/index.html``.

    Notes
    -----
    Writes ``comparison.pdf``/``.png`` (:func:`vsini.plots.plot_survey_comparison`) and
    ``vsini_distribution.pdf``/``.png`` (:func:`vsini.plots.plot_vsini_distribution`): vector PDF for
    papers, PNG for the page. All text from the table is HTML-escaped.
    """
    from pathlib import Path

    from .plots import plot_survey_comparison, plot_vsini_distribution, save_figure

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    axes = plot_survey_comparison(table, title="profile fit vs Fourier first zero")
    save_figure(axes[0].figure, folder / "comparison.pdf", also_png=True)
    ax = plot_vsini_distribution(table, title="adopted v sin i")
    save_figure(ax.figure, folder / "vsini_distribution.pdf", also_png=True)
    html = _index_html(table, figures, figure_dir, title, summary, files, folder)
    return _atomic_text(folder / "index.html", html)


def _href(path):
    from html import escape
    from urllib.parse import quote

    return escape(quote(str(path).replace(os.sep, "/")), quote=True)


def _index_html(table, figures, figure_dir, title, summary, files, folder):
    from html import escape

    import numpy as np

    from .flags import FLAGS

    n = len(table)
    figures = list(figures) if figures is not None else [""] * n
    fit, fit_e, fit_l = (_floats(table, c) for c in ("vsini_fit", "vsini_fit_err", "vsini_fit_upper_limit"))
    four, four_e, four_l = (_floats(table, c) for c in ("vsini_fourier", "vsini_fourier_err",
                                                         "vsini_fourier_upper_limit"))
    ad, ad_e = _floats(table, "vsini_adopted"), _floats(table, "vsini_adopted_err")
    diff, q, q_e = _floats(table, "difference_sigma"), _floats(table, "q2_q1"), _floats(table, "q2_q1_err")
    n_lines, snr = _floats(table, "n_lines"), _floats(table, "snr")
    is_lim = np.ma.filled(np.ma.asarray(table["vsini_adopted_is_limit"]), False).astype(bool)
    text = {c: [str(v) for v in np.ma.filled(np.ma.asarray(table[c]), "")] if c in table.colnames else [""] * n
            for c in ("star", "flags", "error", "adopted_method")}

    def either(v, e, lim, k):
        return format_value(v[k], e[k]) if np.isfinite(v[k]) else format_value(lim[k], limit=True)

    def number(text):  # a value cell: "12.3 ± 0.4", "&lt;1.8"
        return escape(text).replace(" +- ", " &plusmn; ")

    used_flags = sorted({f for fl in text["flags"] for f in fl.split()})
    out = [
        "<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
        f"<title>{escape(title)}</title>",
        "<style>body{font-family:sans-serif;margin:1.5em;max-width:110em}"
        "table{border-collapse:collapse;font-size:0.85em}td,th{border:1px solid #bbb;padding:2px 6px}"
        "td.n{text-align:right}tr.failed{background:#fbe3d6}tr.limit{background:#e8f1fa}"
        "abbr{text-decoration:underline dotted}figure{display:inline-block;margin:0 1em 1em 0}"
        "img{max-width:32em}</style>",
        "</head>", "<body>", f"<h1>{escape(title)}</h1>",
    ]
    if summary:
        out.append(f"<p>{escape(summary)}</p>")
    meta = table.meta
    prov = []
    for key in ("vsini_version", "created", "star_list"):
        if key in meta:
            prov.append(f"{escape(key)}: {escape(str(meta[key]))}")
    if prov:
        out.append("<p><small>" + "; ".join(prov) + "</small></p>")
    if files:
        out.append("<p>Results: " + ", ".join(f'<a href="{_href(p)}">{escape(label)}</a>' for label, p in files)
                   + "</p>")
    out.append("<h2>Survey figures</h2>")
    for stem, caption in (("comparison", "Fourier first zero against the profile fit (1:1 dashed); below, "
                                         "their difference in units of the combined uncertainty (band: 3 sigma)."),
                          ("vsini_distribution", "Adopted v sin i; hatched: upper limits, drawn at the limit.")):
        out.append(f'<figure><a href="{_href(stem + ".pdf")}"><img src="{_href(stem + ".png")}" alt="{escape(stem)}">'
                   f"</a><figcaption>{escape(caption)} "
                   f'(<a href="{_href(stem + ".pdf")}">PDF</a>)</figcaption></figure>')
    out.append("<h2>Stars</h2>")
    out.append("<p>Velocities in km/s, one-sigma uncertainties. &lt;x: upper limit (rotation not resolved; "
               "the true value is anywhere below x). ...: not measured (see the flags and the error).</p>")
    heads = ["#", "star", "adopted v sin i", "method", "fit", "Fourier", "fit &minus; Fourier (&sigma;)", "q2/q1",
             "lines", "S/N", "flags", "error", "figure"]
    out.append("<table><thead><tr>" + "".join(f"<th>{h}</th>" for h in heads) + "</tr></thead><tbody>")
    for k in range(n):
        cls = "failed" if text["adopted_method"][k] == "none" else ("limit" if is_lim[k] else "")
        flags = " ".join(f'<abbr title="{escape(FLAGS.get(f, ""), quote=True)}">{escape(f)}</abbr>'
                         for f in text["flags"][k].split())
        stem = figures[k] if k < len(figures) else ""
        if stem and (folder / figure_dir / f"{stem}.png").exists():
            base = f"{figure_dir}/{stem}"
            fig = f'<a href="{_href(base + ".png")}">PNG</a> <a href="{_href(base + ".pdf")}">PDF</a>'
            star = f'<a href="{_href(base + ".png")}">{escape(text["star"][k])}</a>'
        else:
            fig, star = "", escape(text["star"][k])
        cells = [
            f'<td class="n">{k + 1}</td>', f"<td>{star}</td>",
            f'<td class="n">{number(format_value(ad[k], ad_e[k], limit=bool(is_lim[k])))}</td>',
            f"<td>{escape(text['adopted_method'][k])}</td>",
            f'<td class="n">{number(either(fit, fit_e, fit_l, k))}</td>',
            f'<td class="n">{number(either(four, four_e, four_l, k))}</td>',
            f'<td class="n">{"" if not np.isfinite(diff[k]) else f"{diff[k]:+.1f}"}</td>',
            f'<td class="n">{number(format_value(q[k], q_e[k]))}</td>',
            f'<td class="n">{"" if not np.isfinite(n_lines[k]) else int(n_lines[k])}</td>',
            f'<td class="n">{"" if not np.isfinite(snr[k]) else f"{snr[k]:.0f}"}</td>',
            f"<td>{flags}</td>", f"<td>{escape(text['error'][k])}</td>", f"<td>{fig}</td>",
        ]
        out.append(f'<tr class="{cls}">' + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    if used_flags:
        out.append("<h2>Flags</h2><dl>")
        for f in used_flags:
            out.append(f"<dt><code>{escape(f)}</code></dt><dd>{escape(FLAGS.get(f, ''))}</dd>")
        out.append("</dl>")
    out += ["</body>", "</html>", ""]
    return "\n".join(out)
