"""Line windows for the Fourier first-zero estimator: from arrays, tuples, objects or a spectrum.

A window (:class:`FourierWindow`) is the continuum-normalised depression :math:`d(v) = 1 - F/F_c` of one
line on a (nearly) uniform velocity grid, with its noise per pixel: given, or estimated from the window's
pixel-to-pixel scatter (DER_SNR, Stoehr et al. 2008 [1]_). Masked pixels (at most 25 %) are filled by
linear interpolation. :func:`spectrum_windows` cuts one window around each isolated line of a
:class:`vsini.spectrum.Spectrum` (lines whose windows overlap are left out as blended). The transform and
zero search on a window are in :mod:`vsini.ftransform`, the estimator in :mod:`vsini.fourier`.

References
----------
.. [1] Stoehr, F. et al. 2008, ASP Conf. Ser. 394, 505 (DER_SNR noise estimate; from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .detect import NOISE_FLOOR
from .errors import InputError
from .grid import C_KMS
from .lines import (
    _continuum_level,
    as_lines,
    detect_lines,
    estimate_fwhm,
    estimate_rv,
    extract_windows,
    stack_profile,
)
from .spectrum import der_noise

__all__ = ["FourierWindow", "spectrum_windows"]

_MIN_PIXELS = 16


def _kms(value):
    """Plain floats in km/s from floats (already km/s) or an astropy speed Quantity."""
    if hasattr(value, "unit"):
        return value.to_value("km/s")
    return value


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
        the window (:func:`vsini.spectrum.der_noise`, Stoehr et al. 2008), recorded in :attr:`noise_estimated`.
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
            n = np.full(v.shape, der_noise(d))
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

def _window_continuum(u, flux, level, *, edge=0.15, tolerance=0.05):
    """Continuum of one window: ``level`` when both window edges agree with it, else a straight line.

    The outer ``edge`` fraction of the window on each side is taken as continuum (the window is about
    three times the line's half width). When the medians of both edges lie within ``tolerance`` of
    ``level`` (a normalised spectrum), the continuum stays exactly ``level`` so no noise is added;
    otherwise (a spectrum that is not normalised, or tilted) the straight line through the two edge
    medians is used (common practice).
    """
    n = flux.size
    k = max(3, int(edge * n))
    left, right = np.nanmedian(flux[:k]), np.nanmedian(flux[-k:])
    if not (np.isfinite(left) and np.isfinite(right)) or (
        abs(left / level - 1.0) < tolerance and abs(right / level - 1.0) < tolerance
    ):
        return np.full(n, float(level))
    ul, ur = np.nanmedian(u[:k]), np.nanmedian(u[-k:])
    return left + (right - left) * (u - ul) / (ur - ul)


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
    # a noiseless (synthetic) spectrum: the detector's floor, S/N 10 000 (vsini.detect.NOISE_FLOOR)
    flat_noise = max(1.0 / snr, NOISE_FLOOR) if snr > 0 else math.nan
    level = _continuum_level(np.where(spectrum.good, spectrum.flux, np.nan))  # 90th percentile
    cont = 1.0 if 0.8 < level < 1.2 else level  # a normalised spectrum keeps its continuum at 1
    u_rv = C_KMS * math.log1p(rv / C_KMS)
    out = []
    for w in wins:
        if len(w.lines) > 1:
            skipped += [(ln.label, "blended: its window overlaps another listed line's") for ln in w.lines]
            continue
        local = _window_continuum(w.u, np.where(w.good, w.flux, np.nan), cont)
        dep = np.where(w.good, 1.0 - w.flux / local, np.nan)
        noise = (w.flux_err / local) if w.flux_err is not None else np.full(w.flux.shape, flat_noise * cont / local)
        try:
            out.append(FourierWindow(w.u - u_rv, dep, np.where(w.good, noise, np.nan), 0.0, w.lines[0].label))
        except InputError as e:
            skipped.append((w.lines[0].label, str(e).split(": ", 1)[-1]))
    return tuple(out), tuple(skipped)
