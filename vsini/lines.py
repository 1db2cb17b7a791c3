"""Lines for the profile fit: automatic detection, window extraction and starting values.

A :class:`Line` is one absorption feature; it and the shipped line sets live in :mod:`vsini.linesets`
and are re-exported here, as is :func:`vsini.detect.detect_lines`, which finds isolated lines when no
list is given (their centres are measured in the observed frame, not laboratory wavelengths).

:func:`extract_windows` cuts a window around each line in log-velocity :math:`u = c\\ln(\\lambda/\\lambda_0)`,
merges lines whose windows overlap into one window, and drops lines it cannot use, each with a reason
(:class:`DroppedLine`). :func:`stack_profile`, :func:`estimate_rv` and :func:`estimate_fwhm` give the
starting values of the fit (radial velocity and a first width) without a user guess. The forward model of
a set of windows is :class:`vsini.linemodel.JointModel`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .detect import _continuum_level, detect_lines
from .grid import C_KMS, pixel_edges
from .linesets import DroppedLine, Line, as_lines, available_line_sets, line_set_table, load_line_set

__all__ = [
    "Line",
    "DroppedLine",
    "LineWindow",
    "available_line_sets",
    "line_set_table",
    "load_line_set",
    "as_lines",
    "detect_lines",
    "window_half_width",
    "extract_windows",
    "stack_profile",
    "estimate_rv",
    "estimate_fwhm",
    "emission_excess",
    "rotation_fwhm_factor",
]



# --------------------------------------------------------------------------------------------- windows


@dataclass(frozen=True, eq=False)
class LineWindow:
    """The pixels around one line (or a few merged lines) of a spectrum.

    Parameters
    ----------
    lines : tuple of Line
        The features fitted in this window (more than one when their windows overlapped).
    reference : float
        Rest wavelength (Angstrom) where the window's log-velocity is zero: that of ``lines[0]``.
    wavelength, flux : (N,) ndarray
        The window's pixels (masked ones included).
    flux_err : (N,) ndarray or None
    good : (N,) bool ndarray
        True for pixels used in the fit.
    u_edges : (N+1,) ndarray, km/s
        Pixel edges in :math:`u = c\\ln(\\lambda/\\lambda_\\mathrm{ref})` (rest frame, no RV removed).
    """

    lines: tuple
    reference: float
    wavelength: np.ndarray
    flux: np.ndarray
    flux_err: np.ndarray | None
    good: np.ndarray
    u_edges: np.ndarray

    @property
    def u(self):
        """Pixel centres in log-velocity, km/s."""
        return C_KMS * np.log(self.wavelength / self.reference)

    @property
    def n_good(self):
        """Number of pixels used in the fit."""
        return int(np.count_nonzero(self.good))


def rotation_fwhm_factor(limb_darkening):
    """FWHM of the rotation kernel in units of v sin i, for a limb-darkening law (``~1.56`` at 0.6).

    Found numerically from :meth:`vsini.limbdark.LimbDarkening.profile` (bisection to 1e-10).
    """
    from scipy.optimize import brentq

    from .limbdark import as_limb_darkening

    ld = as_limb_darkening(limb_darkening)
    half = 0.5 * float(ld.profile(np.array([0.0]))[0])
    x = brentq(lambda t: float(ld.profile(np.array([t]))[0]) - half, 0.0, 1.0 - 1e-12, xtol=1e-12)
    return 2.0 * x


def window_half_width(vsini, gauss_b, macroturbulence=0.0, *, step_kms=0.0):
    """Half-width (km/s) of the window around a line: the kernel's reach plus continuum on both sides.

    ``1.8 (v sin i + 3 b + 3 zeta) + 5 pixels``, with ``b`` the 1/e half-width of all Gaussian parts
    (instrument, intrinsic) added in quadrature: beyond ``3 b`` a Gaussian is below 1e-4 of its peak,
    and the factor 1.8 leaves continuum for the linear continuum fit on both sides (common practice; a
    tighter 1.3 gave a visibly larger scatter of v sin i for shallow lines in ``tests/benchmarks/bench_fit.py``).
    """
    return 1.8 * (max(vsini, 0.0) + 3.0 * gauss_b + 3.0 * max(macroturbulence, 0.0)) + 5.0 * step_kms


def extract_windows(spectrum, lines, *, rv, half_width, merge_kms=0.0, max_masked_fraction=0.25, min_pixels=8):
    """Cut a window around every line; merge overlapping windows; drop unusable lines with a reason.

    Parameters
    ----------
    spectrum : Spectrum
    lines : sequence of Line
    rv : float
        Radial velocity, km/s: windows are centred on the shifted lines.
    half_width : float
        Half-width of each window, km/s (see :func:`window_half_width`).
    merge_kms : float
        Lines closer than this (km/s) cannot be told apart: they become one feature with equal weights.
    max_masked_fraction : float
        Drop a window if more than this fraction of its pixels is masked ("in a gap").
    min_pixels : int
        Drop a window with fewer good pixels.

    Returns
    -------
    windows : tuple of LineWindow
    dropped : tuple of DroppedLine
    """
    lines = sorted(lines, key=lambda ln: ln.wavelength)
    shift = 1.0 + rv / C_KMS
    wave = spectrum.wavelength
    lo_all, hi_all = wave[0], wave[-1]
    dropped, inside = [], []
    for ln in lines:
        comp = [c[0] for c in ln.components] or [ln.wavelength]
        lo = min(comp) * shift * math.exp(-half_width / C_KMS)
        hi = max(comp) * shift * math.exp(half_width / C_KMS)
        if lo < lo_all or hi > hi_all:
            dropped.append(DroppedLine(ln, f"outside the spectrum: window {lo:.2f}-{hi:.2f} A not covered by "
                                           f"{lo_all:.2f}-{hi_all:.2f} A"))
        else:
            inside.append([ln, lo, hi])
    inside = _merge_close(inside, merge_kms)
    groups = []  # merge lines whose windows overlap
    for item in inside:
        if groups and item[1] <= groups[-1][2]:
            groups[-1][0].append(item[0])
            groups[-1][2] = max(groups[-1][2], item[2])
        else:
            groups.append([[item[0]], item[1], item[2]])
    steps = np.diff(wave)
    med_step = float(np.median(steps))
    windows = []
    for feats, lo, hi in groups:
        sel = slice(int(np.searchsorted(wave, lo, side="left")), int(np.searchsorted(wave, hi, side="right")))
        w = wave[sel]
        good = spectrum.good[sel]
        names = " + ".join(f.label for f in feats)
        if w.size and np.any(np.diff(w) > 5.0 * med_step):
            reason = "in a gap: the window spans a jump in wavelength coverage"
        elif w.size < min_pixels:
            reason = f"too few pixels: {w.size} pixels in the window (need {min_pixels})"
        elif 1.0 - good.mean() > max_masked_fraction:
            frac = 1.0 - good.mean()
            reason = f"in a gap: {100 * frac:.0f}% of the window's pixels are masked (limit {100 * max_masked_fraction:.0f}%)"
        elif good.sum() < min_pixels:
            reason = f"too few pixels: {int(good.sum())} good pixels in the window (need {min_pixels})"
        else:
            reason = None
        if reason is not None:
            dropped += [DroppedLine(f, reason + (f" (window shared by {names})" if len(feats) > 1 else "")) for f in feats]
            continue
        ref = feats[0].wavelength
        u_centres = C_KMS * np.log(w / ref)
        err = None if spectrum.flux_err is None else spectrum.flux_err[sel]
        windows.append(LineWindow(tuple(feats), ref, w, spectrum.flux[sel], err, good & np.isfinite(spectrum.flux[sel]),
                                  pixel_edges(u_centres)))
    return tuple(windows), tuple(dropped)


def _merge_close(items, merge_kms):
    """Join lines closer than ``merge_kms`` into one feature of equal-weight components."""
    if merge_kms <= 0 or len(items) < 2:
        return items
    out = [items[0]]
    for ln, lo, hi in items[1:]:
        prev = out[-1][0]
        if C_KMS * math.log(ln.wavelength / prev.wavelength) < merge_kms:
            comps = list(prev.components or ((prev.wavelength, 1.0),)) + list(ln.components or ((ln.wavelength, 1.0),))
            n = len(comps)
            comps = tuple((c[0], 1.0 / n) for c in comps)
            joined = Line(float(np.mean([c[0] for c in comps])), prev.species if prev.species == ln.species else "",
                          comps, f"{prev.label}+{ln.label}")
            out[-1] = [joined, min(out[-1][1], lo), max(out[-1][2], hi)]
        else:
            out.append([ln, lo, hi])
    return out


# --------------------------------------------------------------------------------------------- starting values


def stack_profile(spectrum, lines, *, rv=0.0, half_width=400.0, step_kms=None, isolate=False, ccf=False):
    """Median depression of all lines on a common velocity grid (a quick mean profile).

    Parameters
    ----------
    spectrum : Spectrum
    lines : sequence of Line
    rv : float
        km/s; the grid is centred on the shifted lines.
    half_width : float
        km/s each side.
    step_kms : float, optional
        Grid step (default: the spectrum's median pixel step).
    isolate : bool
        Use each line only up to halfway to its neighbours in the list, so they do not enter its profile.
    ccf : bool
        Multiply by the number of lines with data at each velocity (a cross-correlation that does not
        favour velocities where few lines are covered).

    Returns
    -------
    velocity : (M,) ndarray, km/s
    depression : (M,) ndarray
        Median (mean for fewer than 5 lines) over the lines of :math:`1 - F/F_c` (NaN where no line has data).
    n_used : int
        Lines that contribute.
    """
    step = step_kms or spectrum.velocity_step_kms()
    n = max(int(half_width / step), 2)
    v = step * np.arange(-n, n + 1)
    flux = np.where(spectrum.good, spectrum.flux, np.nan)
    cont = _continuum_level(flux[spectrum.good])
    logw = np.log(spectrum.wavelength)
    lines = sorted(lines, key=lambda ln: ln.wavelength)
    u_lines = C_KMS * np.log([ln.wavelength for ln in lines])
    gaps = np.concatenate(([np.inf], np.diff(u_lines), [np.inf])) if isolate else np.full(len(lines) + 1, np.inf)
    rows = []
    for i, ln in enumerate(lines):
        x = math.log(ln.wavelength) + (v + C_KMS * math.log1p(rv / C_KMS)) / C_KMS
        core = math.log(ln.wavelength) + C_KMS * math.log1p(rv / C_KMS) / C_KMS + np.array([-50.0, 50.0]) / C_KMS
        if core[0] < logw[0] or core[1] > logw[-1]:
            continue
        row = 1.0 - np.interp(x, logw, flux, left=np.nan, right=np.nan) / cont
        row[(v < -0.5 * gaps[i]) | (v > 0.5 * gaps[i + 1])] = np.nan
        rows.append(row)
    if not rows:
        return v, np.full(v.shape, np.nan), 0
    stack = np.array(rows)
    enough = np.sum(np.isfinite(stack), axis=0) > 0
    out = np.full(v.shape, np.nan)
    if enough.any():
        pick = np.nanmedian if len(rows) >= 5 else np.nanmean  # the median resists other lines in dense spectra
        out[enough] = pick(stack[:, enough], axis=0)
        if ccf:
            out[enough] *= np.sum(np.isfinite(stack[:, enough]), axis=0)
    return v, out, len(rows)


def estimate_rv(spectrum, lines, *, rv=None, search_kms=500.0, min_fwhm_kms=None):
    """Radial velocity and line width from the line stack, by a matched filter over widths.

    The stack (:func:`stack_profile`) minus its median (the continuum level) is smoothed with Gaussians
    of FWHM from ``min_fwhm_kms`` up; the width whose smoothed peak stands highest above the smoothed
    noise is the matched filter (close to the line width). Its peak position is the radial velocity (searched with filters up to
    half the median line spacing, so that neighbouring lines do not merge into one peak); the FWHM of
    the peak of the isolated-line stack (``isolate=True``, filters up to 800 km/s) minus the filter
    width in quadrature is the line width.

    Parameters
    ----------
    spectrum : Spectrum
    lines : sequence of Line
    rv : float, optional
        Known radial velocity (km/s): only the width is searched, near it.
    search_kms : float
        Radial velocities searched when ``rv`` is None: -search..+search.
    min_fwhm_kms : float, optional
        Narrowest filter (default: 2 pixels).

    Returns
    -------
    rv : float
        km/s (NaN when no line falls in the spectrum).
    fwhm : float
        km/s (NaN when no clear line).
    significance : float
        Peak height over the noise of the smoothed stack.
    """
    step = spectrum.velocity_step_kms()
    u_lines = C_KMS * np.log(sorted(ln.wavelength for ln in lines))
    spacing = float(np.median(np.diff(u_lines))) if len(lines) > 1 else np.inf
    narrow = max(min_fwhm_kms or 0.0, 2.0 * step)
    if rv is None:  # filters wider than half the line spacing would merge neighbouring lines into one peak
        v, dep, n = stack_profile(spectrum, lines, rv=0.0, half_width=search_kms + 900.0, step_kms=step, ccf=True)
        if n == 0 or np.isfinite(dep).sum() < 5:
            return float("nan"), float("nan"), 0.0
        rv, _, _ = _matched_filter(v, dep, step, narrow, max(min(800.0, 0.5 * spacing), 2.0 * narrow), search_kms)
    v, dep, n = stack_profile(spectrum, lines, rv=float(rv), half_width=900.0, step_kms=step, isolate=True)
    if n == 0 or np.isfinite(dep).sum() < 5:
        return float("nan"), float("nan"), 0.0
    dv, width, signif = _matched_filter(v, dep, step, narrow, 800.0, None)
    return float(rv + dv), width, signif


class _ZeroPaddedSmoother:
    """Gaussian smoothing of a few fixed arrays with zero padding, by FFT (many widths, one transform).

    Equals ``scipy.ndimage.gaussian_filter1d(x, sigma, mode='constant')`` (kernel truncated at 4 sigma,
    normalised to unit sum, as ndimage does) to rounding; direct convolution costs O(N sigma) per call,
    which dominated the starting-value search with filters up to 800 km/s.
    """

    def __init__(self, arrays, max_sigma):
        from scipy import fft

        self._fft = fft
        self.n = arrays[0].size
        self.nfft = fft.next_fast_len(self.n + int(4.0 * max_sigma + 0.5) + 1, real=True)
        self.spectra = [fft.rfft(a, self.nfft) for a in arrays]

    def __call__(self, k, sigma):
        """Array ``k`` (index into the arrays given) smoothed with a Gaussian of ``sigma`` pixels."""
        radius = int(4.0 * sigma + 0.5)
        t = np.arange(-radius, radius + 1)
        kern = np.exp(-0.5 * (t / sigma) ** 2)
        wrapped = np.zeros(self.nfft)
        wrapped[t % self.nfft] = kern / kern.sum()  # centred on index 0: no shift
        return self._fft.irfft(self.spectra[k] * self._fft.rfft(wrapped), self.nfft)[: self.n]


def _matched_filter(v, dep, step, narrow, wide, search_kms):
    """Peak position, FWHM and significance of a stack smoothed by the best-matching Gaussian filter."""
    ok = np.isfinite(dep)
    dep = dep - np.median(dep[ok])  # the stack's median level is the continuum (blind to its normalisation)
    filled = np.where(ok, dep, 0.0)
    noise0 = 1.482602 * float(np.median(np.abs(np.diff(dep[ok])))) / math.sqrt(2.0) or 1e-3
    to_sigma = 1.0 / (2.0 * math.sqrt(2.0 * math.log(2.0))) / step  # FWHM (km/s) -> Gaussian sigma (pixels)
    smooth = _ZeroPaddedSmoother([ok * 1.0, filled], max(wide, narrow) * to_sigma)
    best = (-np.inf, 0, 1.0, None)
    for fw in np.geomspace(narrow, max(wide, narrow), 14):
        s = fw * to_sigma
        norm = smooth(0, s)
        # noise of the normalised smoothing: noise0 sqrt(sum k^2) / sum k over the covered pixels
        k2 = smooth(0, s / math.sqrt(2.0)) / (2.0 * math.sqrt(math.pi) * max(s, 0.5))
        covered = norm > 0.05
        sm = np.where(covered, smooth(1, s) / np.where(covered, norm, 1.0), 0.0)
        snr = np.where(covered, sm * norm / (noise0 * np.sqrt(np.clip(k2, 1e-300, None))), -np.inf)
        region = np.abs(v) <= (search_kms if search_kms is not None else 0.25 * fw + step)
        i = int(np.flatnonzero(region)[np.argmax(snr[region])])
        signif = snr[i]
        if signif > best[0]:
            best = (signif, i, fw, sm)
    signif, i, fw, sm = best
    pos = v[i]
    if 0 < i < v.size - 1:
        y0, y1, y2 = sm[i - 1 : i + 2]
        denom = y0 - 2.0 * y1 + y2
        pos = v[i] + (0.5 * (y0 - y2) / denom * step if denom < 0 else 0.0)
    # width: a filter half as wide, minus the median level 1.5-3 filter widths away from the line
    s = 0.5 * fw * to_sigma
    norm = smooth(0, s)
    covered = norm > 0.05
    sm = np.where(covered, smooth(1, s) / np.where(covered, norm, 1.0), np.nan)
    ring = ok & (np.abs(v - pos) > 1.5 * fw) & (np.abs(v - pos) < 3.0 * fw)
    base = float(np.median(dep[ring])) if ring.sum() > 3 else 0.0
    width = estimate_fwhm(v - v[i], sm - base)
    width = math.sqrt(max(width**2 - (0.5 * fw) ** 2, (0.25 * fw) ** 2)) if np.isfinite(width) else float("nan")
    return float(pos), float(width), float(signif)


def emission_excess(spectrum, line, *, rv, half_width, smooth_kms):
    """How far (in noise units) the flux near a line rises above the continuum: > 8 means emission.

    The flux is smoothed with a Gaussian of FWHM ``smooth_kms``; the continuum is the 98th percentile of
    the smoothed spectrum (absorption lines and noise stay below it, an emission line pokes out); the
    noise is that of the smoothed flux (from :meth:`Spectrum.snr_estimate`).

    Returns
    -------
    float
        (largest smoothed flux within ``half_width`` km/s of the shifted line - continuum) / noise.
    """
    return _emission_excesses(spectrum, [line], rv=rv, half_width=half_width, smooth_kms=smooth_kms)[0]


def _emission_excesses(spectrum, lines, *, rv, half_width, smooth_kms):
    """:func:`emission_excess` of many lines, smoothing the spectrum once."""
    from scipy.ndimage import gaussian_filter1d

    good = spectrum.good
    step = spectrum.velocity_step_kms()
    s_pix = max(smooth_kms / (2.0 * math.sqrt(2.0 * math.log(2.0))) / step, 0.5)
    weight = gaussian_filter1d(good.astype(float), s_pix, mode="nearest")
    with np.errstate(invalid="ignore", divide="ignore"):
        sm = gaussian_filter1d(np.where(good, spectrum.flux, 0.0), s_pix, mode="nearest") / weight
    sm = np.where(weight > 0.5, sm, np.nan)
    level = float(np.nanpercentile(sm, 98))
    snr = spectrum.snr_estimate()
    noise = max(level / snr if np.isfinite(snr) and snr > 0 else 0.0, 1e-4 * abs(level)) / math.sqrt(
        2.0 * math.sqrt(math.pi) * s_pix)
    u = C_KMS * np.log(spectrum.wavelength)
    out = []
    for line in lines:
        near = np.abs(u - C_KMS * math.log(line.wavelength * (1.0 + rv / C_KMS))) <= half_width
        near &= np.isfinite(sm)
        out.append(float((np.max(sm[near]) - level) / noise) if near.any() else 0.0)
    return out


def estimate_fwhm(velocity, depression):
    """FWHM (km/s) of the central absorption of a stacked depression profile; NaN if it has no clear core.

    The core is the deepest point within the central third; the half-depth crossings are found walking
    outwards and interpolated linearly.
    """
    v = np.asarray(velocity, dtype=float)
    d = np.asarray(depression, dtype=float)
    d = np.where(np.isfinite(d), d, 0.0)
    centre = np.abs(v) <= (v[-1] - v[0]) / 6.0
    if not centre.any():
        return float("nan")
    i0 = int(np.flatnonzero(centre)[np.argmax(d[centre])])
    peak = d[i0]
    if not peak > 0:
        return float("nan")
    half = 0.5 * peak
    left = i0
    while left > 0 and d[left] > half:
        left -= 1
    right = i0
    while right < d.size - 1 and d[right] > half:
        right += 1
    if d[left] > half or d[right] > half:
        return float("nan")
    vl = np.interp(half, [d[left], d[left + 1]], [v[left], v[left + 1]])
    vr = np.interp(half, [d[right], d[right - 1]], [v[right], v[right - 1]])
    return float(vr - vl)
