"""The profile-fitting estimator of v sin i: one joint least-squares fit over the selected lines of a star.

Every line window is modelled as a linear continuum times :math:`1 - D(u)`, where the depression
:math:`D` is the sum of the window's lines, each an equivalent width times the composed kernel
(intrinsic (x) rotation (x) macroturbulence (x) instrument, :mod:`vsini.model`) shifted by the radial
velocity. Shared by all lines: v sin i, the radial velocity, the macroturbulence (free, fixed or off)
and, optionally, the intrinsic width; per line: the equivalent width and the continuum. Lines found by
:func:`vsini.lines.detect_lines` have measured, not laboratory, centres: each gets its own free centre
and no radial velocity is reported. The model (:class:`vsini.linemodel.JointModel`) is computed on a
fine grid uniform in log-velocity and integrated over the data pixels, so the data are never resampled
and their noise stays independent. Limb darkening is fixed.

Uncertainties come from the fit's covariance (scaled by the reduced chi-square when the spectrum has no
uncertainties) or from Monte Carlo noise resampling. When rotation is not resolved the result is an
upper limit (see :func:`detection_limit` and ``docs/fitting.md``); so is a macroturbulence that
ends at zero (see :data:`MACRO_LIMIT_DCHI2`). Limits, chi-square maps and the least-squares primitives are
in :mod:`vsini.fitlimits` (re-exported here).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from . import kernels as K
from .detect import _FWHM_PER_B
from .errors import FitError, InputError
from .fitlimits import (
    DELTA_CHI2_2PARAM,
    DETECTION_DCHI2,
    MACRO_LIMIT_DCHI2,
    MACRO_MAX,
    MICRO_ERR_KMS,
    Chi2Map,
    _delta_chi2_zero,
    _lmfit,
    _macro_upper_limit,
    _make_params,
    _monte_carlo,
    _width_systematic,
    chi2_map,
    detection_limit,
)
from .flags import check_flags
from .grid import C_KMS
from .limbdark import LimbDarkening, as_limb_darkening
from .linemodel import JointModel
from .lines import (
    DroppedLine,
    Line,
    _emission_excesses,
    as_lines,
    detect_lines,
    estimate_rv,
    extract_windows,
    rotation_fwhm_factor,
    window_half_width,
)

__all__ = ["LineFit", "FitResult", "Chi2Map", "fit_vsini", "detection_limit", "chi2_map",
           "DELTA_CHI2_2PARAM", "DETECTION_DCHI2", "MACRO_LIMIT_DCHI2"]

MACRO_AT_ZERO = 0.01  # km/s: a fitted macroturbulence below this sits at its lower bound
EW_SIGNIFICANCE = 3.0  # a detected line whose fitted equivalent width is below 3 sigma is dropped


# --------------------------------------------------------------------------------------------- results


@dataclass(frozen=True, eq=False)
class LineFit:
    """The fit of one window: its lines, strengths, continuum and the arrays a figure needs.

    ``velocity_kms`` is the pixel position relative to the first line's rest wavelength with the
    radial velocity (and, for detected lines, that line's centre shift) removed; ``flux``, ``model`` and
    ``flux_err`` are divided by the fitted continuum. For detected lines ``lines`` hold the fitted
    centres and ``centre_shift_kms`` the shifts from the detected ones (empty for a shared radial velocity).
    """

    lines: tuple
    ew_kms: tuple
    ew_err_kms: tuple
    continuum: tuple
    chi2: float
    n_pixels: int
    velocity_kms: np.ndarray
    flux: np.ndarray
    model: np.ndarray
    flux_err: np.ndarray
    centre_shift_kms: tuple = ()
    centre_shift_err_kms: tuple = ()


@dataclass(frozen=True, eq=False)
class FitResult:
    """Result of :func:`fit_vsini` for one star.

    ``vsini_kms``/``vsini_err_kms`` are NaN when rotation is not resolved; then ``is_upper_limit`` is
    True and ``upper_limit_kms`` holds the limit. ``vsini_best_kms`` always keeps the best-fit value.
    When a free macroturbulence ends at zero its error is NaN and ``macroturbulence_upper_limit_kms``
    holds an upper limit (:data:`MACRO_LIMIT_DCHI2`). With detected lines (``lines_detected``) every
    line has its own centre and ``rv_kms`` is NaN: no radial velocity is measured.
    Errors are one sigma. ``flags`` uses the words of :data:`vsini.flags.FLAGS`.
    """

    vsini_kms: float
    vsini_err_kms: float
    is_upper_limit: bool
    upper_limit_kms: float
    detection_limit_kms: float
    vsini_best_kms: float
    rv_kms: float
    rv_err_kms: float
    macroturbulence_kms: float
    macroturbulence_err_kms: float
    macroturbulence_mode: str
    intrinsic_width_kms: float
    intrinsic_width_err_kms: float
    limb_darkening: LimbDarkening
    resolution: float | None
    chi2: float
    redchi: float
    n_data: int
    n_free: int
    n_lines: int
    lines: tuple
    dropped: tuple
    flags: tuple
    error_method: str
    snr: float
    correlation_vsini_macro: float
    delta_chi2_zero: float = float("nan")
    vsini_sys_kms: float = float("nan")
    macroturbulence_upper_limit_kms: float = float("nan")
    lines_detected: bool = False
    name: str = ""
    mc_samples: np.ndarray | None = None
    params: dict = field(default_factory=dict, repr=False)
    free: tuple = field(default=(), repr=False)
    model: JointModel | None = field(default=None, repr=False)
    sigma: np.ndarray | None = field(default=None, repr=False)
    scaled_errors: bool = False

    def as_row(self):
        """Values for a results table / JSON object (NaN where nothing was measured)."""
        return {
            "vsini_fit": self.vsini_kms, "vsini_fit_err": self.vsini_err_kms, "vsini_fit_sys": self.vsini_sys_kms,
            "vsini_fit_upper_limit": self.upper_limit_kms, "vsini_fit_detection_limit": self.detection_limit_kms,
            "rv_fit": self.rv_kms, "rv_fit_err": self.rv_err_kms,
            "macroturbulence": self.macroturbulence_kms, "macroturbulence_err": self.macroturbulence_err_kms,
            "macroturbulence_upper_limit": self.macroturbulence_upper_limit_kms,
            "n_lines": self.n_lines, "redchi_fit": self.redchi, "flags": list(self.flags),
        }

    def summary(self):
        """A few lines of text describing the result (values, limits, lines, flags)."""
        if self.is_upper_limit:
            head = f"v sin i < {self.upper_limit_kms:.2f} km/s (upper limit: rotation not resolved; " \
                   f"detection limit {self.detection_limit_kms:.2f} km/s)"
        else:
            head = f"v sin i = {self.vsini_kms:.2f} +/- {self.vsini_err_kms:.2f} km/s ({self.error_method})"
            if math.isfinite(self.vsini_sys_kms):
                head += f" +/- {self.vsini_sys_kms:.2f} km/s (intrinsic width, microturbulence +/- {MICRO_ERR_KMS} km/s)"
        macro = {"off": "off", "fixed": f"{self.macroturbulence_kms:.2f} km/s (fixed)"}.get(
            self.macroturbulence_mode, f"{self.macroturbulence_kms:.2f} +/- {self.macroturbulence_err_kms:.2f} km/s")
        if math.isfinite(self.macroturbulence_upper_limit_kms):
            macro = f"< {self.macroturbulence_upper_limit_kms:.2f} km/s (upper limit: the fit ended at zero)"
        rv = (f"{self.rv_kms:.2f} +/- {self.rv_err_kms:.2f} km/s" if not self.lines_detected else
              "not measured (detected line centres are observed, not laboratory, wavelengths)")
        out = [head, f"macroturbulence: {macro}", f"radial velocity: {rv}",
               f"lines used: {self.n_lines}; dropped: {len(self.dropped)}; reduced chi-square {self.redchi:.2f}",
               f"flags: {', '.join(self.flags) if self.flags else 'none'}"]
        out += [f"  dropped {d.line.label}: {d.reason}" for d in self.dropped]
        return "\n".join(out)


def _as_float(x):
    return float("nan") if x is None else float(x)


# --------------------------------------------------------------------------------------------- fitting


def _emission_bump(resid, n=4):
    """Largest significance (sigma) of flux above the model over ``n`` adjacent pixels (residuals in sigma)."""
    if resid.size < n:
        return 0.0
    return float(np.max(-np.convolve(resid, np.ones(n), mode="valid")) / math.sqrt(n))


def _start_values(model, base, ew_guess):
    """Starting values: shared ones from ``base``; continuum at the window's 90th flux percentile, no slope;
    equivalent widths from the previous pass or from the window's integrated depression."""
    start = dict(base)
    share = {}
    for w, win in enumerate(model.windows):
        y = win.flux[win.good]
        c0 = float(np.percentile(y, 90))
        start[f"c0_{w}"], start[f"c1_{w}"] = c0, 0.0
        integral = float(np.trapezoid(np.clip(1.0 - y / c0, 0, None), win.u[win.good]))
        share[w] = max(integral / len(win.lines), 1e-3)
    for f, (w, ln) in enumerate(model.features):
        start[f"ew{f}"] = ew_guess.get(ln, share[w])
    return start


def _screen(model, res, detected=False):
    """Lines to drop after a pass: emission, not detected, or residuals far above the other windows.

    A detected line (``detected``) must also have an equivalent width of at least
    :data:`EW_SIGNIFICANCE` sigma, or it is dropped as "not significant": it may be a noise dip.
    """
    out = {}
    for f, (_, ln) in enumerate(model.features):
        par = res.params[f"ew{f}"]
        ew, err = par.value, _as_float(par.stderr)
        if np.isfinite(err) and ew < -3.0 * err:
            out[ln] = f"emission: equivalent width {ew:.3g} +/- {err:.2g} km/s is negative"
        elif (np.isfinite(err) and ew < (EW_SIGNIFICANCE if detected else 2.0) * err) or ew <= 0:
            bump = _emission_bump(res.residual[model.rows[model.features[f][0]]])
            if bump > 5.0:
                out[ln] = f"emission: the flux rises {bump:.0f} sigma above the continuum"
            elif detected:
                out[ln] = (f"not significant: equivalent width {ew:.3g} +/- {err:.2g} km/s is below "
                           f"{EW_SIGNIFICANCE:.0f} sigma (a detected dip that may be noise)")
            else:
                out[ln] = f"not detected: equivalent width {ew:.3g} +/- {err:.2g} km/s is below 2 sigma"
    if model.n_windows >= 3:
        r2 = res.residual**2  # in units of the pixel sigma
        per = np.array([r2[model.rows[w]].mean() for w in range(model.n_windows)])
        med = float(np.median(per))
        for w in np.flatnonzero((per > 3.0 * med) & (per > 4.0)):
            for ln in model.windows[w].lines:
                out.setdefault(ln, f"blended: residuals {math.sqrt(per[w] / med):.1f} times those of the other "
                                   f"lines (an unlisted line or a bad region)")
    return out


def fit_vsini(spectrum, *, lines=None, resolution=None, limb_darkening=0.6, macroturbulence="free",
              intrinsic_width=None, teff=None, microturbulence=1.0, rv=None, mc=0, rng=None, lsf=None,
              macro_kind="rt", max_passes=4):
    """Measure v sin i by fitting the profiles of selected lines jointly.

    Parameters
    ----------
    spectrum : Spectrum
        Continuum-normalised (or close) 1-D spectrum; wavelengths in air, Angstrom.
    lines : None, str, sequence of float or sequence of Line
        None: detect isolated lines automatically; a shipped line-set name (``'fgk-optical'``...);
        centres in Angstrom (rest, air) as a ``;``-separated string or a list.
    resolution : float
        Resolving power of the Gaussian instrument profile (FWHM c/R). Needed unless ``lsf`` is given.
    limb_darkening : float or LimbDarkening
        Fixed law; 0.6 (linear) is the usual optical default (common practice).
    macroturbulence : 'free', float or None
        Radial-tangential :math:`\\zeta` (km/s): fitted ('free'), fixed to a value, or off (None or 0).
    intrinsic_width : None, float or 'free'
        Doppler width (km/s) of the intrinsic lines. None: from ``teff`` and ``microturbulence`` per
        element (:func:`vsini.kernels.doppler_width`; ``teff`` None means 5800 K).
    teff, microturbulence : float
        K and km/s.
    rv : float, optional
        Starting radial velocity (km/s); estimated from the line stack when None. Not used with detected
        lines: their centres are observed wavelengths, each fitted on its own, and no radial velocity is
        reported (``rv_kms`` NaN).
    mc : int
        Number of Monte Carlo noise realisations for the uncertainty (0: covariance only).
    rng : None, int or numpy Generator
        Random numbers for ``mc``.
    lsf : TabulatedLSF, optional
        Tabulated instrument profile used instead of ``resolution``.
    macro_kind : {'rt', 'gaussian'}
    max_passes : int
        Fit passes that re-cut the windows around the fitted width. Lines are screened after every pass;
        a pass that drops lines is repeated and does not count. When radial-tangential macroturbulence
        is on, these passes use the product approximation of rotation and macroturbulence, and one last
        fit on the final windows uses the exact joint kernel.

    Returns
    -------
    FitResult

    Raises
    ------
    InputError
        For impossible arguments.
    FitError
        When no usable line remains (``exc.dropped`` lists the lines and reasons, ``exc.flags`` is ``('no_lines',)``).
    """
    name = spectrum.name or "(unnamed)"
    if resolution is None and lsf is None:
        raise InputError(f"{name}: give the resolving power (resolution=...) or a tabulated line-spread function")
    ld = as_limb_darkening(limb_darkening)
    macro_mode, macro0 = _macro_mode(macroturbulence)
    if not (isinstance(mc, (int, np.integer)) and mc >= 0):
        raise InputError(f"{name}: mc must be a whole number >= 0, got {mc!r}")
    free_b = isinstance(intrinsic_width, str)
    if free_b and intrinsic_width != "free":
        raise InputError(f"{name}: intrinsic_width must be a number (km/s), None or 'free', got {intrinsic_width!r}")
    line_list = as_lines(lines)
    detected = line_list is None
    if detected:
        line_list = detect_lines(spectrum, resolution=resolution)
        if not line_list:
            raise _no_lines(name, "no isolated absorption line was detected; give a line list", ())
    b_ins = K.instrument_width(resolution) if resolution else 0.0
    step = spectrum.velocity_step_kms()

    def b_of(ln):
        if free_b:
            return None
        if intrinsic_width is not None:
            return float(intrinsic_width)
        return K.doppler_width(5800.0 if teff is None else teff, element=ln.element, microturbulence=microturbulence)

    b_guess = 2.0 if free_b else max(b_of(ln) for ln in line_list)
    rv0 = 0.0 if detected else rv  # detected centres are observed wavelengths: no radial velocity
    narrow = 0.5 * _FWHM_PER_B * b_ins
    rv_est, fwhm, signif = estimate_rv(spectrum, line_list, rv=rv0, min_fwhm_kms=narrow)
    if not np.isfinite(rv_est):
        raise _no_lines(name, "no line of the list falls in the spectrum", _outside(spectrum, line_list))
    if signif < 8.0:  # no clear absorption (8 sigma: beyond noise peaks): fall back to default starts
        rv_est, fwhm = (0.0 if rv0 is None else rv0), float("nan")
    rv0 = rv_est if rv0 is None else rv0
    emission = {}  # lines whose flux rises above the continuum (8 sigma)
    excesses = _emission_excesses(spectrum, line_list, rv=rv0, half_width=3.0 * b_ins + 30.0,
                                  smooth_kms=max(narrow, 2 * step))
    for ln, excess in zip(line_list, excesses, strict=True):
        if excess > 8.0:
            emission[ln] = f"emission: the flux rises {excess:.0f} sigma above the continuum"
    if emission and len(emission) == len(line_list):
        raise _no_lines(name, "the lines are in emission, not absorption", tuple(_dropped_items(emission)))
    g_fwhm = _FWHM_PER_B * math.hypot(b_ins, b_guess)
    excess = fwhm**2 - g_fwhm**2 if np.isfinite(fwhm) else -1.0
    vsini0 = math.sqrt(excess) / rotation_fwhm_factor(ld) if excess > 0 else 0.5 * max(b_ins, step)
    state = {"vsini": float(np.clip(vsini0, 0.3, 600.0)), "rv": float(rv0), "macro": macro0, "bint": b_guess}
    if macro_mode == "free":
        state["macro"] = float(np.clip(0.3 * state["vsini"], 1.0, 20.0))
    free = {"vsini"} | (set() if detected else {"rv"}) | ({"macro"} if macro_mode == "free" else set())
    active, screened, ew_guess = [ln for ln in line_list if ln not in emission], dict(emission), {}
    restarts = [min(4.0 * state["vsini"] + 2.0 * b_ins, 500.0)]
    kfac = rotation_fwhm_factor(ld)
    # the exact joint disc integral of rotation and RT macroturbulence is costly: the passes use the product
    # of the two transforms, the final fit the joint kernel (tests/test_fit.py checks the change is << error)
    final_mode = "joint" if macro_mode != "off" and macro_kind == "rt" else None
    n_window_passes = 0
    for _ in range(max_passes + len(line_list) + len(restarts)):  # a pass that drops lines does not count
        gb = math.hypot(b_ins, state["bint"] if free_b else b_guess)
        hw = window_half_width(state["vsini"], gb, state["macro"], step_kms=step)
        fwhm_now = math.hypot(kfac * state["vsini"], _FWHM_PER_B * gb)
        windows, dropped_x = extract_windows(spectrum, active, rv=state["rv"], half_width=hw, merge_kms=0.25 * fwhm_now)
        if not windows:
            raise _no_lines(name, "no usable line", tuple(_dropped_items(screened)) + dropped_x)
        widths = None if free_b else [b_of(ln) for win in windows for ln in win.lines]
        # a detected centre may move by up to half the line's FWHM (at least half a resolution element)
        bound = 0.5 * max(fwhm_now + 2.0 * state["macro"], _FWHM_PER_B * b_ins, 3.0 * step) if detected else 0.0
        model = JointModel(windows, limb_darkening=ld, resolution=resolution, lsf=lsf, intrinsic_widths=widths,
                           macro_kind=macro_kind, rt_mode="product" if final_mode else "joint",
                           free_centres=detected, shift_bound_kms=bound)
        sigma, scale = _noise(model, spectrum)
        params = _make_params(model, _start_values(model, state, ew_guess), free)
        res = _lmfit(model, params, model.y, sigma, scale)
        state.update({k: res.params[k].value for k in ("vsini", "rv", "macro")})
        if free_b:
            state["bint"] = res.params["bint"].value
        ew_guess = {ln: res.params[f"ew{f}"].value for f, (_, ln) in enumerate(model.features)}
        bad = _screen(model, res, detected)
        if bad:
            if all(ln in bad for _, ln in model.features):
                if restarts:  # the first start may have led to a false narrow solution: start wider
                    state.update(vsini=restarts.pop(0), rv=rv0)
                    ew_guess = {}
                    continue
                screened.update(bad)
                raise _no_lines(name, "no usable line", tuple(_dropped_items(screened)) + dropped_x)
            screened.update(bad)
            active = [ln for ln in active if not any(_covers(b, ln) for b in bad)]
            continue
        n_window_passes += 1
        new_hw = window_half_width(state["vsini"], math.hypot(b_ins, state["bint"] if free_b else b_guess),
                                   state["macro"], step_kms=step)
        pinned = any(abs(res.params[n].value) >= 0.999 * model.shift_bound for n in model.shift_names())
        if (0.7 * hw < new_hw < 1.2 * hw and not pinned) or n_window_passes >= max_passes:  # margins are generous
            break
        if detected:  # start the next pass from the fitted centres
            active, ew_guess = _recentre(model, res, active, ew_guess)
    if final_mode:
        model = model.with_rt_mode(final_mode)
        res = _lmfit(model, res.params, model.y, sigma, scale)
    dropped = tuple(_dropped_items(screened)) + dropped_x
    return _build_result(spectrum, model, res, sigma, scale, dropped, ld, resolution, macro_mode, free_b, mc, rng,
                         detected, microturbulence)


def _recentre(model, res, active, ew_guess):
    """Detected lines moved to their fitted centres (:math:`\\lambda e^{\\Delta u/c}`), for the next pass."""
    moved = {}
    for f, (_, ln) in enumerate(model.features):
        du = res.params[f"du{f}"].value
        if du != 0.0 and not ln.components:
            wave = ln.wavelength * math.exp(du / C_KMS)
            moved[ln] = Line(wave, ln.species, (), f"auto {wave:.2f}")
    return [moved.get(ln, ln) for ln in active], {moved.get(ln, ln): ew for ln, ew in ew_guess.items()}


def _dropped_items(screened):
    """DroppedLine objects from a ``{line: reason}`` mapping."""
    return [DroppedLine(ln, why) for ln, why in screened.items()]


def _covers(feature, line):
    """True if ``line`` is ``feature`` or one of the lines merged into it."""
    if feature == line:
        return True
    waves = {c[0] for c in feature.components}
    return any(c[0] in waves for c in (line.components or ((line.wavelength, 1.0),)))


def _macro_mode(value):
    if value is None or (not isinstance(value, str) and value == 0):
        return "off", 0.0
    if isinstance(value, str):
        if value != "free":
            raise InputError(f"macroturbulence must be 'free', a number of km/s or None (off), got {value!r}")
        return "free", 3.0
    if not (np.isfinite(value) and 0 < value <= MACRO_MAX):
        raise InputError(f"macroturbulence must be between 0 and {MACRO_MAX} km/s, got {value!r}")
    return "fixed", float(value)


def _outside(spectrum, lines):
    return tuple(DroppedLine(ln, f"outside the spectrum ({spectrum.wavelength[0]:.2f}-{spectrum.wavelength[-1]:.2f} A)")
                 for ln in lines)


def _no_lines(name, why, dropped):
    reasons = "; ".join(sorted({d.reason.split(":")[0] for d in dropped}))
    err = FitError(f"{name}: {why}" + (f" ({len(dropped)} lines dropped: {reasons})" if dropped else "")
                   + "; check the line list, the wavelength range and the radial velocity")
    err.dropped, err.flags = tuple(dropped), ("no_lines",)
    return err


def _noise(model, spectrum):
    """Per-pixel sigma for the fit and whether the covariance must be scaled by the reduced chi-square."""
    if model.err is not None:
        return model.err, False
    snr = spectrum.snr_estimate()
    level = float(np.median(model.y))
    s = level / snr if np.isfinite(snr) and snr > 0 else 0.01 * level
    return np.full(model.n_data, s), True


def _build_result(spectrum, model, res, sigma, scale, dropped, ld, resolution, macro_mode, free_b, mc, rng,
                  detected=False, microturbulence=1.0):
    values = res.params.valuesdict()
    free = tuple(n for n, p in res.params.items() if p.vary)
    redchi = float(res.redchi)
    sig_eff = sigma * (math.sqrt(redchi) if scale else 1.0)
    p = res.params
    v_best, v_err = p["vsini"].value, _as_float(p["vsini"].stderr)
    m_err = _as_float(p["macro"].stderr) if macro_mode == "free" else float("nan")
    corr = float("nan")
    if macro_mode == "free" and p["vsini"].correl:
        corr = float(p["vsini"].correl.get("macro", float("nan")))
    flags = []
    method = "covariance scaled by reduced chi-square" if scale else "covariance"
    samples = None
    if mc:
        samples = _monte_carlo(model, res.params, sig_eff, mc, rng)
        v_err = float(np.std(samples[:, 0], ddof=1))
        if macro_mode == "free":
            m_err = float(np.std(samples[:, 1], ddof=1))
        method = f"Monte Carlo ({mc} realisations)"
    m_limit = float("nan")
    if macro_mode == "free" and p["macro"].value < MACRO_AT_ZERO:  # at its bound the covariance error is meaningless
        m_err = float("nan")
        m_limit = _macro_upper_limit(model, res, sigma, redchi if scale else 1.0)
    v_det, sigma_s = detection_limit(model, values, free, sig_eff)
    dchi2 = float("nan")
    if v_best < 1e-3:
        unresolved = True
    elif v_best < 2.0 * v_det:  # marginal: test v sin i = 0 against the best fit (likelihood ratio)
        dchi2 = _delta_chi2_zero(model, res, sigma) / (redchi if scale else 1.0)
        unresolved = dchi2 < DETECTION_DCHI2
    else:
        unresolved = False
    upper = max(math.sqrt(v_best**2 + 2.0 * sigma_s), v_det) if unresolved else float("nan")
    if unresolved:
        flags.append("unresolved")
    v_sys = float("nan")
    if not unresolved and not free_b:
        v_sys = _width_systematic(model, res, sigma, microturbulence)
        if v_sys > v_err:
            flags.append("width_systematic")
    if not res.success or not res.errorbars:
        flags.append("fit_failed")
    for pname in ("vsini", "macro", "bint", "rv", *model.shift_names()):
        par = p.get(pname)
        if par is None or not par.vary:
            continue
        high = par.value >= par.max - 1e-6 * max(1.0, abs(par.max))
        low = pname not in ("vsini", "macro") and par.value <= par.min + 1e-6 * max(1.0, abs(par.min))
        if high or low:  # zero v sin i or zeta are values (reported as upper limits), not bounds hit by accident
            flags.append("at_bound")
    if np.isfinite(corr) and abs(corr) > 0.9:
        flags.append("macro_degenerate")
    n_lines = model.n_features
    if n_lines < 3:
        flags.append("few_lines")
    if any(not d.reason.startswith("outside the spectrum") for d in dropped):  # a line list wider than the
        flags.append("lines_dropped")  # spectrum is normal; only lines lost inside it deserve a flag
    snr = spectrum.snr_estimate()
    if np.isfinite(snr) and snr < 20:
        flags.append("low_snr")
    if not scale and redchi > 3:
        flags.append("poor_fit")
    if resolution and C_KMS / resolution / spectrum.velocity_step_kms() < 2.0:
        flags.append("undersampled")
    return FitResult(
        vsini_kms=float("nan") if unresolved else v_best,
        vsini_err_kms=float("nan") if unresolved else v_err,
        is_upper_limit=bool(unresolved), upper_limit_kms=upper, detection_limit_kms=v_det, vsini_best_kms=v_best,
        rv_kms=float("nan") if detected else p["rv"].value,
        rv_err_kms=float("nan") if detected else _as_float(p["rv"].stderr),
        macroturbulence_kms=p["macro"].value if macro_mode != "off" else float("nan"),
        macroturbulence_err_kms=m_err, macroturbulence_mode=macro_mode,
        intrinsic_width_kms=p["bint"].value if free_b else float(np.max(model.feature_b)),
        intrinsic_width_err_kms=_as_float(p["bint"].stderr) if free_b else float("nan"),
        limb_darkening=ld, resolution=resolution, chi2=float(res.chisqr), redchi=redchi, n_data=model.n_data,
        n_free=len(free), n_lines=n_lines, lines=_line_fits(model, res, sig_eff), dropped=tuple(dropped),
        flags=check_flags(flags), error_method=method, snr=float(snr), correlation_vsini_macro=corr, delta_chi2_zero=dchi2,
        vsini_sys_kms=v_sys,
        macroturbulence_upper_limit_kms=m_limit, lines_detected=bool(detected),
        name=spectrum.name, mc_samples=samples, params=dict(values), free=free, model=model,
        sigma=sigma, scaled_errors=scale,
    )


def _line_fits(model, res, sig_eff):
    values = res.params.valuesdict()
    m, _, _, cont, _ = model._parts(values)
    out = []
    for w, win in enumerate(model.windows):
        r = model.rows[w]
        feats = [f for f, (fw, _) in enumerate(model.features) if fw == w]
        u = win.u[win.good] - C_KMS * math.log1p(values["rv"] / C_KMS)
        lines, shifts, shift_errs = win.lines, (), ()
        if model.free_centres:  # detected lines: report the fitted centres, centre the plot on the first one
            shifts = tuple(values[f"du{f}"] for f in feats)
            shift_errs = tuple(_as_float(res.params[f"du{f}"].stderr) for f in feats)
            lines = tuple(ln if ln.components else Line(w0 := ln.wavelength * math.exp(d / C_KMS), ln.species, (),
                                                        f"auto {w0:.2f}") for ln, d in zip(win.lines, shifts, strict=True))
            u = u - shifts[0]
        out.append(LineFit(
            lines=lines, ew_kms=tuple(values[f"ew{f}"] for f in feats),
            ew_err_kms=tuple(_as_float(res.params[f"ew{f}"].stderr) for f in feats),
            continuum=(values[f"c0_{w}"], values[f"c1_{w}"]), chi2=float(np.sum(res.residual[r] ** 2)),
            n_pixels=int(r.stop - r.start), velocity_kms=u, flux=model.y[r] / cont[r], model=m[r] / cont[r],
            flux_err=sig_eff[r] / cont[r], centre_shift_kms=shifts, centre_shift_err_kms=shift_errs))
    return tuple(out)

