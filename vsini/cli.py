"""The ``vsini`` command line: parse, call the library, print. No physics here.

Every :class:`~vsini.errors.VsiniError` becomes one line on standard error and exit code 2; an
unexpected exception becomes one line too (exit 3) unless ``VSINI_DEBUG=1`` asks for the traceback.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path
from typing import Optional

import typer

from ._cli_common import guarded as _guarded
from ._cli_common import print_json as _print_json
from ._cli_common import write_figure
from .cli_inclination import inclination_app

__all__ = ["app", "main"]

app = typer.Typer(
    name="vsini",
    help="Projected rotational velocities (v sin i) of stars from their spectra.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
app.add_typer(inclination_app, name="inclination")


def _parse_range(text):
    from .errors import InputError

    try:
        a, b = (float(x) for x in text.split(":"))
    except ValueError:
        raise InputError(f"--range: cannot read {text!r}; write START:END in Angstrom, e.g. 5480:5540") from None
    return a, b


def _intrinsic(intrinsic_width, teff, microturbulence, element):
    from .kernels import doppler_width

    if intrinsic_width is not None:
        return intrinsic_width
    return doppler_width(teff, element=element, microturbulence=microturbulence)


# ---------------------------------------------------------------------------------------------- simulate


@app.command()
@_guarded
def simulate(
    output: Path = typer.Option(..., "--output", "-o", help="File to write: .fits/.fit for FITS, .csv/.txt for text."),
    lines: str = typer.Option(
        "5500.0:0.6", help="Lines as 'centre:depth' pairs separated by ';' (centre in Angstrom, rest frame; depth of "
        "the unbroadened intrinsic line, 0-1). Example: '6141.7:0.5;6162.2:0.7'."
    ),
    vsini: float = typer.Option(10.0, help="Projected rotational velocity v sin i, km/s."),
    limb_darkening: str = typer.Option("0.6", help="Linear limb-darkening coefficient, or 'a,b' for the quadratic law."),
    resolution: Optional[float] = typer.Option(
        50000.0, help="Resolving power R of a Gaussian instrument profile (FWHM = c/R). 0 for none."
    ),
    lsf: Optional[Path] = typer.Option(None, help="Tabulated instrument profile (velocity km/s, response); replaces R."),
    macroturbulence: float = typer.Option(0.0, help="Radial-tangential macroturbulence zeta, km/s."),
    gaussian_macro: bool = typer.Option(False, "--gaussian-macro", help="Use isotropic Gaussian macroturbulence instead."),
    intrinsic_width: Optional[float] = typer.Option(
        None, help="Doppler width b of the intrinsic line, km/s (profile exp(-(v/b)^2)). Default: from --teff and "
        "--microturbulence for an iron line."
    ),
    teff: float = typer.Option(5800.0, help="Temperature for the thermal width, K."),
    microturbulence: float = typer.Option(1.0, help="Microturbulence xi, km/s."),
    element: str = typer.Option("Fe", help="Element whose mass sets the thermal width."),
    damping: float = typer.Option(0.0, help="Voigt damping parameter a = gamma/b of the intrinsic line (0: Gaussian)."),
    rv: float = typer.Option(0.0, help="Radial velocity, km/s."),
    snr: Optional[float] = typer.Option(None, help="Signal-to-noise ratio per pixel in the continuum (omit: noiseless)."),
    seed: Optional[int] = typer.Option(None, help="Seed of the noise, for a reproducible spectrum."),
    wave_range: str = typer.Option("5480:5520", "--range", help="First and last wavelength, Angstrom: START:END."),
    step: float = typer.Option(0.02, help="Pixel step, Angstrom."),
    name: str = typer.Option("simulated", help="Object name written into the file."),
    plot: Optional[Path] = typer.Option(None, help="Also draw the spectrum to this figure file (.pdf, .png)."),
):
    """Write a synthetic rotationally broadened, continuum-normalised spectrum.

    The line profile is the intrinsic line convolved with the limb-darkened rotation kernel,
    macroturbulence and the instrument profile, averaged over each pixel.
    """
    from .io import write_spectrum
    from .model import load_lsf
    from .simulate import simulate_spectrum

    table_lsf = load_lsf(lsf) if lsf else None
    spec = simulate_spectrum(
        lines,
        wave_range=_parse_range(wave_range),
        step=step,
        vsini=vsini,
        limb_darkening=limb_darkening,
        resolution=resolution or None,
        macroturbulence=macroturbulence,
        macro_kind="gaussian" if gaussian_macro else "rt",
        intrinsic_width=intrinsic_width,
        teff=teff,
        microturbulence=microturbulence,
        element=element,
        damping=damping,
        rv=rv,
        snr=snr,
        rng=seed,
        lsf=table_lsf,
        name=name,
    )
    write_spectrum(spec, output)
    typer.echo(f"wrote {output} ({spec.n_pixels} pixels, v sin i = {vsini:g} km/s)")
    if plot:
        from .plots import plot_spectrum

        write_figure(lambda: plot_spectrum(spec, title=f"{name}: v sin i = {vsini:g} km/s"), plot)


# ---------------------------------------------------------------------------------------------- kernel


@app.command()
@_guarded
def kernel(
    output: Path = typer.Option(..., "--output", "-o", help="Table to write (.ecsv, .csv or .fits)."),
    vsini: float = typer.Option(10.0, help="v sin i, km/s."),
    limb_darkening: str = typer.Option("0.6", help="Linear coefficient, or 'a,b' for the quadratic law."),
    resolution: Optional[float] = typer.Option(None, help="Resolving power R of a Gaussian instrument profile."),
    lsf: Optional[Path] = typer.Option(None, help="Tabulated instrument profile (velocity km/s, response)."),
    macroturbulence: float = typer.Option(0.0, help="Radial-tangential macroturbulence zeta, km/s."),
    gaussian_macro: bool = typer.Option(False, "--gaussian-macro", help="Use isotropic Gaussian macroturbulence instead."),
    product: bool = typer.Option(
        False, "--product", help="Multiply separate rotation and radial-tangential kernels (fast approximation) instead of "
        "integrating them together over the disc."
    ),
    intrinsic_width: float = typer.Option(0.0, help="Doppler width b of the intrinsic Gaussian, km/s (0: none)."),
    damping: float = typer.Option(0.0, help="Voigt damping parameter of the intrinsic profile."),
    step: float = typer.Option(0.25, help="Velocity step of the table, km/s."),
    plot: Optional[Path] = typer.Option(None, help="Figure of the kernel and its Fourier amplitude (.pdf, .png)."),
):
    """Write the composed broadening kernel and its Fourier amplitude.

    The table has two parts in one file: columns velocity/kernel, and frequency/amplitude
    (the transform sampled at the table's frequencies); zeros of the rotation transform are in the
    metadata.
    """
    import numpy as np
    from astropy.table import Table

    from .model import Broadening, composed_kernel, load_lsf
    from .report import write_table

    b = Broadening(
        vsini=vsini,
        limb_darkening=limb_darkening,
        resolution=resolution or None,
        lsf=load_lsf(lsf) if lsf else None,
        macroturbulence=macroturbulence,
        macro_kind="gaussian" if gaussian_macro else "rt",
        rt_mode="product" if product else "joint",
        intrinsic_width=intrinsic_width,
        damping=damping,
    )
    v, k = composed_kernel(b, step)
    sigma = np.fft.rfftfreq(4 * v.size, step)[: v.size]
    amp = np.abs(b.transform(sigma))
    zeros = (b.limb_darkening.transform_zeros(3) / vsini).tolist() if vsini > 0 else []
    t = Table()
    t["velocity"] = v
    t["velocity"].unit = "km/s"
    t["kernel"] = k
    t["kernel"].unit = "s/km"
    t["frequency"] = sigma
    t["frequency"].unit = "s/km"
    t["amplitude"] = amp
    t.meta.update(
        {
            "vsini_kms": vsini,
            "limb_darkening": b.limb_darkening.label,
            "resolution": resolution,
            "macroturbulence_kms": macroturbulence,
            "macro_kind": b.macro_kind,
            "rt_mode": b.rt_mode,
            "intrinsic_width_kms": intrinsic_width,
            "damping": damping,
            "rotation_zeros_s_per_km": zeros,
            "note": "kernel sampled at points; amplitude = |Fourier transform| of the composed kernel",
        }
    )
    write_table(t, output)
    typer.echo(f"wrote {output} ({v.size} samples, half extent {v[-1]:.1f} km/s)")
    if zeros:
        typer.echo("rotation zeros (s/km): " + ", ".join(f"{z:.5f}" for z in zeros))
    if plot:
        from .plots import plot_kernel

        title = f"v sin i = {vsini:g} km/s, {b.limb_darkening.label}"
        write_figure(lambda: plot_kernel(v, k, sigma, amp, zeros=zeros[:2], title=title), plot)


# ---------------------------------------------------------------------------------------------- measure


def _macro_option(text):
    from .errors import InputError

    t = text.strip().lower()
    if t == "free":
        return "free"
    if t in ("off", "none", "0"):
        return None
    try:
        value = float(t)
    except ValueError:
        raise InputError(f"--macroturbulence: write 'free', 'off' or a value in km/s, got {text!r}") from None
    if not value >= 0:
        raise InputError(f"--macroturbulence: the value must be >= 0 km/s, got {text!r}")
    return value


def _fmt(value, err=None, digits=2):
    if value is None or not math.isfinite(value):
        return "--"
    if err is None or not math.isfinite(err):
        return f"{value:.{digits}f}"
    return f"{value:.{digits}f} +/- {err:.{digits}f}"


def _print_measurement(m, spectrum_name):
    from .flags import describe

    r = m.row
    typer.echo(f"star: {r['star']}  ({spectrum_name})")
    if r["vsini_adopted_is_limit"]:
        typer.echo(f"  v sin i (adopted): < {_fmt(r['vsini_adopted'])} km/s  UPPER LIMIT ({r['adopted_method']})")
    else:
        typer.echo(f"  v sin i (adopted): {_fmt(r['vsini_adopted'], r['vsini_adopted_err'])} km/s  ({r['adopted_method']})")
    fit_txt = _fmt(r["vsini_fit"], r["vsini_fit_err"])
    if math.isfinite(r["vsini_fit"]) and math.isfinite(r["vsini_fit_sys"]):
        fit_txt += f" (stat.) +/- {r['vsini_fit_sys']:.2f} (intrinsic width)"
    if math.isfinite(r["vsini_fit_upper_limit"]):
        fit_txt = f"< {r['vsini_fit_upper_limit']:.2f} (upper limit)"
    four_txt = _fmt(r["vsini_fourier"], r["vsini_fourier_err"])
    if math.isfinite(r["vsini_fourier_upper_limit"]):
        four_txt = f"< {r['vsini_fourier_upper_limit']:.2f} (upper limit)"
    typer.echo(f"  profile fit:       {fit_txt} km/s")
    typer.echo(f"  Fourier zero:      {four_txt} km/s")
    if math.isfinite(r["difference_sigma"]):
        typer.echo(f"  fit - Fourier:     {r['difference_sigma']:+.2f} sigma")
    typer.echo(f"  q2/q1:             {_fmt(r['q2_q1'], r['q2_q1_err'], 3)}")
    if math.isfinite(r.get("macroturbulence_upper_limit", math.nan)):
        typer.echo(f"  macroturbulence:   < {r['macroturbulence_upper_limit']:.2f} km/s (upper limit)")
    else:
        typer.echo(f"  macroturbulence:   {_fmt(r['macroturbulence'], r['macroturbulence_err'])} km/s")
    if m.fit is not None and m.fit.lines_detected:
        typer.echo("  radial velocity:   not measured (detected line centres are observed wavelengths)")
    else:
        typer.echo(f"  radial velocity:   {_fmt(r['rv'])} km/s")
    typer.echo(f"  lines used:        {r['n_lines']}    S/N per pixel: {_fmt(r['snr'], digits=0)}")
    if m.fit is not None and m.fit.dropped:
        for d in m.fit.dropped:
            typer.echo(f"    dropped {d.line.label}: {d.reason}")
    flags = r["flags"].split()
    typer.echo(f"  flags:             {', '.join(flags) if flags else 'none'}")
    for f in flags:
        typer.echo(f"    {f}: {describe(f)}")
    if r["error"]:
        typer.echo(f"  note: {r['error']}")


@app.command()
@_guarded
def measure(
    spectrum: Path = typer.Argument(..., help="Spectrum file (FITS image or table, CSV or text)."),
    resolution: Optional[float] = typer.Option(None, help="Resolving power R of the spectrograph (FWHM = c/R)."),
    lsf: Optional[Path] = typer.Option(None, help="Tabulated instrument profile (velocity km/s, response); replaces R."),
    limb_darkening: str = typer.Option("0.6", help="Linear coefficient (0.6 is usual in the optical), or 'a,b'."),
    lines: Optional[str] = typer.Option(
        None, help="Line centres in Angstrom (air, rest frame) separated by ';', or a shipped line-set name. "
        "Default: detect isolated lines."
    ),
    method: str = typer.Option("both", help="fit, fourier or both."),
    macroturbulence: str = typer.Option("free", help="'free' (fitted), 'off', or a fixed value in km/s."),
    teff: Optional[float] = typer.Option(None, help="Effective temperature, K (sets the thermal line width)."),
    rv: Optional[float] = typer.Option(None, help="Radial velocity, km/s (default: measured)."),
    mc: int = typer.Option(0, help="Monte Carlo noise realisations for the uncertainties (0: from the fit)."),
    seed: Optional[int] = typer.Option(None, help="Seed for the Monte Carlo realisations."),
    as_json: bool = typer.Option(False, "--json", help="Print one JSON object with the result columns."),
    plot: Optional[Path] = typer.Option(None, help="Figure of the line fits and the Fourier amplitudes (.pdf, .png)."),
    chi2_map: Optional[Path] = typer.Option(
        None, "--chi2-map", help="Figure of chi-square over (v sin i, macroturbulence) with 1-3 sigma contours, to "
        "see how the two trade off (needs the fit with macroturbulence free)."
    ),
):
    """Measure v sin i of one star by profile fitting and by the Fourier first zero.

    Exit code 0 when a value or an upper limit was obtained, 1 when neither method could measure
    anything (the reasons are printed), 2 for bad input.
    """
    from .compare import measure_star
    from .errors import InputError
    from .io import read_spectrum
    from .model import load_lsf

    if method not in ("fit", "fourier", "both"):
        raise InputError(f"--method must be fit, fourier or both, got {method!r}")
    if resolution is None and lsf is None:
        typer.echo("vsini: warning: no --resolution or --lsf given: the instrument profile is ignored, so the "
                   "fitted v sin i absorbs the instrumental width (an overestimate)", err=True)
    spec = read_spectrum(spectrum)
    m = measure_star(
        spec, name=spec.name or spectrum.stem, resolution=resolution, lsf=load_lsf(lsf) if lsf else None,
        limb_darkening=limb_darkening, lines=lines, teff=teff, rv=rv, macroturbulence=_macro_option(macroturbulence),
        method=method, mc=mc, rng=seed,
    )
    if as_json:
        _print_json(m.row | {"spectrum": str(spectrum), "flags": m.row["flags"].split()})
    else:
        _print_measurement(m, spectrum.name)
    if plot:
        from .plots import star_figure

        write_figure(lambda: star_figure(m, title=m.row["star"]), plot, quiet=as_json)
    if chi2_map:
        if m.fit is None or m.fit.macroturbulence_mode != "free":
            raise InputError("--chi2-map needs a profile fit with --macroturbulence free")
        from .fit import chi2_map as make_chi2_map
        from .plots import plot_chi2_map

        write_figure(lambda: plot_chi2_map(make_chi2_map(m.fit)), chi2_map, quiet=as_json)
    if m.row["adopted_method"] == "none":
        raise typer.Exit(1)  # printed above; the exit code tells scripts that nothing was measured


# ---------------------------------------------------------------------------------------------- survey


@app.command()
@_guarded
def survey(
    starlist: Path = typer.Argument(..., help="Star list, CSV or ECSV: columns star, spectrum (path relative to the "
                                    "list), and optionally resolution, limb_darkening, lines, teff, logg, rv, "
                                    "macroturbulence, period_days, radius_rsun."),
    output: Path = typer.Option(..., "--output", "-o", help="Results table: .ecsv (default), .csv, .fits, .tex "
                                "(AASTeX) or .txt. A journal (.journal.sqlite) is kept beside it."),
    resolution: Optional[float] = typer.Option(None, help="Resolving power R for stars whose row gives none."),
    lsf: Optional[Path] = typer.Option(None, help="Tabulated instrument profile (velocity km/s, response); replaces R."),
    limb_darkening: str = typer.Option("0.6", help="Linear coefficient, or 'a,b' for the quadratic law."),
    lines: Optional[str] = typer.Option(None, help="Line centres (Angstrom, air) separated by ';', or a line-set "
                                        "name, for stars whose row gives none. Default: detect lines."),
    method: str = typer.Option("both", help="fit, fourier or both."),
    macroturbulence: str = typer.Option("free", help="'free', 'off' or a value in km/s, for stars whose row gives none."),
    mc: int = typer.Option(0, help="Monte Carlo noise realisations per star for the uncertainties."),
    seed: Optional[int] = typer.Option(None, help="Seed for the Monte Carlo realisations (per star, reproducible)."),
    jobs: Optional[int] = typer.Option(None, "--jobs", "-j", help="Local worker processes (default: all cores)."),
    executor: str = typer.Option("local", help="local (worker processes) or dask (an existing Dask cluster)."),
    scheduler: Optional[str] = typer.Option(None, help="Dask scheduler address, e.g. tcp://10.0.0.5:8786."),
    resume: bool = typer.Option(False, "--resume", help="Continue an interrupted run from its journal: finished stars "
                                "are not measured again."),
    report: Optional[Path] = typer.Option(None, help="Folder for the report: a figure per star, survey figures and "
                                          "index.html."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="Print only the final summary line."),
):
    """Measure every star of a star list with both methods and write one results table.

    Stars are journaled as they finish, so an interrupted run loses nothing (--resume). A star that
    cannot be measured gets a row with its flags and the reason; the rest go on. Exit code 0 when the
    list was processed, 2 when the star list itself is unusable.
    """
    from .console import ConsoleProgress
    from .errors import InputError
    from .survey import run_survey

    if method not in ("fit", "fourier", "both"):
        raise InputError(f"--method must be fit, fourier or both, got {method!r}")
    if executor not in ("local", "dask"):
        raise InputError(f"--executor must be local or dask, got {executor!r}")
    if executor == "dask" and not scheduler:
        raise InputError("--executor dask needs --scheduler ADDRESS of a running Dask scheduler")
    defaults = {
        "resolution": resolution, "lsf": lsf, "limb_darkening": limb_darkening, "lines": lines, "method": method,
        "macroturbulence": _macro_option(macroturbulence), "mc": mc, "seed": seed,
    }
    if defaults["macroturbulence"] is None:
        defaults["macroturbulence"] = "off"
    progress = ConsoleProgress(quiet=quiet)
    summary = run_survey(starlist, output, defaults=defaults, jobs=jobs, executor=executor, scheduler=scheduler,
                         resume=resume, report_dir=report, progress=progress)  # the summary line goes to stderr
    typer.echo(f"results: {summary.results}")
    if summary.report:
        typer.echo(f"report: {summary.report}")


@app.command()
@_guarded
def demo(
    out: Path = typer.Option(Path("vsini-demo-output"), "--out", help="Folder for the results and the report."),
    jobs: Optional[int] = typer.Option(None, "--jobs", "-j", help="Local worker processes (default: all cores)."),
    resume: bool = typer.Option(False, "--resume", help="Continue an interrupted demo run."),
):
    """Run the survey and its report on the demo data: the fictional Lantern cluster.

    About thirty stars observed with the (invented) Halcyon Echelle Spectrograph, R = 60 000: slow and
    fast rotators, a macroturbulent giant, a differential rotator and one broken file.
    """
    from .console import ConsoleProgress
    from .survey import run_demo

    summary = run_demo(out, jobs=jobs, progress=ConsoleProgress(), resume=resume)  # summary line on stderr
    typer.echo(f"results: {summary.results}")
    if summary.report:
        typer.echo(f"report: {summary.report}  (open it in a browser)")


def main():  # pragma: no cover - entry point
    """Run the command line (``python -m vsini``)."""
    app()


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
