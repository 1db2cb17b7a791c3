"""The Fourier first-zero estimate of v sin i and the q2/q1 differential-rotation diagnostic.

By the convolution theorem the transform of a rotationally broadened line is the product of the
rotation kernel's transform with those of the intrinsic, macroturbulent and instrumental profiles.
Those other factors have no zeros, so the zeros of the line's transform are the rotation kernel's:
:math:`\\sigma_k = q_k/(v\\sin i)`, with :math:`q_k` fixed by the limb-darkening law (Carroll 1933 [1]_;
Gray 2005 [2]_; Dravins, Lindegren & Torkelsson 1990 [3]_). The ratio :math:`q_2/q_1` of the first two
zeros is about 1.76 for a rigid rotator with linear limb darkening 0.6 and falls with solar-like
differential rotation (Reiners & Schmitt 2002 [4]_).

Steps (each documented in its function; the rules are summarised in ``docs/fourier.md``):

1. *Transform* (:func:`line_transform`). The continuum-normalised depression :math:`d(v) = 1 - F/F_c` of
   a window, multiplied by a cosine (Tukey) taper on its outer edges only, is Fourier-summed directly
   about the line centre: :math:`T(\\sigma) = \\sum_j w_j d_j \\Delta v_j e^{-2\\pi i\\sigma(v_j - v_0)}/W`,
   with :math:`W = \\sum_j w_j d_j\\Delta v_j` the (tapered) equivalent width, so :math:`T(0) = 1`. A direct
   sum evaluated on any frequency grid is identical to the FFT of the window zero-padded to any length,
   so zero padding is implicit and unlimited; the default grid oversamples the natural resolution
   :math:`1/L` (L = window length) eightfold.
2. *Zeros* (:func:`fourier_zeros`). They are the sign changes of :math:`\\mathrm{Re}\\,T`, the transform
   of the profile symmetrised about :math:`v_0`, located on the grid and refined by safeguarded Newton
   iteration on the exact sum (to 1e-12 relative), i.e. far beyond the grid spacing.
3. *Noise rules*. White noise of :math:`\\sigma_j` per pixel gives :math:`\\mathrm{Re}\\,T` a noise of rms
   :math:`\\eta(\\sigma) = [\\sum_j (w_j\\sigma_j\\Delta v_j)^2\\cos^2 2\\pi\\sigma x_j]^{1/2}/W`
   (:math:`\\approx \\sigma_n\\Delta v\\sqrt{N/2}/W`; the complex amplitude has :math:`\\sigma_n\\Delta v\\sqrt N/W`).
   A line is used only if :math:`W` exceeds ``threshold`` (3) times its own error. The usable frequency
   range ends at :math:`\\sigma_\\mathrm{max}`, where the instrument's transform falls below ``threshold``
   times the noise, and at the Nyquist frequency :math:`1/(2\\Delta v)`. A zero is accepted only when
   :math:`|\\mathrm{Re}\\,T|` stands clear of the noise (reaches ``threshold`` :math:`\\eta`) in the lobe
   before it and in the lobe after it, below :math:`\\sigma_\\mathrm{max}`. Otherwise there is no value,
   only the upper limit :math:`q_1/\\sigma_\\mathrm{noise}` (:math:`\\sigma_\\mathrm{noise}`: where the
   main lobe sinks below ``threshold`` :math:`\\eta`) with the flag ``fourier_unresolved`` (limit below
   the resolution element c/R) or ``fourier_noise``.
4. *v sin i* :math:`= q_1/\\sigma_1`, with :math:`q_1` from the closed-form transform (linear law) or the
   table ``kernels/q1_quadratic.ecsv`` (quadratic law). Radial-tangential macroturbulence acts element
   by element over the disc and does move the zeros; given :math:`\\zeta`, :math:`q_1` is replaced by
   the first zero of the joint rotation + macroturbulence kernel at :math:`\\zeta/v\\sin i`
   (:func:`macro_zero_positions`), solved self-consistently.
5. *Uncertainty*: Monte Carlo resampling of the noise (seeded), the line-to-line scatter, a weighted mean
   over lines next to the estimate from the mean profile of all lines.

References
----------
.. [1] Carroll, J. A. 1933, MNRAS 93, 478 (first use of Fourier zeros for rotation; from memory).
.. [2] Gray, D. F. 2005, *The Observation and Analysis of Stellar Photospheres*, 3rd ed., CUP, ch. 17-18.
.. [3] Dravins, D., Lindegren, L. & Torkelsson, U. 1990, A&A 237, 137 (volume and page from memory).
.. [4] Reiners, A. & Schmitt, J. H. M. M. 2002, A&A 384, 155; Reiners, A. 2006, A&A 446, 267 (from memory).
.. [5] Harris, F. J. 1978, Proc. IEEE 66, 51 (the Tukey, cosine-tapered window; from memory).
.. [6] Stoehr, F. et al. 2008, ASP Conf. Ser. 394, 505 (DER_SNR noise estimate; from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields
from functools import lru_cache

import numpy as np

from .errors import InputError, MeasurementError
from .grid import C_KMS, pixel_edges
from .limbdark import as_limb_darkening, bessel_a, bessel_b, bessel_c

__all__ = [
    "DEFAULT_TAPER",
    "DEFAULT_THRESHOLD",
    "MACRO_RATIO_LIMIT",
    "ZERO_TABLE_NAME",
    "FourierWindow",
    "FourierSpectrum",
    "ZeroSearch",
    "LineZeros",
    "FourierResult",
    "cosine_taper",
    "transform_noise_level",
    "usable_frequency_limit",
    "line_transform",
    "fourier_zeros",
    "rotation_zeros",
    "macro_zero_positions",
    "rigid_q2_q1_range",
    "build_zero_table",
    "write_zero_table",
    "load_zero_table",
    "spectrum_windows",
    "fourier_vsini",
]

#: Fraction of the window, at each end, inside the cosine taper.
DEFAULT_TAPER = 0.1
#: Signal-to-noise a line's equivalent width and the lobes around a zero must reach (in noise rms units).
DEFAULT_THRESHOLD = 3.0
#: From this zeta/vsini on, radial-tangential macroturbulence lowers a rigid rotator's q2/q1 by 0.02 or more
#: (1.741 instead of 1.761 at eps = 0.6, computed with the joint kernel; more than the whole +-0.1 limb-
#: darkening band): q2/q1 is then not used as a differential-rotation diagnostic.
MACRO_RATIO_LIMIT = 0.25
#: File name of the quadratic-law zero table in the package data (top-level ``kernels/``).
ZERO_TABLE_NAME = "q1_quadratic.ecsv"

_PAD = 8  # frequency-grid oversampling of 1/L
_MAX_MATRIX = 2_000_000  # largest (frequencies x pixels) block evaluated at once
_MIN_PIXELS = 16
_TWO_PI = 2.0 * np.pi
_MAD_TO_SIGMA = 1.482602  # median absolute deviation -> standard deviation, normal noise (common practice)


# --------------------------------------------------------------------------------------------- inputs


def _kms(value):
    """Plain floats in km/s from floats (already km/s) or an astropy speed Quantity."""
    if hasattr(value, "unit"):
        return value.to_value("km/s")
    return value


def _scatter_noise(d):
    """Per-pixel noise from the second difference of pixels two apart (DER_SNR, Stoehr et al. 2008 [6]_).

    :math:`1.482602/\\sqrt 6\\;\\mathrm{median}|2d_i - d_{i-2} - d_{i+2}|`: smooth line shapes cancel, so it
    measures the pixel-to-pixel (continuum) scatter; unresolved structure counts as noise (conservative).
    """
    d = d[np.isfinite(d)]
    if d.size < 5:
        return 0.0
    return float(_MAD_TO_SIGMA / np.sqrt(6.0) * np.median(np.abs(2.0 * d[2:-2] - d[:-4] - d[4:])))


@dataclass(frozen=True, eq=False)
class FourierWindow:
    """The continuum-normalised depression of one line on a (nearly) uniform velocity grid.

    Parameters
    ----------
    velocity_kms : (N,) array_like, km/s
        Strictly increasing pixel centres, steps equal within a factor 1.5 (each pixel is weighted by its
        own width). An astropy speed Quantity is converted.
    depression : (N,) array_like
        :math:`1 - F/F_c`; NaN marks a bad pixel (filled by linear interpolation, at most 25 %).
    noise : float or (N,) array_like, optional
        One-sigma noise of the depression per pixel. None: estimated from the pixel-to-pixel scatter of
        the window (:func:`_scatter_noise`), recorded in :attr:`noise_estimated`.
    centre_kms : float, optional
        Line centre; default the centroid of the depression over the untapered part of the window.
    label : str
        Name for tables and messages.
    """

    velocity_kms: np.ndarray
    depression: np.ndarray
    noise: object = None
    centre_kms: float | None = None
    label: str = ""
    n_filled: int = field(init=False, default=0)
    noise_estimated: bool = field(init=False, default=False)

    def __post_init__(self):
        where = f"Fourier window {self.label!r}" if self.label else "Fourier window"
        v = np.array(_kms(self.velocity_kms), dtype=float)
        d = np.array(self.depression, dtype=float)
        if v.ndim != 1 or d.shape != v.shape:
            raise InputError(f"{where}: velocity and depression must be 1-D of equal length, got shapes "
                             f"{v.shape} and {d.shape}")
        if v.size < _MIN_PIXELS:
            raise InputError(f"{where}: {v.size} pixels; need at least {_MIN_PIXELS}: widen the window")
        step = np.diff(v)
        if not (np.all(np.isfinite(v)) and np.all(step > 0)):
            raise InputError(f"{where}: velocities must be finite and strictly increasing; sort the pixels")
        if step.max() > 1.5 * step.min():
            raise InputError(f"{where}: pixel steps vary from {step.min():.4g} to {step.max():.4g} km/s; "
                             "resample onto a uniform velocity grid first")
        estimated = self.noise is None
        if estimated:
            n = np.full(v.shape, _scatter_noise(d))
        else:
            n = np.array(np.broadcast_to(np.asarray(self.noise, dtype=float), v.shape))
            if np.any(n[np.isfinite(n)] < 0):
                raise InputError(f"{where}: negative noise values; give one-sigma noise >= 0 per pixel")
        bad = ~(np.isfinite(d) & np.isfinite(n))
        if bad.sum() > 0.25 * v.size:
            raise InputError(f"{where}: {int(bad.sum())} of {v.size} pixels are NaN (limit 25 %); "
                             "choose a window outside the gap")
        if bad.any():
            d[bad] = np.interp(v[bad], v[~bad], d[~bad])
            n[bad] = np.interp(v[bad], v[~bad], n[~bad])
        centre = self.centre_kms
        if centre is not None:
            centre = float(_kms(centre))
            if not (np.isfinite(centre) and v[0] <= centre <= v[-1]):
                raise InputError(f"{where}: centre_kms={centre} lies outside the window {v[0]:.4g}..{v[-1]:.4g}")
        for arr in (v, d, n):
            arr.flags.writeable = False
        for key, value in (("velocity_kms", v), ("depression", d), ("noise", n), ("centre_kms", centre),
                           ("label", str(self.label)), ("n_filled", int(bad.sum())),
                           ("noise_estimated", estimated)):
            object.__setattr__(self, key, value)

    @property
    def step_kms(self):
        """Largest pixel step, km/s (it sets the Nyquist frequency :math:`1/(2\\Delta v)`)."""
        return float(np.max(np.diff(self.velocity_kms)))


def _as_window(item, i):
    """A :class:`FourierWindow` from a window, a tuple ``(velocity, depression[, noise[, centre]])``, or an
    object with ``velocity``/``velocity_kms``, ``depression`` and optional ``noise``/``centre_kms``."""
    if isinstance(item, FourierWindow):
        return item
    if isinstance(item, tuple) and 2 <= len(item) <= 4:
        return FourierWindow(*item, label=f"window {i}")
    vel = getattr(item, "velocity_kms", getattr(item, "velocity", None))
    dep = getattr(item, "depression", None)
    if vel is None or dep is None:
        raise InputError(f"fourier: window {i} ({type(item).__name__}) has no velocity and depression; give "
                         "FourierWindow objects, (velocity, depression[, noise]) tuples or a Spectrum")
    return FourierWindow(vel, dep, getattr(item, "noise", None), getattr(item, "centre_kms", None),
                         str(getattr(item, "label", f"window {i}")))


# --------------------------------------------------------------------------------------------- transforms


def cosine_taper(n, fraction=DEFAULT_TAPER):
    """Tukey window: 1 in the middle, a half-cosine roll-off over ``fraction`` of the pixels at each end.

    Parameters
    ----------
    n : int
        Number of pixels.
    fraction : float
        Tapered fraction at *each* end, 0 (no taper) to 0.5.

    Notes
    -----
    :math:`w = \\tfrac12[1 - \\cos(\\pi t/f)]` within a fraction f of either end (t: position along the window
    from that end, 0..1), the cosine-tapered (Tukey) window of Harris (1978) [5]_; equal to
    ``scipy.signal.windows.tukey(n, 2 * fraction)``. Only
    the outer edges are tapered, so a line well inside the window is left untouched, while a continuum
    offset or a neighbour's wing at the edges does not leak into the transform as a sharp-edged box.
    """
    if not 0.0 <= fraction <= 0.5:
        raise InputError(f"taper fraction must be within 0..0.5, got {fraction}")
    n = int(n)
    w = np.ones(n)
    if fraction > 0 and n > 1:
        t = np.arange(n) / (n - 1)  # 0..1 along the window
        edge = np.minimum(t, 1.0 - t) / fraction  # 0 at the ends, 1 where the taper stops
        taper = edge < 1.0
        w[taper] = 0.5 * (1.0 - np.cos(np.pi * edge[taper]))
    return w


def transform_noise_level(noise_sigma, step_kms, n_pixels):
    """rms of the Fourier amplitude of white noise: :math:`\\sigma_n\\,\\Delta v\\,\\sqrt N` (km/s).

    Parameters
    ----------
    noise_sigma : float
        Noise per pixel, continuum units.
    step_kms : float
        Pixel step, km/s.
    n_pixels : int
        Pixels summed.

    Notes
    -----
    :math:`F(\\sigma) = \\Delta v\\sum_j n_j e^{-2\\pi i\\sigma v_j}` of independent noise :math:`n_j` has
    :math:`\\langle|F|^2\\rangle = \\Delta v^2 N \\sigma_n^2` at every frequency (white); its real part has
    half that variance away from :math:`\\sigma = 0`. Divide by the equivalent width W (km/s) for the level
    relative to a line's transform. Derived in the project's reference notes (section 9).
    """
    return float(noise_sigma) * float(step_kms) * math.sqrt(int(n_pixels))


def _gaussian_limit(level, b_kms):
    """Frequency where :math:`e^{-(\\pi b\\sigma)^2}` falls to ``level`` (inf for b = 0, 0 for level >= 1)."""
    if level >= 1.0:
        return 0.0
    if b_kms <= 0 or level <= 0:
        return math.inf
    return math.sqrt(math.log(1.0 / level)) / (math.pi * b_kms)


def usable_frequency_limit(noise_level, *, resolution=None, lsf=None, step_kms=None, threshold=DEFAULT_THRESHOLD):
    """Highest frequency (s/km) at which the instrument still lets a line's transform stand clear of noise.

    Parameters
    ----------
    noise_level : float
        rms of the noise of the (normalised) transform, relative to its value at :math:`\\sigma = 0`.
    resolution : float, optional
        Resolving power of a Gaussian instrument profile of FWHM c/R.
    lsf : vsini.model.TabulatedLSF, optional
        Tabulated instrument profile (used instead of ``resolution``).
    step_kms : float, optional
        Pixel step: the limit never exceeds the Nyquist frequency :math:`1/(2\\Delta v)`.
    threshold : float
        The instrument transform must exceed ``threshold * noise_level``.

    Returns
    -------
    float
        0 when even :math:`\\sigma = 0` is buried; inf without instrument and pixel step.

    Notes
    -----
    Every other factor of a line's transform (rotation, intrinsic profile, macroturbulence) has modulus
    at most 1, so beyond the frequency where the instrument's transform alone sinks below
    ``threshold * noise_level`` nothing of the line can be seen. For a Gaussian of 1/e half-width b the
    transform is :math:`e^{-(\\pi b\\sigma)^2}` (:func:`vsini.kernels.gaussian_transform`), giving the
    closed form :math:`\\sigma_\\mathrm{max} = \\sqrt{\\ln[1/(t\\eta)]}/(\\pi b)`.
    """
    from .kernels import instrument_width

    level = threshold * float(noise_level)
    nyquist = 0.5 / step_kms if step_kms else math.inf
    if level >= 1.0:
        return 0.0
    if lsf is not None:
        top = nyquist if math.isfinite(nyquist) else 4.0 / max(lsf.half_extent, 1e-3)
        s = np.linspace(0.0, top, 4001)
        low = np.flatnonzero(np.abs(lsf.transform(s)) < level)
        limit = float(s[low[0]]) if low.size else math.inf
    elif resolution is not None:
        limit = _gaussian_limit(level, instrument_width(resolution))
    else:
        limit = math.inf
    return min(limit, nyquist)


@dataclass(frozen=True, eq=False)
class _Prepared:
    """A window (or a weighted set of windows) ready for the Fourier sum, normalised so that T(0) = 1."""

    x: np.ndarray  # pixel offsets from the line centre, km/s
    a: np.ndarray  # taper * depression * pixel width / W
    b: np.ndarray  # taper * noise * pixel width / W
    ew: float  # tapered equivalent width W, km/s
    ew_err: float  # its noise, km/s
    centre: float
    span: float  # window length L, km/s
    step: float  # largest pixel step, km/s
    label: str = ""

    @property
    def noise_level(self):
        """rms of the complex noise of T relative to T(0): :math:`\\sqrt{\\sum b^2}`."""
        return float(np.sqrt(np.sum(self.b**2)))


def _prepare(window, taper):
    v, d, n = window.velocity_kms, window.depression, window.noise
    width = np.diff(pixel_edges(v))
    w = cosine_taper(v.size, taper)
    a, b = w * d * width, w * n * width
    ew, ew_err = float(a.sum()), float(np.sqrt(np.sum(b**2)))
    centre = window.centre_kms
    if centre is None:
        inner = w >= 1.0 - 1e-12
        mass = float(np.sum((d * width)[inner]))
        centre = float(np.sum((d * width * v)[inner]) / mass) if mass > 0 else 0.5 * (v[0] + v[-1])
        centre = float(np.clip(centre, v[0], v[-1]))
    scale = ew if ew > 0 else 1.0
    return _Prepared(v - centre, a / scale, b / scale, ew, ew_err, centre, float(v[-1] - v[0] + width.mean()),
                     window.step_kms, window.label)


def _combine(preps):
    """The EW-normalised mean profile: inverse-variance weighted mean of the normalised transforms.

    Weights :math:`\\lambda_i \\propto (W_i/\\delta W_i)^2` (equal when a window is noiseless); the result
    carries the weighted mean equivalent width and the combined signal-to-noise :math:`\\sqrt{\\sum_i
    (W_i/\\delta W_i)^2}`.
    """
    if len(preps) == 1:
        return preps[0]
    noiseless = any(p.ew_err <= 0 for p in preps)
    snr2 = np.array([0.0 if noiseless else (p.ew / p.ew_err) ** 2 for p in preps])
    lam = np.ones(len(preps)) if noiseless else snr2
    lam = lam / lam.sum()
    ew = float(sum(p.ew * wt for p, wt in zip(preps, lam, strict=True)))
    ew_err = 0.0 if noiseless else ew / math.sqrt(float(snr2.sum()))
    return _Prepared(np.concatenate([p.x for p in preps]),
                     np.concatenate([wt * p.a for p, wt in zip(preps, lam, strict=True)]),
                     np.concatenate([wt * p.b for p, wt in zip(preps, lam, strict=True)]),
                     ew, ew_err, 0.0, max(p.span for p in preps), max(p.step for p in preps), "mean profile")


def _sums(sigma, x, coef, b2=None, imag=False):
    """:math:`\\sum_j c_j\\cos 2\\pi\\sigma x_j` (rows of ``coef``), optionally the imaginary part and the
    noise variance :math:`\\sum_j b_j^2\\cos^2 2\\pi\\sigma x_j`, chunked over frequencies."""
    coef = np.atleast_2d(coef)
    k, n = sigma.size, x.size
    re = np.empty((coef.shape[0], k))
    im = np.empty((coef.shape[0], k)) if imag else None
    var = np.empty(k) if b2 is not None else None
    chunk = max(1, _MAX_MATRIX // max(n, 1))
    for i in range(0, k, chunk):
        ph = _TWO_PI * np.outer(sigma[i : i + chunk], x)
        c = np.cos(ph)
        re[:, i : i + chunk] = coef @ c.T
        if var is not None:
            var[i : i + chunk] = (c * c) @ b2
        if imag:
            im[:, i : i + chunk] = -(coef @ np.sin(ph).T)
    return re, im, var


def _refine_roots(x, coef, lo, hi, *, rtol=1e-12, max_iter=60):
    """Roots of :math:`g(\\sigma) = \\sum_j c_j\\cos 2\\pi\\sigma x_j` in brackets [lo, hi], one per row.

    Safeguarded Newton iteration on the exact sum (bisection whenever a step leaves the bracket).

    Returns
    -------
    root, slope : (m,) ndarray
        The roots and :math:`g'` there.
    """
    coef = np.atleast_2d(coef)
    lo, hi = np.array(lo, dtype=float), np.array(hi, dtype=float)
    tx = _TWO_PI * x[None, :]

    def f(s):
        ph = s[:, None] * tx
        return np.sum(coef * np.cos(ph), axis=1), -np.sum(coef * tx * np.sin(ph), axis=1)

    flo, _ = f(lo)
    fhi, _ = f(hi)
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.where(fhi != flo, lo - flo * (hi - lo) / (fhi - flo), 0.5 * (lo + hi))
    s = np.where((s > lo) & (s < hi), s, 0.5 * (lo + hi))
    g, gp = f(s)
    for _ in range(max_iter):
        exact = g == 0
        left = (np.sign(g) == np.sign(flo)) & ~exact
        lo, flo = np.where(left, s, lo), np.where(left, g, flo)
        hi = np.where(left | exact, hi, s)
        with np.errstate(divide="ignore", invalid="ignore"):
            new = s - g / gp
        bad = ~np.isfinite(new) | (new <= lo) | (new >= hi)
        new = np.where(exact, s, np.where(bad, 0.5 * (lo + hi), new))
        done = np.abs(new - s) <= rtol * np.abs(s)
        s = new
        g, gp = f(s)
        if np.all(done):
            break
    return s, gp


# --------------------------------------------------------------------------------------------- spectra, zeros


@dataclass(frozen=True, eq=False)
class FourierSpectrum:
    """A transform on a frequency grid, for tables and figures.

    Attributes
    ----------
    sigma : (K,) ndarray, s/km
    amplitude : (K,) ndarray
        :math:`|T(\\sigma)|`, normalised to 1 at :math:`\\sigma = 0`.
    real : (K,) ndarray
        :math:`\\mathrm{Re}\\,T` about the line centre (the transform of the symmetrised profile).
    noise_level : float
        rms of the noise of :math:`|T|` (complex; the real part has :math:`1/\\sqrt 2` of it).
    expected : (K,) ndarray or None
        :math:`|\\hat K|` of rotation x instrument x pixel (x macroturbulence) for the derived v sin i, or None.
    """

    sigma: np.ndarray
    amplitude: np.ndarray
    real: np.ndarray
    noise_level: float
    expected: np.ndarray | None = None


def _spectrum_of(prep, top, pad=_PAD):
    dsig = 1.0 / (pad * prep.span)
    sig = np.arange(0.0, top + 0.5 * dsig, dsig)
    re, im, _ = _sums(sig, prep.x, prep.a, imag=True)
    return FourierSpectrum(sig, np.hypot(re[0], im[0]), re[0], prep.noise_level)


def line_transform(window, *, taper=DEFAULT_TAPER, sigma=None, pad=_PAD):
    """Fourier amplitude of one line window against frequency.

    Parameters
    ----------
    window : FourierWindow or tuple
        See :class:`FourierWindow`.
    taper : float
        Tapered fraction at each end (:func:`cosine_taper`).
    sigma : (K,) ndarray, optional
        Frequencies (s/km). Default: 0 to the Nyquist frequency in steps of :math:`1/(\\mathrm{pad}\\,L)`.
    pad : int
        Oversampling of the natural frequency resolution :math:`1/L` (the zero-padding factor).

    Returns
    -------
    FourierSpectrum
    """
    prep = _prepare(_as_window(window, 0), taper)
    if sigma is None:
        return _spectrum_of(prep, 0.5 / prep.step, pad)
    sig = np.asarray(sigma, dtype=float)
    re, im, _ = _sums(sig, prep.x, prep.a, imag=True)
    return FourierSpectrum(sig, np.hypot(re[0], im[0]), re[0], prep.noise_level)


@dataclass(frozen=True)
class ZeroSearch:
    """The zeros of one transform and the noise limits that apply to them.

    Attributes
    ----------
    zeros : tuple of float
        Accepted zeros :math:`\\sigma_k` (s/km), in order (the first ``len(zeros)`` of them).
    zeros_err : tuple of float
        First-order errors :math:`\\eta(\\sigma_k)/|\\partial_\\sigma\\mathrm{Re}\\,T|` (s/km).
    ew_kms, ew_snr : float
        Tapered equivalent width (km/s) and its signal-to-noise ratio.
    centre_kms : float
        Line centre used for the symmetrised transform.
    noise_level : float
        rms of the complex noise of the normalised transform, :math:`\\sigma_n\\Delta v\\sqrt N/W`.
    sigma_max : float
        End of the usable frequency range (instrument and Nyquist), s/km.
    sigma_noise : float
        Where :math:`\\mathrm{Re}\\,T` first falls below ``threshold`` times its noise (<= sigma_max).
    status : {'ok', 'no_line', 'no_zero'}
        'no_line': the equivalent width is below ``threshold`` times its error; 'no_zero': no zero stands
        clear of the noise below ``sigma_max``.
    """

    zeros: tuple
    zeros_err: tuple
    ew_kms: float
    ew_snr: float
    centre_kms: float
    noise_level: float
    sigma_max: float
    sigma_noise: float
    status: str


def _search(prep, *, sigma_top, threshold, count=2, pad=_PAD):
    """Zero search on a prepared transform (see :func:`fourier_zeros`)."""
    snr_ew = prep.ew / prep.ew_err if prep.ew_err > 0 else (math.inf if prep.ew > 0 else 0.0)
    base = dict(ew_kms=prep.ew, ew_snr=float(snr_ew), centre_kms=prep.centre, noise_level=prep.noise_level,
                sigma_max=float(sigma_top))
    if not snr_ew >= threshold or sigma_top <= 0:
        return ZeroSearch((), (), sigma_noise=0.0, status="no_line", **base)
    dsig = 1.0 / (pad * prep.span)
    n_grid = int(min(sigma_top / dsig, 200_000)) + 1
    grid = np.linspace(0.0, (n_grid - 1) * dsig, n_grid)
    g, _, var = _sums(grid, prep.x, prep.a, prep.b**2)
    g = g[0]
    with np.errstate(divide="ignore", invalid="ignore"):
        snr = np.where(var > 0, g / np.sqrt(var), np.sign(g) * np.inf)
    below = np.flatnonzero(snr < threshold)
    sigma_noise = float(grid[below[0]]) if below.size else float(grid[-1])
    pos = g >= 0
    cross = np.flatnonzero(pos[:-1] != pos[1:])
    bounds = np.concatenate(([0], cross + 1, [grid.size]))
    accepted = []
    for k in range(min(count, cross.size)):
        before = np.max(np.abs(snr[bounds[k] : bounds[k + 1]]))
        after = np.max(np.abs(snr[bounds[k + 1] : bounds[k + 2]]))
        if before >= threshold and after >= threshold:
            accepted.append(int(cross[k]))
        else:
            break
    if not accepted:
        return ZeroSearch((), (), sigma_noise=sigma_noise, status="no_zero", **base)
    idx = np.array(accepted)
    roots, slope = _refine_roots(prep.x, prep.a, grid[idx], grid[idx + 1])
    var_r = (np.cos(_TWO_PI * np.outer(roots, prep.x)) ** 2) @ prep.b**2
    with np.errstate(divide="ignore"):
        err = np.sqrt(var_r) / np.abs(slope)
    return ZeroSearch(tuple(float(r) for r in roots), tuple(float(e) for e in err), sigma_noise=sigma_noise,
                      status="ok", **base)


def fourier_zeros(velocity, depression, noise_sigma=None, *, centre_kms=None, resolution=None, lsf=None,
                  taper=DEFAULT_TAPER, threshold=DEFAULT_THRESHOLD, count=2, pad=_PAD):
    """First zeros of a line's Fourier transform, with the noise and resolution rules applied.

    Parameters
    ----------
    velocity : (N,) ndarray, km/s
        Uniform (or nearly uniform) pixel centres.
    depression : (N,) ndarray
        Continuum-normalised depression :math:`1 - F/F_c`.
    noise_sigma : float or (N,) ndarray, optional
        Noise per pixel; None: estimated from the pixel-to-pixel scatter.
    centre_kms : float, optional
        Line centre (default: centroid).
    resolution : float, optional
        Resolving power (Gaussian instrument): limits the usable frequency range.
    lsf : vsini.model.TabulatedLSF, optional
        Tabulated instrument profile instead of ``resolution``.
    taper : float
        Cosine-tapered fraction at each end of the window.
    threshold : float
        Noise multiple a line and the lobes around a zero must reach.
    count : int
        Zeros sought (1 or 2 for v sin i and q2/q1).
    pad : int
        Frequency-grid oversampling of :math:`1/L`.

    Returns
    -------
    ZeroSearch

    Notes
    -----
    Zeros are sign changes of :math:`\\mathrm{Re}\\,T(\\sigma)`, the transform of the profile symmetrised
    about its centre. An error :math:`\\delta` in the centre multiplies :math:`\\mathrm{Re}\\,T` of a
    symmetric profile by :math:`\\cos 2\\pi\\sigma\\delta` and so leaves its zeros in place; the modulus
    :math:`|T|`, by contrast, never reaches zero in the presence of noise and its minima are biased
    upwards. A zero is accepted when :math:`|\\mathrm{Re}\\,T|` reaches ``threshold`` times its noise in
    the lobe before it and in the lobe after it, within the usable range
    (:func:`usable_frequency_limit`); the second zero is looked at only when the first is accepted.
    """
    if not 1 <= count <= 5:
        raise InputError(f"fourier_zeros: count must be within 1..5, got {count}")
    win = FourierWindow(velocity, depression, noise_sigma, centre_kms)
    prep = _prepare(win, taper)
    top = usable_frequency_limit(prep.noise_level / math.sqrt(2.0), resolution=resolution, lsf=lsf,
                                 step_kms=prep.step, threshold=threshold)
    return _search(prep, sigma_top=top, threshold=threshold, count=count, pad=pad)


def _mc_zeros(prep, nominal, draws, pad=_PAD):
    """Zeros of noise-resampled transforms near the nominal ones: (m, len(nominal)) array, NaN where lost.

    Each realisation adds :math:`b_j\\,\\xi_j` (standard normal :math:`\\xi`) to the coefficients; the sign
    change nearest each nominal zero, within half the spacing of the zeros, is refined on the exact sum.
    """
    nominal = np.asarray(nominal, dtype=float)
    coef = prep.a[None, :] + prep.b[None, :] * draws
    spacing = min(nominal[0], np.min(np.diff(nominal)) if nominal.size > 1 else nominal[0])
    dsig = 1.0 / (pad * prep.span)
    lo_s, hi_s = max(nominal[0] - 0.5 * spacing, dsig), nominal[-1] + 0.5 * spacing
    grid = np.arange(lo_s, hi_s + dsig, dsig)
    g, _, _ = _sums(grid, prep.x, coef)
    pos = g >= 0
    change = pos[:, :-1] != pos[:, 1:]
    mid = 0.5 * (grid[:-1] + grid[1:])
    out = np.full((draws.shape[0], nominal.size), np.nan)
    rows = np.arange(draws.shape[0])
    for k, z in enumerate(nominal):
        dist = np.where(change, np.abs(mid - z)[None, :], np.inf)
        j = np.argmin(dist, axis=1)
        ok = dist[rows, j] < 0.5 * spacing
        if ok.any():
            r, _ = _refine_roots(prep.x, coef[ok], grid[j[ok]], grid[j[ok] + 1], rtol=1e-9)
            out[ok, k] = r
    return out


def _spread(values):
    """Half the 16-84 percentile range of the finite values (a standard deviation robust to a few outliers)."""
    v = values[np.isfinite(values)]
    if v.size < 5:
        return math.nan
    p16, p84 = np.percentile(v, [15.865, 84.135])
    return float(0.5 * (p84 - p16))


# --------------------------------------------------------------------------------------------- zero positions q_k


def _quadratic_numerator(u, a, b):
    """Transform of the quadratic-law kernel times its flux normalisation (same zeros), any (a, b)."""
    return (1.0 - a - b) * bessel_a(u) + (2.0 / 3.0) * (a + 2.0 * b) * bessel_b(u) - 0.5 * b * bessel_c(u)


def _first_roots(func, count, u_max=30.0, n=6000, levels=2, sub=64):
    """First ``count`` positive roots of a vectorised ``func`` (NaN where missing).

    Sign changes on a grid of ``n`` points up to ``u_max``; each bracket is then resampled ``levels`` times
    with ``sub`` points (all brackets in one call) and the root linearly interpolated in the last interval
    (relative error ~1e-11 for smooth functions with the defaults).
    """
    u = np.linspace(1e-3, u_max, n)
    g = func(u)
    idx = np.flatnonzero(np.sign(g[:-1]) * np.sign(g[1:]) < 0)[:count]
    out = np.full(count, np.nan)
    if idx.size == 0:
        return out
    lo, hi = u[idx], u[idx + 1]
    t = np.linspace(0.0, 1.0, sub + 1)
    for _ in range(levels):
        pts = lo[:, None] + (hi - lo)[:, None] * t[None, :]
        val = func(pts.ravel()).reshape(pts.shape)
        j = np.argmax(np.sign(val[:, :-1]) * np.sign(val[:, 1:]) <= 0, axis=1)
        rows = np.arange(lo.size)
        lo, hi = pts[rows, j], pts[rows, j + 1]
        f_lo, f_hi = val[rows, j], val[rows, j + 1]
    with np.errstate(invalid="ignore", divide="ignore"):
        root = np.where(f_hi != f_lo, lo - f_lo * (hi - lo) / (f_hi - f_lo), 0.5 * (lo + hi))
    out[: idx.size] = root
    return out


def _quadratic_roots(a, b, count=2):
    """First ``count`` roots u of :func:`_quadratic_numerator` for arrays of (a, b): grid bracketing, then a
    vectorised Illinois regula falsi to a bracket below 1e-14 (every row at once)."""
    a, b = np.asarray(a, dtype=float)[:, None], np.asarray(b, dtype=float)[:, None]
    u = np.linspace(1e-3, 6.0 * np.pi, 1900)  # q2 < 1.5 for every law in the table: two roots below u = 6 pi
    basis = (bessel_a(u), bessel_b(u), bessel_c(u))
    g = (1.0 - a - b) * basis[0] + (2.0 / 3.0) * (a + 2.0 * b) * basis[1] - 0.5 * b * basis[2]
    change = np.sign(g[:, :-1]) * np.sign(g[:, 1:]) < 0
    out = np.full((a.shape[0], count), np.nan)
    for k in range(count):
        idx = np.argmax(np.cumsum(change, axis=1) == k + 1, axis=1)
        has = np.sum(change, axis=1) > k
        lo, hi = u[idx], u[idx + 1]
        flo, fhi = g[np.arange(a.shape[0]), idx], g[np.arange(a.shape[0]), idx + 1]
        side = np.zeros(lo.shape, dtype=int)
        for _ in range(40):  # Illinois regula falsi (superlinear; the kept end's value is halved when kept twice)
            with np.errstate(invalid="ignore", divide="ignore"):
                m = np.where(fhi != flo, (lo * fhi - hi * flo) / (fhi - flo), 0.5 * (lo + hi))
            fm = _quadratic_numerator(m, a[:, 0], b[:, 0])
            left = np.sign(fm) == np.sign(flo)
            flo, fhi = np.where(~left & (side == -1), 0.5 * flo, flo), np.where(left & (side == 1), 0.5 * fhi, fhi)
            lo, flo = np.where(left, m, lo), np.where(left, fm, flo)
            hi, fhi = np.where(left, hi, m), np.where(left, fhi, fm)
            side = np.where(left, 1, -1)
            if np.all((hi - lo <= 1e-15 * hi) | (fm == 0) | ~has):
                break
        out[:, k] = np.where(has, np.where(fm == 0, m, 0.5 * (lo + hi)), np.nan)
    return out


#: Grid of the quadratic-law table (a, b), step 0.05: a wide rectangle around the usual coefficients. Points
#: with a + b > 1 (negative limb intensity) are mathematical extensions kept only as interpolation support.
_TABLE_A = np.round(np.arange(-0.1, 1.2 + 1e-9, 0.05), 10) + 0.0
_TABLE_B = np.round(np.arange(-0.5, 1.0 + 1e-9, 0.05), 10) + 0.0


def build_zero_table(a_values=None, b_values=None):
    """The table of the first two zeros :math:`q_1, q_2` of the quadratic-law rotation transform.

    Parameters
    ----------
    a_values, b_values : 1-D array_like, optional
        Grid of the coefficients of :math:`I = 1 - a(1-\\mu) - b(1-\\mu)^2`; default a = -0.1..1.2,
        b = -0.5..1.0 in steps of 0.05.

    Returns
    -------
    astropy.table.Table
        Columns ``a``, ``b``, ``q1``, ``q2`` (cycles: :math:`\\sigma_k v\\sin i`), ``physical`` (limb
        intensity >= 0), with provenance in ``meta``.

    Notes
    -----
    The zeros are the roots of the closed-form transform
    :math:`(1-a-b)\\,2J_1(u)/u + \\tfrac23(a+2b)\\,3j_1(u)/u - \\tfrac b2\\,8J_2(u)/u^2`
    (:meth:`vsini.limbdark.LimbDarkening.transform`), bracketed on a grid and refined by Illinois regula
    falsi to a bracket below 1e-14, divided by :math:`2\\pi`. For b = 0 they reduce to the linear law,
    checked in the tests against the polynomial of Dravins, Lindegren & Torkelsson (1990) [3]_. Regenerate
    the shipped file with ``python -m vsini.fourier`` (see :func:`write_zero_table`).
    """
    from astropy.table import Table

    a_values = _TABLE_A if a_values is None else np.asarray(a_values, dtype=float)
    b_values = _TABLE_B if b_values is None else np.asarray(b_values, dtype=float)
    aa, bb = (g.ravel() for g in np.meshgrid(a_values, b_values, indexing="ij"))
    u = _quadratic_roots(aa, bb)
    mu = np.linspace(0.0, 1.0, 101)[:, None]
    physical = np.all(1.0 - aa * (1 - mu) - bb * (1 - mu) ** 2 >= -1e-12, axis=0)
    t = Table([aa, bb, u[:, 0] / _TWO_PI, u[:, 1] / _TWO_PI, physical], names=("a", "b", "q1", "q2", "physical"))
    for col, text in (("a", "linear coefficient of I = 1 - a(1-mu) - b(1-mu)^2"),
                      ("b", "quadratic coefficient"),
                      ("q1", "first zero of the rotation kernel's transform, sigma_1 * vsini (cycles)"),
                      ("q2", "second zero, sigma_2 * vsini (cycles)"),
                      ("physical", "limb intensity >= 0 (rows with False are interpolation support only)")):
        t[col].description = text
    t.meta.update({
        "title": "First two Fourier zeros of the quadratic-limb-darkening rotation kernel",
        "source": "roots of the closed-form transform (vsini.limbdark.LimbDarkening.transform; project reference "
                  "notes section 4), bracketed on a grid and refined by Illinois regula falsi to 1e-14; b = 0 "
                  "agrees with the Dravins, Lindegren & Torkelsson 1990 (A&A 237, 137) polynomial to 2e-4",
        "regenerate": "python -m vsini.fourier   (vsini.fourier.write_zero_table)",
        "grid": f"a {a_values[0]:g}..{a_values[-1]:g}, b {b_values[0]:g}..{b_values[-1]:g}",
    })
    return t


def write_zero_table(path=None):
    """Write :func:`build_zero_table` as ECSV (default: ``kernels/q1_quadratic.ecsv`` of the source tree).

    Returns the path written. Run as ``python -m vsini.fourier`` from a source checkout.
    """
    from importlib.resources import files

    target = files("vsini.data").joinpath(ZERO_TABLE_NAME) if path is None else path
    build_zero_table().write(str(target), format="ascii.ecsv", overwrite=True)
    load_zero_table.cache_clear()
    _zeros_cached.cache_clear()
    return str(target)


@lru_cache(maxsize=1)
def load_zero_table():
    """The shipped quadratic-law zero table (:func:`build_zero_table`) as ``(a_grid, b_grid, q1, q2)`` splines.

    Returns
    -------
    a, b : 1-D ndarray
        The grid.
    spline_q1, spline_q2 : scipy.interpolate.RectBivariateSpline
        Bicubic interpolants of :math:`q_1(a, b)` and :math:`q_2(a, b)`.
    """
    from importlib.resources import files

    from astropy.table import Table
    from scipy.interpolate import RectBivariateSpline

    path = files("vsini.data").joinpath(ZERO_TABLE_NAME)
    try:
        t = Table.read(str(path), format="ascii.ecsv")
    except FileNotFoundError as e:
        raise MeasurementError(f"zero table {ZERO_TABLE_NAME} is missing from the package data; regenerate "
                               "it with 'python -m vsini.fourier'") from e
    a, b = np.unique(t["a"]), np.unique(t["b"])
    order = np.lexsort((t["b"], t["a"]))
    q1 = np.asarray(t["q1"])[order].reshape(a.size, b.size)
    q2 = np.asarray(t["q2"])[order].reshape(a.size, b.size)
    return a, b, RectBivariateSpline(a, b, q1), RectBivariateSpline(a, b, q2)


@lru_cache(maxsize=256)
def _zeros_cached(law, coefficients):
    ld = as_limb_darkening((law, *coefficients))
    if law == "quadratic":
        a_grid, b_grid, s1, s2 = load_zero_table()
        a, b = coefficients
        if a_grid[0] <= a <= a_grid[-1] and b_grid[0] <= b <= b_grid[-1]:
            return float(s1(a, b)[0, 0]), float(s2(a, b)[0, 0])
    q = ld.transform_zeros(2)  # linear law (closed-form transform), or a quadratic law outside the table
    return float(q[0]), float(q[1])


def rotation_zeros(limb_darkening=0.6):
    """First two zeros :math:`(q_1, q_2)` of a rigid rotator's transform, in :math:`\\sigma v\\sin i` (cycles).

    Linear law: roots of the closed-form transform (Gray 2005 [2]_; :math:`q_1 = 0.660` at
    :math:`\\epsilon = 0.6`). Quadratic law: bicubic interpolation in ``kernels/q1_quadratic.ecsv``
    (:func:`build_zero_table`; error < 1e-6), or the direct roots outside the tabulated range.
    """
    ld = as_limb_darkening(limb_darkening)
    return _zeros_cached(ld.law, ld.coefficients)


def macro_zero_positions(ratio, limb_darkening=0.6, radial_fraction=0.5):
    """Zeros :math:`(q_1, q_2)` of the joint rotation + radial-tangential macroturbulence kernel.

    Parameters
    ----------
    ratio : float
        :math:`\\zeta/v\\sin i` (:math:`\\zeta` the 1/e half-width of the radial-tangential model).
    limb_darkening : LimbDarkening or float
    radial_fraction : float
        :math:`A_R`.

    Returns
    -------
    (2,) ndarray
        In :math:`\\sigma v\\sin i` (cycles); NaN where the zero no longer exists (the kernel's transform
        only dips: for :math:`\\epsilon = 0.6` the zeros vanish near :math:`\\zeta/v\\sin i \\approx 0.7`).

    Notes
    -----
    The joint kernel (:func:`vsini.kernels.rotation_rt_transform`, Gray 2005 [2]_ ch. 17-18) depends on
    v sin i and :math:`\\zeta` only through their ratio, :math:`K(\\sigma; v, \\zeta) = K(\\sigma v; 1,
    \\zeta/v)`. Its first zero moves up with the ratio (+0.03 %, +0.2 %, +1.4 %, +3.3 % at 0.2, 0.3, 0.5,
    0.6 for :math:`\\epsilon = 0.6`), so :math:`q_1/\\sigma_1` with the rigid :math:`q_1` comes out low,
    and :math:`q_2/q_1` drops (1.753, 1.721, 1.535 at 0.2, 0.3, 0.5).
    """
    from .kernels import rotation_rt_transform

    ld = as_limb_darkening(limb_darkening)
    ratio = float(ratio)
    if not (np.isfinite(ratio) and ratio >= 0):
        raise InputError(f"macro_zero_positions: zeta/vsini must be >= 0, got {ratio}")
    if ratio == 0:
        return np.array(rotation_zeros(ld))
    u = _first_roots(lambda t: rotation_rt_transform(t / _TWO_PI, 1.0, ratio, ld, radial_fraction), 2,
                     u_max=10.0, n=400)
    return u / _TWO_PI


def _macro_q(sigma1, zeta, ld, radial_fraction):
    """Self-consistent (q1, q2) and zeta/vsini for a measured first zero; None if the joint kernel has none.

    Solves :math:`v = q_1^\\mathrm{joint}(\\zeta/v)/\\sigma_1` by fixed-point iteration (the right side
    falls slowly with v), with bisection on :math:`[q_1/\\sigma_1, 1.25\\,q_1/\\sigma_1]` as the fallback
    when an iterate lands where the joint kernel has no zero.
    """

    def q_at(v):
        return macro_zero_positions(zeta / v, ld, radial_fraction)

    v = rotation_zeros(ld)[0] / sigma1
    lo, hi = v, 1.25 * v
    for _ in range(40):
        q = q_at(v)
        if not np.isfinite(q[0]):
            break
        v_new = q[0] / sigma1
        if abs(v_new - v) <= 1e-9 * v:
            return q, zeta / v_new
        v = v_new
    if not np.isfinite(q_at(hi)[0]) or q_at(hi)[0] / sigma1 > hi:
        return None
    for _ in range(60):  # h(v) = v - q1(zeta/v)/sigma1 rises with v; "no zero" counts as h < 0
        mid = 0.5 * (lo + hi)
        q = q_at(mid)
        if np.isfinite(q[0]) and mid >= q[0] / sigma1:
            hi = mid
        else:
            lo = mid
        if hi - lo <= 1e-9 * hi:
            break
    q = q_at(hi)
    return q, zeta / hi


def rigid_q2_q1_range(limb_darkening=0.6, *, tolerance=0.1, macro_ratio=0.0, radial_fraction=0.5):
    """The q2/q1 a rigid rotator can show for a limb-darkening law known to ``tolerance``.

    Parameters
    ----------
    limb_darkening : LimbDarkening or float
    tolerance : float
        Uncertainty of each coefficient: the range spans the law with each coefficient moved by
        :math:`\\pm` ``tolerance`` (linear :math:`\\epsilon` clipped to 0..1).
    macro_ratio : float
        :math:`\\zeta/v\\sin i` of radial-tangential macroturbulence; the range is shifted by its effect on the
        rigid ratio (:func:`macro_zero_positions`).
    radial_fraction : float

    Returns
    -------
    (lo, nominal, hi) : tuple of float

    Notes
    -----
    Linear law: q2/q1 = 1.831 (:math:`\\epsilon` = 0), 1.761 (0.6), 1.719 (1), the rigid range "about 1.72 to
    1.83" of Reiners & Schmitt (2002) [4]_; values below it need solar-like differential rotation.
    """
    ld = as_limb_darkening(limb_darkening)
    q = rotation_zeros(ld)
    nominal = q[1] / q[0]
    if ld.law == "linear":
        eps = ld.coefficients[0]
        variants = [(min(max(eps + s, 0.0), 1.0),) for s in (-tolerance, tolerance)]
    else:
        a, b = ld.coefficients
        variants = [(a + sa, b + sb) for sa in (-tolerance, tolerance) for sb in (-tolerance, tolerance)]
    ratios = [nominal]
    for c in variants:
        try:
            qq = _zeros_cached(ld.law, tuple(float(x) for x in c))
        except InputError:  # a corner with negative limb intensity: use the table's extension instead
            qq = _table_extension(c)
        ratios.append(qq[1] / qq[0])
    shift = 0.0
    if macro_ratio > 0:
        qm = macro_zero_positions(macro_ratio, ld, radial_fraction)
        shift = qm[1] / qm[0] - nominal if np.all(np.isfinite(qm)) else math.nan
    return float(min(ratios) + shift), float(nominal + shift), float(max(ratios) + shift)


def _table_extension(coefficients):
    u = _quadratic_roots([coefficients[0]], [coefficients[1]])[0]
    return float(u[0] / _TWO_PI), float(u[1] / _TWO_PI)


# --------------------------------------------------------------------------------------------- spectra -> windows


def _continuum_level(flux):
    """1 for a normalised spectrum, else the 90th percentile of the flux (common practice; as in lines.py)."""
    f = flux[np.isfinite(flux)]
    level = float(np.percentile(f, 90)) if f.size else 1.0
    return 1.0 if 0.8 < level < 1.2 else level


def spectrum_windows(spectrum, lines=None, *, rv=None, half_width_kms=None, resolution=None):
    """Cut one Fourier window around each isolated line of a spectrum.

    Parameters
    ----------
    spectrum : vsini.spectrum.Spectrum
        Continuum-normalised (or close to it: a continuum level far from 1 is taken as the 90th percentile).
    lines : line-set name, sequence of rest wavelengths (Angstrom) or of :class:`vsini.lines.Line`, optional
        None: lines found by :func:`vsini.lines.detect_lines`.
    rv : float, optional
        Radial velocity, km/s; None: :func:`vsini.lines.estimate_rv`.
    half_width_kms : float, optional
        Half-width of each window. None: :math:`1.8\\,\\mathrm{FWHM} + 5` pixels, with the FWHM of the line
        stack (:func:`vsini.lines.estimate_rv`, else :func:`vsini.lines.estimate_fwhm`): 2.5 v sin i for a
        rotation-dominated line (2.3 v sin i with the FWHM of the stack), so the taper (outer 10 %) acts on continuum only.
    resolution : float, optional
        Resolving power (used only for line detection).

    Returns
    -------
    windows : tuple of FourierWindow
        Velocity about the shifted line centre (log-velocity :math:`c\\ln\\lambda/\\lambda_c`), depression,
        noise per pixel (``flux_err``, else the DER_SNR scatter of the whole spectrum), centre 0.
    skipped : tuple of (str, str)
        ``(label, reason)`` for lines left out: outside the spectrum, in a gap, or whose windows overlap
        (a transform of two lines has no clean zeros).
    """
    from .lines import as_lines, detect_lines, estimate_fwhm, estimate_rv, extract_windows, stack_profile

    found = as_lines(lines)
    if found is None:
        found = detect_lines(spectrum, resolution=resolution)
    if not found:
        return (), ()
    step = spectrum.velocity_step_kms()
    fwhm = math.nan
    if rv is None or half_width_kms is None:
        got = estimate_rv(spectrum, found, rv=rv)  # (rv, fwhm, significance) of the line stack
        if rv is None:
            rv = float(got[0]) if np.isfinite(got[0]) else 0.0
        fwhm = float(got[1])
    if half_width_kms is None and np.isfinite(fwhm) and fwhm > 0:
        half_width_kms = 1.8 * fwhm + 5.0 * step
    if half_width_kms is None:
        half_width_kms = 20.0 * step
        for h0 in (150.0, 300.0, 600.0):
            v, dep, n_used = stack_profile(spectrum, found, rv=rv, half_width=h0, step_kms=step)
            fwhm = estimate_fwhm(v, dep) if n_used else math.nan
            if np.isfinite(fwhm) and fwhm < 0.6 * h0:
                half_width_kms = 1.8 * fwhm + 5.0 * step
                break
    wins, dropped = extract_windows(spectrum, found, rv=rv, half_width=float(half_width_kms))
    skipped = [(d.line.label, d.reason) for d in dropped]
    snr = spectrum.snr_estimate()
    flat_noise = 1.0 / snr if np.isfinite(snr) and snr > 0 else math.nan
    cont = _continuum_level(np.where(spectrum.good, spectrum.flux, np.nan))
    u_rv = C_KMS * math.log1p(rv / C_KMS)
    out = []
    for w in wins:
        if len(w.lines) > 1:
            skipped += [(ln.label, "blended: its window overlaps another listed line's") for ln in w.lines]
            continue
        dep = np.where(w.good, 1.0 - w.flux / cont, np.nan)
        noise = (w.flux_err / cont) if w.flux_err is not None else np.full(w.flux.shape, flat_noise)
        try:
            out.append(FourierWindow(w.u - u_rv, dep, np.where(w.good, noise, np.nan), 0.0, w.lines[0].label))
        except InputError as e:
            skipped.append((w.lines[0].label, str(e).split(": ", 1)[-1]))
    return tuple(out), tuple(skipped)


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
    line values about their weighted mean when :math:`S > 1` and at least three lines give zeros (lines that
    disagree more than their errors allow: blends and continuum errors that resampling cannot see). Without ``mc`` the errors
    are first order, :math:`\\eta/|\\partial_\\sigma\\mathrm{Re}\\,T|`. The limb-darkening uncertainty is
    not included: :math:`dq_1/d\\epsilon \\approx 0.09` near 0.6 (1.4 % per 0.1 in :math:`\\epsilon`).

    *Flags* (:data:`vsini.flags.FLAGS`): ``fourier_noise``, ``fourier_unresolved`` (no value, an upper
    limit or nothing), ``fourier_no_q2`` (second zero not usable), ``differential_candidate`` (q2/q1 more
    than two standard deviations below the rigid range of :func:`rigid_q2_q1_range`, with :math:`\\zeta`
    given and below the limit),
    ``macro_shifts_zeros`` (radial-tangential :math:`\\zeta/v\\sin i \\ge` :data:`MACRO_RATIO_LIMIT`, or
    zeros the joint kernel cannot have: q2/q1 is then not used for differential rotation), ``macro_unknown``
    (such a low q2/q1 but no :math:`\\zeta` given: never called differential on q2/q1 alone).
    """
    from .flags import check_flags
    from .kernels import pixel_transform
    from .model import Broadening

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
    if sigma1_ref is None:
        ok1 = [searches[i].zeros[0] for i in detected if searches[i].zeros]
        sigma1_ref = float(np.median(ok1)) if ok1 else (msearch.sigma_noise if msearch is not None else None)
    if macroturbulence and macro_kind == "rt" and sigma1_ref:
        got = _macro_q(sigma1_ref, macroturbulence, ld, radial_fraction)
        if got is None:
            flags.append("macro_shifts_zeros")
            ratio = math.inf
        else:
            (q1, q2), ratio = got
            correction = q1 / q_rigid[0]
            if ratio >= MACRO_RATIO_LIMIT:
                flags.append("macro_shifts_zeros")

    # ---- lines
    line_results = []
    for i, (p, s) in enumerate(zip(preps, searches, strict=True)):
        if s.status != "ok":
            limit = q1 / s.sigma_noise if (s.status == "no_zero" and s.sigma_noise > 0) else None
            line_results.append(LineZeros(p.label, s.status, s.ew_kms, s.ew_snr, limit_kms=limit))
            continue
        kw = _zero_values(s, mc_of(p, s, None if draws is None else draws[i]))
        kw.update(vsini_kms=q1 / kw["sigma1"], vsini_err_kms=q1 / kw["sigma1"] * kw["sigma1_err"] / kw["sigma1"])
        line_results.append(LineZeros(p.label, "ok", s.ew_kms, s.ew_snr, **kw))
    good = [r for r in line_results if r.status == "ok"]
    v_lines = e_lines = None
    scale = 1.0
    if good:
        v_lines, e_lines, scale = _weighted_mean([r.vsini_kms for r in good], [r.vsini_err_kms for r in good])

    # ---- mean profile values
    res = dict(q2_q1=None, q2_q1_err=None, sigma1=None, sigma1_err=None, sigma2=None, sigma2_err=None)
    v_mean = e_mean = None
    if msearch is not None and msearch.status == "ok":
        mdraw = None if draws is None else np.concatenate([draws[i] for i in detected], axis=1)
        res.update(_zero_values(msearch, mc_of(mean, msearch, mdraw)))
        v_mean = q1 / res["sigma1"]
        e_mean = v_mean * res["sigma1_err"] / res["sigma1"]

    # ---- adopted value, or a limit
    vsini = err = limit = None
    if v_mean is not None:
        vsini, err = v_mean, e_mean
        if len(good) >= 3:  # lines disagree more than their errors allow: blends, continuum (PDG scale factor)
            err = err * max(1.0, scale)
    elif v_lines is not None:
        vsini, err = v_lines, e_lines
    step = max(p.step for p in preps)
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
    if res["q2_q1"] is not None and "macro_shifts_zeros" not in flags:
        if res["q2_q1"] + 2.0 * res["q2_q1_err"] < rigid[0]:
            flags.append("differential_candidate" if macroturbulence is not None else "macro_unknown")

    # ---- the mean profile's transform, with the expected one, for figures
    spec = None
    if mean is not None:
        top_plot = min(0.5 / mean.step, 1.25 * top if math.isfinite(top) else 0.5 / mean.step)
        if res["sigma2"] is not None:
            top_plot = min(0.5 / mean.step, max(top_plot, 1.3 * res["sigma2"]))
        spec = _spectrum_of(mean, top_plot)
        v_exp = vsini if vsini is not None else limit
        if v_exp:
            zeta = macroturbulence or 0.0
            model = Broadening(vsini=min(v_exp, 2000.0), limb_darkening=ld, macroturbulence=zeta,
                               macro_kind=macro_kind, radial_fraction=radial_fraction, resolution=resolution, lsf=lsf)
            expected = np.abs(model.transform(spec.sigma) * pixel_transform(spec.sigma, step))
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


def _main():  # pragma: no cover - exercised by hand: ``python -m vsini.fourier`` regenerates the table
    write_zero_table()


if __name__ == "__main__":  # pragma: no cover
    _main()
