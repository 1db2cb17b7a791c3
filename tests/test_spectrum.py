"""Tests of the Spectrum container, and of the grid helpers it is built on (Doppler, resampling)."""

import astropy.units as u
import numpy as np
import pytest

from vsini.errors import InputError, SpectrumFileError
from vsini.grid import C_KMS, doppler_shift, log_wavelength_grid, pixel_edges, resample_flux_conserving
from vsini.spectrum import MIN_PIXELS, Spectrum, der_snr


def flat(n=200, start=5000.0, step=0.05, **kwargs):
    w = start + step * np.arange(n)
    return Spectrum(w, np.ones(n), **kwargs)


# --- validation ------------------------------------------------------------------------------

W = 5000.0 + 0.05 * np.arange(50)
ONES = np.ones(50)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"wavelength": W, "flux": ONES[:-1]}, r"flux has 49 values but wavelength has 50"),
        ({"wavelength": W, "flux": ONES, "flux_err": ONES[:10]}, r"flux_err has 10 values"),
        ({"wavelength": W, "flux": ONES, "mask": np.zeros(51, bool)}, r"mask has 51 values"),
        ({"wavelength": W, "flux": np.ones((2, 25))}, r"flux must be 1-D, got shape \(2, 25\)"),
        ({"wavelength": [], "flux": []}, r"no pixels"),
        ({"wavelength": W[:MIN_PIXELS - 1], "flux": ONES[:MIN_PIXELS - 1]}, rf"only {MIN_PIXELS - 1} pixels"),
        ({"wavelength": np.r_[W[:-1], np.nan], "flux": ONES}, r"1 wavelengths are NaN or infinite"),
        ({"wavelength": W - 5001.0, "flux": ONES}, r"wavelengths must be positive"),
        ({"wavelength": W[::-1], "flux": ONES}, r"not strictly increasing .* reverse a descending"),
        ({"wavelength": np.r_[W[:5], W[4:49]], "flux": ONES}, r"duplicated wavelength 5000.2 Angstrom \(pixels 4 and 5\)"),
        ({"wavelength": W, "flux": ONES, "flux_err": np.r_[ONES[:-2], 0.0, -1.0]}, r"2 zero or negative uncertainties"),
        ({"wavelength": W, "flux": np.full(50, np.nan)}, r"all 50 pixels are masked"),
        ({"wavelength": W, "flux": ONES, "mask": np.arange(50) > 5}, rf"only 6 of 50 pixels are unmasked; need at least {MIN_PIXELS}"),
    ],
)
def test_validation_errors(kwargs, match):
    with pytest.raises(InputError, match=match):
        Spectrum(**kwargs, name="HD 1")


def test_error_names_the_spectrum_or_the_file():
    with pytest.raises(InputError, match=r"^spectrum HD 1: no pixels"):
        Spectrum([], [], name="HD 1")
    with pytest.raises(SpectrumFileError, match=r"^star\.fits: no pixels") as info:
        Spectrum([], [], path="star.fits")
    assert info.value.path == "star.fits"


def test_nonfinite_pixels_are_masked_and_counted():
    flux = np.ones(50)
    flux[[3, 7]] = [np.nan, np.inf]
    err = np.full(50, 0.1)
    err[10] = np.nan
    s = Spectrum(W, flux, err, mask=np.arange(50) == 20)
    assert s.n_bad_pixels == 4
    assert np.flatnonzero(s.mask).tolist() == [3, 7, 10, 20]
    assert s.good.sum() == 46 and len(s) == s.n_pixels == 50


def test_arrays_are_copied_and_read_only():
    w, f = W.copy(), ONES.copy()
    s = Spectrum(w, f)
    w[0] = 1.0  # the caller's arrays stay writeable and do not alias the spectrum's
    assert s.wavelength[0] == 5000.0
    for arr in (s.wavelength, s.flux, s.mask):
        with pytest.raises(ValueError, match="read-only"):
            arr[0] = 0.0
    with pytest.raises(AttributeError):
        s.flux = f


def test_quantity_wavelengths_are_converted_to_angstrom():
    s = Spectrum((W / 10) * u.nm, ONES)
    np.testing.assert_allclose(s.wavelength, W, rtol=1e-15)


def test_repr_is_short():
    assert repr(flat(name="HD 1")) == ("Spectrum(name='HD 1', n_pixels=200, wavelength=5000..5009.95 Angstrom, "
                                       "flux_err=no, n_bad_pixels=0)")


# --- S/N, velocity step, slicing ------------------------------------------------------------------


def test_snr_from_uncertainties_is_median_flux_over_error():
    err = np.full(50, 0.02)
    err[:10] = 0.01  # median of flux/err = 50
    assert Spectrum(W, ONES, err).snr_estimate() == pytest.approx(50.0, rel=1e-12)


def test_der_snr_recovers_white_noise():
    # DER_SNR (Stoehr et al. 2008, ASP Conf. Ser. 394, 505; from memory): for white noise of sigma,
    # 2F_i - F_{i-2} - F_{i+2} has variance 6 sigma^2, so 1.482602/sqrt(6) * MAD -> sigma.
    # Scatter of the estimate: 0.97 % for n = 20000 (measured over 300 seeds, mean 99.94), close to
    # the 1.17/sqrt(n) = 0.83 % of a MAD from independent samples (common practice); 4 % is four sigma.
    rng = np.random.default_rng(42)
    n, sigma = 20000, 0.01
    w = 5000.0 + 0.02 * np.arange(n)
    flux = 1.0 + 1e-5 * (w - 5000.0) + sigma * rng.standard_normal(n)  # a continuum slope cancels
    s = Spectrum(w, flux)
    assert s.snr_estimate() == pytest.approx(np.median(flux) / sigma, rel=0.04)


def test_der_snr_limits():
    assert der_snr(np.ones(100)) == np.inf  # no scatter at all
    assert np.isnan(der_snr([1.0, 2.0, np.nan, 3.0]))  # fewer than five finite pixels


def test_velocity_step_of_a_log_grid():
    w = log_wavelength_grid(5000.0, 5100.0, 1.5)
    s = Spectrum(w, np.ones(w.size))
    assert s.velocity_step_kms() == pytest.approx(1.5, rel=1e-9)
    # On a linear grid the median step is c * dlambda / lambda at the median wavelength, to first order.
    assert flat().velocity_step_kms() == pytest.approx(C_KMS * 0.05 / 5004.975, rel=1e-5)


def test_slice_is_inclusive_and_accepts_quantities():
    s = flat(flux_err=np.full(200, 0.1))
    part = s.slice(5001.0, 5002.0)
    assert part.wavelength[0] == pytest.approx(5001.0) and part.wavelength[-1] == pytest.approx(5002.0)
    assert part.n_pixels == 21 and part.flux_err.size == 21
    assert s.slice(500.099 * u.nm, 500.201 * u.nm).n_pixels == 21


def test_slice_errors():
    s = flat(name="HD 1")
    with pytest.raises(InputError, match=r"HD 1: slice needs wmin < wmax, got 5002 and 5001 Angstrom"):
        s.slice(5002.0, 5001.0)
    with pytest.raises(InputError, match=r"only 3 pixels"):
        s.slice(5001.0, 5001.1)


# --- log-lambda resampling -------------------------------------------------------------------------


def test_to_log_grid_is_uniform_in_log_lambda_and_conserves_flux():
    w = 5000.0 + 0.05 * np.arange(400)
    flux = 1.0 - 0.6 * np.exp(-0.5 * ((w - 5010.0) / 0.4) ** 2)
    s = Spectrum(w, flux, np.full(400, 0.01))
    out = s.to_log_grid()
    step = np.diff(np.log(out.wavelength)) * C_KMS
    np.testing.assert_allclose(step, s.velocity_step_kms(), rtol=1e-9)
    assert out.meta["log_step_kms"] == s.velocity_step_kms()
    # Integrated flux over new pixels lying inside the old coverage equals the integral of the old
    # piecewise-constant spectrum over the same range (the two end pixels stick out by a fraction).
    new_edges = pixel_edges(out.wavelength)[1:-1]
    old_edges = pixel_edges(w)
    cumulative = np.r_[0.0, np.cumsum(flux * np.diff(old_edges))]
    expected = np.diff(np.interp(new_edges[[0, -1]], old_edges, cumulative))[0]
    assert np.sum(out.flux[1:-1] * np.diff(new_edges)) == pytest.approx(expected, rel=1e-10)
    assert out.flux_err is not None and np.all(out.flux_err > 0)


def test_to_log_grid_with_an_explicit_step():
    out = flat().to_log_grid(step_kms=10.0)
    assert out.velocity_step_kms() == pytest.approx(10.0, rel=1e-9)


# --- grid helpers the container relies on ------------------------------------------------------------


@pytest.mark.parametrize("rv", [-250.0, -3.0, 0.0, 30.0, 1000.0])
def test_doppler_shift_matches_astropy_optical_convention(rv):
    # astropy.units.doppler_optical: v = c (lambda - lambda0) / lambda0
    # (Astropy Collaboration 2013, A&A 558, A33; 2018, AJ 156, 123; volume/page from memory).
    rest = 6562.8 * u.AA
    expected = (rv * u.km / u.s).to_value(u.AA, equivalencies=u.doppler_optical(rest))
    assert doppler_shift(rest.value, rv) == pytest.approx(expected, rel=1e-9)


def test_sodium_d2_shift():
    # Na I D2 at 588.995 nm in air (common practice), shifted by +30 km/s: lambda0 (1 + v/c).
    shifted = doppler_shift(5889.95, 30.0)
    assert shifted == pytest.approx(5889.95 * (1 + 30.0 / 299792.458), rel=1e-12)
    assert shifted - 5889.95 == pytest.approx(0.58941, abs=1e-5)  # about 0.59 Angstrom redward


def test_resample_conserves_flux_over_whole_pixels():
    # Old pixels of step h; new pixels of step 2h whose edges fall on old edges, so each new pixel
    # covers two whole old pixels: sum(F_new * 2h) = sum(F_old * h) exactly (to rounding).
    rng = np.random.default_rng(7)
    h, n = 0.05, 400
    w = 5000.0 + h * np.arange(n)
    flux = 1.0 + 0.2 * rng.standard_normal(n)
    new = w[0] - h / 2 + h + 2 * h * np.arange(n // 2)
    out, _, mask = resample_flux_conserving(w, flux, new)
    assert not mask.any()
    assert np.sum(out * 2 * h) == pytest.approx(np.sum(flux * h), rel=1e-10)
    np.testing.assert_allclose(out, 0.5 * (flux[0::2] + flux[1::2]), rtol=1e-10)


def test_resample_conserves_flux_on_an_irregular_grid():
    rng = np.random.default_rng(8)
    edges_old = 5000.0 + np.cumsum(rng.uniform(0.02, 0.08, 301))
    w = 0.5 * (edges_old[1:] + edges_old[:-1])
    flux = rng.uniform(0.5, 1.5, w.size)
    new = np.linspace(w[5], w[-5], 97)
    out, _, _ = resample_flux_conserving(w, flux, new)
    old_edges, new_edges = pixel_edges(w), pixel_edges(new)
    cumulative = np.r_[0.0, np.cumsum(flux * np.diff(old_edges))]
    expected = np.diff(np.interp(new_edges[[0, -1]], old_edges, cumulative))[0]
    assert np.sum(out * np.diff(new_edges)) == pytest.approx(expected, rel=1e-10)


def test_resample_propagates_errors_as_sqrt_n_averaging():
    # The mean of N independent pixels has sigma / sqrt(N): two-to-one binning gives sigma / sqrt(2)
    # (propagation of independent errors, common practice).
    h, n, sigma = 0.05, 400, 0.01
    w = 5000.0 + h * np.arange(n)
    new = w[0] - h / 2 + h + 2 * h * np.arange(n // 2)
    _, err, _ = resample_flux_conserving(w, np.ones(n), new, flux_err=np.full(n, sigma))
    np.testing.assert_allclose(err, sigma / np.sqrt(2), rtol=1e-10)
    # ... and white noise really shrinks by that factor: 200 realisations x 200 binned pixels, so the
    # sample standard deviation has relative error ~1/sqrt(2 * 40000) = 0.35 %; tolerance 2 %.
    rng = np.random.default_rng(11)
    binned = [resample_flux_conserving(w, sigma * rng.standard_normal(n), new)[0] for _ in range(200)]
    assert np.std(binned) == pytest.approx(sigma / np.sqrt(2), rel=0.02)
