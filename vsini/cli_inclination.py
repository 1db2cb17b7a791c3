"""``vsini inclination ...``: surface-model sensitivity, inclination posteriors and deprojection.

A typer sub-application registered by :mod:`vsini.cli` as ``vsini inclination``. Each command parses
its options, calls one library function (:func:`vsini.sensitivity.sensitivity_study`,
:func:`vsini.inclination.infer_inclination` / :func:`~vsini.inclination.infer_table`,
:func:`vsini.deprojection.deproject`) and prints or writes the result. Errors are one line on standard
error with exit code 2 (:func:`vsini._cli_common.guarded`).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Optional

import typer

from ._cli_common import guarded, print_json, write_figure
from .errors import InputError, SpectrumFileError

__all__ = ["inclination_app"]

inclination_app = typer.Typer(
    name="inclination",
    help="Inclinations and equatorial velocities: how the surface model biases v sin i (sensitivity), the "
    "inclination of a star from v sin i, period and radius (infer), and the distribution of equatorial "
    "velocities of a sample (deproject).",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

_SENSITIVITY_KEYS = ("inclination_deg", "vsini_true", "vsini_fit", "vsini_fourier", "q2_q1")
_TRUE = ("true", "t", "yes", "y", "1")


# ---------------------------------------------------------------------------------------------- helpers


def _floats(text, option, example):
    """Numbers separated by commas (or spaces)."""
    parts = [p for p in str(text).replace(";", ",").replace(" ", ",").split(",") if p]
    try:
        values = [float(p) for p in parts]
    except ValueError:
        raise InputError(f"{option}: cannot read {text!r}; write numbers separated by commas, e.g. {example}") from None
    if not values:
        raise InputError(f"{option}: no value given; write numbers separated by commas, e.g. {example}")
    return values


def _read_table(path, what):
    """Read a table file (ECSV, CSV, FITS; other text formats guessed) or raise a one-line error."""
    from astropy.table import Table

    path = Path(path)
    if not path.is_file():
        raise SpectrumFileError(path, f"no such {what} file; check the path")
    fmt = {".ecsv": "ascii.ecsv", ".csv": "ascii.csv", ".fits": "fits", ".fit": "fits"}.get(path.suffix.lower())
    try:
        table = Table.read(path, format=fmt) if fmt else Table.read(path)
    except Exception as e:  # astropy raises many kinds; the user needs one line naming the file
        first = str(e).strip().splitlines()[0] if str(e).strip() else type(e).__name__
        raise SpectrumFileError(path, f"cannot read the {what} as a table ({first}); write it as ECSV, CSV or FITS") from None
    if len(table) == 0:
        raise SpectrumFileError(path, f"the {what} has no rows")
    return table


def _bool_column(table, name):
    """A boolean array from a column of booleans, 0/1 or 'True'/'False' strings (masked -> False)."""
    import numpy as np

    if name not in table.colnames:
        return np.zeros(len(table), dtype=bool)
    col = table[name]
    values = np.ma.filled(np.ma.asarray(col), False) if np.ma.isMaskedArray(col) else np.asarray(col)
    if values.dtype.kind in "US":
        return np.array([str(v).strip().lower() in _TRUE for v in values])
    return values.astype(bool)


def _fmt(value, digits=2):
    return "--" if value is None or not math.isfinite(value) else f"{value:.{digits}f}"


# ---------------------------------------------------------------------------------------------- sensitivity


@inclination_app.command()
@guarded
def sensitivity(
    veq: Optional[float] = typer.Option(None, "--veq", help="Equatorial rotation velocity v_eq, km/s (spherical star; "
                                        "or give --omega with --mass and --radius)."),
    omega: float = typer.Option(0.0, help="Angular velocity as a fraction of the critical one, Omega/Omega_crit, "
                                "0 <= omega < 1 (Roche shape and gravity darkening; v_eq follows from --mass and "
                                "--radius). Note v_eq/v_crit < omega: 0.81 at omega = 0.95."),
    mass: Optional[float] = typer.Option(None, help="Stellar mass, solar masses (with --omega)."),
    radius: Optional[float] = typer.Option(None, help="Polar radius, solar radii (with --omega; held fixed in the "
                                           "Roche model, i.e. about the radius without rotation). "
                                           "v_crit = sqrt(2 G M / (3 R_pole))."),
    alpha: float = typer.Option(0.0, help="Differential rotation alpha in Omega(lat) = Omega_eq (1 - alpha sin^2 lat); "
                                "0 rigid, > 0 solar-like. Not with --omega."),
    beta: float = typer.Option(0.25, help="Gravity-darkening exponent beta, T_eff ~ g^beta (von Zeipel: 0.25)."),
    limb_darkening: str = typer.Option("0.6", help="Linear limb-darkening coefficient, or 'a,b' for the quadratic "
                                       "law; used by the model and by both estimators."),
    resolution: float = typer.Option(60000.0, help="Resolving power R of the Gaussian instrument profile (FWHM c/R)."),
    inclinations: str = typer.Option("10,20,30,40,50,60,70,80,90", help="Inclinations, degrees in (0, 90], "
                                     "separated by commas, e.g. '10,30,50,70,90'."),
    lines: str = typer.Option("4500:0.5;5000:0.5;5500:0.5", help="Synthetic lines 'centre:depth' separated by ';' "
                              "(centre in Angstrom, depth of the unbroadened line 0-1); far enough apart that the "
                              "lines do not overlap."),
    intrinsic_width: float = typer.Option(2.0, help="1/e half-width b of the local Gaussian line, km/s."),
    teff_pole: Optional[float] = typer.Option(None, help="Polar temperature, K: Planck intensities at each line's "
                                              "wavelength instead of bolometric T^4 (Roche stars only)."),
    snr: Optional[float] = typer.Option(None, help="S/N per pixel of added noise (omit: noiseless spectra)."),
    seed: Optional[int] = typer.Option(None, help="Seed of the noise, for reproducible results."),
    as_json: bool = typer.Option(False, "--json", help="Print a JSON list, one object per inclination "
                                 "(inclination_deg, vsini_true, vsini_fit, vsini_fourier, q2_q1, biases, flags)."),
    plot: Optional[Path] = typer.Option(None, help="Figure: profiles per inclination, apparent/true v sin i and "
                                        "q2/q1 against inclination (.pdf, .png)."),
    output: Optional[Path] = typer.Option(None, "--output", "-o", help="Write the table (.ecsv, .csv, .fits)."),
):
    """How much the standard (rigid, spherical, uniformly bright) kernel misreads a star, per inclination.

    Spectra of the star are integrated over its surface (differential rotation, or Roche shape with
    gravity darkening, and limb darkening), convolved with the instrument and measured by the profile fit
    and by the Fourier first zero; the table compares the apparent v sin i with the true v_eq sin i.
    """
    from .report import write_table
    from .sensitivity import sensitivity_study
    from .simulate import parse_line_list

    if veq is not None and omega > 0:
        raise InputError(f"--veq {veq:g} and --omega {omega:g} exclude each other: with --omega, v_eq follows from "
                         "--mass and --radius")
    if omega == 0 and (mass is not None or radius is not None):
        raise InputError("--mass and --radius are used only with --omega; drop them or give --omega")
    if veq is None and omega == 0:
        raise InputError("give --veq (km/s), or --omega with --mass and --radius")
    result = sensitivity_study(
        v_eq_kms=veq, omega_crit_fraction=omega, mass_msun=mass, radius_rsun=radius,
        inclinations_deg=_floats(inclinations, "--inclinations", "10,30,50,70,90"), alpha=alpha, beta=beta,
        limb_darkening=limb_darkening, resolution=resolution,
        lines=[(ln.centre, ln.depth) for ln in parse_line_list(lines)], intrinsic_width_kms=intrinsic_width,
        teff_pole_k=teff_pole, snr=snr, rng=seed,
    )
    records = result.records()
    if as_json:
        ordered = [{k: r[k] for k in _SENSITIVITY_KEYS} | {k: v for k, v in r.items() if k not in _SENSITIVITY_KEYS}
                   for r in records]
        print_json(ordered)
    else:
        _print_sensitivity(result, records)
    if output:
        write_table(result.table, output)
        if not as_json:
            typer.echo(f"wrote {output}")
    if plot:
        from .plots import plot_sensitivity

        write_figure(lambda: plot_sensitivity(result), plot, quiet=as_json)


def _print_sensitivity(result, records):
    head = f"v_eq = {result.v_eq_kms:.2f} km/s"
    if result.omega_crit_fraction > 0:
        head += (f" (omega = {result.omega_crit_fraction:g}, v_crit = {result.v_crit_kms:.1f} km/s, "
                 f"v_eq/v_crit = {result.v_eq_kms / result.v_crit_kms:.3f}, beta = {result.beta:g})")
    if result.alpha:
        head += f", alpha = {result.alpha:g}"
    typer.echo(f"{head}; limb darkening {result.limb_darkening}; R = {result.resolution:.0f}; "
               f"{'noiseless' if result.snr is None else f'S/N {result.snr:g}'}")
    typer.echo(f"{'i(deg)':>7} {'true':>9} {'fit':>9} {'bias':>7} {'Fourier':>9} {'bias':>7} {'q2/q1':>7}  flags")
    for r in records:
        fit = _fmt(r["vsini_fit"]) if math.isfinite(r["vsini_fit"]) else f"<{_fmt(r['vsini_fit_limit'])}"
        four = _fmt(r["vsini_fourier"]) if math.isfinite(r["vsini_fourier"]) else f"<{_fmt(r['vsini_fourier_limit'])}"
        fb = f"{100 * r['fit_bias']:+.1f}%" if math.isfinite(r["fit_bias"]) else "--"
        qb = f"{100 * r['fourier_bias']:+.1f}%" if math.isfinite(r["fourier_bias"]) else "--"
        flags = " ".join(r["fit_flags"] + r["fourier_flags"])
        typer.echo(f"{r['inclination_deg']:7.1f} {r['vsini_true']:9.2f} {fit:>9} {fb:>7} {four:>9} {qb:>7} "
                   f"{_fmt(r['q2_q1'], 3):>7}  {flags}")
    lo, _, _ = result.rigid_q2_q1
    low_q = [r["inclination_deg"] for r in records if r["q2_q1"] < lo]
    worst = max((abs(r[k]) for r in records for k in ("fit_bias", "fourier_bias") if math.isfinite(r[k])), default=0.0)
    if low_q:
        typer.echo(f"caution: q2/q1 below the rigid range ({lo:.3f}) at i = {', '.join(f'{x:g}' for x in low_q)} deg: "
                   "the standard kernel does not describe this star (differential rotation or gravity darkening)")
    if worst > 0.02:
        typer.echo(f"caution: the apparent v sin i is off by up to {100 * worst:.0f} % here; a v sin i from the "
                   "standard kernel is then not v_eq sin i (below it: a lower limit)")


# ---------------------------------------------------------------------------------------------- infer


@inclination_app.command()
@guarded
def infer(
    vsini: Optional[float] = typer.Option(None, help="Measured v sin i (or its upper limit with --limit), km/s."),
    vsini_err: Optional[float] = typer.Option(None, help="One-sigma error of v sin i, km/s (with --limit, 0 means "
                                              "a hard limit)."),
    period: Optional[float] = typer.Option(None, help="Rotation period, days."),
    period_err: Optional[float] = typer.Option(None, help="One-sigma error of the period, days (0: exact)."),
    radius: Optional[float] = typer.Option(None, help="Stellar radius, solar radii."),
    radius_err: Optional[float] = typer.Option(None, help="One-sigma error of the radius, solar radii (0: exact)."),
    limit: bool = typer.Option(False, "--limit", help="--vsini is only an upper limit."),
    results: Optional[Path] = typer.Option(None, help="Table mode: survey results table (columns star, "
                                           "vsini_adopted, vsini_adopted_err [km/s], optional vsini_adopted_is_limit, "
                                           "flags)."),
    starlist: Optional[Path] = typer.Option(None, help="Table mode: star list with star, period_days, radius_rsun "
                                            "and optional period_err_days, radius_err_rsun."),
    radius_frac_err: float = typer.Option(0.10, help="Table mode: fractional radius error where the star list has "
                                          "none."),
    period_frac_err: float = typer.Option(0.05, help="Table mode: fractional period error where the star list has "
                                          "none."),
    output: Optional[Path] = typer.Option(None, "--output", "-o", help="Table mode: write the inclination table "
                                          "(.ecsv, .csv, .fits)."),
    as_json: bool = typer.Option(False, "--json", help="Print JSON: inclination_deg (median), inclination_lo_deg, "
                                 "inclination_hi_deg (16th/84th percentiles), cos_i_median, flags (a list of such "
                                 "objects in table mode)."),
    plot: Optional[Path] = typer.Option(None, help="Figure of the posterior in i and in cos i (.pdf, .png; one star "
                                        "only)."),
):
    """Posterior of the inclination from v sin i, rotation period and radius (Masuda & Winn 2020).

    v = 2 pi R / P and v sin i are treated jointly (v sin i <= v) with isotropic spin axes. Give one star's
    values, or --results and --starlist to run over a survey table.
    """
    names = ("--vsini", "--vsini-err", "--period", "--period-err", "--radius", "--radius-err")
    if results is not None or starlist is not None:
        given = [n for n, v in zip(names, (vsini, vsini_err, period, period_err, radius, radius_err), strict=True)
                 if v is not None] + (["--limit"] if limit else [])
        if given:
            raise InputError(f"{', '.join(given)} and --results/--starlist exclude each other: give one star's "
                             "values or two tables")
        if results is None or starlist is None:
            raise InputError("table mode needs both --results and --starlist")
        if plot is not None:
            raise InputError("--plot draws one star's posterior; it is not available with --results/--starlist")
        _infer_tables(results, starlist, radius_frac_err, period_frac_err, output, as_json)
        return
    if output is not None:
        raise InputError("--output writes the table of table mode; give --results and --starlist, or drop -o")
    if limit and vsini_err is None:
        vsini_err = 0.0  # a hard upper limit
    values = (vsini, vsini_err, period, period_err, radius, radius_err)
    missing = [n for n, v in zip(names, values, strict=True) if v is None]
    if missing:
        raise InputError(f"missing {', '.join(missing)}; give v sin i, period and radius with their errors "
                         "(0 for an exact value)")
    from .inclination import infer_inclination

    post = infer_inclination(vsini, vsini_err, period, period_err, radius, radius_err, vsini_is_upper_limit=limit)
    summary = {
        "inclination_deg": post.inclination_deg,
        "inclination_lo_deg": post.inclination_lo_deg,
        "inclination_hi_deg": post.inclination_hi_deg,
        "cos_i_median": post.cos_i_median,
        "veq_kms": post.veq_kms,
        "veq_err_kms": post.veq_err_kms,
        "information_gain_nat": post.information_gain_nat,
        "is_limit": post.is_limit,
        "flags": list(post.flags),
    }
    if as_json:
        print_json(summary)
    else:
        _print_posterior(post)
    if plot:
        from .plots import plot_inclination_posterior

        write_figure(lambda: plot_inclination_posterior(post), plot, quiet=as_json)


def _print_posterior(post):
    from .inclination import INCLINATION_FLAGS

    typer.echo(f"v_eq = 2 pi R / P = {post.veq_kms:.2f} +/- {post.veq_err_kms:.2f} km/s")
    if post.is_limit:
        typer.echo(f"inclination: i < {post.inclination_hi_deg:.1f} deg (84th percentile; v sin i is an upper limit, "
                   "so only this bound is meaningful)")
    else:
        typer.echo(f"inclination: {post.inclination_deg:.1f} deg (68 %: {post.inclination_lo_deg:.1f} to "
                   f"{post.inclination_hi_deg:.1f} deg)")
    typer.echo(f"cos i (median): {post.cos_i_median:.4f}")
    typer.echo(f"information gain over the isotropic prior: {post.information_gain_nat:.2f} nat")
    typer.echo(f"flags: {', '.join(post.flags) if post.flags else 'none'}")
    for f in post.flags:
        typer.echo(f"  {f}: {INCLINATION_FLAGS[f]}")


def _infer_tables(results, starlist, radius_frac_err, period_frac_err, output, as_json):
    from .inclination import infer_table
    from .report import write_table

    out = infer_table(_read_table(results, "results table"), _read_table(starlist, "star list"),
                      radius_frac_err=radius_frac_err, period_frac_err=period_frac_err)
    if as_json:
        print_json([{name: (str(row[name]).split() if name in ("flags", "vsini_flags") else
                            (str(row[name]) if name == "star" else float(row[name])))
                     for name in out.colnames} for row in out])
    else:
        typer.echo(f"{'star':<20} {'i(deg)':>7} {'16%':>7} {'84%':>7} {'cos i':>7} {'v_eq':>8}  flags")
        for row in out:
            typer.echo(f"{str(row['star']):<20} {_fmt(row['inclination_deg'], 1):>7} "
                       f"{_fmt(row['inclination_lo_deg'], 1):>7} {_fmt(row['inclination_hi_deg'], 1):>7} "
                       f"{_fmt(row['cos_i_median'], 3):>7} {_fmt(row['veq_kms']):>8}  {row['flags']}")
    if output:
        write_table(out, output)
        if not as_json:
            typer.echo(f"wrote {output} ({len(out)} stars)")


# ---------------------------------------------------------------------------------------------- deproject


@inclination_app.command()
@guarded
def deproject(
    results: Path = typer.Argument(..., help="Survey results table (columns star, vsini_adopted [km/s], optional "
                                   "vsini_adopted_is_limit); .ecsv, .csv or .fits."),
    bins: Optional[int] = typer.Option(None, help="Number of velocity bins on [0, 1.1 max v sin i] (default: "
                                       "ceil(2 N^(1/3)) clipped to 8-60)."),
    bootstrap: int = typer.Option(200, help="Bootstrap resamples of the stars for the bands (0: none)."),
    seed: Optional[int] = typer.Option(None, help="Seed of the bootstrap, for reproducible bands."),
    output: Optional[Path] = typer.Option(None, "--output", "-o", help="Write f(v) per bin (.ecsv, .csv, .fits)."),
    plot: Optional[Path] = typer.Option(None, help="Figure: f(v) with its bootstrap band, and the observed v sin i "
                                        "histogram with the model (.pdf, .png)."),
    as_json: bool = typer.Option(False, "--json", help="Print a JSON summary (mean v and band, stars, limits, "
                                 "iterations, flags)."),
):
    """Distribution of equatorial velocities from the v sin i of a sample (isotropic axes; Lucy 1974).

    Upper limits (vsini_adopted_is_limit) are spread below their limits by the model; rows without a value
    are skipped.
    """
    import numpy as np
    from astropy.table import Table

    from .deprojection import DEPROJECTION_FLAGS
    from .deprojection import deproject as run_deprojection
    from .report import write_table

    table = _read_table(results, "results table")
    if "vsini_adopted" not in table.colnames:
        raise SpectrumFileError(results, "no vsini_adopted column; give a survey results table (star, vsini_adopted, "
                                "vsini_adopted_is_limit)")
    col = table["vsini_adopted"]
    try:
        values = np.array(np.ma.filled(np.ma.asarray(col, dtype=float), np.nan), dtype=float)
    except (TypeError, ValueError):
        raise SpectrumFileError(results, "column vsini_adopted is not numeric; check the table") from None
    is_limit = _bool_column(table, "vsini_adopted_is_limit")
    keep = np.isfinite(values)
    n_skipped = int(np.count_nonzero(~keep))
    dep = run_deprojection(values[keep], upper_limits=is_limit[keep], bins=bins, n_bootstrap=bootstrap, rng=seed)
    summary = {
        "n_stars": dep.n_stars,
        "n_limits": dep.n_limits,
        "n_skipped": n_skipped,
        "mean_v_kms": dep.mean_v_kms,
        "mean_v_lo_kms": dep.mean_v_lo_kms,
        "mean_v_hi_kms": dep.mean_v_hi_kms,
        "mean_vsini_measured_kms": float(np.mean(values[keep][~is_limit[keep]])) if np.any(~is_limit[keep])
        else math.nan,
        "n_bins": int(dep.centres_kms.size),
        "n_iter": dep.n_iter,
        "chi2": dep.chi2,
        "n_bootstrap": dep.n_bootstrap,
        "flags": list(dep.flags),
    }
    if as_json:
        print_json(summary)
    else:
        typer.echo(f"{dep.n_stars} stars ({dep.n_limits} upper limits; {n_skipped} rows without v sin i skipped), "
                   f"{dep.centres_kms.size} bins, {dep.n_iter} Lucy iterations, chi2 = {dep.chi2:.1f}")
        band = (f" (68 % bootstrap: {dep.mean_v_lo_kms:.1f} to {dep.mean_v_hi_kms:.1f})"
                if math.isfinite(dep.mean_v_lo_kms) else "")
        typer.echo(f"mean equatorial velocity: {dep.mean_v_kms:.1f} km/s{band}; mean measured v sin i "
                   f"{summary['mean_vsini_measured_kms']:.1f} km/s (pi/4 of the mean v for isotropic axes, "
                   "limits aside)")
        typer.echo(f"flags: {', '.join(dep.flags) if dep.flags else 'none'}")
        for f in dep.flags:
            typer.echo(f"  {f}: {DEPROJECTION_FLAGS[f]}")
    if output:
        e = dep.edges_kms
        out = Table()
        out["v_lo"], out["v_hi"], out["v_centre"] = e[:-1], e[1:], dep.centres_kms
        out["f_pdf"], out["f_lo"], out["f_hi"] = dep.f_pdf, dep.f_lo, dep.f_hi
        out["phi_model_pdf"], out["phi_observed_pdf"] = dep.phi_model_pdf, dep.phi_observed_pdf
        for name in ("v_lo", "v_hi", "v_centre"):
            out[name].unit = "km/s"
        for name in ("f_pdf", "f_lo", "f_hi", "phi_model_pdf", "phi_observed_pdf"):
            out[name].unit = "s/km"
        out.meta.update({k: v for k, v in summary.items()})
        out.meta["source"] = str(results.name)
        out.meta["method"] = ("Lucy 1974 iteration on the Chandrasekhar & Munch 1950 kernel, isotropic axes "
                              "(vsini.deprojection.deproject); bands: bootstrap 15.87-84.13 percentiles")
        out.meta["flag_meanings"] = {f: DEPROJECTION_FLAGS[f] for f in dep.flags}
        write_table(out, output)
        if not as_json:
            typer.echo(f"wrote {output}")
    if plot:
        from .plots import plot_deprojection

        write_figure(lambda: plot_deprojection(dep), plot, quiet=as_json)
