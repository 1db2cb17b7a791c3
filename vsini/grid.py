"""Velocity and log-wavelength grids, Doppler conversions and flux-conserving resampling.

Inside the library wavelengths are in Angstrom and velocities in km/s (plain floats).
On a grid uniform in :math:`\\ln\\lambda` a velocity offset is a constant shift in pixels, so every
broadening kernel is the same for every line of a star.
"""

from __future__ import annotations

from typing import Final

import numpy as np
from astropy.constants import c as _c

from .errors import InputError

__all__ = [
    "C_KMS",
    "doppler_shift",
    "velocity_from_wavelength",
    "wavelength_from_velocity",
    "log_velocity",
    "log_wavelength_grid",
    "pixel_edges",
    "resample_flux_conserving",
]

#: Speed of light in km/s (CODATA value through astropy).
C_KMS: Final[float] = float(_c.to_value("km/s"))


def doppler_shift(wavelength, rv_kms):
    """Shift rest wavelengths by a radial velocity, optical convention.

    Parameters
    ----------
    wavelength : float or ndarray, Angstrom
        Rest wavelength(s).
    rv_kms : float
        Radial velocity in km/s, positive away from the observer.

    Returns
    -------
    ndarray, Angstrom
        Observed wavelength :math:`\\lambda = \\lambda_0 (1 + v/c)`.

    Notes
    -----
    The optical convention :math:`v = c(\\lambda - \\lambda_0)/\\lambda_0`, the same as astropy's
    ``doppler_optical`` equivalency (Astropy Collaboration 2013, A&A 558, A33).
    """
    return np.asarray(wavelength, dtype=float) * (1.0 + rv_kms / C_KMS)


def velocity_from_wavelength(wavelength, rest_wavelength):
    """Optical-convention velocity (km/s) of ``wavelength`` relative to ``rest_wavelength``."""
    return C_KMS * (np.asarray(wavelength, dtype=float) - rest_wavelength) / rest_wavelength


def wavelength_from_velocity(velocity_kms, rest_wavelength):
    """Wavelength (Angstrom) at optical-convention velocity ``velocity_kms`` from ``rest_wavelength``."""
    return rest_wavelength * (1.0 + np.asarray(velocity_kms, dtype=float) / C_KMS)


def log_velocity(wavelength, reference_wavelength):
    """Log-wavelength velocity :math:`u = c \\ln(\\lambda/\\lambda_\\mathrm{ref})` in km/s.

    This is the coordinate in which every broadening kernel is a fixed function. It equals the
    optical-convention velocity to first order; the difference is :math:`v^2/2c` (0.4 km/s at
    500 km/s), which shifts a kernel's edge by less than 0.1 %.
    """
    return C_KMS * np.log(np.asarray(wavelength, dtype=float) / reference_wavelength)


def log_wavelength_grid(start, stop, step_kms):
    """Wavelengths (Angstrom) uniform in :math:`\\ln\\lambda` from ``start`` to at most ``stop``.

    Parameters
    ----------
    start, stop : float, Angstrom
        The range to cover.
    step_kms : float
        The pixel step in velocity, km/s.
    """
    if not (np.isfinite(start) and np.isfinite(stop) and 0 < start < stop):
        raise InputError(f"log_wavelength_grid: need 0 < start < stop, got start={start}, stop={stop}")
    if not step_kms > 0:
        raise InputError(f"log_wavelength_grid: step_kms must be positive, got {step_kms}")
    n = int(np.floor(C_KMS * np.log(stop / start) / step_kms)) + 1
    return start * np.exp(np.arange(n) * step_kms / C_KMS)


def pixel_edges(centres):
    """Pixel edges from pixel centres (midpoints inside, half a step beyond each end).

    Parameters
    ----------
    centres : (N,) ndarray
        Strictly increasing pixel centres, N >= 2.

    Returns
    -------
    (N+1,) ndarray
    """
    x = np.asarray(centres, dtype=float)
    if x.ndim != 1 or x.size < 2:
        raise InputError("pixel_edges: need at least two pixel centres")
    mid = 0.5 * (x[1:] + x[:-1])
    return np.concatenate(([x[0] - (mid[0] - x[0])], mid, [x[-1] + (x[-1] - mid[-1])]))


def resample_flux_conserving(wavelength, flux, new_wavelength, flux_err=None, mask=None):
    """Resample a spectrum onto new pixels, conserving the integrated flux.

    Each new pixel receives the overlap-weighted mean of the old pixels it covers, so that
    :math:`\\int F\\,d\\lambda` over any range of whole pixels is unchanged. Uncertainties propagate
    as independent errors through the same weights. Masked (``mask=True``) or non-finite old pixels
    carry no weight; a new pixel with no valid overlap is NaN and masked.

    Parameters
    ----------
    wavelength : (N,) ndarray
        Old pixel centres, strictly increasing.
    flux : (N,) ndarray
        Old flux (any units, per unit wavelength or normalised).
    new_wavelength : (M,) ndarray
        New pixel centres, strictly increasing.
    flux_err : (N,) ndarray, optional
        One-sigma uncertainties of ``flux``.
    mask : (N,) bool ndarray, optional
        True where an old pixel is bad.

    Returns
    -------
    flux_new : (M,) ndarray
    err_new : (M,) ndarray or None
    mask_new : (M,) bool ndarray
        True where the new pixel had no valid overlap.

    Notes
    -----
    The overlap matrix is built with sparse arithmetic, so memory and time scale with N + M.
    """
    from scipy import sparse

    old_edges = pixel_edges(wavelength)
    new_edges = pixel_edges(new_wavelength)
    flux = np.asarray(flux, dtype=float)
    good = np.isfinite(flux)
    if mask is not None:
        good &= ~np.asarray(mask, dtype=bool)
    if flux_err is not None:
        flux_err = np.asarray(flux_err, dtype=float)
        good &= np.isfinite(flux_err)
    # For each new pixel j, the old pixels i overlapping it: [lo_j, hi_j]
    lo = np.clip(np.searchsorted(old_edges, new_edges[:-1], side="right") - 1, 0, len(flux) - 1)
    hi = np.clip(np.searchsorted(old_edges, new_edges[1:], side="left") - 1, 0, len(flux) - 1)
    counts = np.maximum(hi - lo + 1, 0)
    rows = np.repeat(np.arange(len(new_wavelength)), counts)
    starts = np.repeat(lo, counts)
    offsets = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
    cols = starts + offsets
    left = np.maximum(old_edges[cols], new_edges[rows])
    right = np.minimum(old_edges[cols + 1], new_edges[rows + 1])
    overlap = np.clip(right - left, 0.0, None) * good[cols]
    w = sparse.csr_matrix((overlap, (rows, cols)), shape=(len(new_wavelength), len(flux)))
    wsum = np.asarray(w.sum(axis=1)).ravel()
    ok = wsum > 0
    safe = np.where(ok, wsum, 1.0)
    f0 = np.where(good, flux, 0.0)
    out = (w @ f0) / safe
    out[~ok] = np.nan
    err_out = None
    if flux_err is not None:
        e0 = np.where(good, flux_err, 0.0)
        err_out = np.sqrt(w.multiply(w) @ (e0**2)) / safe
        err_out[~ok] = np.nan
    return out, err_out, ~ok
