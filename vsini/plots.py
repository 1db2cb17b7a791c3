"""Figures for papers: kernels, spectra, line fits, Fourier amplitudes, survey comparisons.

Every function takes ``ax=None`` (a new figure is made when None) and returns the Axes it drew on,
so figures can be composed. Sizes follow journal column widths (:data:`COLUMN_WIDTH_IN`,
:data:`PAGE_WIDTH_IN`); colours come from a colour-blind-safe palette (Okabe & Ito 2008, "Color
Universal Design"). matplotlib is imported here only, never in the physics modules.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "COLUMN_WIDTH_IN",
    "PAGE_WIDTH_IN",
    "PALETTE",
    "new_axes",
    "save_figure",
    "plot_kernel",
    "plot_spectrum",
    "plot_fourier",
    "plot_line_fits",
    "plot_chi2_map",
    "star_figure",
]

#: One journal column and a full page width, inches (A&A / AAS / MNRAS are all close to these; common practice).
COLUMN_WIDTH_IN = 3.5
PAGE_WIDTH_IN = 7.2
#: Okabe & Ito (2008) colour-blind-safe palette.
PALETTE = ["#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"]

_RC = {
    "font.size": 8,
    "axes.labelsize": 8,
    "legend.fontsize": 7,
    "xtick.labelsize": 7,
    "ytick.labelsize": 7,
    "axes.linewidth": 0.6,
    "lines.linewidth": 1.0,
    "savefig.dpi": 300,
    "axes.prop_cycle": None,  # set below
}


def _style():
    import matplotlib as mpl
    from cycler import cycler

    rc = dict(_RC)
    rc["axes.prop_cycle"] = cycler(color=PALETTE[1:] + PALETTE[:1])
    return mpl.rc_context(rc)


def new_axes(nrows=1, ncols=1, *, width=COLUMN_WIDTH_IN, height=None, **kwargs):
    """A figure of journal width with the project's style; returns ``(fig, axes)``."""
    import matplotlib.pyplot as plt

    with _style():
        height = height if height is not None else width * 0.75 * nrows / max(ncols, 1)
        fig, axes = plt.subplots(nrows, ncols, figsize=(width, height), **kwargs)
    return fig, axes


def save_figure(fig, path, *, also_png=False):
    """Save ``fig`` (format by extension; PDF is vector) and close it. ``also_png`` adds a PNG beside it."""
    from pathlib import Path

    import matplotlib.pyplot as plt

    path = Path(path)
    with _style():
        fig.savefig(path, bbox_inches="tight")
        if also_png and path.suffix.lower() != ".png":
            fig.savefig(path.with_suffix(".png"), bbox_inches="tight", dpi=200)
    plt.close(fig)
    return path


def plot_kernel(velocity, kernel, sigma, amplitude, *, title=None, zeros=None, axes=None):
    """The composed kernel (left) and its Fourier amplitude on a log scale (right).

    Parameters
    ----------
    velocity, kernel : ndarray
        Kernel samples (km/s, per km/s).
    sigma, amplitude : ndarray
        Frequency (s/km) and |transform|.
    zeros : sequence of float, optional
        Frequencies of the rotation zeros to mark.
    axes : pair of Axes, optional

    Returns
    -------
    (Axes, Axes)
    """
    if axes is None:
        _, axes = new_axes(1, 2, width=7.2, height=2.6, constrained_layout=True)
    with _style():
        a0, a1 = axes
        a0.plot(velocity, kernel, color=PALETTE[5])
        a0.set_xlabel("velocity (km s$^{-1}$)")
        a0.set_ylabel("kernel (per km s$^{-1}$)")
        a0.axhline(0, color="0.7", lw=0.5)
        pos = sigma > 0
        a1.semilogy(sigma[pos], np.clip(amplitude[pos], 1e-12, None), color=PALETTE[5])
        for z in zeros or ():
            a1.axvline(z, color=PALETTE[6], ls="--", lw=0.7)
        a1.set_xlabel(r"frequency $\sigma$ (s km$^{-1}$)")
        a1.set_ylabel("|transform|")
        a1.set_ylim(1e-6, 1.5)
        if title:
            a0.set_title(title, fontsize=8, loc="left")
    return axes


def plot_spectrum(spectrum, *, ax=None, title=None, windows=None):
    """A spectrum (flux against wavelength) with optional shaded line windows ``[(lo, hi), ...]`` (Angstrom)."""
    if ax is None:
        _, ax = new_axes(width=PAGE_WIDTH_IN, height=2.4, constrained_layout=True)
    with _style():
        good = ~np.asarray(spectrum.mask)
        flux = np.where(good, spectrum.flux, np.nan)
        ax.plot(spectrum.wavelength, flux, color=PALETTE[0], lw=0.6, drawstyle="steps-mid")
        for lo, hi in windows or ():
            ax.axvspan(lo, hi, color=PALETTE[2], alpha=0.15, lw=0)
        ax.set_xlabel(r"wavelength ($\mathrm{\AA}$)")
        ax.set_ylabel("normalised flux")
        if title:
            ax.set_title(title, fontsize=8, loc="left")
    return ax


def plot_fourier(result, *, ax=None, title=None):
    """Fourier amplitude of the mean line profile (log scale) with its zeros, noise level and expected transform.

    Parameters
    ----------
    result : vsini.fourier.FourierResult
        Needs ``result.spectrum`` (always set when a line was detected).
    ax : matplotlib Axes, optional
    title : str, optional

    Returns
    -------
    Axes

    Notes
    -----
    Drawn: :math:`|T(\\sigma)|` of the EW-normalised mean profile; the accepted zeros (dashed); the rms
    noise of the amplitude (dotted); the frequency range beyond the usable limit (shaded); and the
    transform of rotation x instrument x pixel (x macroturbulence) for the derived v sin i, or for the upper
    limit when only a limit is known. The intrinsic line profile is not in the expected curve, so the data
    fall below it at high frequency.
    """
    from .errors import InputError

    spec = result.spectrum
    if spec is None:
        raise InputError("plot_fourier: the result has no transform (no line was detected); nothing to draw")
    if ax is None:
        _, ax = new_axes(width=COLUMN_WIDTH_IN, height=2.6, constrained_layout=True)
    with _style():
        pos = spec.sigma > 0
        ax.semilogy(spec.sigma[pos], np.clip(spec.amplitude[pos], 1e-6, None), color=PALETTE[0], lw=0.8,
                    label="mean profile")
        if spec.expected is not None:
            lab = "expected, v sin i = {:.1f} km/s".format(result.vsini_kms) if result.vsini_kms is not None else (
                "expected at the limit {:.1f} km/s".format(result.limit_kms))
            ax.semilogy(spec.sigma[pos], np.clip(spec.expected[pos], 1e-6, None), color=PALETTE[5], lw=0.8,
                        ls="-", alpha=0.8, label=lab)
        if np.isfinite(spec.noise_level) and spec.noise_level > 0:
            ax.axhline(spec.noise_level, color=PALETTE[6], ls=":", lw=0.8, label="noise rms")
        for i, z in enumerate(s for s in (result.sigma1, result.sigma2) if s is not None):
            ax.axvline(z, color=PALETTE[3], ls="--", lw=0.7, label="zeros" if i == 0 else None)
        top = float(spec.sigma[-1])
        if np.isfinite(result.sigma_max) and result.sigma_max < top:
            ax.axvspan(result.sigma_max, top, color="0.85", lw=0, zorder=0, label="beyond usable range")
        ax.set_xlim(0.0, top)
        floor = max(1e-4, 0.3 * spec.noise_level) if np.isfinite(spec.noise_level) else 1e-4
        ax.set_ylim(floor, 1.5)
        ax.set_xlabel(r"frequency $\sigma$ (s km$^{-1}$)")
        ax.set_ylabel("|transform| (normalised)")
        ax.legend(loc="upper right", frameon=False)
        if title:
            ax.set_title(title, fontsize=8, loc="left")
    return ax


# --------------------------------------------------------------------------------------------- profile fit
# (functions for vsini.fit results)


def plot_line_fits(result, *, axes=None, ncols=4):
    """Every fitted window of a :class:`vsini.fit.FitResult`: data, model and residuals.

    Parameters
    ----------
    result : FitResult
    axes : (2 * nrows, ncols) array of Axes, optional
        Profile panels on even rows, residual panels below them on odd rows.
    ncols : int
        Windows per row of the figure.

    Returns
    -------
    ndarray of Axes
        The panels drawn (unused ones are hidden).
    """
    fits = result.lines
    ncols = max(1, min(ncols, len(fits)))
    nrows = -(-len(fits) // ncols)
    if axes is None:
        _, axes = new_axes(2 * nrows, ncols, width=PAGE_WIDTH_IN, height=2.2 * nrows + 0.4, squeeze=False,
                           constrained_layout=True, gridspec_kw={"height_ratios": [3, 1] * nrows})
    axes = np.asarray(axes).reshape(2 * nrows, ncols)
    with _style():
        for k, ax in enumerate(axes[0::2].ravel()):
            res_ax = axes[2 * (k // ncols) + 1, k % ncols]
            if k >= len(fits):
                ax.set_visible(False)
                res_ax.set_visible(False)
                continue
            lf = fits[k]
            ax.errorbar(lf.velocity_kms, lf.flux, yerr=lf.flux_err, fmt=".", ms=2, lw=0.4, color=PALETTE[0],
                        label="data")
            ax.plot(lf.velocity_kms, lf.model, color=PALETTE[6], lw=0.9, label="model")
            ax.set_title(" + ".join(ln.label for ln in lf.lines), fontsize=7, loc="left")
            ax.tick_params(labelbottom=False)
            res_ax.axhline(0, color="0.6", lw=0.5)
            res_ax.plot(lf.velocity_kms, (lf.flux - lf.model) / lf.flux_err, ".", ms=2, color=PALETTE[5])
            res_ax.set_xlabel("velocity (km s$^{-1}$)")
            if k % ncols == 0:
                ax.set_ylabel("flux / continuum")
                res_ax.set_ylabel("resid. ($\\sigma$)")
        first = axes[0, 0]
        if result.is_upper_limit:
            text = f"v sin i < {result.upper_limit_kms:.2f} km/s (upper limit)"
        else:
            text = f"v sin i = {result.vsini_kms:.2f} $\\pm$ {result.vsini_err_kms:.2f} km/s"
        first.legend(loc="lower right", frameon=False, fontsize=6)
        first.figure.suptitle(f"{result.name}: {text}" if result.name else text, fontsize=8, x=0.01, ha="left")
    return axes


def plot_chi2_map(cmap, *, ax=None):
    """Chi-square map over (v sin i, macroturbulence) with 1, 2 and 3 sigma joint contours.

    Parameters
    ----------
    cmap : vsini.fit.Chi2Map
    ax : Axes, optional

    Returns
    -------
    Axes

    Notes
    -----
    Contours at :math:`\\Delta\\chi^2` = 2.30, 6.18 and 11.8 above the minimum: the 68.3, 95.4 and
    99.73 % regions of two jointly estimated parameters (Press et al. 2007, Numerical Recipes, 3rd ed.,
    section 15.6).
    """
    if ax is None:
        _, ax = new_axes(width=COLUMN_WIDTH_IN, height=COLUMN_WIDTH_IN * 0.85, constrained_layout=True)
    with _style():
        d = cmap.chi2 - cmap.chi2_min
        mesh = ax.pcolormesh(cmap.vsini_kms, cmap.macro_kms, np.log10(1.0 + d), shading="auto", cmap="Greys_r")
        levels = [cmap.levels[k] for k in sorted(cmap.levels)]
        cs = ax.contour(cmap.vsini_kms, cmap.macro_kms, d, levels=levels, colors=[PALETTE[6], PALETTE[1], PALETTE[2]],
                        linewidths=0.9)
        ax.clabel(cs, fmt={lv: f"{k}$\\sigma$" for k, lv in zip(sorted(cmap.levels), levels, strict=True)}, fontsize=6)
        ax.plot(*cmap.best, "+", color=PALETTE[6], ms=8)
        ax.set_xlabel("v sin i (km s$^{-1}$)")
        ax.set_ylabel("macroturbulence $\\zeta_{RT}$ (km s$^{-1}$)")
        cb = ax.figure.colorbar(mesh, ax=ax)
        cb.set_label("log$_{10}$(1 + $\\Delta\\chi^2$)" + (" (scaled)" if cmap.scaled else ""))
        if cmap.name:
            ax.set_title(cmap.name, fontsize=8, loc="left")
    return ax


# --------------------------------------------------------------------------------------------- one star, both methods


def star_figure(measurement, *, title=None, ncols=4):
    """Diagnostic figure of one star: every fitted line with residuals, and the Fourier amplitude.

    Parameters
    ----------
    measurement : vsini.compare.StarMeasurement
    title : str, optional
    ncols : int
        Line panels per row.

    Returns
    -------
    matplotlib Figure
    """
    import matplotlib.pyplot as plt

    fit, four = measurement.fit, measurement.fourier
    n_fit = len(fit.lines) if fit is not None and fit.lines else 0
    has_four = four is not None and four.spectrum is not None
    ncols = max(1, min(ncols, n_fit)) if n_fit else 1
    nrows = -(-n_fit // ncols) if n_fit else 0
    height = 2.0 * nrows + (2.4 if has_four else 0.0) + 0.5
    with _style():
        fig = plt.figure(figsize=(PAGE_WIDTH_IN, max(height, 2.0)), constrained_layout=True)
        ratios = [3, 1] * nrows + ([4] if has_four else [])
        if not ratios:
            ax = fig.add_subplot()
            ax.text(0.5, 0.5, "nothing measured: " + (measurement.row.get("error") or "no usable line"),
                    ha="center", va="center", wrap=True, fontsize=8)
            ax.set_axis_off()
            return fig
        grid = fig.add_gridspec(len(ratios), ncols, height_ratios=ratios)
        if n_fit:
            axes = np.array([[fig.add_subplot(grid[r, c]) for c in range(ncols)] for r in range(2 * nrows)])
            plot_line_fits(fit, axes=axes, ncols=ncols)
        if has_four:
            plot_fourier(four, ax=fig.add_subplot(grid[len(ratios) - 1, :]))
        row = measurement.row
        if row.get("vsini_adopted_is_limit"):
            summary = f"v sin i < {row['vsini_adopted']:.2f} km/s (upper limit)"
        elif np.isfinite(row.get("vsini_adopted", np.nan)):
            summary = f"v sin i = {row['vsini_adopted']:.2f} $\\pm$ {row['vsini_adopted_err']:.2f} km/s ({row['adopted_method']})"
        else:
            summary = "v sin i not measured"
        flags = row.get("flags", "")
        fig.suptitle(f"{title or row.get('star', '')}: {summary}" + (f"   [{flags}]" if flags else ""),
                     fontsize=8, x=0.01, ha="left")
    return fig


# --------------------------------------------------------------------------------------------- inclination
# (functions for vsini.sensitivity, vsini.inclination and vsini.deprojection results)

__all__ += ["plot_sensitivity", "plot_inclination_posterior", "plot_deprojection"]


def plot_sensitivity(result, *, axes=None, title=None):
    """Sensitivity study: profiles per inclination, apparent/true v sin i and q2/q1 against inclination.

    Parameters
    ----------
    result : vsini.sensitivity.SensitivityResult
    axes : sequence of 3 Axes, optional
        Profiles, v sin i ratio, q2/q1. A page-wide figure is made when None.
    title : str, optional
        Figure title (default: the star's v_eq, omega, alpha and the resolving power).

    Returns
    -------
    (Axes, Axes, Axes)

    Notes
    -----
    Left: the first line of the study at each inclination (solid, colour = inclination) and, dotted, the
    same line for a rigid, spherical, uniformly bright star with the same v_eq sin i (the standard kernel).
    Middle: apparent / true v sin i of the profile fit and of the Fourier first zero; an open downward
    triangle marks an upper limit. Right: q2/q1 of the Fourier zeros; shaded, the range of a rigid rotator
    with the study's limb-darkening coefficients +-0.1 (dark) and with any linear law (light; 1.72-1.83,
    Reiners & Schmitt 2002).
    """
    import matplotlib as mpl

    if axes is None:
        _, axes = new_axes(1, 3, width=PAGE_WIDTH_IN, height=2.5, constrained_layout=True)
    t = result.table
    inc = np.asarray(t["inclination_deg"], dtype=float)
    truth = np.asarray(t["vsini_true"], dtype=float)
    with _style():
        a0, a1, a2 = axes
        cmap = mpl.colormaps["viridis"]
        norm = mpl.colors.Normalize(vmin=0.0, vmax=90.0)
        for k, i_deg in enumerate(inc):
            colour = cmap(norm(i_deg))
            a0.plot(result.velocity_kms, result.profiles[k], color=colour, lw=0.9)
            a0.plot(result.velocity_kms, result.reference_profiles[k], color=colour, lw=0.7, ls=":")
        a0.figure.colorbar(mpl.cm.ScalarMappable(norm=norm, cmap=cmap), ax=a0, label="inclination (deg)",
                           pad=0.01, fraction=0.06)
        a0.set_xlabel("velocity (km s$^{-1}$)")
        a0.set_ylabel("normalised flux")
        a0.set_title("solid: surface model; dotted: rigid sphere, same v sin i", fontsize=6, loc="left")
        a0.figure.suptitle(title or _sensitivity_label(result), fontsize=8, x=0.01, ha="left")

        for name, limit, colour, marker, label in (
            ("vsini_fit", "vsini_fit_limit", PALETTE[5], "o", "profile fit"),
            ("vsini_fourier", "vsini_fourier_limit", PALETTE[6], "s", "Fourier first zero"),
        ):
            ratio = np.asarray(t[name], dtype=float) / truth
            a1.plot(inc, ratio, marker=marker, ms=3.5, color=colour, lw=0.8, label=label)
            lim = np.asarray(t[limit], dtype=float) / truth
            if np.any(np.isfinite(lim)):
                a1.plot(inc, lim, ls="none", marker="v", mfc="none", ms=4, color=colour, label=f"{label}: limit")
        a1.axhline(1.0, color="0.6", lw=0.6)
        a1.set_xlabel("inclination (deg)")
        a1.set_ylabel("apparent / true v sin i")
        a1.set_xlim(0, 92)
        a1.legend(loc="best", frameon=False, fontsize=6)

        lo_any, hi_any = result.rigid_q2_q1_any_linear
        lo, nominal, hi = result.rigid_q2_q1
        a2.axhspan(lo_any, hi_any, color=PALETTE[2], alpha=0.15, lw=0, label="rigid, any linear law")
        a2.axhspan(lo, hi, color=PALETTE[2], alpha=0.35, lw=0, label="rigid, coefficients $\\pm$0.1")
        a2.axhline(nominal, color=PALETTE[2], lw=0.6)
        q = np.asarray(t["q2_q1"], dtype=float)
        q_err = np.asarray(t["q2_q1_err"], dtype=float)
        a2.errorbar(inc, q, yerr=np.where(np.isfinite(q_err), q_err, 0.0), marker="s", ms=3.5, color=PALETTE[6],
                    lw=0.8, capsize=0, label="Fourier q2/q1")
        a2.set_xlabel("inclination (deg)")
        a2.set_ylabel("q$_2$/q$_1$")
        a2.set_xlim(0, 92)
        err0 = np.where(np.isfinite(q_err), q_err, 0.0)
        y_lo = np.nanmin(np.concatenate([[lo_any], q - err0]))
        y_hi = np.nanmax(np.concatenate([[hi_any], q + err0]))
        a2.set_ylim(y_lo - 0.05 * (y_hi - y_lo), y_hi + 0.45 * (y_hi - y_lo))  # room for the legend above
        a2.legend(loc="upper left", frameon=False, fontsize=6)
    return axes


def _sensitivity_label(result):
    parts = [f"$v_{{eq}}$ = {result.v_eq_kms:.0f} km/s"]
    if result.omega_crit_fraction > 0:
        parts.append(f"$\\omega$ = {result.omega_crit_fraction:g} ($v_{{eq}}/v_{{crit}}$ = "
                     f"{result.v_eq_kms / result.v_crit_kms:.2f}), $\\beta$ = {result.beta:g}")
    if result.alpha != 0:
        parts.append(f"$\\alpha$ = {result.alpha:g}")
    parts.append(f"R = {result.resolution:.0f}")
    return ", ".join(parts)


def plot_inclination_posterior(posterior, *, axes=None, title=None):
    """Posterior of the inclination (left, per degree) and of cos i (right), with median and 68 % interval.

    Parameters
    ----------
    posterior : vsini.inclination.InclinationPosterior
    axes : pair of Axes, optional
    title : str, optional

    Returns
    -------
    (Axes, Axes)

    Notes
    -----
    The shaded band is the equal-tailed interval between the 15.87th and 84.13th percentiles; the dashed line
    in the right panel is the isotropic prior (uniform in cos i). For an upper limit on v sin i only the
    upper bound of i is meaningful, and the title says so.
    """
    if axes is None:
        _, axes = new_axes(1, 2, width=PAGE_WIDTH_IN, height=2.4, constrained_layout=True)
    p = posterior
    with _style():
        a0, a1 = axes
        x, y = p.inclination_grid_deg, p.inclination_pdf
        a0.plot(x, y, color=PALETTE[5])
        band = (x >= p.inclination_lo_deg) & (x <= p.inclination_hi_deg)
        a0.fill_between(x, 0.0, y, where=band, color=PALETTE[5], alpha=0.25, lw=0, label="68 % interval")
        a0.axvline(p.inclination_deg, color=PALETTE[6], lw=0.8, ls="--", label=f"median {p.inclination_deg:.1f} deg")
        a0.set_xlim(0, 90)
        a0.set_ylim(bottom=0)
        a0.set_xlabel("inclination i (deg)")
        a0.set_ylabel("posterior density (per deg)")
        a0.legend(loc="upper left", frameon=False, fontsize=6)

        c, pc = p.cos_i_grid, p.cos_i_pdf
        c_lo, c_hi = np.cos(np.radians(p.inclination_hi_deg)), np.cos(np.radians(p.inclination_lo_deg))
        a1.plot(c, pc, color=PALETTE[5])
        a1.fill_between(c, 0.0, pc, where=(c >= c_lo) & (c <= c_hi), color=PALETTE[5], alpha=0.25, lw=0)
        a1.axvline(p.cos_i_median, color=PALETTE[6], lw=0.8, ls="--", label=f"median {p.cos_i_median:.3f}")
        a1.axhline(1.0, color="0.5", lw=0.7, ls=":", label="isotropic prior")
        a1.set_xlim(0, 1)
        a1.set_ylim(bottom=0)
        a1.set_xlabel("cos i")
        a1.set_ylabel("posterior density")
        a1.legend(loc="upper right", frameon=False, fontsize=6)
        head = title or (f"$v_{{eq}}$ = 2$\\pi$R/P = {p.veq_kms:.2f} $\\pm$ {p.veq_err_kms:.2f} km/s")
        if p.is_limit:
            head += f"; v sin i is an upper limit: i < {p.inclination_hi_deg:.1f} deg (84 %)"
        if p.flags:
            head += "  [" + " ".join(p.flags) + "]"
        a0.set_title(head, fontsize=7, loc="left")
    return axes


def plot_deprojection(result, *, axes=None, title=None):
    """Deprojected distribution of equatorial velocities (left) and the observed v sin i histogram (right).

    Parameters
    ----------
    result : vsini.deprojection.Deprojection
    axes : pair of Axes, optional
    title : str, optional

    Returns
    -------
    (Axes, Axes)

    Notes
    -----
    Left: f(v), piecewise constant, with its bootstrap 15.87-84.13 % band (sampling noise only, not the
    bias of the binning). Right: the observed v sin i histogram (upper limits shared below their limits in
    proportion to the model) and the projected model phi(y) = integral of f(v) K(y|v) dv.
    """
    if axes is None:
        _, axes = new_axes(1, 2, width=PAGE_WIDTH_IN, height=2.4, constrained_layout=True)
    r = result
    e = r.edges_kms
    with _style():
        a0, a1 = axes
        if np.all(np.isfinite(r.f_lo)):
            a0.stairs(r.f_hi, e, baseline=r.f_lo, fill=True, color=PALETTE[5], alpha=0.25, lw=0,
                      label="bootstrap 68 % band")
        a0.stairs(r.f_pdf, e, color=PALETTE[5], lw=1.0, label="f(v), Lucy iteration")
        a0.axvline(r.mean_v_kms, color=PALETTE[6], lw=0.8, ls="--", label=f"mean {r.mean_v_kms:.1f} km/s")
        a0.set_xlim(0, e[-1])
        a0.set_ylim(bottom=0)
        a0.set_xlabel("equatorial velocity v (km s$^{-1}$)")
        a0.set_ylabel("f(v) (per km s$^{-1}$)")
        a0.legend(loc="upper right", frameon=False, fontsize=6)
        a1.stairs(r.phi_observed_pdf, e, color=PALETTE[0], lw=0.8, label=f"observed v sin i (N = {r.n_stars})")
        a1.stairs(r.phi_model_pdf, e, color=PALETTE[6], lw=1.0, ls="--", label="model $\\varphi$(v sin i)")
        a1.set_xlim(0, e[-1])
        a1.set_ylim(bottom=0)
        a1.set_xlabel("v sin i (km s$^{-1}$)")
        a1.set_ylabel("density (per km s$^{-1}$)")
        a1.legend(loc="upper right", frameon=False, fontsize=6)
        head = title or f"{r.n_stars} stars, {r.n_limits} upper limits, {r.n_iter} iterations"
        if r.flags:
            head += "  [" + " ".join(r.flags) + "]"
        a0.set_title(head, fontsize=7, loc="left")
    return axes


# --------------------------------------------------------------------------------------------- survey
# (functions for the results table of vsini.survey)

__all__ += ["plot_survey_comparison", "plot_vsini_distribution"]


def _column(table, name):
    """A table column as a float array with NaN where masked or missing."""
    if name not in getattr(table, "colnames", table.keys() if hasattr(table, "keys") else ()):
        return np.full(len(table), np.nan)
    col = np.ma.asarray(table[name])
    if col.dtype.kind == "b":
        return np.ma.filled(col.astype(float), 0.0)
    return np.ma.filled(col.astype(float), np.nan)


def plot_survey_comparison(table, *, axes=None, title=None):
    """Fourier first zero against the profile fit, with the 1:1 line, and their difference in sigma.

    Parameters
    ----------
    table : astropy Table (or mapping of columns)
        Survey results: ``vsini_fit``, ``vsini_fit_err``, ``vsini_fit_upper_limit``, ``vsini_fourier``,
        ``vsini_fourier_err``, ``vsini_fourier_upper_limit``, ``difference_sigma``.
    axes : pair of Axes, optional
        Top (values) and bottom (differences). A one-column figure is made when None.
    title : str, optional

    Returns
    -------
    (Axes, Axes)

    Notes
    -----
    Top: stars with both values, with one-sigma error bars, on logarithmic axes; stars where one method
    gives only an upper limit are drawn at the limit as open triangles pointing to lower values (down:
    the Fourier value is below; left: the fitted value is below). Bottom: :math:`(v_\\mathrm{fit} - v_\\mathrm{F})/\\sqrt{\\sigma_\\mathrm{fit}^2 +
    \\sigma_\\mathrm{F}^2}` against the fitted value; the shaded band is +-3 sigma, the threshold of the
    ``methods_disagree`` flag.
    """
    if axes is None:
        _, axes = new_axes(2, 1, width=COLUMN_WIDTH_IN, height=COLUMN_WIDTH_IN * 1.25, constrained_layout=True,
                           gridspec_kw={"height_ratios": [3, 1.3]}, sharex=True)
    fit, fit_e, fit_l = (_column(table, c) for c in ("vsini_fit", "vsini_fit_err", "vsini_fit_upper_limit"))
    four, four_e, four_l = (_column(table, c) for c in ("vsini_fourier", "vsini_fourier_err",
                                                         "vsini_fourier_upper_limit"))
    diff = _column(table, "difference_sigma")
    with _style():
        top, bottom = axes
        both = np.isfinite(fit) & np.isfinite(four)
        top.errorbar(fit[both], four[both], xerr=np.nan_to_num(fit_e[both]), yerr=np.nan_to_num(four_e[both]),
                     fmt="o", ms=3, lw=0.6, color=PALETTE[5], label=f"both methods ({both.sum()})")
        f_lim = np.isfinite(fit) & ~np.isfinite(four) & np.isfinite(four_l)
        if f_lim.any():  # open triangle pointing down: the Fourier value is below it
            top.plot(fit[f_lim], four_l[f_lim], "v", ms=4, mfc="none", mew=0.8, color=PALETTE[6],
                     label=f"Fourier gives an upper limit ({f_lim.sum()})")
        l_fit = ~np.isfinite(fit) & np.isfinite(fit_l) & np.isfinite(four)
        if l_fit.any():  # open triangle pointing left: the fitted value is below it
            top.plot(fit_l[l_fit], four[l_fit], "<", ms=4, mfc="none", mew=0.8, color=PALETTE[1],
                     label=f"fit gives an upper limit ({l_fit.sum()})")
        values = np.concatenate([fit[both], four[both], four_l[f_lim], fit[f_lim], fit_l[l_fit], four[l_fit]])
        values = values[np.isfinite(values) & (values > 0)]
        lo, hi = (values.min() / 1.6, values.max() * 1.6) if values.size else (1.0, 300.0)
        top.plot([lo, hi], [lo, hi], color="0.5", lw=0.7, ls="--", label="1:1")
        top.set_xscale("log")
        top.set_yscale("log")
        top.set_xlim(lo, hi)
        top.set_ylim(lo, hi)
        top.set_ylabel("v sin i, Fourier first zero (km s$^{-1}$)")
        top.legend(loc="upper left", frameon=False)
        if title:
            top.set_title(title, fontsize=8, loc="left")
        bottom.axhspan(-3, 3, color=PALETTE[2], alpha=0.2, lw=0)
        bottom.axhline(0, color="0.5", lw=0.6)
        ok = np.isfinite(diff) & np.isfinite(fit) & (fit > 0)
        bottom.plot(fit[ok], diff[ok], "o", ms=3, color=PALETTE[5])
        bottom.set_xscale("log")
        bottom.set_xlim(lo, hi)
        span = max(4.0, float(np.max(np.abs(diff[ok]))) * 1.15) if ok.any() else 4.0
        bottom.set_ylim(-span, span)
        bottom.set_xlabel("v sin i, profile fit (km s$^{-1}$)")
        bottom.set_ylabel("fit $-$ Fourier ($\\sigma$)")
    return axes


def plot_vsini_distribution(table, *, ax=None, bins=None, title=None):
    """Histogram of the adopted v sin i, upper limits drawn apart (hatched, at the limit value).

    Parameters
    ----------
    table : astropy Table (or mapping of columns)
        Survey results: ``vsini_adopted`` and ``vsini_adopted_is_limit``.
    ax : Axes, optional
    bins : array, optional
        Bin edges in km/s (default: logarithmic, 8 per decade, covering the values).
    title : str, optional

    Returns
    -------
    Axes

    Notes
    -----
    Measured values and upper limits are stacked: the hatched part of a bar counts stars whose adopted value
    is only an upper limit at that velocity (their true v sin i is anywhere below it).
    """
    if ax is None:
        _, ax = new_axes(width=COLUMN_WIDTH_IN, height=COLUMN_WIDTH_IN * 0.7, constrained_layout=True)
    value = _column(table, "vsini_adopted")
    limit = _column(table, "vsini_adopted_is_limit") > 0
    ok = np.isfinite(value) & (value > 0)
    with _style():
        if bins is None:
            if ok.any():
                lo, hi = np.log10(value[ok].min()), np.log10(value[ok].max())
                n = max(int(np.ceil((hi - lo) * 8)), 4)
                bins = np.logspace(lo - 0.05, hi + 0.05, n + 1)
            else:
                bins = np.logspace(0, 2.5, 11)
        measured = value[ok & ~limit]
        limits = value[ok & limit]
        _, _, bars = ax.hist([measured, limits], bins=bins, stacked=True, linewidth=0.8,
                             label=[f"measured ({measured.size})", f"upper limits ({limits.size})"])
        from matplotlib.ticker import MaxNLocator

        for patch in bars[0]:
            patch.set(facecolor=PALETTE[5], edgecolor=PALETTE[5])
        for patch in bars[1]:
            patch.set(facecolor="none", edgecolor=PALETTE[6], hatch="////", visible=patch.get_height() > 0)
        ax.yaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_xscale("log")
        ax.set_xlabel("adopted v sin i (km s$^{-1}$)")
        ax.set_ylabel("stars")
        ax.legend(loc="upper right", frameon=False)
        if title:
            ax.set_title(title, fontsize=8, loc="left")
    return ax
