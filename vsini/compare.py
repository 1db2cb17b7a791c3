"""One star, both methods: the profile fit, the Fourier first zero, their comparison and the adopted value.

Adoption rule
-------------
The two estimates come from the same pixels, so they are not independent and are never averaged. The
rule, in order:

1. **Fit value, methods agree** (|difference| <= 3 sigma, or no Fourier value): adopt the profile fit.
   It uses every pixel of every line and reaches close to the Cramér-Rao bound (see the fitting
   benchmark), while the first zero uses one feature of the transform.
2. **Fit value, methods disagree** (|difference| > 3 sigma of the combined error): adopt the fit,
   flag ``methods_disagree`` and widen its error to :math:`\\sqrt{\\sigma_\\mathrm{fit}^2 + (\\Delta/2)^2}`
   so that the adopted interval covers the gap between the methods.
3. **The fit cannot split v sin i from macroturbulence** (flag ``macro_degenerate``) and the Fourier
   method has a value: adopt the Fourier value. The first zero does not move with an isotropic Gaussian
   broadening and moves only a little with radial-tangential macroturbulence (and is corrected for it,
   Gray 2005 ch. 18; see ``docs/fourier.md``), so it is the safer number there.
4. **Fit gives only an upper limit** (rotation not resolved): adopt the limit, flagged ``unresolved``;
   a Fourier value below the resolution is not trusted (the Fourier zero is usable only for
   v sin i of about c/R and above, project reference notes section 9). When the Fourier method gives
   an upper limit too, the smaller of the two limits is adopted: each bounds v sin i on its own, and
   with macroturbulence free the fit's limit is widened by the v sin i - macroturbulence trade-off
   (on 48 injected slow rotators at 0.3-1.2 c/R and S/N 50-200 the Fourier limits were never below the
   truth and were the tighter one in 19 of 34 stars with both; ``tests/test_survey.py``).
5. **Fit failed, Fourier has a value**: adopt the Fourier value, flagged ``fourier_only``.
6. **Fit failed, Fourier gives a limit**: adopt the Fourier limit.
7. Nothing measured: NaN, with the reasons in the flags.

The difference in sigma, :math:`(v_\\mathrm{fit} - v_\\mathrm{F}) / \\sqrt{\\sigma_\\mathrm{fit}^2 +
\\sigma_\\mathrm{F}^2}`, is reported whenever both methods give values; since the errors are correlated
through the shared noise, this combination is conservative (it overstates the combined spread).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import VsiniError
from .flags import check_flags

__all__ = ["DISAGREE_SIGMA", "StarMeasurement", "measure_star", "failed_row", "adopt", "RESULT_COLUMNS"]

#: Disagreement threshold in combined sigma.
DISAGREE_SIGMA = 3.0

#: Result columns of one star, in table order, with units (None: dimensionless).
RESULT_COLUMNS = {
    "star": None,
    "vsini_adopted": "km/s",
    "vsini_adopted_err": "km/s",
    "vsini_adopted_is_limit": None,
    "adopted_method": None,
    "vsini_fit": "km/s",
    "vsini_fit_err": "km/s",
    "vsini_fit_sys": "km/s",
    "vsini_fit_upper_limit": "km/s",
    "vsini_fourier": "km/s",
    "vsini_fourier_err": "km/s",
    "vsini_fourier_upper_limit": "km/s",
    "difference_sigma": None,
    "q2_q1": None,
    "q2_q1_err": None,
    "macroturbulence": "km/s",
    "macroturbulence_err": "km/s",
    "macroturbulence_upper_limit": "km/s",
    "rv": "km/s",
    "n_lines": None,
    "snr": None,
    "flags": None,
    "error": None,
}

_NAN = float("nan")


def _num(x):
    """float or NaN from a value that may be None."""
    if x is None:
        return _NAN
    try:
        x = float(x)
    except (TypeError, ValueError):
        return _NAN
    return x if math.isfinite(x) else _NAN


@dataclass(frozen=True, eq=False)
class StarMeasurement:
    """Both estimates of one star, their comparison and the adopted value.

    Attributes
    ----------
    row : dict
        One results-table row, keys as :data:`RESULT_COLUMNS` (NaN where nothing was measured;
        ``flags`` a space-separated string of the words of :data:`vsini.flags.FLAGS`).
    fit : vsini.fit.FitResult or None
    fourier : vsini.fourier.FourierResult or None
    fit_error, fourier_error : str
        Why a method produced no result ("" if it did).
    """

    row: dict
    fit: object = None
    fourier: object = None
    fit_error: str = ""
    fourier_error: str = ""


def adopt(fit_value, fit_err, fit_limit, fourier_value, fourier_err, fourier_limit, *, macro_degenerate=False):
    """Apply the adoption rule (module docstring) to the two estimates.

    Parameters
    ----------
    fit_value, fit_err, fit_limit : float
        Profile-fit value and error (NaN if none) and its upper limit (NaN if none), km/s.
    fourier_value, fourier_err, fourier_limit : float
        The same for the Fourier first-zero method.
    macro_degenerate : bool
        The fit could not split v sin i from macroturbulence.

    Returns
    -------
    value, error : float
    is_limit : bool
    method : str
        'fit', 'fourier', 'fit_limit', 'fourier_limit' or 'none'.
    difference_sigma : float
    flags : tuple of str
    """
    flags = []
    have_fit = math.isfinite(fit_value) and math.isfinite(fit_err)
    have_four = math.isfinite(fourier_value) and math.isfinite(fourier_err)
    diff = _NAN
    if have_fit and have_four:
        comb = math.hypot(fit_err, fourier_err)
        diff = (fit_value - fourier_value) / comb if comb > 0 else _NAN
    if have_fit:
        if macro_degenerate and have_four:
            return fourier_value, fourier_err, False, "fourier", diff, ("macro_degenerate",)
        if math.isfinite(diff) and abs(diff) > DISAGREE_SIGMA:
            flags.append("methods_disagree")
            err = math.hypot(fit_err, 0.5 * (fit_value - fourier_value))
            return fit_value, err, False, "fit", diff, tuple(flags)
        return fit_value, fit_err, False, "fit", diff, tuple(flags)
    if math.isfinite(fit_limit):
        if math.isfinite(fourier_limit) and fourier_limit < fit_limit:
            return fourier_limit, _NAN, True, "fourier_limit", diff, ("unresolved",)
        return fit_limit, _NAN, True, "fit_limit", diff, ("unresolved",)
    if have_four:
        return fourier_value, fourier_err, False, "fourier", diff, ("fourier_only",)
    if math.isfinite(fourier_limit):
        return fourier_limit, _NAN, True, "fourier_limit", diff, ()
    return _NAN, _NAN, False, "none", diff, ()


def failed_row(name, message, flags=("failed",)):
    """A results row for a star that could not be measured at all (unreadable file, bad settings)."""
    row = {k: _NAN for k in RESULT_COLUMNS}
    row.update(
        star=str(name),
        vsini_adopted_is_limit=False,
        adopted_method="none",
        n_lines=0,
        flags=" ".join(check_flags(flags)),
        error=str(message),
    )
    return row


def measure_star(
    spectrum,
    *,
    name=None,
    resolution=None,
    limb_darkening=0.6,
    lines=None,
    teff=None,
    logg=None,
    rv=None,
    macroturbulence="free",
    method="both",
    mc=0,
    rng=None,
    lsf=None,
):
    """Measure one star with the profile fit and/or the Fourier first zero, compare and adopt.

    Parameters
    ----------
    spectrum : vsini.spectrum.Spectrum
    name : str, optional
        Star name for the row (default: the spectrum's name).
    resolution : float, optional
        Resolving power R (Gaussian instrument, FWHM = c/R).
    limb_darkening : float, str or LimbDarkening
    lines : None, str or sequence
        Line centres (Angstrom, air), a shipped line-set name, or None to detect lines.
    teff : float, optional
        Effective temperature (K) for the thermal width of the intrinsic line.
    logg : float, optional
        Surface gravity (cgs); recorded, not used by the estimators yet.
    rv : float, optional
        Radial velocity (km/s); measured when None.
    macroturbulence : 'free', float or None
        Fitted, fixed at a value (km/s), or off. The Fourier method uses the fitted or fixed value to
        correct its zeros for radial-tangential macroturbulence.
    method : {'both', 'fit', 'fourier'}
    mc : int
        Monte Carlo noise realisations (0: covariance errors for the fit; first-order errors for
        the Fourier method).
    rng : None, int or numpy.random.Generator
    lsf : vsini.model.TabulatedLSF, optional

    Returns
    -------
    StarMeasurement

    Notes
    -----
    A method that fails with a :class:`~vsini.errors.VsiniError` leaves NaN and its reason in
    ``row['error']``; only programming errors propagate.
    """
    from .fit import fit_vsini
    from .fourier import fourier_vsini

    if method not in ("both", "fit", "fourier"):
        raise ValueError(f"method must be 'both', 'fit' or 'fourier', got {method!r}")
    gen = np.random.default_rng(rng)
    name = str(name if name is not None else (spectrum.name or "star"))
    flags = []
    fit = four = None
    fit_error = four_error = ""
    if method in ("both", "fit"):
        try:
            fit = fit_vsini(
                spectrum, lines=lines, resolution=resolution, limb_darkening=limb_darkening,
                macroturbulence=macroturbulence, teff=teff, rv=rv, mc=mc, rng=gen, lsf=lsf,
            )
            flags += list(fit.flags)
        except VsiniError as e:
            fit_error = str(e)
            # "no usable line" is not a failure of the minimiser: say which it was
            flags.append("no_lines" if "no_lines" in getattr(e, "flags", ()) else "fit_failed")
    if method in ("both", "fourier"):
        macro_value = None
        if fit is not None and math.isfinite(fit.macroturbulence_kms):
            macro_value = fit.macroturbulence_kms
        elif isinstance(macroturbulence, (int, float)) and not isinstance(macroturbulence, bool):
            macro_value = float(macroturbulence)
        fourier_rv = fit.rv_kms if fit is not None and math.isfinite(fit.rv_kms) else rv
        if fit is not None and fit.lines_detected:  # the kept lines carry observed (fitted) centres: no shift
            fourier_rv = 0.0
        # the Fourier method reuses the lines the fit kept (detected or screened), else the user's choice
        kept = [ln for window in fit.lines for ln in window.lines] if fit is not None and fit.lines else []
        lines_for_fourier = kept or lines
        try:
            four = fourier_vsini(
                spectrum, lines=lines_for_fourier, resolution=resolution, limb_darkening=limb_darkening,
                macroturbulence=macro_value, rv=fourier_rv, mc=mc, rng=gen, lsf=lsf,
            )
            flags += list(four.flags)
        except VsiniError as e:
            four_error = str(e)
            flags.append("fourier_failed")

    fit_value = _num(fit.vsini_kms) if fit else _NAN
    fit_err = _num(fit.vsini_err_kms) if fit else _NAN
    fit_sys = _num(fit.vsini_sys_kms) if fit else _NAN
    # the adopted error and the comparison with the Fourier value (which hardly depends on the intrinsic
    # width) use the fit's statistical and intrinsic-width errors in quadrature
    fit_total = math.hypot(fit_err, fit_sys) if math.isfinite(fit_sys) else fit_err
    fit_limit = _num(fit.upper_limit_kms) if fit and fit.is_upper_limit else _NAN
    four_value = _num(four.vsini_kms) if four else _NAN
    four_err = _num(four.vsini_err_kms) if four else _NAN
    four_limit = _num(four.limit_kms) if four and four.is_limit else _NAN
    value, err, is_limit, how, diff, adopt_flags = adopt(
        fit_value, fit_total, fit_limit, four_value, four_err, four_limit,
        macro_degenerate=bool(fit and "macro_degenerate" in fit.flags),
    )
    flags += list(adopt_flags)
    if how == "none":
        flags.append("not_measured")
    snr = _num(fit.snr) if fit else _NAN
    if not math.isfinite(snr):
        try:
            snr = float(spectrum.snr_estimate())
        except (VsiniError, ValueError, FloatingPointError):
            snr = _NAN
    row = {
        "star": name,
        "vsini_adopted": value,
        "vsini_adopted_err": err,
        "vsini_adopted_is_limit": bool(is_limit),
        "adopted_method": how,
        "vsini_fit": fit_value,
        "vsini_fit_err": fit_err,
        "vsini_fit_sys": fit_sys,
        "vsini_fit_upper_limit": fit_limit,
        "vsini_fourier": four_value,
        "vsini_fourier_err": four_err,
        "vsini_fourier_upper_limit": four_limit,
        "difference_sigma": diff,
        "q2_q1": _num(four.q2_q1) if four else _NAN,
        "q2_q1_err": _num(four.q2_q1_err) if four else _NAN,
        "macroturbulence": _num(fit.macroturbulence_kms) if fit else _NAN,
        "macroturbulence_err": _num(fit.macroturbulence_err_kms) if fit else _NAN,
        "macroturbulence_upper_limit": _num(fit.macroturbulence_upper_limit_kms) if fit else _NAN,
        "rv": _num(fit.rv_kms) if fit else (_num(rv) if rv is not None else _NAN),
        "n_lines": int(fit.n_lines) if fit else int(four.n_lines) if four else 0,
        "snr": snr,
        "flags": " ".join(check_flags(flags)),
        "error": "; ".join(e for e in (fit_error and f"fit: {fit_error}", four_error and f"fourier: {four_error}") if e),
    }
    return StarMeasurement(row=row, fit=fit, fourier=four, fit_error=fit_error, fourier_error=four_error)
