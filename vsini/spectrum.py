"""The :class:`Spectrum` container: one validated 1-D spectrum.

A :class:`Spectrum` holds pixel centres in Angstrom (strictly increasing), the flux, optional
one-sigma uncertainties and a bad-pixel mask. It is checked once, when it is made, and its arrays
are read-only afterwards, so every later step can rely on them.

Pixels whose flux or uncertainty is NaN or infinite are *masked*, not rejected: they are counted
in :attr:`Spectrum.n_bad_pixels` and carry no weight downstream.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import astropy.units as u
import numpy as np

from .errors import InputError, SpectrumFileError
from .grid import C_KMS, log_wavelength_grid, resample_flux_conserving

__all__ = [
    "MIN_PIXELS", "Spectrum", "der_noise", "der_snr"]

#: Fewest pixels a spectrum may have (in total, and unmasked).
MIN_PIXELS = 10

# Normal-distribution factor turning a median absolute deviation into a standard deviation,
# 1/Phi^-1(3/4) = 1.482602 (common practice).
_MAD_TO_SIGMA = 1.482602


def der_noise(flux):
    """Per-pixel noise (one sigma) from the pixel-to-pixel scatter, the noise part of :func:`der_snr`.

    Returns 0.0 when fewer than five finite pixels are given. See :func:`der_snr` for the formula
    and its source (Stoehr et al. 2008).
    """
    f = np.asarray(flux, dtype=float)
    f = f[np.isfinite(f)]
    if f.size < 5:
        return 0.0
    return float(_MAD_TO_SIGMA / np.sqrt(6.0) * np.median(np.abs(2.0 * f[2:-2] - f[:-4] - f[4:])))


def der_snr(flux):
    """Signal-to-noise ratio of a spectrum from its own pixel-to-pixel scatter (DER_SNR).

    Parameters
    ----------
    flux : (N,) ndarray
        Flux of the good pixels, in order of wavelength; N >= 5. Non-finite values are dropped.

    Returns
    -------
    float
        ``median(flux) / noise``; ``inf`` when the estimated noise is zero and NaN when fewer
        than five finite pixels are given.

    Notes
    -----
    The noise is estimated from the second difference over pixels two apart [1]_:

    .. math:: N = \\frac{1.482602}{\\sqrt{6}}\\,
              \\mathrm{median}_i\\,\\left|2F_i - F_{i-2} - F_{i+2}\\right| .

    For white Gaussian noise of standard deviation :math:`\\sigma` the second difference has
    variance :math:`(4 + 1 + 1)\\sigma^2 = 6\\sigma^2`, and 1.482602 converts a median absolute
    deviation to a standard deviation. Smooth signal (anything close to linear over five pixels)
    cancels, so the estimate is insensitive to the continuum slope, but lines resolved over only a
    few pixels add to the "noise": the estimate is then a lower limit on the true S/N. Pixels two
    apart are used because neighbouring pixels of a resampled spectrum are correlated.

    References
    ----------
    .. [1] Stoehr, F., et al. 2008, "DER_SNR: A Simple & General Spectroscopic Signal-to-Noise
       Measurement Algorithm", ASP Conf. Ser. 394, 505 (volume and page from memory).

    Examples
    --------
    >>> rng = np.random.default_rng(1)
    >>> snr = der_snr(1.0 + 0.01 * rng.standard_normal(20000))
    >>> bool(abs(snr - 100.0) < 3.0)
    True
    """
    f = np.asarray(flux, dtype=float)
    f = f[np.isfinite(f)]
    if f.size < 5:
        return float("nan")
    noise = der_noise(f)
    signal = np.median(f)
    return float(np.inf) if noise == 0 else float(signal / noise)


def _angstrom(value):
    """A float in Angstrom from a float (already Angstrom) or an astropy length Quantity."""
    if isinstance(value, u.Quantity):
        return value.to_value(u.AA, equivalencies=u.spectral())
    return value


@dataclass(frozen=True, eq=False, repr=False)
class Spectrum:
    """A 1-D spectrum: wavelengths, flux, optional uncertainties and a bad-pixel mask.

    Parameters
    ----------
    wavelength : (N,) array_like, Angstrom
        Pixel centres, strictly increasing, finite and positive. An astropy ``Quantity`` with
        a length unit is converted to Angstrom.
    flux : (N,) array_like
        Flux per pixel, in any unit (often continuum-normalised).
    flux_err : (N,) array_like, optional
        One-sigma uncertainty of ``flux``, > 0 wherever finite.
    mask : (N,) array_like of bool, optional
        True where a pixel is bad. Non-finite ``flux`` or ``flux_err`` pixels are added to it.
    name : str
        Star or spectrum name, used in messages.
    path : str
        The file the spectrum came from ("" if none). When set, validation errors are raised as
        :class:`~vsini.errors.SpectrumFileError` naming that file.
    meta : dict
        Free-form provenance (file format, units read, air/vacuum, ...).

    Raises
    ------
    InputError
        (or :class:`~vsini.errors.SpectrumFileError` when ``path`` is set) if the arrays are not
        1-D, differ in length, hold fewer than :data:`MIN_PIXELS` pixels, if the wavelengths are not
        finite, positive and strictly increasing, if an uncertainty is zero or negative, or if
        fewer than :data:`MIN_PIXELS` pixels are left unmasked.

    Notes
    -----
    The arrays are copied and made read-only, so a ``Spectrum`` never changes after it is made;
    methods return new spectra.

    Examples
    --------
    >>> w = np.linspace(5000.0, 5010.0, 101)
    >>> s = Spectrum(w, np.ones_like(w), np.full_like(w, 0.01), name="demo")
    >>> s.n_pixels, s.n_bad_pixels, round(s.snr_estimate(), 6)
    (101, 0, 100.0)
    """

    wavelength: np.ndarray
    flux: np.ndarray
    flux_err: np.ndarray | None = None
    mask: np.ndarray | None = None
    name: str = ""
    path: str = ""
    meta: dict = field(default_factory=dict)

    def __post_init__(self):
        def fail(problem):
            if self.path:
                raise SpectrumFileError(self.path, problem)
            raise InputError(f"spectrum {self.name or '(unnamed)'}: {problem}")

        wave = np.array(_angstrom(self.wavelength), dtype=float)
        flux = np.array(self.flux, dtype=float)
        err = None if self.flux_err is None else np.array(self.flux_err, dtype=float)
        mask = np.zeros(wave.shape, bool) if self.mask is None else np.array(self.mask, dtype=bool)

        arrays = {"wavelength": wave, "flux": flux, "flux_err": err, "mask": mask}
        for key, arr in arrays.items():
            if arr is not None and arr.ndim != 1:
                fail(f"{key} must be 1-D, got shape {arr.shape}; extract a single spectrum (order) first")
        for key, arr in arrays.items():
            if arr is not None and arr.size != wave.size:
                fail(f"{key} has {arr.size} values but wavelength has {wave.size}; give one value per pixel")
        if wave.size == 0:
            fail("no pixels (empty arrays)")
        if wave.size < MIN_PIXELS:
            fail(f"only {wave.size} pixels; need at least {MIN_PIXELS}")
        if not np.all(np.isfinite(wave)):
            fail(f"{np.count_nonzero(~np.isfinite(wave))} wavelengths are NaN or infinite; drop those pixels")
        if wave[0] <= 0:
            fail(f"wavelengths must be positive, got {wave[0]:g} Angstrom; check the wavelength unit")
        step = np.diff(wave)
        if np.any(step <= 0):
            i = int(np.argmax(step <= 0))
            if step[i] == 0:
                fail(f"duplicated wavelength {wave[i]:.10g} Angstrom (pixels {i} and {i + 1}); "
                     "remove repeated pixels")
            fail(f"wavelengths not strictly increasing ({wave[i]:.10g} then {wave[i + 1]:.10g} Angstrom "
                 f"at pixels {i}-{i + 1}); sort the pixels, or reverse a descending spectrum")
        if err is not None:
            nonpositive = np.isfinite(err) & (err <= 0)
            if nonpositive.any():
                i = int(np.argmax(nonpositive))
                fail(f"{np.count_nonzero(nonpositive)} zero or negative uncertainties (first {err[i]:g} at "
                     f"{wave[i]:.10g} Angstrom); uncertainties must be > 0: set bad ones to NaN to mask them")
        mask |= ~np.isfinite(flux)
        if err is not None:
            mask |= ~np.isfinite(err)
        n_good = wave.size - np.count_nonzero(mask)
        if n_good == 0:
            fail(f"all {wave.size} pixels are masked (flux or uncertainty NaN/inf, or flagged bad)")
        if n_good < MIN_PIXELS:
            fail(f"only {n_good} of {wave.size} pixels are unmasked; need at least {MIN_PIXELS}")

        for arr in (wave, flux, err, mask):
            if arr is not None:
                arr.flags.writeable = False
        for key, value in (("wavelength", wave), ("flux", flux), ("flux_err", err), ("mask", mask),
                           ("name", str(self.name)), ("path", str(self.path)), ("meta", dict(self.meta))):
            object.__setattr__(self, key, value)

    def __repr__(self):
        err = "yes" if self.flux_err is not None else "no"
        return (f"Spectrum(name={self.name!r}, n_pixels={self.n_pixels}, "
                f"wavelength={self.wavelength[0]:.6g}..{self.wavelength[-1]:.6g} Angstrom, "
                f"flux_err={err}, n_bad_pixels={self.n_bad_pixels})")

    def __len__(self):
        return self.n_pixels

    @property
    def n_pixels(self) -> int:
        """Number of pixels, masked ones included."""
        return int(self.wavelength.size)

    @property
    def n_bad_pixels(self) -> int:
        """Number of masked pixels (flagged bad, or flux/uncertainty NaN or infinite)."""
        return int(np.count_nonzero(self.mask))

    @property
    def good(self) -> np.ndarray:
        """(N,) bool array, True for pixels that are not masked."""
        return ~self.mask

    def snr_estimate(self) -> float:
        """Median signal-to-noise ratio per pixel over the unmasked pixels.

        Returns
        -------
        float
            ``median(flux / flux_err)`` when uncertainties are given; otherwise the DER_SNR
            estimate from the pixel-to-pixel scatter (:func:`der_snr`, Stoehr et al. 2008), which
            is only an estimate: unresolved structure counts as noise, so it is then a lower limit,
            and it is too high if neighbouring pixels are correlated over more than two pixels.
        """
        good = self.good
        if self.flux_err is not None:
            return float(np.median(self.flux[good] / self.flux_err[good]))
        return der_snr(self.flux[good])

    def velocity_step_kms(self) -> float:
        """Median pixel step in km/s, :math:`c\\,\\Delta\\ln\\lambda` (equal to :math:`c\\,\\Delta\\lambda/\\lambda` to first order)."""
        return float(C_KMS * np.median(np.diff(np.log(self.wavelength))))

    def slice(self, wmin, wmax) -> Spectrum:
        """The pixels with ``wmin <= wavelength <= wmax`` as a new spectrum.

        Parameters
        ----------
        wmin, wmax : float (Angstrom) or astropy Quantity
            Inclusive wavelength limits.

        Raises
        ------
        InputError
            If ``wmin >= wmax`` or fewer than :data:`MIN_PIXELS` (unmasked) pixels fall inside.
        """
        lo, hi = float(_angstrom(wmin)), float(_angstrom(wmax))
        if not lo < hi:
            raise InputError(f"spectrum {self.name or '(unnamed)'}: slice needs wmin < wmax, got {lo:g} and "
                             f"{hi:g} Angstrom")
        keep = (self.wavelength >= lo) & (self.wavelength <= hi)
        err = None if self.flux_err is None else self.flux_err[keep]
        return replace(self, wavelength=self.wavelength[keep], flux=self.flux[keep], flux_err=err,
                       mask=self.mask[keep])

    def to_log_grid(self, step_kms=None) -> Spectrum:
        """Resample onto a grid uniform in :math:`\\ln\\lambda`, conserving flux.

        Parameters
        ----------
        step_kms : float, optional
            Pixel step in km/s. Default: the median native step (:meth:`velocity_step_kms`).

        Returns
        -------
        Spectrum
            New pixels from the first wavelength up to at most the last, built with
            :func:`vsini.grid.log_wavelength_grid` and filled by
            :func:`vsini.grid.resample_flux_conserving` (masked pixels carry no weight; uncertainties
            propagate as independent errors, so neighbouring output pixels become correlated when
            the step is finer than the native one). ``meta["log_step_kms"]`` records the step.
        """
        step = self.velocity_step_kms() if step_kms is None else float(step_kms)
        new_wave = log_wavelength_grid(self.wavelength[0], self.wavelength[-1], step)
        flux, err, mask = resample_flux_conserving(self.wavelength, self.flux, new_wave,
                                                   flux_err=self.flux_err, mask=self.mask)
        return replace(self, wavelength=new_wave, flux=flux, flux_err=err, mask=mask,
                       meta={**self.meta, "log_step_kms": step})
