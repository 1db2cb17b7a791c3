"""The Fourier first-zero estimate of v sin i and the q2/q1 differential-rotation diagnostic.

By the convolution theorem the transform of a rotationally broadened line is the product of the
rotation kernel's transform with those of the intrinsic, macroturbulent and instrumental profiles.
Those other factors have no zeros, so the zeros of the line's transform are the rotation kernel's:
:math:`\\sigma_k = q_k/(v\\sin i)`, with :math:`q_k` fixed by the limb-darkening law (Carroll 1933 [1]_;
Gray 2005 [2]_; Dravins, Lindegren & Torkelsson 1990 [3]_). The ratio :math:`q_2/q_1` of the first two
zeros is about 1.76 for a rigid rotator with linear limb darkening 0.6 and falls with solar-like
differential rotation (Reiners & Schmitt 2002 [4]_) and rises with anti-solar differential rotation.

The estimator: :func:`fourier_vsini` (results :class:`FourierResult`, :class:`LineZeros`). Its parts live
in :mod:`vsini.fwindows` (line windows, :func:`spectrum_windows`), :mod:`vsini.ftransform` (taper,
transform, noise rules, zero search on arrays) and :mod:`vsini.zeros` (zero positions :math:`q_k`,
macroturbulence calibration, rigid q2/q1 range); their public names are re-exported here. Rules in
``docs/fourier.md``. v sin i :math:`= q_1/\\sigma_1` from the mean profile of all lines; with no accepted
zero in the mean profile only an upper limit (a zero in single lines alone is not adopted) :math:`q_1/\\sigma_\\mathrm{noise}` (flag ``fourier_unresolved`` or
``fourier_noise``). Given radial-tangential :math:`\\zeta`, :math:`q_1` is that of the joint kernel at
:math:`\\zeta/v\\sin i`, solved self-consistently. Errors: seeded Monte Carlo noise resampling and the
line-to-line scatter.

References
----------
.. [1] Carroll, J. A. 1933, MNRAS 93, 478 (first use of Fourier zeros for rotation; from memory).
.. [2] Gray, D. F. 2005, *The Observation and Analysis of Stellar Photospheres*, 3rd ed., CUP, ch. 17-18.
.. [3] Dravins, D., Lindegren, L. & Torkelsson, U. 1990, A&A 237, 137 (volume and page from memory).
.. [4] Reiners, A. & Schmitt, J. H. M. M. 2002, A&A 384, 155; Reiners, A. 2006, A&A 446, 267 (from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np

from .errors import InputError, MeasurementError
from .flags import check_flags
from .ftransform import (
    DEFAULT_TAPER,
    DEFAULT_THRESHOLD,
    FourierSpectrum,
    ZeroSearch,
    _combine,
    _mc_zeros,
    _prepare,
    _search,
    _spectrum_of,
    cosine_taper,
    fourier_zeros,
    line_transform,
    transform_noise_level,
    usable_frequency_limit,
)
from .fwindows import FourierWindow, _as_window, _kms, spectrum_windows
from .fzerocheck import ZeroCheck, zero_check
from .grid import C_KMS
from .kernels import pixel_transform
from .limbdark import as_limb_darkening
from .model import Broadening
from .zeros import (
    ZERO_TABLE_NAME,
    _macro_q,
    build_zero_table,
    load_zero_table,
    macro_zero_positions,
    rigid_q2_q1_range,
    rotation_zeros,
    write_zero_table,
)

__all__ = [
    "DEFAULT_TAPER",
    "DEFAULT_THRESHOLD",
    "MACRO_RATIO_LIMIT",
    "ZERO_TABLE_NAME",
    "FourierWindow",
    "FourierSpectrum",
    "ZeroSearch",
    "ZeroCheck",
    "LineZeros",
    "FourierResult",
    "cosine_taper",
    "transform_noise_level",
    "usable_frequency_limit",
    "line_transform",
    "fourier_zeros",
    "zero_check",
    "rotation_zeros",
    "macro_zero_positions",
    "rigid_q2_q1_range",
    "build_zero_table",
    "write_zero_table",
    "load_zero_table",
    "spectrum_windows",
    "fourier_vsini",
]

#: From this zeta/vsini on, radial-tangential macroturbulence lowers a rigid rotator's q2/q1 by 0.02 or more
#: (1.741 instead of 1.761 at eps = 0.6, computed with the joint kernel; more than the whole +-0.1 limb-
#: darkening band): q2/q1 is then not used as a differential-rotation diagnostic.
MACRO_RATIO_LIMIT = 0.25


# --------------------------------------------------------------------------------------------- the estimator


def _plain_numbers(obj):
    """Turn numpy scalars in a frozen dataclass into Python floats/ints/bools (clean JSON and reprs)."""
    for f in fields(obj):
        value = getattr(obj, f.name)
        if isinstance(value, np.bool_):
            object.__setattr__(obj, f.name, bool(value))
        elif isinstance(value, np.integer):
            object.__setattr__(obj, f.name, int(value))
        elif isinstance(value, np.floating):
            object.__setattr__(obj, f.name, float(value))
        elif isinstance(value, tuple) and any(isinstance(v, np.floating) for v in value):
            object.__setattr__(obj, f.name, tuple(float(v) for v in value))


@dataclass(frozen=True)
class LineZeros:
    """Fourier result of one line.

    Attributes
    ----------
    label : str
    status : {'ok', 'no_line', 'no_zero', 'no_data'}
        'no_line': equivalent width below the noise threshold; 'no_zero': no zero clear of the noise.
    ew_kms, ew_snr : float
    sigma1, sigma1_err, sigma2, sigma2_err : float or None
        Zeros and their errors, s/km.
    vsini_kms, vsini_err_kms : float or None
    q2_q1, q2_q1_err : float or None
    limit_kms : float or None
        Upper limit when no zero is usable.
    marginal : bool
        The zero is marginal (:func:`vsini.fzerocheck.zero_check`): its error is the model-slope one.
    """

    label: str
    status: str
    ew_kms: float
    ew_snr: float
    sigma1: float | None = None
    sigma1_err: float | None = None
    sigma2: float | None = None
    sigma2_err: float | None = None
    vsini_kms: float | None = None
    vsini_err_kms: float | None = None
    q2_q1: float | None = None
    q2_q1_err: float | None = None
    limit_kms: float | None = None
    marginal: bool = False

    def __post_init__(self):
        _plain_numbers(self)


@dataclass(frozen=True, eq=False)
class FourierResult:
    """The Fourier first-zero estimate of one star.

    Attributes
    ----------
    vsini_kms, vsini_err_kms : float or None
        Adopted value: from the mean profile of all lines (else the weighted mean over lines); None when
        only a limit is known.
    is_limit : bool
        True when no zero is usable: ``limit_kms`` is then an upper limit and ``vsini_kms`` is None.
    limit_kms : float or None
    q2_q1, q2_q1_err : float or None
        Ratio of the second to the first zero (mean profile).
    sigma1, sigma1_err, sigma2, sigma2_err : float or None
        Zeros of the mean profile, s/km.
    vsini_lines_kms, vsini_lines_err_kms : float or None
        Weighted mean over lines with a usable zero (weights 1/err^2; error the larger of the internal and
        the scatter-based one).
    n_lines : int
        Lines with a usable first zero.
    vsini_mean_profile_kms, vsini_mean_profile_err_kms : float or None
        From the EW-normalised, inverse-variance weighted mean profile.
    noise_level : float
        rms of the noise of the mean profile's normalised amplitude.
    sigma_max : float
        End of the usable frequency range, s/km.
    q1, q2 : float
        Zero positions used (joint rotation + macroturbulence kernel when corrected).
    macro_correction : float
        Factor applied to :math:`q_1/\\sigma_1` for radial-tangential macroturbulence (1: none).
    rigid_range : (float, float, float)
        ``(lo, nominal, hi)`` of q2/q1 for a rigid rotator with this law (and macroturbulence).
    limb_darkening : str
    flags : tuple of str
        Words of :data:`vsini.flags.FLAGS`.
    lines : tuple of LineZeros
    skipped : tuple of (str, str)
        Lines left out and why.
    spectrum : FourierSpectrum or None
        The mean profile's transform for figures.
    mc : int
        Monte Carlo realisations used.
    """

    vsini_kms: float | None
    vsini_err_kms: float | None
    is_limit: bool
    limit_kms: float | None
    q2_q1: float | None
    q2_q1_err: float | None
    sigma1: float | None
    sigma1_err: float | None
    sigma2: float | None
    sigma2_err: float | None
    vsini_lines_kms: float | None
    vsini_lines_err_kms: float | None
    n_lines: int
    vsini_mean_profile_kms: float | None
    vsini_mean_profile_err_kms: float | None
    noise_level: float
    sigma_max: float
    q1: float
    q2: float
    macro_correction: float
    rigid_range: tuple
    limb_darkening: str
    flags: tuple
    lines: tuple = ()
    skipped: tuple = ()
    spectrum: FourierSpectrum | None = None
    mc: int = 0

    def __post_init__(self):
        _plain_numbers(self)

    def as_dict(self):
        """Plain values (floats, None, lists) for JSON; arrays left out."""
        keys = ("vsini_kms", "vsini_err_kms", "is_limit", "limit_kms", "q2_q1", "q2_q1_err", "sigma1", "sigma1_err",
                "sigma2", "sigma2_err", "vsini_lines_kms", "vsini_lines_err_kms", "n_lines",
                "vsini_mean_profile_kms", "vsini_mean_profile_err_kms", "noise_level", "sigma_max", "q1", "q2",
                "macro_correction", "limb_darkening", "mc")
        out = {k: getattr(self, k) for k in keys}
        out["rigid_range"] = list(self.rigid_range)
        out["flags"] = list(self.flags)
        return out


def _weighted_mean(values, errors):
    """Weighted mean (weights :math:`1/e^2`), its error and the scale factor :math:`S = \\sqrt{\\chi^2/(n-1)}`.

    The error is the internal one, :math:`(\\sum w)^{-1/2}`, times :math:`\\max(1, S)`: the larger of the
    internal and the scatter-based error (Bevington & Robinson 2003, *Data Reduction and Error Analysis*,
    3rd ed., ch. 4; the "scale factor" of the Particle Data Group's averages; both from memory). With a
    zero error among them the plain mean and its standard error are used; S is 1 for a single value.
    """
    x, e = np.asarray(values, dtype=float), np.asarray(errors, dtype=float)
    if x.size == 1:
        return float(x[0]), float(e[0]), 1.0
    if np.any(~(e > 0)):
        return float(x.mean()), float(x.std(ddof=1) / math.sqrt(x.size)), 1.0
    w = 1.0 / e**2
    mean = float(np.sum(w * x) / w.sum())
    scale = math.sqrt(float(np.sum(w * (x - mean) ** 2)) / (x.size - 1))
    return mean, max(1.0, scale) / math.sqrt(w.sum()), scale


def _spread(values):
    """Half the 16-84 percentile range of the finite values (a standard deviation robust to a few outliers)."""
    v = values[np.isfinite(values)]
    if v.size < 5:
        return math.nan
    p16, p84 = np.percentile(v, [15.865, 84.135])
    return float(0.5 * (p84 - p16))



def _zero_values(search, zs):
    """Zeros, errors and q2/q1 of an accepted search: Monte Carlo spreads from ``zs`` (m, k), else first order."""

    def err(k, mc_values):
        e = _spread(mc_values) if zs is not None else math.nan
        return e if np.isfinite(e) else search.zeros_err[k]

    s1 = search.zeros[0]
    out = dict(sigma1=s1, sigma1_err=err(0, None if zs is None else zs[:, 0]))
    if len(search.zeros) > 1:
        s2 = search.zeros[1]
        e2 = err(1, None if zs is None else zs[:, 1])
        er = _spread(zs[:, 1] / zs[:, 0]) if zs is not None else math.nan
        if not np.isfinite(er):
            er = (s2 / s1) * math.hypot(out["sigma1_err"] / s1, e2 / s2)
        out.update(sigma2=s2, sigma2_err=e2, q2_q1=s2 / s1, q2_q1_err=er)
    return out


def _resolution_element(resolution, lsf, step):
    """FWHM of the instrument (km/s): c/R, the tabulated LSF's FWHM, or two pixels (Nyquist)."""
    if lsf is not None:
        r = lsf.response
        above = lsf.velocity[r >= 0.5 * r.max()]
        return float(above[-1] - above[0])
    if resolution is not None:
        return C_KMS / float(resolution)
    return 2.0 * step


def fourier_vsini(data, *, lines=None, resolution=None, limb_darkening=0.6, macroturbulence=None, macro_kind="rt",
                  radial_fraction=0.5, rv=None, mc=200, rng=None, lsf=None, half_width_kms=None,
                  taper=DEFAULT_TAPER, threshold=DEFAULT_THRESHOLD, ld_tolerance=0.1):
    """v sin i from the first zero of the lines' Fourier transforms, with q2/q1 and its flags.

    Parameters
    ----------
    data : Spectrum or sequence of windows
        A :class:`vsini.spectrum.Spectrum` (windows cut by :func:`spectrum_windows`) or windows: each a
        :class:`FourierWindow`, a tuple ``(velocity_kms, depression[, noise[, centre_kms]])`` or an object
        with such attributes.
    lines : optional
        Lines of a Spectrum (see :func:`spectrum_windows`); ignored for windows.
    resolution : float, optional
        Resolving power of a Gaussian instrument profile (limits the usable frequencies).
    limb_darkening : LimbDarkening, float, str or tuple
        Law that sets :math:`q_1, q_2` (default linear 0.6).
    macroturbulence : float, optional
        :math:`\\zeta` (km/s) from the fit or the user. ``macro_kind='rt'``: the zeros are calibrated with
        the joint rotation + radial-tangential kernel. ``'gaussian'`` (isotropic): it only multiplies the
        transform, nothing to correct. None: unknown (no correction; see the flags).
    macro_kind : {'rt', 'gaussian'}
    radial_fraction : float
        :math:`A_R` of the radial-tangential model.
    rv : float, optional
        Radial velocity (km/s) of a Spectrum.
    mc : int
        Monte Carlo noise realisations for the errors (0: first-order errors only).
    rng : None, int or numpy.random.Generator
    lsf : vsini.model.TabulatedLSF, optional
        Tabulated instrument profile instead of ``resolution``.
    half_width_kms : float, optional
        Window half-width for a Spectrum.
    taper : float
        Cosine-tapered fraction at each window end.
    threshold : float
        Noise multiple for lines and zeros (see the module notes).
    ld_tolerance : float
        Uncertainty of the limb-darkening coefficients for the rigid q2/q1 range.

    Returns
    -------
    FourierResult

    Raises
    ------
    InputError
        For bad arguments or windows.
    MeasurementError
        When no window is left to measure (all lines outside the spectrum, in gaps or blended).

    Notes
    -----
    *Mean profile*: the normalised transforms :math:`T_i` of the lines with a significant equivalent width
    are averaged with inverse-variance weights :math:`(W_i/\\delta W_i)^2`; this is the transform of the
    EW-normalised mean profile, with sub-pixel centring exact. Rotation zeros are common to all lines, so
    they survive the average.

    *Adopted value and error*: the mean profile's :math:`q_1/\\sigma_1`; its error is the Monte Carlo
    spread (half the 16-84 percentile range of ``mc`` noise-resampled transforms: data plus noise drawn from
    the per-pixel uncertainty), multiplied by the scale factor :math:`S = \\sqrt{\\chi^2/(n-1)}` of the
    line values about their weighted mean when :math:`S > 1` and at least three lines give zeros that are not
    marginal (lines that disagree more than their errors allow: blends and continuum errors that resampling
    cannot see; a marginal line's error is understated and would inflate S). Without ``mc`` the errors are
    first order, :math:`\\eta/|\\partial_\\sigma\\mathrm{Re}\\,T|`. The limb-darkening uncertainty is
    not included: :math:`dq_1/d\\epsilon \\approx 0.09` near 0.6 (1.4 % per 0.1 in :math:`\\epsilon`).

    *Only the mean profile is adopted*. When it has no zero clear of the noise, a zero in one or two single
    lines is far more likely a noise excursion (with n lines each tested, the chance that one passes by
    noise grows as :math:`1-(1-p)^n`: multiple trials, common practice) and its first-order error is
    meaningless (pulls of 2-6 measured at 1-2 c/R); the result is then the mean profile's upper limit.
    ``vsini_lines_kms`` stays in the result for information.

    *Marginal zeros* (:func:`vsini.fzerocheck.zero_check`, flag ``fourier_marginal``): when the lobe after
    the zero, predicted from the main lobe (known kernel times a fitted Gaussian envelope), stays below
    ``threshold`` times the noise, the zero passed only because noise deepened that lobe, which also
    steepens the slope: first-order and Monte Carlo errors then come out about 1.3-1.5 times too small
    (measured near c/R; ``tests/benchmarks/bench_fourier.py``). The error is then the larger of that and
    the model-slope error :math:`\\eta/|M'(\\sigma_1)|` (conservative: flagged values scatter by 0.2-0.8 of
    it), and q2/q1 is not used for the rotation flags.

    *Flags* (:data:`vsini.flags.FLAGS`): ``fourier_noise``, ``fourier_unresolved`` (no value, an upper
    limit or nothing), ``fourier_no_q2`` (second zero not usable), ``differential_candidate`` (q2/q1 more
    than two standard deviations below the rigid range of :func:`rigid_q2_q1_range`, with :math:`\\zeta`
    given and below the limit), ``antisolar_candidate`` (q2/q1 more than two standard deviations *above* the
    rigid range, :math:`\\zeta` given: poles faster than the equator, Reiners & Schmitt 2003; also a cool
    polar spot, or weaker limb darkening than assumed: :math:`\\epsilon = 0.3` instead of 0.6 raises the
    rigid ratio from 1.761 to 1.797), ``fourier_marginal`` (see above),
    ``macro_shifts_zeros`` (radial-tangential :math:`\\zeta/v\\sin i \\ge` :data:`MACRO_RATIO_LIMIT`, or
    zeros the joint kernel cannot have: q2/q1 is then not used for differential rotation), ``macro_unknown``
    (such a low or high q2/q1 but no :math:`\\zeta` given: never called differential on q2/q1 alone).
    Radial-tangential macroturbulence lowers q2/q1 for :math:`A_R = 0.5`, but a mostly radial field raises
    it (computed with the joint kernel, :math:`\\epsilon = 0.6`, :math:`A_R = 1`: 1.778, 1.826, 1.875 at
    :math:`\\zeta/v\\sin i` = 0.5, 0.8, 1.0), so an unknown :math:`\\zeta` can fake either flag.
    """
    ld = as_limb_darkening(limb_darkening)
    if macro_kind not in ("rt", "gaussian"):
        raise InputError(f"fourier_vsini: macro_kind must be 'rt' or 'gaussian', got {macro_kind!r}")
    if macroturbulence is not None:
        macroturbulence = float(_kms(macroturbulence))
        if not (np.isfinite(macroturbulence) and macroturbulence >= 0):
            raise InputError(f"fourier_vsini: macroturbulence must be >= 0 km/s, got {macroturbulence}")
    if not (isinstance(mc, (int, np.integer)) and mc >= 0):
        raise InputError(f"fourier_vsini: mc must be an integer >= 0, got {mc!r}")
    if not threshold > 0:
        raise InputError(f"fourier_vsini: threshold must be positive, got {threshold}")
    gen = np.random.default_rng(rng)

    skipped = ()
    if hasattr(data, "wavelength") and hasattr(data, "flux"):
        windows, skipped = spectrum_windows(data, lines, rv=rv, half_width_kms=half_width_kms,
                                            resolution=resolution)
        if not windows and skipped:
            why = "; ".join(f"{lab}: {r}" for lab, r in skipped[:3])
            raise MeasurementError(f"fourier: no usable line window in spectrum {data.name or '(unnamed)'} ({why})")
    else:
        items = [data] if isinstance(data, FourierWindow) else list(data)
        if not items:
            raise InputError("fourier_vsini: no windows given; pass a Spectrum or at least one window")
        windows = tuple(_as_window(w, i) for i, w in enumerate(items))

    q_rigid = rotation_zeros(ld)
    if not windows:  # no line was found in the spectrum: nothing to measure, not even a limit
        return FourierResult(
            vsini_kms=None, vsini_err_kms=None, is_limit=False, limit_kms=None, q2_q1=None, q2_q1_err=None,
            sigma1=None, sigma1_err=None, sigma2=None, sigma2_err=None, vsini_lines_kms=None,
            vsini_lines_err_kms=None, n_lines=0, vsini_mean_profile_kms=None, vsini_mean_profile_err_kms=None,
            noise_level=math.nan, sigma_max=0.0, q1=float(q_rigid[0]), q2=float(q_rigid[1]), macro_correction=1.0,
            rigid_range=rigid_q2_q1_range(ld, tolerance=ld_tolerance), limb_darkening=ld.label,
            flags=check_flags(["fourier_noise"]), skipped=tuple(skipped), mc=int(mc))
    preps = [_prepare(w, taper) for w in windows]
    lim = [usable_frequency_limit(p.noise_level / math.sqrt(2.0), resolution=resolution, lsf=lsf,
                                  step_kms=p.step, threshold=threshold) for p in preps]
    searches = [_search(p, sigma_top=t, threshold=threshold) for p, t in zip(preps, lim, strict=True)]
    detected = [i for i, s in enumerate(searches) if s.status != "no_line"]
    flags = []

    # ---- the mean profile
    if detected:
        mean = _combine([preps[i] for i in detected])
        top = usable_frequency_limit(mean.noise_level / math.sqrt(2.0), resolution=resolution, lsf=lsf,
                                     step_kms=mean.step, threshold=threshold)
        msearch = _search(mean, sigma_top=top, threshold=threshold)
    else:
        mean, top, msearch = None, 0.0, None

    # ---- Monte Carlo: one noise draw per pixel and realisation, shared by the lines and the mean profile
    draws = [gen.standard_normal((mc, p.x.size)) for p in preps] if mc > 0 else None

    def mc_of(prep, search, draw):
        if draw is None or not search.zeros:
            return None
        return _mc_zeros(prep, search.zeros, draw)

    # ---- macroturbulence: calibrate q1 (and q2) with the joint kernel
    q1, q2, correction, ratio = q_rigid[0], q_rigid[1], 1.0, None
    sigma1_ref = msearch.zeros[0] if msearch is not None and msearch.zeros else None
    have_zero = sigma1_ref is not None
    if sigma1_ref is None:
        ok1 = [searches[i].zeros[0] for i in detected if searches[i].zeros]
        have_zero = bool(ok1)
        sigma1_ref = float(np.median(ok1)) if ok1 else (msearch.sigma_noise if msearch is not None else None)
    if macroturbulence and macro_kind == "rt" and sigma1_ref:
        got = _macro_q(sigma1_ref, macroturbulence, ld, radial_fraction)
        # when the joint kernel has no zeros at all, macroturbulence is why none can be used: say so;
        # otherwise the flag speaks of zeros that were used (with only a limit there is nothing shifted)
        if got is None:
            ratio = math.inf
            flags.append("macro_shifts_zeros")
        else:
            (q1, q2), ratio = got
            correction = q1 / q_rigid[0]
            if ratio >= MACRO_RATIO_LIMIT and have_zero:
                flags.append("macro_shifts_zeros")

    def _known(v, step):
        """Transform of everything known for v sin i = v: rotation, given macroturbulence, instrument, pixel."""
        model = Broadening(vsini=v, limb_darkening=ld, macroturbulence=macroturbulence or 0.0, macro_kind=macro_kind,
                           radial_fraction=radial_fraction, resolution=resolution, lsf=lsf)
        return lambda s: model.transform(s) * pixel_transform(s, step)

    # ---- lines
    line_results = []
    for i, (p, s) in enumerate(zip(preps, searches, strict=True)):
        if s.status != "ok":
            limit = q1 / s.sigma_noise if (s.status == "no_zero" and s.sigma_noise > 0) else None
            line_results.append(LineZeros(p.label, s.status, s.ew_kms, s.ew_snr, limit_kms=limit))
            continue
        kw = _zero_values(s, mc_of(p, s, None if draws is None else draws[i]))
        chk = zero_check(p, kw["sigma1"], _known(q1 / kw["sigma1"], p.step), sigma_top=lim[i], threshold=threshold)
        if chk.marginal:
            kw["sigma1_err"] = max(kw["sigma1_err"], chk.error_model)
        kw.update(vsini_kms=q1 / kw["sigma1"], vsini_err_kms=q1 / kw["sigma1"] * kw["sigma1_err"] / kw["sigma1"])
        line_results.append(LineZeros(p.label, "ok", s.ew_kms, s.ew_snr, marginal=chk.marginal, **kw))
    good = [r for r in line_results if r.status == "ok"]
    v_lines = e_lines = None
    scale = 1.0
    if good:
        v_lines, e_lines, _ = _weighted_mean([r.vsini_kms for r in good], [r.vsini_err_kms for r in good])
    firm = [r for r in good if not r.marginal]  # a marginal line's error is understated: it would inflate S
    if len(firm) >= 3:
        scale = _weighted_mean([r.vsini_kms for r in firm], [r.vsini_err_kms for r in firm])[2]

    # ---- mean profile values
    step = max(p.step for p in preps)
    res = dict(q2_q1=None, q2_q1_err=None, sigma1=None, sigma1_err=None, sigma2=None, sigma2_err=None)
    v_mean = e_mean = None
    if msearch is not None and msearch.status == "ok":
        mdraw = None if draws is None else np.concatenate([draws[i] for i in detected], axis=1)
        res.update(_zero_values(msearch, mc_of(mean, msearch, mdraw)))
        check = zero_check(mean, res["sigma1"], _known(q1 / res["sigma1"], mean.step), sigma_top=top,
                           threshold=threshold)
        if check.marginal:  # the lobe that confirms the zero was selected for depth: model slope (Notes)
            flags.append("fourier_marginal")
            res["sigma1_err"] = max(res["sigma1_err"], check.error_model)
        v_mean = q1 / res["sigma1"]
        e_mean = v_mean * res["sigma1_err"] / res["sigma1"]

    # ---- adopted value (the mean profile's), or a limit: single lines are never adopted on their own
    vsini = err = limit = None
    if v_mean is not None:
        vsini, err = v_mean, e_mean
        if len(firm) >= 3:  # lines disagree more than their errors allow: blends, continuum (PDG scale factor)
            err = err * max(1.0, scale)
    if vsini is None:
        if msearch is None:
            flags.append("fourier_noise")
        else:
            s_lim = min(msearch.sigma_noise, top) if msearch.sigma_noise > 0 else top
            limit = q1 / s_lim if s_lim > 0 and math.isfinite(s_lim) else None
            element = _resolution_element(resolution, lsf, step)
            flags.append("fourier_unresolved" if limit is not None and limit < element else "fourier_noise")
    elif res["q2_q1"] is None:
        flags.append("fourier_no_q2")

    # ---- q2/q1 diagnostic
    rigid = rigid_q2_q1_range(ld, tolerance=ld_tolerance)
    if ratio is not None and math.isfinite(ratio) and ratio > 0:
        rigid = rigid_q2_q1_range(ld, tolerance=ld_tolerance, macro_ratio=ratio, radial_fraction=radial_fraction)
    if res["q2_q1"] is not None and "macro_shifts_zeros" not in flags and "fourier_marginal" not in flags:
        if res["q2_q1"] + 2.0 * res["q2_q1_err"] < rigid[0]:
            flags.append("differential_candidate" if macroturbulence is not None else "macro_unknown")
        elif res["q2_q1"] - 2.0 * res["q2_q1_err"] > rigid[2]:  # a mostly radial RT field raises q2/q1 (Notes)
            flags.append("antisolar_candidate" if macroturbulence is not None else "macro_unknown")

    # ---- the mean profile's transform, with the expected one, for figures
    spec = None
    if mean is not None:
        top_plot = min(0.5 / mean.step, 1.25 * top if math.isfinite(top) else 0.5 / mean.step)
        if res["sigma2"] is not None:
            top_plot = min(0.5 / mean.step, max(top_plot, 1.3 * res["sigma2"]))
        spec = _spectrum_of(mean, top_plot)
        v_exp = vsini if vsini is not None else limit
        if v_exp:
            expected = np.abs(_known(min(v_exp, 2000.0), step)(spec.sigma))
            spec = FourierSpectrum(spec.sigma, spec.amplitude, spec.real, spec.noise_level, expected)

    return FourierResult(
        vsini_kms=vsini, vsini_err_kms=err, is_limit=vsini is None and limit is not None, limit_kms=limit,
        vsini_lines_kms=v_lines, vsini_lines_err_kms=e_lines, n_lines=len(good),
        vsini_mean_profile_kms=v_mean, vsini_mean_profile_err_kms=e_mean,
        noise_level=mean.noise_level if mean is not None else math.nan, sigma_max=float(top),
        q1=float(q1), q2=float(q2), macro_correction=float(correction), rigid_range=rigid,
        limb_darkening=ld.label, flags=check_flags(flags), lines=tuple(line_results), skipped=tuple(skipped),
        spectrum=spec, mc=int(mc), **res,
    )
