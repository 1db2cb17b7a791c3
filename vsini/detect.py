"""Automatic detection of isolated absorption lines, for a profile fit without a line list.

:func:`detect_lines` finds candidate minima in a lightly smoothed, locally normalised spectrum, keeps the
isolated ones and confirms each at the expected line width against the local noise. The centres it
returns are measured in the observed frame, not laboratory wavelengths. It is re-exported by
:mod:`vsini.lines`.
"""

from __future__ import annotations

import math

import numpy as np

from .grid import C_KMS
from .linesets import Line
from .spectrum import der_noise

__all__ = ["detect_lines"]

_FWHM_PER_B = 2.0 * math.sqrt(math.log(2.0))  # FWHM of exp(-(v/b)^2) is 2 sqrt(ln 2) b

#: Smallest relative noise the detector assumes (S/N 10 000 per pixel). A noiseless (synthetic) spectrum
#: has no pixel-to-pixel scatter; below this level rounding in the file and the interpolation of the
#: model dominate anyway (common practice), and without a floor no line would stand "above the noise".
NOISE_FLOOR = 1e-4

#: Candidate smoothing, in units of half a resolution element: the finest first; a coarser one is tried
#: only when a pass confirms no line (faint lines at low S/N, or lines much broader than the resolution).
_SMOOTHING_LADDER = (1.0, 2.0, 4.0, 8.0)


def _continuum_level(flux):
    """A rough continuum level: the 90th percentile of the flux (common practice; for starting values only)."""
    f = flux[np.isfinite(flux)]
    return float(np.percentile(f, 90)) if f.size else 1.0


def _running_continuum(flux, block):
    """90th percentile of ``flux`` in blocks of ``block`` pixels, interpolated linearly (common practice)."""
    n = flux.size
    starts = np.arange(0, n, block)
    centres, levels = [], []
    for a in starts:
        seg = flux[a : a + block]
        seg = seg[np.isfinite(seg)]
        if seg.size >= max(3, block // 4):
            centres.append(a + 0.5 * (min(a + block, n) - a))
            levels.append(np.percentile(seg, 90))
    if not levels:
        return np.full(n, np.nanmedian(flux) if np.isfinite(flux).any() else 1.0)
    return np.interp(np.arange(n), centres, levels)


def _nearest_above(y, p, level, direction):
    """Index of the nearest pixel beyond ``p`` (``direction`` -1 or +1) with ``y > level``; -1 or len(y) if none."""
    n, span = y.size, 64
    while True:
        if direction < 0:
            lo = max(p - span, 0)
            hit = np.flatnonzero(y[lo:p] > level)
            if hit.size:
                return lo + int(hit[-1])
            if lo == 0:
                return -1
        else:
            hi = min(p + 1 + span, n)
            hit = np.flatnonzero(y[p + 1 : hi] > level)
            if hit.size:
                return p + 1 + int(hit[0])
            if hi == n:
                return n
        span *= 4


def _maxima(y, min_height, min_prominence):
    """Local maxima of ``y`` with their height, prominence and full width at half prominence (pixels).

    The prominence is the height above the higher of the two lowest points between the peak and the
    nearest higher sample on each side (the spectrum ends count as higher samples); the width is measured
    at half the prominence below the peak, with linear interpolation between samples.
    """
    inner = (y[1:-1] > y[:-2]) & (y[1:-1] >= y[2:]) & (y[1:-1] >= min_height)
    peaks, prom, width = [], [], []
    for p in np.flatnonzero(inner) + 1:
        h = y[p]
        left, right = _nearest_above(y, p, h, -1) + 1, _nearest_above(y, p, h, +1)
        prominence = h - max(float(y[left:p].min()), float(y[p + 1 : right].min()))
        if prominence < min_prominence:
            continue
        ref = h - 0.5 * prominence
        j = left + int(np.flatnonzero(y[left : p + 1] <= ref)[-1])
        k = p + int(np.flatnonzero(y[p:right] <= ref)[0])
        xl = j + (ref - y[j]) / (y[j + 1] - y[j])
        xr = k - (ref - y[k]) / (y[k - 1] - y[k])
        peaks.append(p)
        prom.append(prominence)
        width.append(xr - xl)
    return np.array(peaks, dtype=int), np.array(prom), np.array(width)


def _confirm(depression, p, width_pix, smoothed, kernel_norm):
    """Significance, equivalent-width S/N and refined position (pixels) of a candidate at pixel ``p``.

    ``smoothed`` is the depression smoothed at the expected line width; the baseline is the median of the
    depression 1.5-4 widths away; the noise is the local DER_SNR noise within 15 widths.
    """
    n = depression.size
    reach = int(math.ceil(15.0 * width_pix))
    lo, hi = max(p - reach, 0), min(p + reach + 1, n)
    sigma = max(der_noise(depression[lo:hi]), NOISE_FLOOR)  # DER_SNR (Stoehr et al. 2008), floored
    idx = np.arange(lo, hi)
    ring = (np.abs(idx - p) > 1.5 * width_pix) & (np.abs(idx - p) < 4.0 * width_pix)
    ring_vals = depression[lo:hi][ring]
    ring_vals = ring_vals[np.isfinite(ring_vals)]
    if not (np.isfinite(sigma) and sigma > 0) or ring_vals.size < 5:
        return 0.0, 0.0, float(p)
    base = float(np.median(ring_vals))
    sig_base = 1.2533 * sigma / math.sqrt(ring_vals.size)  # sd of a median: sqrt(pi/2) sigma/sqrt(n)
    h = max(int(round(0.5 * width_pix)), 1)
    a, b = max(p - h, 1), min(p + h + 1, n - 1)
    q = a + int(np.nanargmax(smoothed[a:b]))
    signif = (smoothed[q] - base) / math.hypot(sigma * kernel_norm, sig_base)
    y0, y1, y2 = smoothed[q - 1 : q + 2]
    denom = y0 - 2.0 * y1 + y2
    pos = q + (float(np.clip(0.5 * (y0 - y2) / denom, -0.5, 0.5)) if denom < 0 else 0.0)
    box = depression[max(q - int(width_pix), 0) : q + int(width_pix) + 1]
    box = box[np.isfinite(box)]
    ew_snr = float(np.sum(box - base)) / math.sqrt(box.size * sigma**2 + (box.size * sig_base) ** 2)
    return float(signif), ew_snr, pos


def detect_lines(spectrum, *, resolution=None, min_snr=6.0, min_significance=5.0, min_ew_snr=5.0, isolation=2.5,
                 max_lines=40, edge_kms=None, continuum_kms=1000.0):
    """Find isolated absorption lines in a spectrum.

    Candidates: the flux is smoothed with a Gaussian of FWHM half a resolution element (when that finds
    no line, 1, 2 and then 4 resolution elements, a matched filter closer to faint broad lines, with
    ``min_ew_snr`` lowered by one) and divided by
    its 90th percentile in blocks of ``continuum_kms`` (the continuum); local maxima of the depression
    :math:`1 - F/F_c` deeper and more prominent than ``min_snr`` times the noise of the smoothed
    depression are kept if no other candidate deeper than 10 % of it lies within ``isolation`` times the
    mean of their two full widths at half maximum.

    Confirmation: every candidate is then measured at the expected line width (the median FWHM of the
    candidates at least 30 % as deep as the deepest one, at least one resolution element c/R) against
    the local noise (DER_SNR within 15 widths) and a local baseline (median 1.5-4 widths away). It is
    kept if the depression smoothed with a Gaussian of that FWHM stands ``min_significance`` times its
    noise above the baseline, and if its equivalent width within one width of the centre has a
    signal-to-noise ratio of at least ``min_ew_snr``. A noise dip narrower than the lines fails both.

    Parameters
    ----------
    spectrum : Spectrum
    resolution : float, optional
        Resolving power; the smoothing kernel has a FWHM of half a resolution element (default: 2 pixels).
    min_snr : float
        Candidate threshold in units of the noise of the smoothed depression.
    min_significance : float
        Confirmation threshold at the expected line width, in units of the local noise of the smoothed depression.
    min_ew_snr : float
        Smallest signal-to-noise ratio of the equivalent width.
    isolation : float
        Isolation criterion in units of the line FWHM.
    max_lines : int
        Keep at most this many lines (the deepest).
    edge_kms : float, optional
        Ignore minima closer than this to a spectrum end or a masked pixel (default: 3 line FWHM).
    continuum_kms : float
        Block length (km/s) for the continuum percentile; lines much broader than this are missed.

    Returns
    -------
    tuple of Line
        Centres in the observed frame, measured, not laboratory wavelengths (species ``''``, label
        ``'auto NNNN.NN'``), sorted by wavelength.
    """
    step = spectrum.velocity_step_kms()
    base = 0.5 * C_KMS / resolution if resolution else 2.0 * step
    snr = spectrum.snr_estimate()
    rel_noise = max(1.0 / snr if snr > 0 else 0.01, NOISE_FLOOR)  # no estimate (noise only): assume S/N 100
    found = ()
    for factor in _SMOOTHING_LADDER:  # coarser only when nothing was found: faint, broad lines
        # the coarse passes accept an equivalent width one sigma weaker (the matched-filter significance
        # stays at min_significance; the fit then drops lines whose fitted strength is below 3 sigma)
        ew_snr = min_ew_snr if factor == _SMOOTHING_LADDER[0] else max(min_ew_snr - 1.0, 3.0)
        found = _detect(spectrum, base * factor, rel_noise, resolution=resolution, min_snr=min_snr,
                        min_significance=min_significance, min_ew_snr=ew_snr, isolation=isolation,
                        max_lines=max_lines, edge_kms=edge_kms, continuum_kms=continuum_kms)
        if found or base * factor > 0.25 * continuum_kms:
            break
    return found


def _detect(spectrum, smooth_kms, rel_noise, *, resolution, min_snr, min_significance, min_ew_snr, isolation, max_lines,
            edge_kms, continuum_kms):
    """One pass of :func:`detect_lines` with candidates from flux smoothed to a FWHM of ``smooth_kms``
    (``rel_noise``: the pixel noise over the continuum)."""
    from scipy.ndimage import gaussian_filter1d

    good = spectrum.good
    step = spectrum.velocity_step_kms()
    s_pix = max(smooth_kms / _FWHM_PER_B / math.sqrt(2.0) / step, 0.5)  # Gaussian sigma in pixels
    filled = np.where(good, spectrum.flux, 0.0)
    weight = gaussian_filter1d(good.astype(float), s_pix, mode="nearest")
    with np.errstate(invalid="ignore", divide="ignore"):
        flux_s = gaussian_filter1d(filled, s_pix, mode="nearest") / weight
    flux_s = np.where(weight > 0.5, flux_s, np.nan)
    cont = _running_continuum(flux_s, max(int(continuum_kms / step), 20))
    smooth = np.where(np.isfinite(flux_s), 1.0 - flux_s / cont, 0.0)
    noise = rel_noise / math.sqrt(2.0 * math.sqrt(math.pi) * s_pix)
    peaks, depth, fwhm = _maxima(smooth, min_snr * noise, min_snr * noise)  # fwhm in pixels
    if peaks.size == 0:
        return ()
    depth = smooth[peaks]
    bad_idx = np.flatnonzero(~good)
    keep = []
    for i, p in enumerate(peaks):
        reach = (edge_kms / step) if edge_kms is not None else 3.0 * fwhm[i]
        if p < reach or p > spectrum.n_pixels - 1 - reach:
            continue
        if bad_idx.size and np.min(np.abs(bad_idx - p)) < reach:
            continue
        near = np.abs(peaks - p) < isolation * 0.5 * (fwhm + fwhm[i])
        near[i] = False
        if np.any(near & (depth > 0.1 * depth[i])):
            continue
        keep.append(i)
    if not keep:
        return ()
    strong = depth >= 0.3 * depth.max()
    width = max(float(np.median(fwhm[strong])), (C_KMS / resolution if resolution else 2.0 * step) / step)  # pixels
    raw = np.where(good, 1.0 - spectrum.flux / np.where(np.isfinite(cont) & (cont > 0), cont, np.nan), np.nan)
    s_w = width / (2.0 * math.sqrt(2.0 * math.log(2.0)))
    ok = np.isfinite(raw)
    with np.errstate(invalid="ignore", divide="ignore"):
        smoothed = gaussian_filter1d(np.where(ok, raw, 0.0), s_w, mode="nearest") / gaussian_filter1d(
            ok * 1.0, s_w, mode="nearest")
    impulse = np.zeros(2 * int(4 * s_w + 2) + 1)
    impulse[impulse.size // 2] = 1.0
    kernel_norm = float(np.sqrt(np.sum(gaussian_filter1d(impulse, s_w, mode="constant") ** 2)))
    out = []
    for i in sorted(keep, key=lambda i: -depth[i]):
        signif, ew_snr, pos = _confirm(raw, int(peaks[i]), width, smoothed, kernel_norm)
        if signif < min_significance or ew_snr < min_ew_snr:
            continue
        wave = float(np.interp(pos, np.arange(spectrum.n_pixels), spectrum.wavelength))
        out.append(Line(wave, "", (), f"auto {wave:.2f}"))
        if len(out) == max_lines:
            break
    return tuple(sorted(out, key=lambda ln: ln.wavelength))
