"""How far the standard rotation kernel is from a real rotating star: apparent v sin i against the truth.

:func:`sensitivity_study` builds, for a set of inclinations, synthetic spectra of a star whose lines are
integrated over its surface by :mod:`vsini.surface` (differential rotation, Roche shape, gravity darkening,
limb darkening) and measures them with the two estimators of the project, which both assume a rigid,
spherical, uniformly bright star: the profile fit (:func:`vsini.fit.fit_vsini`) and the Fourier first zero
(:func:`vsini.fourier.fourier_vsini`). It returns, per inclination, the true :math:`v_{eq}\\sin i`, the two
apparent values, their relative bias and the Fourier ratio :math:`q_2/q_1` of the second to the first zero,
with the line profiles for a figure.

How the spectra are made (the "forward model" of this study):

* every line is :func:`vsini.surface.disk_line_profile`: a Gaussian local line of 1/e half-width
  :math:`b` and central depth :math:`d` carried by every surface element, Doppler shifted and
  flux-weighted over the visible surface;
* the Gaussian instrument profile (FWHM :math:`c/R`, 1/e half-width :math:`b_R = c/(2R\\sqrt{\\ln 2})`) is
  applied *exactly*: a Gaussian local line convolved with a Gaussian instrument is a Gaussian of width
  :math:`b_\\mathrm{eff} = \\sqrt{b^2 + b_R^2}` with the same area, so the convolved profile is
  ``disk_line_profile`` with width :math:`b_\\mathrm{eff}` and depth :math:`d\\,b/b_\\mathrm{eff}` (widths of
  this form add in quadrature; derived here, no FFT and no sampling error);
* the profile is averaged over each pixel (midpoint rule on :data:`OVERSAMPLE` sub-pixels) on a grid
  uniform in :math:`\\ln\\lambda` with :data:`PIXELS_PER_RESOLUTION` pixels per :math:`c/R`; each line gets
  a segment of continuum around it, and the segments form one :class:`vsini.spectrum.Spectrum`
  (with gaps between the segments).

The estimators are told everything except the surface physics: the resolving power, the limb-darkening
law, the intrinsic width, a zero macroturbulence and the line list. A rigid spherical star is therefore
recovered exactly (to ~1e-6), and any bias comes from the surface model alone.

References
----------
.. [1] Reiners, A. & Schmitt, J. H. M. M. 2002, A&A 384, 155: q2/q1 as a tracer of differential rotation.
.. [2] Townsend, R. H. D., Owocki, S. P. & Howarth, I. D. 2004, MNRAS 350, 189 (volume and page from
   memory): gravity darkening makes line widths underestimate :math:`v_e\\sin i` near critical rotation.
.. [3] Maeder, A. & Meynet, G. 2000, A&A 361, 159: the Roche model and the critical velocity.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import astropy.units as u
import numpy as np
from astropy.constants import G, M_sun, R_sun
from astropy.table import Table

from .errors import FitError, InputError, MeasurementError
from .fit import fit_vsini
from .flags import check_flags
from .fourier import fourier_vsini, rigid_q2_q1_range
from .grid import C_KMS
from .kernels import instrument_width
from .limbdark import as_limb_darkening
from .spectrum import Spectrum
from .surface import SurfaceModel, disk_line_profile, roche_equatorial_velocity_fraction, roche_radius

__all__ = [
    "DEFAULT_INCLINATIONS_DEG",
    "DEFAULT_LINES",
    "DEFAULT_INTRINSIC_WIDTH_KMS",
    "PIXELS_PER_RESOLUTION",
    "OVERSAMPLE",
    "NOISELESS_ERROR",
    "SensitivityResult",
    "critical_velocity_kms",
    "sensitivity_study",
]

#: Default inclinations of the study, degrees.
DEFAULT_INCLINATIONS_DEG: Final[tuple[float, ...]] = (10.0, 20.0, 30.0, 40.0, 50.0, 60.0, 70.0, 80.0, 90.0)
#: Default lines: (rest wavelength in Angstrom, central depth of the unbroadened line). Three well separated
#: lines (30 000 km/s apart) so that no window overlaps another even at critical rotation; a choice of
#: this module, not a real line list.
DEFAULT_LINES: Final[tuple[tuple[float, float], ...]] = ((4500.0, 0.5), (5000.0, 0.5), (5500.0, 0.5))
#: Default 1/e half-width b of the local (intrinsic) Gaussian line, km/s: thermal plus microturbulent width of
#: a metal line in an A/B star, of the order of 2 km/s (a choice of this module).
DEFAULT_INTRINSIC_WIDTH_KMS: Final[float] = 2.0
#: Pixels per resolution element c/R of the synthetic spectra (common practice: a little above Nyquist).
PIXELS_PER_RESOLUTION: Final[int] = 3
#: Sub-pixels of the midpoint rule that averages the profile over each pixel.
OVERSAMPLE: Final[int] = 5
#: Nominal per-pixel uncertainty given to noiseless spectra (no noise is added; the estimators need a scale).
NOISELESS_ERROR: Final[float] = 1e-4

#: :math:`G M_\odot / R_\odot` in (km/s)^2 (astropy's IAU 2015 nominal values).
_GM_OVER_R_SUN: Final[float] = float((G * M_sun / R_sun).to_value(u.km**2 / u.s**2))
_N_PROFILE: Final[int] = 601  # points of the figure profiles


def critical_velocity_kms(mass_msun, polar_radius_rsun):
    """Critical (break-up) equatorial velocity of a Roche rotator, km/s.

    Parameters
    ----------
    mass_msun : float
        Stellar mass, solar masses.
    polar_radius_rsun : float
        Polar radius :math:`R_p`, solar radii. In the Roche model of :mod:`vsini.surface` the polar radius
        is held fixed as the rotation rate changes, so it stands for the radius of the star without rotation.

    Returns
    -------
    float
        :math:`v_\\mathrm{crit} = \\sqrt{G M / R_{eq,\\mathrm{crit}}} = \\sqrt{2 G M / (3 R_p)}`, km/s.

    Notes
    -----
    At critical rotation the centrifugal force balances gravity at the equator, :math:`\\Omega_c^2 R_{eq} =
    GM/R_{eq}^2`, and the Roche equipotential through the pole has :math:`R_{eq} = 1.5 R_p`
    (:func:`vsini.surface.roche_radius`), so :math:`v_\\mathrm{crit} = \\Omega_c R_{eq} = \\sqrt{2GM/(3R_p)}`
    (Roche model; e.g. Maeder & Meynet 2000, A&A 361, 159). Examples (computed): 376 km/s for
    2 :math:`M_\\odot` and 1.8 :math:`R_\\odot`, 460 km/s for 5 :math:`M_\\odot` and 3.0 :math:`R_\\odot`.

    Examples
    --------
    >>> round(critical_velocity_kms(2.0, 1.8))
    376
    """
    m = _positive("mass_msun", mass_msun)
    r = _positive("radius_rsun", polar_radius_rsun)
    return math.sqrt(2.0 * _GM_OVER_R_SUN * m / (3.0 * r))


def _number(name, value):
    try:
        x = float(value)
    except (TypeError, ValueError):
        raise InputError(f"sensitivity_study: {name} must be a number, got {value!r}") from None
    if not math.isfinite(x):
        raise InputError(f"sensitivity_study: {name} must be finite, got {value!r}")
    return x


def _positive(name, value):
    x = _number(name, value)
    if not x > 0:
        raise InputError(f"sensitivity_study: {name} must be positive and finite, got {value!r}")
    return x


@dataclass(frozen=True, eq=False)
class SensitivityResult:
    """Result of :func:`sensitivity_study`.

    Attributes
    ----------
    table : astropy.table.Table
        One row per inclination (ascending). Columns: ``inclination_deg``; ``vsini_true`` (km/s,
        :math:`v_{eq}\\sin i`); ``vsini_fit``, ``vsini_fit_err`` and ``vsini_fit_limit`` (profile fit: value,
        one-sigma error, upper limit when rotation is not resolved, else NaN); ``vsini_fourier``,
        ``vsini_fourier_err``, ``vsini_fourier_limit`` (Fourier first zero, same meaning); ``q2_q1`` and
        ``q2_q1_err`` (NaN when the second zero is not usable); ``fit_bias`` and ``fourier_bias``
        (apparent / true - 1); ``fit_flags`` and ``fourier_flags`` (words of :data:`vsini.flags.FLAGS`,
        space separated). The metadata repeat every input and the quantities derived from them.
    velocity_kms : (M,) ndarray
        Velocity grid of the profiles, km/s about the line centre.
    profiles : (n_inc, M) ndarray
        Continuum-normalised profile of the first line at each inclination, with the instrument profile,
        point-sampled (no pixel averaging, no noise).
    reference_profiles : (n_inc, M) ndarray
        The same line for a rigid, spherical, uniformly bright star with the same :math:`v_{eq}\\sin i` (what
        the standard kernel predicts).
    v_eq_kms : float
        Equatorial velocity, km/s.
    v_crit_kms : float
        Critical velocity :math:`\\sqrt{2GM/(3R_p)}` when the star is a Roche rotator, else NaN.
    omega_crit_fraction, alpha, beta : float
        :math:`\\Omega/\\Omega_c`, the differential-rotation parameter and the von Zeipel exponent.
    limb_darkening : str
        Label of the law, e.g. ``'linear 0.60'``.
    resolution : float
    snr : float or None
        S/N per pixel of the added noise (None: noiseless).
    rigid_q2_q1 : (float, float, float)
        ``(lo, nominal, hi)`` of q2/q1 for a rigid rotator with the law's coefficients moved by +-0.1
        (:func:`vsini.fourier.rigid_q2_q1_range`).
    rigid_q2_q1_any_linear : (float, float)
        The range for any linear law, :math:`0 \\le \\epsilon \\le 1` (1.719 to 1.831).
    """

    table: Table
    velocity_kms: np.ndarray
    profiles: np.ndarray
    reference_profiles: np.ndarray
    v_eq_kms: float
    v_crit_kms: float
    omega_crit_fraction: float
    alpha: float
    beta: float
    limb_darkening: str
    resolution: float
    snr: float | None
    rigid_q2_q1: tuple
    rigid_q2_q1_any_linear: tuple

    def records(self):
        """The table as a list of plain dicts (one per inclination; NaN kept as float NaN; flags as lists)."""
        out = []
        for row in self.table:
            rec = {}
            for name in self.table.colnames:
                value = row[name]
                if name.endswith("_flags"):
                    rec[name] = str(value).split()
                else:
                    rec[name] = float(value)
            out.append(rec)
        return out


def _check_lines(lines):
    """Validated ((centre, depth), ...) from pairs or bare centres (depth 0.5)."""
    out = []
    for item in lines:
        if np.ndim(item) == 0:
            centre, depth = item, 0.5
        else:
            pair = tuple(item)
            if len(pair) != 2:
                raise InputError(f"sensitivity_study: line {item!r} must be a centre or a (centre, depth) pair")
            centre, depth = pair
        try:
            centre, depth = float(centre), float(depth)
        except (TypeError, ValueError):
            raise InputError(f"sensitivity_study: cannot read line {item!r} as (centre in Angstrom, depth)") from None
        if not (math.isfinite(centre) and centre > 0 and 0 < depth < 1):
            raise InputError(
                f"sensitivity_study: line {item!r} needs a positive centre (Angstrom) and 0 < depth < 1"
            )
        out.append((centre, depth))
    if not out:
        raise InputError("sensitivity_study: no lines given; pass e.g. lines=[(5000.0, 0.5)]")
    return tuple(sorted(out))


def _check_inclinations(inclinations_deg):
    inc = np.atleast_1d(np.asarray(inclinations_deg, dtype=float)).ravel()
    if inc.size == 0 or not np.all(np.isfinite(inc)) or np.any(inc <= 0) or np.any(inc > 90):
        raise InputError(
            f"sensitivity_study: inclinations_deg={list(np.round(inc, 6))} must be finite, in (0, 90] degrees, "
            "and not empty (i = 0 has no v sin i; i and 180 - i give the same profiles)"
        )
    return np.unique(inc)


def _velocity_setup(v_eq_kms, omega, mass_msun, radius_rsun):
    """Return (v_eq, v_crit, R_eq/R_p) from either v_eq or omega with mass and polar radius."""
    if omega > 0:
        if v_eq_kms is not None:
            raise InputError(
                f"sensitivity_study: give either v_eq_kms ({v_eq_kms}) or omega_crit_fraction ({omega}) with "
                "mass_msun and radius_rsun, not both: the Roche model fixes v_eq"
            )
        if mass_msun is None or radius_rsun is None:
            raise InputError(
                f"sensitivity_study: omega_crit_fraction={omega} needs mass_msun and radius_rsun (polar radius) "
                "to set the critical velocity"
            )
        v_crit = critical_velocity_kms(mass_msun, radius_rsun)
        return v_crit * roche_equatorial_velocity_fraction(omega), v_crit, float(roche_radius(np.pi / 2, omega))
    if v_eq_kms is None:
        raise InputError(
            "sensitivity_study: give v_eq_kms (km/s), or omega_crit_fraction > 0 with mass_msun and radius_rsun"
        )
    if mass_msun is not None or radius_rsun is not None:
        raise InputError(
            "sensitivity_study: mass_msun and radius_rsun are used only with omega_crit_fraction > 0; "
            "drop them or give omega_crit_fraction"
        )
    return _positive("v_eq_kms", v_eq_kms), math.nan, 1.0


def _pixel_mean_profile(model, u_pix, u_line, step, depth, b, b_eff):
    """Profile (with instrument) averaged over pixels centred at log-velocities ``u_pix`` (uniform)."""
    edge0 = u_pix[0] - 0.5 * step - u_line
    fine = edge0 + (np.arange(u_pix.size * OVERSAMPLE) + 0.5) * (step / OVERSAMPLE)
    # Gaussian local line (x) Gaussian instrument = Gaussian of width b_eff with the same area
    prof = disk_line_profile(model, fine, depth=depth * b / b_eff, intrinsic_width_kms=b_eff)
    return prof.reshape(u_pix.size, OVERSAMPLE).mean(axis=1)


def _model_for(v_eq, inc, alpha, omega, beta, law, wavelength, teff_pole_k):
    return SurfaceModel(
        v_eq_kms=v_eq,
        inclination_deg=inc,
        alpha=alpha,
        omega_crit_fraction=omega,
        gravity_darkening_beta=beta,
        limb_darkening=law,
        wavelength_angstrom=wavelength if teff_pole_k is not None else None,
        teff_pole_k=teff_pole_k,
    )


def _nan_if_none(x):
    return math.nan if x is None else float(x)


def sensitivity_study(
    *,
    v_eq_kms=None,
    omega_crit_fraction=0.0,
    mass_msun=None,
    radius_rsun=None,
    inclinations_deg=DEFAULT_INCLINATIONS_DEG,
    alpha=0.0,
    beta=0.25,
    limb_darkening=0.6,
    resolution=60000.0,
    lines=DEFAULT_LINES,
    intrinsic_width_kms=DEFAULT_INTRINSIC_WIDTH_KMS,
    teff_pole_k=None,
    snr=None,
    rng=None,
):
    """Apparent v sin i of both estimators, and q2/q1, for a surface-integrated star at several inclinations.

    Parameters
    ----------
    v_eq_kms : float, optional
        Equatorial velocity, km/s. Give it, or ``omega_crit_fraction`` > 0 with ``mass_msun`` and
        ``radius_rsun``.
    omega_crit_fraction : float, optional
        :math:`\\omega = \\Omega/\\Omega_c` (angular velocity over the critical one) of a rigid Roche rotator,
        0 <= omega < 1; 0 = spherical and uniformly bright (apart from limb darkening). Then
        :math:`v_{eq} = v_\\mathrm{crit}\\,\\omega\\,x_{eq}(\\omega)/1.5` with :math:`v_\\mathrm{crit}` from
        :func:`critical_velocity_kms` (note :math:`v_{eq}/v_\\mathrm{crit} \\ne \\omega`: 0.81 at
        :math:`\\omega` = 0.95, 0.92 at 0.99).
    mass_msun, radius_rsun : float, optional
        Mass (solar masses) and **polar** radius (solar radii; held fixed in the Roche model, i.e. the
        radius the star would have without rotation). Only with ``omega_crit_fraction`` > 0.
    inclinations_deg : sequence of float, optional
        Inclinations in (0, 90] degrees; sorted, duplicates removed.
    alpha : float, optional
        Differential rotation :math:`\\Omega(l) = \\Omega_{eq}(1 - \\alpha\\sin^2 l)`; not with ``omega`` > 0.
    beta : float, optional
        von Zeipel exponent, :math:`T_{eff} \\propto g_{eff}^\\beta` (0.25 for radiative envelopes).
    limb_darkening : float, str, tuple or LimbDarkening, optional
        Law of the model *and* of both estimators (:func:`vsini.limbdark.as_limb_darkening`): a linear
        coefficient, ``'a,b'`` or ``(a, b)`` for the quadratic law.
    resolution : float, optional
        Resolving power of the Gaussian instrument profile (FWHM c/R).
    lines : sequence, optional
        Rest wavelengths in Angstrom, or ``(centre, depth)`` pairs (bare centres get depth 0.5). Lines must be
        far enough apart that their segments (see Notes) do not overlap.
    intrinsic_width_kms : float, optional
        1/e half-width of the local Gaussian line, km/s (also given to the profile fit).
    teff_pole_k : float, optional
        Polar temperature, K: scale the local intensity by the Planck function at each line's wavelength
        instead of the bolometric :math:`T^4` (matters for Roche rotators only).
    snr : float, optional
        S/N per pixel of Gaussian noise added to the spectra (:math:`\\sigma_i = \\sqrt{F_i}/\\mathrm{S/N}`).
        None: noiseless spectra carrying the nominal uncertainty :data:`NOISELESS_ERROR`.
    rng : None, int or numpy.random.Generator, optional
        Seed or generator for the noise (one generator for all inclinations, in ascending order).

    Returns
    -------
    SensitivityResult

    Raises
    ------
    InputError
        Missing or contradictory velocity inputs, inclinations outside (0, 90], bad lines (overlapping
        segments, depth outside (0, 1)), non-positive resolution, width or S/N, and the checks of
        :class:`vsini.surface.SurfaceModel` (e.g. ``alpha`` with ``omega_crit_fraction``).

    Notes
    -----
    *Spectra.* The pixel grid is uniform in :math:`\\ln\\lambda` with step :math:`c/(3R)`. Around each line
    a segment of half-width :math:`4 v_{eq} + 30 b_\\mathrm{eff} + 20` pixels is kept (more than the windows
    of either estimator: :math:`1.8(v\\sin i + 3b)` for the fit, about :math:`2.9\\,v\\sin i` for the
    Fourier method). See the module notes for the exact instrument convolution and the pixel averaging.

    *Estimators.* :func:`vsini.fit.fit_vsini` with the true resolution, limb-darkening law and intrinsic
    width, macroturbulence off and a starting radial velocity of 0; :func:`vsini.fourier.fourier_vsini`
    with the true law and resolution, macroturbulence 0 (known to be absent, so a low q2/q1 can raise
    ``differential_candidate``) and no Monte Carlo (first-order errors). A rigid spherical star gives
    zero bias to ~1e-6 and q2/q1 = 1.761 for :math:`\\epsilon` = 0.6 (Reiners & Schmitt 2002 [1]_); the
    biases of a Roche rotator are compared with Townsend, Owocki & Howarth (2004) [2]_ in
    ``docs/inclination.md`` (section 3, with the table of measured biases).

    *Noiseless mode.* The spectra carry the nominal error :data:`NOISELESS_ERROR` (S/N 10 000) but no noise:
    the ``poor_fit`` flag then means a shape mismatch of the order of 1e-4 of the continuum, not a bad
    measurement, and the quoted errors are those of S/N 10 000. Far below the resolution (v sin i << c/R)
    noiseless values are not realistic measurements; give ``snr`` for realistic limits.

    A failure of one estimator at one inclination (no usable line or zero) gives NaN and the flag
    ``no_lines`` (fit) or ``fourier_failed`` (Fourier) in that row; the other rows are kept.

    References
    ----------
    .. [1] Reiners, A. & Schmitt, J. H. M. M. 2002, A&A 384, 155.
    .. [2] Townsend, R. H. D., Owocki, S. P. & Howarth, I. D. 2004, MNRAS 350, 189 (from memory).
    """
    omega = _number("omega_crit_fraction", omega_crit_fraction)
    if not 0.0 <= omega < 1.0:
        raise InputError(f"sensitivity_study: omega_crit_fraction={omega_crit_fraction} must satisfy 0 <= omega < 1")
    alpha = _number("alpha", alpha)
    beta = _number("beta", beta)
    if omega > 0 and alpha != 0.0:
        raise InputError(
            f"sensitivity_study: alpha={alpha} with omega_crit_fraction={omega}: the Roche model assumes rigid "
            "rotation; set one of them to 0"
        )
    v_eq, v_crit, x_eq = _velocity_setup(v_eq_kms, omega, mass_msun, radius_rsun)
    inc = _check_inclinations(inclinations_deg)
    ld = as_limb_darkening(limb_darkening)
    law = (ld.law, *ld.coefficients)
    res = _positive("resolution", resolution)
    b = _positive("intrinsic_width_kms", intrinsic_width_kms)
    if teff_pole_k is not None:
        teff_pole_k = _positive("teff_pole_k", teff_pole_k)
    if snr is not None:
        snr = _positive("snr", snr)
    line_list = _check_lines(lines)
    # validate alpha, beta and the law once (SurfaceModel raises InputError naming the field)
    _model_for(v_eq, 90.0, alpha, omega, beta, law, line_list[0][0], teff_pole_k)
    gen = np.random.default_rng(rng)

    step = C_KMS / (PIXELS_PER_RESOLUTION * res)
    b_eff = math.hypot(b, instrument_width(res))
    half = 4.0 * v_eq + 30.0 * b_eff + 20.0 * step
    u_lines = np.array([C_KMS * math.log(c / line_list[0][0]) for c, _ in line_list])
    if np.any(np.diff(u_lines) <= 2.0 * half):
        raise InputError(
            f"sensitivity_study: lines {[c for c, _ in line_list]} Angstrom are closer than {2 * half:.0f} km/s "
            f"(two segments of 4 v_eq + 30 b + 20 pixels at v_eq = {v_eq:.1f} km/s); space them further apart"
        )
    # one global pixel grid u_k = k * step (log-velocity from the first line), cut into segments
    segments = [
        np.arange(math.floor((ul - half) / step), math.ceil((ul + half) / step) + 1) * step for ul in u_lines
    ]
    u_all = np.concatenate(segments)
    wave = line_list[0][0] * np.exp(u_all / C_KMS)
    centres = [c for c, _ in line_list]

    v_prof = np.linspace(-(1.15 * v_eq + 5.0 * b_eff), 1.15 * v_eq + 5.0 * b_eff, _N_PROFILE)
    d0 = line_list[0][1]
    rows, profiles, references = [], [], []
    for i_deg in inc:
        flux = np.empty(u_all.size)
        pos = 0
        for seg, ul, (centre, depth) in zip(segments, u_lines, line_list, strict=True):
            model = _model_for(v_eq, i_deg, alpha, omega, beta, law, centre, teff_pole_k)
            flux[pos : pos + seg.size] = _pixel_mean_profile(model, seg, ul, step, depth, b, b_eff)
            pos += seg.size
        if snr is None:
            err = np.full(flux.size, NOISELESS_ERROR)
        else:
            err = np.sqrt(np.clip(flux, 1e-6, None)) / snr  # photon noise, as vsini.simulate
            flux = flux + err * gen.standard_normal(flux.size)
        spec = Spectrum(wave, flux, err, name=f"sensitivity i={i_deg:g}")

        model0 = _model_for(v_eq, i_deg, alpha, omega, beta, law, centres[0], teff_pole_k)
        vs_true = model0.vsini_kms
        profiles.append(disk_line_profile(model0, v_prof, depth=d0 * b / b_eff, intrinsic_width_kms=b_eff))
        rigid = SurfaceModel(v_eq_kms=vs_true, inclination_deg=90.0, limb_darkening=law)
        references.append(disk_line_profile(rigid, v_prof, depth=d0 * b / b_eff, intrinsic_width_kms=b_eff))

        fit_vals = [math.nan] * 3
        try:
            fr = fit_vsini(spec, lines=centres, resolution=res, limb_darkening=ld, macroturbulence=None,
                           intrinsic_width=b, rv=0.0)
            fit_vals = [fr.vsini_kms, fr.vsini_err_kms, fr.upper_limit_kms if fr.is_upper_limit else math.nan]
            fit_flags = fr.flags
        except FitError as e:
            fit_flags = tuple(getattr(e, "flags", ())) or ("no_lines",)
        four_vals = [math.nan] * 5
        try:
            fo = fourier_vsini(spec, lines=centres, resolution=res, limb_darkening=ld, macroturbulence=0.0,
                               rv=0.0, mc=0)
            four_vals = [_nan_if_none(fo.vsini_kms), _nan_if_none(fo.vsini_err_kms),
                         _nan_if_none(fo.limit_kms) if fo.is_limit else math.nan,
                         _nan_if_none(fo.q2_q1), _nan_if_none(fo.q2_q1_err)]
            four_flags = fo.flags
        except MeasurementError:
            four_flags = ("fourier_failed",)
        rows.append(
            [float(i_deg), vs_true, *fit_vals, *four_vals[:3], *four_vals[3:],
             fit_vals[0] / vs_true - 1.0, four_vals[0] / vs_true - 1.0,
             " ".join(check_flags(fit_flags)), " ".join(check_flags(four_flags))]
        )

    names = ("inclination_deg", "vsini_true", "vsini_fit", "vsini_fit_err", "vsini_fit_limit", "vsini_fourier",
             "vsini_fourier_err", "vsini_fourier_limit", "q2_q1", "q2_q1_err", "fit_bias", "fourier_bias",
             "fit_flags", "fourier_flags")
    table = Table(rows=rows, names=names, dtype=[float] * 12 + [str, str])
    table["inclination_deg"].unit = u.deg
    for name in names[1:8]:
        table[name].unit = u.km / u.s
    rigid_range = rigid_q2_q1_range(ld, tolerance=0.1)
    any_linear = rigid_q2_q1_range(0.5, tolerance=0.5)
    table.meta.update(
        {
            "description": "apparent v sin i of a surface-integrated star (vsini.sensitivity.sensitivity_study)",
            "v_eq_kms": v_eq,
            "v_crit_kms": v_crit if math.isfinite(v_crit) else None,
            "v_eq_over_v_crit": v_eq / v_crit if math.isfinite(v_crit) else None,
            "omega_crit_fraction": omega,
            "equatorial_over_polar_radius": x_eq,
            "mass_msun": None if mass_msun is None else float(mass_msun),
            "polar_radius_rsun": None if radius_rsun is None else float(radius_rsun),
            "alpha": alpha,
            "gravity_darkening_beta": beta,
            "teff_pole_k": teff_pole_k,
            "limb_darkening": ld.label,
            "resolution": res,
            "intrinsic_width_kms": b,
            "lines": [list(x) for x in line_list],
            "snr": snr,
            "pixel_step_kms": step,
            "rigid_q2_q1": list(rigid_range),
            "bias": "apparent / true - 1",
            "note": "estimators assume a rigid, spherical, uniformly bright star; limits in *_limit columns",
        }
    )
    arrays = [v_prof, np.array(profiles), np.array(references)]
    for a in arrays:
        a.setflags(write=False)
    return SensitivityResult(
        table=table,
        velocity_kms=arrays[0],
        profiles=arrays[1],
        reference_profiles=arrays[2],
        v_eq_kms=float(v_eq),
        v_crit_kms=float(v_crit),
        omega_crit_fraction=omega,
        alpha=alpha,
        beta=beta,
        limb_darkening=ld.label,
        resolution=res,
        snr=snr,
        rigid_q2_q1=tuple(rigid_range),
        rigid_q2_q1_any_linear=(any_linear[0], any_linear[2]),
    )
