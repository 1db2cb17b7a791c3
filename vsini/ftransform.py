"""The Fourier transform of one line window, its noise and its zeros, on plain arrays.

The building blocks of the Fourier first-zero estimator (:func:`vsini.fourier.fourier_vsini`); the zero
positions :math:`q_k` of the rotation kernels are in :mod:`vsini.zeros`. Rules summarised in
``docs/fourier.md``:

1. *Window*: a :class:`vsini.fwindows.FourierWindow`, the continuum-normalised depression
   :math:`d(v) = 1 - F/F_c` of one line on a (nearly) uniform velocity grid, with its noise per pixel.
2. *Transform* (:func:`line_transform`). The depression, multiplied by a cosine (Tukey) taper on its outer
   edges only (:func:`cosine_taper`, Harris 1978 [2]_), is Fourier-summed directly about the line centre:
   :math:`T(\\sigma) = \\sum_j w_j d_j \\Delta v_j e^{-2\\pi i\\sigma(v_j - v_0)}/W`, with
   :math:`W = \\sum_j w_j d_j\\Delta v_j` the (tapered) equivalent width, so :math:`T(0) = 1`. A direct
   sum evaluated on any frequency grid is identical to the FFT of the window zero-padded to any length,
   so zero padding is implicit and unlimited; the default grid oversamples the natural resolution
   :math:`1/L` (L = window length) eightfold.
3. *Zeros* (:func:`fourier_zeros`). They are the sign changes of :math:`\\mathrm{Re}\\,T`, the transform
   of the profile symmetrised about :math:`v_0`, located on the grid and refined by safeguarded Newton
   iteration on the exact sum (to 1e-12 relative), i.e. far beyond the grid spacing. By the convolution
   theorem only the rotation kernel contributes zeros (Gray 2005 [1]_, ch. 18).
4. *Noise rules*. White noise of :math:`\\sigma_j` per pixel gives :math:`\\mathrm{Re}\\,T` a noise of rms
   :math:`\\eta(\\sigma) = [\\sum_j (w_j\\sigma_j\\Delta v_j)^2\\cos^2 2\\pi\\sigma x_j]^{1/2}/W`
   (:math:`\\approx \\sigma_n\\Delta v\\sqrt{N/2}/W`; the complex amplitude has :math:`\\sigma_n\\Delta v\\sqrt N/W`,
   :func:`transform_noise_level`). A line is used only if :math:`W` exceeds ``threshold`` (3) times its
   own error. The usable frequency range ends at :math:`\\sigma_\\mathrm{max}`, where the instrument's
   transform falls below ``threshold`` times the noise, and at the Nyquist frequency :math:`1/(2\\Delta v)`
   (:func:`usable_frequency_limit`). A zero is accepted only when :math:`|\\mathrm{Re}\\,T|` stands clear
   of the noise (reaches ``threshold`` :math:`\\eta`) in the lobe before it and in the lobe after it,
   below :math:`\\sigma_\\mathrm{max}`; :attr:`ZeroSearch.sigma_noise` is where the main lobe sinks below
   ``threshold`` :math:`\\eta` (it sets the upper limit when no zero is accepted).
5. *Marginal zeros* (:func:`vsini.fzerocheck.zero_check`). A zero accepted because noise deepened a lobe that is really
   below the threshold is selected for a steep slope, so its first-order error
   :math:`\\eta/|\\partial_\\sigma\\mathrm{Re}\\,T|` is too small (the selection bias of any
   threshold on noisy data; common practice). The transform expected from the main lobe alone, where the signal is strong,
   tells whether the lobe after the zero should stand clear of the noise; where it should not, the zero
   is *marginal*.

References
----------
.. [1] Gray, D. F. 2005, *The Observation and Analysis of Stellar Photospheres*, 3rd ed., CUP, ch. 17-18.
.. [2] Harris, F. J. 1978, Proc. IEEE 66, 51 (the Tukey, cosine-tapered window; from memory).
.. [3] Fieller, E. C. 1954, J. R. Stat. Soc. B 16, 175 (the root of a noisy linear function: the
   first-order error holds only while the slope is well determined; from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .fwindows import FourierWindow, _as_window
from .grid import pixel_edges
from .kernels import instrument_width

__all__ = [
    "DEFAULT_TAPER",
    "DEFAULT_THRESHOLD",
    "FourierSpectrum",
    "ZeroSearch",
    "cosine_taper",
    "transform_noise_level",
    "usable_frequency_limit",
    "line_transform",
    "fourier_zeros",
]

#: Fraction of the window, at each end, inside the cosine taper.
DEFAULT_TAPER = 0.1
#: Signal-to-noise a line's equivalent width and the lobes around a zero must reach (in noise rms units).
DEFAULT_THRESHOLD = 3.0

_PAD = 8  # frequency-grid oversampling of 1/L
_MAX_MATRIX = 2_000_000  # largest (frequencies x pixels) block evaluated at once
_TWO_PI = 2.0 * np.pi


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
    from that end, 0..1), the cosine-tapered (Tukey) window of Harris (1978) [2]_; equal to
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
