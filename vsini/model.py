"""The composed forward model: intrinsic (x) rotation (x) macroturbulence (x) instrument.

:class:`Broadening` collects every broadening of one star and gives the transform of the composed kernel.
:func:`synthesize` turns a list of lines (centre, equivalent width) into line depressions on uniform
velocity grids, many windows at once, by one batched inverse FFT: each line is a phase factor
:math:`W e^{-2\\pi i\\sigma v_0}` times the composed transform, so sub-pixel line positions, sub-pixel
kernels and the pixel response are all exact, and zero padding keeps any wrap-around out of the window.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
from scipy import fft as _fft

from . import kernels as K
from .errors import InputError
from .limbdark import LimbDarkening, as_limb_darkening

__all__ = [
    "TabulatedLSF",
    "load_lsf",
    "Broadening",
    "synthesize",
    "padded_length",
    "composed_kernel",
    "equivalent_width_from_depth",
]

MACRO_KINDS = ("rt", "gaussian")
RT_MODES = ("joint", "product")


@dataclass(frozen=True, eq=False)
class TabulatedLSF:
    """A tabulated instrumental line-spread function.

    Parameters
    ----------
    velocity : (N,) ndarray, km/s
        Increasing velocities of the samples (the LSF's zero point is the line centre: an offset acts as a
        radial-velocity shift).
    response : (N,) ndarray
        Non-negative response; normalised here to unit area (trapezoid rule).
    source : str
        Where the table came from (file name), for provenance.
    """

    velocity: np.ndarray
    response: np.ndarray
    source: str = ""

    def __post_init__(self):
        v = np.asarray(self.velocity, dtype=float)
        r = np.asarray(self.response, dtype=float)
        where = self.source or "line-spread function"
        if v.ndim != 1 or v.shape != r.shape or v.size < 3:
            raise InputError(f"{where}: need two columns of equal length with at least 3 rows")
        if not (np.all(np.isfinite(v)) and np.all(np.isfinite(r))):
            raise InputError(f"{where}: non-finite values in the table")
        if np.any(np.diff(v) <= 0):
            raise InputError(f"{where}: velocities must be strictly increasing")
        if np.any(r < 0):
            raise InputError(f"{where}: negative response values")
        area = np.trapezoid(r, v)
        if not area > 0:
            raise InputError(f"{where}: the response has zero area")
        object.__setattr__(self, "velocity", v)
        object.__setattr__(self, "response", r / area)

    @property
    def half_extent(self):
        """Largest |velocity| in the table, km/s."""
        return float(np.max(np.abs(self.velocity)))

    def transform(self, sigma):
        """Fourier transform of the linearly interpolated table (exact for the piecewise-linear LSF).

        Notes
        -----
        The transform of a piecewise-linear function with knots :math:`v_j` is the sum over segments of
        closed-form terms; here it is computed as the transform of the second difference of triangles:
        :math:`\\hat f(\\sigma) = \\sum_j c_j e^{-2\\pi i\\sigma v_j} / (2\\pi i\\sigma)^2` with
        :math:`c_j` the jumps of the slope, and its :math:`\\sigma \\to 0` limit 1.
        """
        s = np.asarray(sigma, dtype=float)
        key = (s.shape, s.tobytes())
        cache = self.__dict__.setdefault("_cache", {})  # fits evaluate the same frequencies many times
        if key in cache:
            return cache[key]
        out = self._transform(s)
        if len(cache) >= 8:
            cache.pop(next(iter(cache)))
        cache[key] = out
        return out

    def _transform(self, s):
        v, r = self.velocity, self.response
        slope = np.diff(r) / np.diff(v)
        jumps = np.diff(np.concatenate(([0.0], slope, [0.0])))  # slope changes at each knot
        out = np.ones(s.shape, dtype=complex)
        nz = np.abs(s) > 1e-12
        ph = np.exp(-2j * np.pi * np.outer(s[nz], v))
        out[nz] = (ph @ jumps) / (2j * np.pi * s[nz]) ** 2
        if np.allclose(r, r[::-1]) and np.allclose(v, -v[::-1]):
            return out.real
        return out


def load_lsf(path):
    """Read a tabulated line-spread function: two columns, velocity (km/s) and response.

    Any table astropy reads works (ECSV, CSV, whitespace text, with or without header).
    """
    from astropy.table import Table

    from .errors import SpectrumFileError

    try:
        try:
            t = Table.read(path, format="ascii.ecsv")
        except Exception:
            t = Table.read(path, format="ascii")
    except FileNotFoundError as e:
        raise SpectrumFileError(path, "line-spread function file not found") from e
    except Exception as e:
        raise SpectrumFileError(path, f"cannot read line-spread function table ({e})") from e
    if len(t.colnames) < 2:
        raise SpectrumFileError(path, "line-spread function needs two columns: velocity (km/s), response")
    v = t.columns[0]
    vel = np.asarray(v, dtype=float)
    if getattr(v, "unit", None) is not None:
        import astropy.units as u

        try:
            vel = (vel * v.unit).to_value(u.km / u.s)
        except u.UnitConversionError as e:
            raise SpectrumFileError(path, f"first column must be a velocity, its unit is {v.unit}") from e
    try:
        return TabulatedLSF(vel, np.asarray(t.columns[1], dtype=float), source=str(path))
    except InputError as e:
        raise SpectrumFileError(path, str(e).split(": ", 1)[-1]) from e


@dataclass(frozen=True)
class Broadening:
    """Everything that broadens the lines of one star, with the transform of the composed kernel.

    Parameters
    ----------
    vsini : float
        Projected equatorial rotation velocity, km/s (0: no rotation).
    limb_darkening : LimbDarkening or float
        Law of the rotating disc (a number is a linear coefficient; 0.6 is the usual optical value).
    intrinsic_width : float
        Doppler width :math:`b` (1/e half-width, km/s) of the intrinsic Gaussian (see
        :func:`vsini.kernels.doppler_width`); 0 for a delta-function intrinsic line.
    damping : float
        Voigt damping parameter :math:`a = \\gamma/b` of the intrinsic profile (0: Gaussian).
    macroturbulence : float
        :math:`\\zeta` in km/s (0: none).
    macro_kind : {'rt', 'gaussian'}
        Radial-tangential (Gray) or isotropic Gaussian (1/e half-width :math:`\\zeta`).
    rt_mode : {'joint', 'product'}
        For 'rt': integrate rotation and macroturbulence together over the disc ('joint', exact) or
        multiply their separate transforms ('product', fast approximation).
    radial_fraction : float
        :math:`A_R` of the radial-tangential model.
    resolution : float or None
        Resolving power of a Gaussian instrument profile (FWHM = c/R).
    lsf : TabulatedLSF or None
        Tabulated instrument profile; used instead of ``resolution`` when given.
    """

    vsini: float = 0.0
    limb_darkening: LimbDarkening = field(default_factory=lambda: as_limb_darkening(0.6))
    intrinsic_width: float = 0.0
    damping: float = 0.0
    macroturbulence: float = 0.0
    macro_kind: str = "rt"
    rt_mode: str = "joint"
    radial_fraction: float = 0.5
    resolution: float | None = None
    lsf: TabulatedLSF | None = None

    def __post_init__(self):
        object.__setattr__(self, "limb_darkening", as_limb_darkening(self.limb_darkening))
        for name in ("vsini", "intrinsic_width", "damping", "macroturbulence"):
            val = getattr(self, name)
            if not (np.isfinite(val) and val >= 0):
                raise InputError(f"broadening: {name} must be a finite number >= 0, got {val}")
        if self.vsini > 2000:
            raise InputError(f"broadening: vsini = {self.vsini} km/s is beyond any star (limit 2000 km/s)")
        if self.macro_kind not in MACRO_KINDS:
            raise InputError(f"broadening: macro_kind must be one of {MACRO_KINDS}, got {self.macro_kind!r}")
        if self.rt_mode not in RT_MODES:
            raise InputError(f"broadening: rt_mode must be one of {RT_MODES}, got {self.rt_mode!r}")
        if self.damping > 0 and self.intrinsic_width == 0:
            raise InputError("broadening: a Voigt damping parameter needs a positive intrinsic_width")
        if self.resolution is not None:
            K.instrument_width(self.resolution)  # validates

    def with_(self, **changes):
        """A copy with some fields changed."""
        return replace(self, **changes)

    @property
    def is_pure_rotation(self):
        """True when rotation is the only broadening (the kernel then has sharp edges: see :func:`synthesize`)."""
        return (
            self.intrinsic_width == 0
            and self.macroturbulence == 0
            and self.resolution is None
            and self.lsf is None
        )

    @property
    def instrument_b(self):
        """1/e half-width (km/s) of the Gaussian instrument profile (0 if none)."""
        return K.instrument_width(self.resolution) if self.resolution else 0.0

    def half_extent(self):
        """Velocity (km/s) beyond which the composed kernel is negligible (< ~1e-9 of its peak)."""
        gauss = self.intrinsic_width**2 + self.instrument_b**2
        if self.macro_kind == "gaussian":
            gauss += self.macroturbulence**2
        ext = self.vsini + 6.0 * math.sqrt(gauss)
        if self.macro_kind == "rt":
            ext += 5.0 * self.macroturbulence
        if self.damping > 0:
            # Lorentzian wings fall as gamma/(pi v^2): pad until the wrapped-round wing is < 1e-7 of the peak.
            gamma, b = self.damping * self.intrinsic_width, self.intrinsic_width
            ext += min(5000.0, 0.5 * math.sqrt(8.0 * gamma * math.sqrt(math.pi) * b / (math.pi * 1e-7)))
        if self.lsf is not None:
            ext += self.lsf.half_extent
        return ext

    def transform(self, sigma):
        """Transform of the composed kernel at frequencies ``sigma`` (s/km).

        Real unless a tabulated LSF is asymmetric. Equals 1 at :math:`\\sigma = 0` (unit area).
        """
        s = np.asarray(sigma, dtype=float)
        gauss_b2 = self.instrument_b**2 if self.lsf is None else 0.0
        if self.macro_kind == "gaussian":
            gauss_b2 += self.macroturbulence**2
        out = np.ones(s.shape)
        if self.intrinsic_width > 0:
            if self.damping > 0:
                out = K.voigt_transform(s, self.intrinsic_width, self.damping)
            else:
                gauss_b2 += self.intrinsic_width**2
        if gauss_b2 > 0:
            out = out * K.gaussian_transform(s, math.sqrt(gauss_b2))  # widths add in quadrature
        if self.macro_kind == "rt" and self.macroturbulence > 0:
            if self.rt_mode == "joint" and self.vsini > 0:
                # The disc integral is the costly factor. Where an upper envelope of the product
                # (|others| x RT x 3 u^-1.5, which bounds the rotation transform) is below 1e-13, the
                # composed transform is negligible and the product approximation stands in for it.
                rt = K.rt_transform(s, self.macroturbulence, self.radial_fraction)
                u = 2.0 * np.pi * np.abs(s) * self.vsini
                with np.errstate(divide="ignore", over="ignore"):
                    envelope = np.abs(out) * rt * np.minimum(1.0, 3.0 * u**-1.5)
                live = envelope > 1e-13
                joint = np.asarray(rt * K.rotation_transform(s, self.vsini, self.limb_darkening))  # 0-d safe
                joint[live] = K.rotation_rt_transform(
                    s[live], self.vsini, self.macroturbulence, self.limb_darkening, self.radial_fraction
                )
                out = out * joint
            else:
                out = out * K.rt_transform(s, self.macroturbulence, self.radial_fraction)
                if self.vsini > 0:
                    out = out * K.rotation_transform(s, self.vsini, self.limb_darkening)
        elif self.vsini > 0:
            out = out * K.rotation_transform(s, self.vsini, self.limb_darkening)
        if self.lsf is not None:
            out = out * self.lsf.transform(s)
        return out

    def profile(self, velocity, *, pixel_width=0.0):
        """The composed kernel sampled at the points of a uniform velocity grid (km/s).

        Parameters
        ----------
        velocity : (N,) ndarray
            Uniformly spaced velocities.
        pixel_width : float
            If > 0, each sample is the mean over a pixel of that width (km/s) instead of a point value.
        """
        v = np.asarray(velocity, dtype=float)
        if v.ndim != 1 or v.size < 2:
            raise InputError("profile: need a 1-D velocity grid with at least two points")
        dv = float(v[1] - v[0])
        out = synthesize(self, dv, v.size, np.array([-v[0]]), np.array([1.0]), pixel_width=pixel_width)
        return out[0]


def composed_kernel(broadening, dv, *, pixel_width=0.0):
    """The composed kernel on a centred grid of step ``dv`` covering :meth:`Broadening.half_extent`.

    Returns
    -------
    velocity, kernel : ndarray
        Odd number of samples, centred on 0; ``kernel.sum() * dv`` is 1 to the truncation level.
    """
    half = max(1, int(math.ceil(broadening.half_extent() / dv)))
    v = dv * np.arange(-half, half + 1)
    return v, broadening.profile(v, pixel_width=pixel_width)


def equivalent_width_from_depth(depth, intrinsic_width, damping=0.0):
    """Equivalent width (km/s) of an intrinsic line with central depth ``depth``.

    For a Gaussian :math:`d\\,e^{-(v/b)^2}`, :math:`W = d\\sqrt{\\pi}b`; for a Voigt the depth is divided by
    the unit-area profile's central value.
    """
    if not intrinsic_width > 0:
        raise InputError("equivalent_width_from_depth: intrinsic_width must be positive")
    if damping > 0:
        return depth / float(K.voigt_profile(np.array([0.0]), intrinsic_width, damping)[0])
    return depth * np.sqrt(np.pi) * intrinsic_width


def padded_length(n_pixels, dv, broadening):
    """Length of the zero-padded FFT grid for ``n_pixels`` of step ``dv`` under ``broadening``.

    The window is padded by the kernel's half extent (:meth:`Broadening.half_extent`) plus two cells on
    each side, so the circular convolution equals the linear one, and rounded up to a fast FFT length.
    """
    margin = int(math.ceil(broadening.half_extent() / dv)) + 2
    return _fft.next_fast_len(n_pixels + 2 * margin, real=True)


def synthesize(
    broadening,
    dv,
    n_pixels,
    line_offsets,
    line_strengths,
    *,
    line_window=None,
    n_windows=1,
    pixel_width=None,
    transform=None,
):
    """Line depressions :math:`1 - F` on uniform velocity grids, for many windows at once.

    Parameters
    ----------
    broadening : Broadening
    dv : float
        Pixel step of every window, km/s.
    n_pixels : int
        Pixels per window; window ``w`` covers velocities ``dv * arange(n_pixels)`` in its own frame.
    line_offsets : (L,) ndarray, km/s
        Line centres relative to the first pixel of their window (may be outside the window: its wings
        still count).
    line_strengths : (L,) ndarray, km/s
        Equivalent widths in velocity units (positive: absorption).
    line_window : (L,) int ndarray, optional
        Window index of each line (default: all in window 0).
    n_windows : int
        Number of windows.
    pixel_width : float, optional
        Width of the pixel response in km/s; default ``dv`` (pixel means). 0 gives point samples.
    transform : ndarray, optional
        Precomputed ``broadening.transform`` on ``rfftfreq(npad, dv)``, to reuse across calls.

    Returns
    -------
    (n_windows, n_pixels) ndarray
        The depression of every window.

    Notes
    -----
    A line of equivalent width W at :math:`v_0` has transform :math:`W e^{-2\\pi i\\sigma v_0}\\hat K(\\sigma)`.
    The windows are padded by the kernel's half extent on both sides so the circular convolution
    equals the linear one to ~1e-9. Sampling a transform aliases whatever lies beyond the Nyquist
    frequency; any Gaussian broadening (instrument, thermal) wider than about a pixel makes that
    negligible. When rotation is the *only* broadening its sharp edges would alias, so pixel means are then
    computed in real space from the kernel's closed-form cumulative integral
    (:meth:`vsini.limbdark.LimbDarkening.cdf`), which is exact, the v sin i = 0 delta included.
    """
    offsets = np.atleast_1d(np.asarray(line_offsets, dtype=float))
    strengths = np.atleast_1d(np.asarray(line_strengths, dtype=float))
    if offsets.shape != strengths.shape:
        raise InputError("synthesize: line_offsets and line_strengths must have the same length")
    if not (dv > 0 and n_pixels >= 1):
        raise InputError(f"synthesize: need dv > 0 and n_pixels >= 1, got dv={dv}, n_pixels={n_pixels}")
    window = np.zeros(offsets.shape, dtype=int) if line_window is None else np.asarray(line_window, dtype=int)
    width = dv if pixel_width is None else float(pixel_width)
    if transform is None and width > 0 and broadening.is_pure_rotation:
        return _synthesize_pure_rotation(broadening, dv, n_pixels, offsets, strengths, window, n_windows, width)
    npad = padded_length(n_pixels, dv, broadening)
    sigma = _fft.rfftfreq(npad, dv)
    aliases = None
    if transform is None:
        transform = broadening.transform(sigma) * K.pixel_transform(sigma, width)
        aliases = _alias_terms(broadening, sigma, dv, width, transform)
    # Place lines whose centre lies left of the window at negative positions: the padding holds their wings.
    # exp(-2 pi i sigma_m v0) = z**m with z = exp(-2 pi i dsigma v0): a running product is ~10x cheaper than
    # exp() and its rounding error grows only as m * 1e-16.
    step = np.exp((-2j * np.pi * (sigma[1] - sigma[0])) * offsets) if sigma.size > 1 else np.ones(offsets.size)
    phase = np.empty((offsets.size, sigma.size), dtype=complex)
    phase[:, 0] = strengths
    if sigma.size > 1:
        phase[:, 1:] = step[:, None]
        np.cumprod(phase, axis=1, out=phase)
    if aliases is not None:  # kernel not band-limited: add its transform beyond Nyquist, line by line
        orders, terms = aliases
        coeff = np.exp((-2j * np.pi / dv) * np.multiply.outer(offsets, orders))  # (L, K)
        phase *= transform + coeff @ terms
        transform = 1.0
    if n_windows == 1:
        spectra = phase.sum(axis=0, keepdims=True)
    else:
        select = np.zeros((n_windows, offsets.size))
        select[window, np.arange(offsets.size)] = 1.0
        spectra = select @ phase
    spectra *= transform
    out = _fft.irfft(spectra, n=npad, axis=-1)[:, :n_pixels]
    out /= dv
    return out


def _alias_terms(broadening, sigma, dv, width, transform, *, tol=1e-13, max_order=64):
    r"""Transform terms beyond the Nyquist frequency, for kernels that are not band-limited.

    Sampling a function whose transform H is not zero beyond :math:`1/2\Delta v` gives samples whose
    discrete transform is :math:`\sum_k H(\sigma + k/\Delta v)\,e^{-2\pi i (k/\Delta v) v_0}`
    (Poisson summation). Returns ``None`` when the composed transform is already below ``tol`` at
    Nyquist (any Gaussian broadening of about a pixel or more), else the orders k and the terms
    :math:`H(\sigma + k/\Delta v)`, added until they fall below ``tol`` or 64 orders (the sum then
    converges as :math:`k^{-2}` or faster, leaving < 1e-7 of the kernel's area misplaced).
    """
    if abs(transform[-1]) <= tol * abs(transform[0]):
        return None
    # far beyond Nyquist the joint and product forms of rotation + RT differ negligibly: use the fast one
    fast = broadening.with_(rt_mode="product")
    orders, terms = [], []
    for k in range(1, max_order + 1):
        found = False
        for kk in (k, -k):
            shifted = sigma + kk / dv
            h = fast.transform(shifted) * K.pixel_transform(shifted, width)
            if fast != broadening and np.max(np.abs(h)) > 1e-9:  # keep the exact form where it matters
                h = broadening.transform(shifted) * K.pixel_transform(shifted, width)
            if np.max(np.abs(h)) > tol:
                orders.append(kk)
                terms.append(h)
                found = True
        if not found:
            break
    if not orders:
        return None
    return np.asarray(orders, dtype=float), np.asarray(terms)


def _synthesize_pure_rotation(broadening, dv, n_pixels, offsets, strengths, window, n_windows, width):
    """Exact pixel means of rotation-only lines from the kernel's cumulative integral."""
    centres = dv * np.arange(n_pixels)
    lo = centres[None, :] - 0.5 * width - offsets[:, None]
    hi = lo + width
    if broadening.vsini > 0:
        cdf = broadening.limb_darkening.cdf
        frac = cdf(hi / broadening.vsini) - cdf(lo / broadening.vsini)
    else:  # delta function: the whole line falls in the pixel that contains it
        frac = ((lo <= 0.0) & (hi > 0.0)).astype(float)
    contrib = frac * (strengths[:, None] / width)
    out = np.zeros((n_windows, n_pixels))
    np.add.at(out, window, contrib)
    return out
