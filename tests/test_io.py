"""Tests of reading and writing spectra (vsini.io): round trips, the WCS, units and bad input."""

import gzip

import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits
from astropy.table import Table
from astropy.wcs import WCS

from vsini.errors import SpectrumFileError
from vsini.grid import log_wavelength_grid
from vsini.io import read_spectrum, write_spectrum
from vsini.spectrum import Spectrum

N = 120


def make_spectrum(wavelength=None, *, err=True, medium=None, name="HD 1"):
    """A line on a flat continuum, one NaN pixel; linear grid 5000-5006 Angstrom by default."""
    w = 5000.0 + 0.05 * np.arange(N) if wavelength is None else wavelength
    flux = 1.0 - 0.5 * np.exp(-0.5 * ((w - w[N // 2]) / 0.3) ** 2)
    flux[7] = np.nan
    meta = {} if medium is None else {"medium": medium}
    return Spectrum(w, flux, np.full(w.size, 0.01) if err else None, name=name, meta=meta)


def assert_same(read, original, rtol=1e-12):
    np.testing.assert_allclose(read.wavelength, original.wavelength, rtol=rtol, atol=0)
    np.testing.assert_array_equal(read.mask, original.mask)
    np.testing.assert_array_equal(read.flux[read.good], original.flux[original.good])
    if original.flux_err is None:
        assert read.flux_err is None
    else:
        np.testing.assert_array_equal(read.flux_err, original.flux_err)


def image_header(ctype=None, cunit=None, crval=5000.0, cdelt=0.05, crpix=1.0):
    header = fits.Header()
    for key, value in (("CTYPE1", ctype), ("CUNIT1", cunit), ("CRVAL1", crval), ("CDELT1", cdelt),
                       ("CRPIX1", crpix)):
        if value is not None:
            header[key] = value
    return header


def write_image(path, flux, header, *extensions):
    fits.HDUList([fits.PrimaryHDU(np.asarray(flux, float), header=header), *extensions]).writeto(path)
    return path


# --- round trips ----------------------------------------------------------------------------------


@pytest.mark.parametrize("medium", ["air", "vacuum"])
def test_round_trip_linear_fits_image_with_err_extension(tmp_path, medium):
    s = make_spectrum(medium=medium)
    write_spectrum(s, tmp_path / "s.fits")
    with fits.open(tmp_path / "s.fits") as hdul:
        assert [h.name for h in hdul] == ["PRIMARY", "ERR"]
        assert hdul[0].header["CTYPE1"] == {"air": "AWAV", "vacuum": "WAVE"}[medium]
    r = read_spectrum(tmp_path / "s.fits")
    assert_same(r, s, rtol=1e-12)
    assert r.name == "HD 1" and r.n_bad_pixels == 1
    assert r.meta["format"] == "fits-image" and r.meta["medium"] == medium
    assert r.meta["uncertainty_source"] == "ERR" and not r.meta["wavelength_unit_assumed"]


def test_round_trip_log_lambda_fits_image(tmp_path):
    s = make_spectrum(log_wavelength_grid(5000.0, 5010.0, 2.0)[:N])
    write_spectrum(s, tmp_path / "s.fits.gz")
    with gzip.open(tmp_path / "s.fits.gz") as fh, fits.open(fh) as hdul:
        assert hdul[0].header["CTYPE1"] == "WAVE-LOG"
    r = read_spectrum(tmp_path / "s.fits.gz")
    assert_same(r, s, rtol=1e-12)
    assert r.name == "HD 1"


def test_round_trip_irregular_grid_as_fits_table(tmp_path):
    w = 5000.0 + np.cumsum(np.linspace(0.04, 0.06, N))
    s = make_spectrum(w)
    write_spectrum(s, tmp_path / "s.fits")
    r = read_spectrum(tmp_path / "s.fits")
    assert r.meta["format"] == "fits-table" and r.meta["hdu"] == 1
    assert_same(r, s, rtol=0)


@pytest.mark.parametrize(("suffix", "first_line"), [(".csv", "wavelength,flux,flux_err"),
                                                    (".txt", "wavelength flux flux_err"),
                                                    (".dat", "wavelength flux flux_err")])
def test_round_trip_text(tmp_path, suffix, first_line):
    s = make_spectrum()
    write_spectrum(s, tmp_path / f"HD1{suffix}")
    assert (tmp_path / f"HD1{suffix}").read_text().splitlines()[0] == first_line
    r = read_spectrum(tmp_path / f"HD1{suffix}")
    assert_same(r, s, rtol=0)
    assert r.name == "HD1" and r.meta["wavelength_unit_assumed"]


def test_round_trip_without_uncertainties(tmp_path):
    s = make_spectrum(err=False)
    for name in ("a.fits", "b.csv"):
        write_spectrum(s, tmp_path / name)
        assert_same(read_spectrum(tmp_path / name), s)


def test_whitespace_text_without_header(tmp_path):
    s = make_spectrum()
    data = np.column_stack([s.wavelength, s.flux, s.flux_err])
    np.savetxt(tmp_path / "s.txt", data, header="observed 2024-01-01, wavelength flux error")  # '#' comment
    assert_same(read_spectrum(tmp_path / "s.txt"), s, rtol=1e-15)
    np.savetxt(tmp_path / "two.txt", data[:, :2], delimiter="\t")
    r = read_spectrum(tmp_path / "two.txt")
    assert r.flux_err is None and r.n_pixels == N


def test_write_refuses_to_overwrite_and_unknown_endings(tmp_path):
    s = make_spectrum()
    write_spectrum(s, tmp_path / "s.csv")
    with pytest.raises(SpectrumFileError, match=r"s\.csv: file exists; pass overwrite=True"):
        write_spectrum(s, tmp_path / "s.csv")
    write_spectrum(s, tmp_path / "s.csv", overwrite=True)
    with pytest.raises(SpectrumFileError, match=r"unknown output format '\.xyz'"):
        write_spectrum(s, tmp_path / "s.xyz")
    with pytest.raises(SpectrumFileError, match=r"cannot be written"):
        write_spectrum(s, tmp_path / "missing-directory" / "s.csv")


# --- units ------------------------------------------------------------------------------------------


@pytest.mark.parametrize(("unit", "scale"), [("nm", 0.1), ("um", 1e-4), ("micron", 1e-4), ("Angstroms", 1.0),
                                             ("m", 1e-10)])
def test_fits_image_units(tmp_path, unit, scale):
    path = write_image(tmp_path / "s.fits", np.ones(N), image_header("WAVE", unit, 5000.0 * scale, 0.05 * scale))
    r = read_spectrum(path)
    np.testing.assert_allclose(r.wavelength, 5000.0 + 0.05 * np.arange(N), rtol=1e-12)
    assert not r.meta["wavelength_unit_assumed"]


@pytest.mark.parametrize("header", ["wavelength[nm],flux", "wavelength (nm),flux", "WAVE [nm],Flux"])
def test_text_units_in_the_header(tmp_path, header):
    w_nm = 500.0 + 0.005 * np.arange(N)
    path = tmp_path / "s.csv"
    path.write_text(header + "\n" + "\n".join(f"{float(w)!r},1.0" for w in w_nm) + "\n")
    r = read_spectrum(path)
    np.testing.assert_allclose(r.wavelength, w_nm * 10, rtol=1e-15)
    assert r.meta["wavelength_unit"] == "nm"


def test_fits_table_micron_tunit_and_ivar(tmp_path):
    w_um = 1.5 + 1e-5 * np.arange(N)
    ivar = np.full(N, 1e4)
    ivar[3] = 0.0  # a zero inverse variance is an infinite error: masked
    cols = [fits.Column(name="WAVE", format="D", unit="micron", array=w_um),
            fits.Column(name="FLUX", format="E", array=np.ones(N)),
            fits.Column(name="IVAR", format="E", array=ivar)]
    fits.HDUList([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols)]).writeto(tmp_path / "t.fits")
    r = read_spectrum(tmp_path / "t.fits")
    np.testing.assert_allclose(r.wavelength, w_um * 1e4, rtol=1e-15)
    assert r.flux_err[0] == pytest.approx(0.01) and r.mask[3] and r.n_bad_pixels == 1
    assert r.meta["columns"] == {"wavelength": "WAVE", "flux": "FLUX", "flux_err": "IVAR"}


def test_wavelength_unit_argument_overrides_the_file(tmp_path):
    path = write_image(tmp_path / "s.fits", np.ones(N), image_header("WAVE", "Angstrom", 500.0, 0.005))
    r = read_spectrum(path, wavelength_unit="nm")
    assert r.wavelength[0] == pytest.approx(5000.0, rel=1e-14)
    r = read_spectrum(path, wavelength_unit=u.nm)
    assert r.wavelength[-1] == pytest.approx(5000.0 + 0.05 * (N - 1), rel=1e-14)


def test_single_row_table_with_array_columns_and_loglam(tmp_path):
    # loglam = log10(wavelength / Angstrom), single row of array columns (common practice for survey files).
    loglam = 3.7 + 1e-4 * np.arange(N)
    table = Table({"loglam": [loglam], "flux": [np.ones(N)], "ivar": [np.full(N, 100.0)]})
    table.write(tmp_path / "t.fits")
    r = read_spectrum(tmp_path / "t.fits", name="star")
    np.testing.assert_allclose(r.wavelength, 10**loglam, rtol=1e-14)
    assert r.name == "star" and r.flux_err[0] == pytest.approx(0.1)


def test_descending_wavelengths_are_reversed(tmp_path):
    path = tmp_path / "s.csv"
    w = 5000.0 + 0.05 * np.arange(N)[::-1]
    Table({"lambda": w, "intensity": np.linspace(1, 2, N)}).write(path)
    r = read_spectrum(path)
    assert r.meta["reversed"] and r.wavelength[0] == 5000.0 and r.flux[0] == 2.0


# --- the FITS WCS ---------------------------------------------------------------------------------


@pytest.mark.parametrize(("ctype", "cunit", "crval", "cdelt", "crpix"), [
    ("WAVE", "nm", 500.0, 0.004, 3.5),
    ("AWAV", "Angstrom", 6500.0, 0.02, 1.0),
    ("WAVE-LOG", "Angstrom", 5000.0, 5000.0 * 1e-5, 10.0),
    ("AWAV-LOG", "um", 2.2, 2.2 * 2e-5, 1.0),
])
def test_fits_image_wavelengths_match_astropy_wcs(tmp_path, ctype, cunit, crval, cdelt, crpix):
    # Reference: astropy.wcs (wcslib; spectral axis types: Greisen et al. 2006, A&A 446, 747, from memory).
    header = image_header(ctype, cunit, crval, cdelt, crpix)
    path = write_image(tmp_path / "s.fits", np.ones(N), header)
    with fits.open(path) as hdul:
        expected = WCS(hdul[0].header).pixel_to_world(np.arange(N)).to_value(u.AA)
    r = read_spectrum(path)
    np.testing.assert_allclose(r.wavelength, expected, rtol=1e-13)
    assert r.meta["medium"] == ("air" if ctype.startswith("AWAV") else "vacuum")


def test_plain_linear_header_without_ctype_or_cunit(tmp_path):
    # CRVAL1 + CDELT1 * (p - CRPIX1) with 1-based p (FITS convention), Angstrom when CUNIT1 is absent.
    path = write_image(tmp_path / "s.fits", np.ones(N), image_header(crval=4000.0, cdelt=0.1, crpix=11.0))
    r = read_spectrum(path)
    np.testing.assert_allclose(r.wavelength, 4000.0 + 0.1 * (np.arange(1, N + 1) - 11.0), rtol=1e-14)
    assert r.meta["wavelength_unit_assumed"] and r.meta["medium"] == "unknown"


def test_iraf_log10_linear_axis(tmp_path):
    # IRAF DC-FLAG = 1: the linear axis holds log10(wavelength) (common practice).
    header = image_header("LINEAR", None, 3.7, 1e-5)
    header["DC-FLAG"] = 1
    r = read_spectrum(write_image(tmp_path / "s.fits", np.ones(N), header))
    np.testing.assert_allclose(r.wavelength, 10 ** (3.7 + 1e-5 * np.arange(N)), rtol=1e-13)


@pytest.mark.parametrize(("extname", "values", "sigma"), [("ERROR", 0.2, 0.2), ("SIGMA", 0.2, 0.2),
                                                          ("IVAR", 25.0, 0.2), ("VARIANCE", 0.04, 0.2)])
def test_uncertainty_extensions(tmp_path, extname, values, sigma):
    ext = fits.ImageHDU(np.full(N, values), name=extname)
    r = read_spectrum(write_image(tmp_path / "s.fits", np.ones(N), image_header("WAVE"), ext))
    np.testing.assert_allclose(r.flux_err, sigma, rtol=1e-12)


def test_degenerate_axis_and_first_image_extension(tmp_path):
    ext = fits.ImageHDU(np.ones((1, N)), header=image_header("WAVE", "nm", 500.0, 0.005), name="FLUX")
    fits.HDUList([fits.PrimaryHDU(), ext]).writeto(tmp_path / "s.fits")
    r = read_spectrum(tmp_path / "s.fits")
    assert r.meta["hdu"] == 1 and r.wavelength[0] == pytest.approx(5000.0)


def test_astropy_header_warnings_are_recorded_not_raised(tmp_path):
    header = image_header("WAVE", "Angstrom")
    header["RADECSYS"] = "FK5"  # deprecated keyword: astropy.wcs warns (FITSFixedWarning)
    r = read_spectrum(write_image(tmp_path / "s.fits", np.ones(N), header))
    assert any(w.startswith("FITSFixedWarning") and "RADECSYS" in w for w in r.meta["read_warnings"])


# --- bad input ------------------------------------------------------------------------------------


def bad_csv(tmp_path, text, name="bad.csv"):
    path = tmp_path / name
    path.write_text(text)
    return path


def rows(w, *cols):
    return "\n".join(",".join(repr(float(v)) for v in row) for row in zip(w, *cols, strict=True)) + "\n"


W = 5000.0 + 0.05 * np.arange(20)


def test_missing_file(tmp_path):
    with pytest.raises(SpectrumFileError, match=r"nope\.fits: file not found; check the path"):
        read_spectrum(tmp_path / "nope.fits")
    with pytest.raises(SpectrumFileError, match=r"is a directory"):
        read_spectrum(tmp_path)


def test_empty_file(tmp_path):
    with pytest.raises(SpectrumFileError, match=r"empty\.csv: file is empty"):
        read_spectrum(bad_csv(tmp_path, "", "empty.csv"))


def test_random_bytes(tmp_path):
    data = np.random.default_rng(5).integers(0, 256, 4000, dtype=np.uint8).tobytes()
    (tmp_path / "noise.dat").write_bytes(data)
    with pytest.raises(SpectrumFileError, match=r"not a spectrum: binary content that is neither FITS nor text"):
        read_spectrum(tmp_path / "noise.dat")
    (tmp_path / "noise.fits").write_bytes(data)
    with pytest.raises(SpectrumFileError, match=r"has a FITS file name but no FITS header"):
        read_spectrum(tmp_path / "noise.fits")


def test_fits_without_data(tmp_path):
    fits.PrimaryHDU().writeto(tmp_path / "empty.fits")
    with pytest.raises(SpectrumFileError, match=r"not a spectrum: no HDU holds an image or a binary table"):
        read_spectrum(tmp_path / "empty.fits")


def test_truncated_fits_is_wrapped(tmp_path):
    write_spectrum(make_spectrum(), tmp_path / "s.fits")
    data = (tmp_path / "s.fits").read_bytes()
    (tmp_path / "cut.fits").write_bytes(data[:2880 + 100])
    with pytest.raises(SpectrumFileError, match=r"cut\.fits: cannot be read as FITS \(\w+") as info:
        read_spectrum(tmp_path / "cut.fits")
    assert info.value.__cause__ is not None


def test_fits_image_problems(tmp_path):
    with pytest.raises(SpectrumFileError, match=r"HDU 0 holds an image of shape \(3, 40\); need a 1-D spectrum"):
        read_spectrum(write_image(tmp_path / "a.fits", np.ones((3, 40)), fits.Header()))
    with pytest.raises(SpectrumFileError, match=r"CTYPE1 = 'FREQ' in HDU 0 is not a supported wavelength axis"):
        read_spectrum(write_image(tmp_path / "b.fits", np.ones(N), image_header("FREQ", "Hz")))
    with pytest.raises(SpectrumFileError, match=r"no wavelength solution; it needs CRVAL1, CDELT1"):
        read_spectrum(write_image(tmp_path / "c.fits", np.ones(N), fits.Header()))


def test_missing_columns(tmp_path):
    with pytest.raises(SpectrumFileError, match=r"no wavelength column in the header \(looked for wavelength, "
                                                r"wave, lambda, wl, loglam; found time, counts\)"):
        read_spectrum(bad_csv(tmp_path, "time,counts\n" + rows(W, W)))
    with pytest.raises(SpectrumFileError, match=r"no flux column in the table in HDU 1"):
        Table({"wave": W, "counts": W}).write(tmp_path / "t.fits")
        read_spectrum(tmp_path / "t.fits")
    with pytest.raises(SpectrumFileError, match=r"4 columns and no header; expected 2 or 3 columns"):
        read_spectrum(bad_csv(tmp_path, rows(W, W, W, W)))


def test_non_numeric_column(tmp_path):
    with pytest.raises(SpectrumFileError, match=r"column 'flux' is not numeric"):
        read_spectrum(bad_csv(tmp_path, "wavelength,flux\n" + "".join(f"{w},bright\n" for w in W)))


@pytest.mark.parametrize(("unit", "match"), [
    ("furlongs", r"unknown wavelength unit 'furlongs' in the unit of column 'wavelength \[furlongs\]'"),
    ("Hz", r"wavelength unit 'Hz' in .* is a unit of frequency, not a length"),
])
def test_bad_units_in_text(tmp_path, unit, match):
    with pytest.raises(SpectrumFileError, match=match):
        read_spectrum(bad_csv(tmp_path, f"wavelength [{unit}],flux\n" + rows(W, W)))


def test_bad_units_in_fits_and_argument(tmp_path):
    path = write_image(tmp_path / "s.fits", np.ones(N), image_header("WAVE", "parsec-ish"))
    with pytest.raises(SpectrumFileError, match=r"unknown wavelength unit 'parsec-ish' in CUNIT1 of HDU 0"):
        read_spectrum(path)
    with pytest.raises(SpectrumFileError, match=r"unknown wavelength unit 'bogus' in the wavelength_unit argument"):
        read_spectrum(path, wavelength_unit="bogus")


def test_mismatched_lengths(tmp_path):
    ext = fits.ImageHDU(np.ones(N - 1), name="ERR")
    path = write_image(tmp_path / "s.fits", np.ones(N), image_header("WAVE"), ext)
    with pytest.raises(SpectrumFileError, match=rf"the ERR extension has {N - 1} pixels but the flux has {N}"):
        read_spectrum(path)
    Table({"wave": [W], "flux": [W[:-2]]}).write(tmp_path / "t.fits")
    with pytest.raises(SpectrumFileError, match=r"flux has 18 values but wavelength has 20"):
        read_spectrum(tmp_path / "t.fits")


def test_non_monotonic_and_duplicated_wavelengths(tmp_path):
    w = W.copy()
    w[[5, 6]] = w[[6, 5]]
    with pytest.raises(SpectrumFileError, match=r"wavelengths not strictly increasing \(5000.3 then 5000.25"):
        read_spectrum(bad_csv(tmp_path, "wavelength,flux\n" + rows(w, W), "a.csv"))
    w = W.copy()
    w[6] = w[5]
    with pytest.raises(SpectrumFileError, match=r"duplicated wavelength 5000.25 Angstrom \(pixels 5 and 6\)"):
        read_spectrum(bad_csv(tmp_path, "wavelength,flux\n" + rows(w, W), "b.csv"))


def test_zero_or_negative_uncertainties(tmp_path):
    err = np.full(20, 0.1)
    err[4], err[9] = 0.0, -0.1
    with pytest.raises(SpectrumFileError, match=r"2 zero or negative uncertainties \(first 0 at 5000.2 Angstrom\)"):
        read_spectrum(bad_csv(tmp_path, "wavelength,flux,sigma\n" + rows(W, W, err)))
    ext = fits.ImageHDU(np.full(N, -1.0), name="IVAR")
    with pytest.raises(SpectrumFileError, match=rf"the IVAR extension has {N} negative inverse variances"):
        read_spectrum(write_image(tmp_path / "s.fits", np.ones(N), image_header("WAVE"), ext))


def test_all_flux_nan(tmp_path):
    with pytest.raises(SpectrumFileError, match=r"all 20 pixels are masked"):
        read_spectrum(bad_csv(tmp_path, "wavelength,flux\n" + rows(W, np.full(20, np.nan))))


def test_nan_and_inf_pixels_are_masked_and_counted(tmp_path):
    flux = np.ones(20)
    flux[[2, 11]] = [np.nan, np.inf]
    r = read_spectrum(bad_csv(tmp_path, "wavelength,flux\n" + rows(W, flux)))
    assert r.n_bad_pixels == 2 and np.flatnonzero(r.mask).tolist() == [2, 11]


def test_unparseable_text_is_wrapped(tmp_path):
    with pytest.raises(SpectrumFileError, match=r"ragged\.txt: not a readable table: the lines have different"):
        read_spectrum(bad_csv(tmp_path, "1 2 3\n4 5\n6\n", "ragged.txt"))
    with pytest.raises(SpectrumFileError, match=r"comments\.txt: no data rows \(the file holds only"):
        read_spectrum(bad_csv(tmp_path, "# a comment\n\n# another\n", "comments.txt"))
    (tmp_path / "bad.fits.gz").write_bytes(b"\x1f\x8b" + b"not really gzip")
    with pytest.raises(SpectrumFileError, match=r"bad\.fits\.gz: cannot be read as a spectrum \(BadGzipFile"):
        read_spectrum(tmp_path / "bad.fits.gz")
    with pytest.raises(SpectrumFileError, match=r"header_only\.csv: no data rows"):
        read_spectrum(bad_csv(tmp_path, "wavelength,flux\n", "header_only.csv"))
    with pytest.raises(SpectrumFileError, match=r"oc\.csv: no data rows"):
        read_spectrum(bad_csv(tmp_path, "# a\n# b\n", "oc.csv"))


def test_fits_table_without_rows_or_with_many_array_rows(tmp_path):
    Table({"wavelength": np.zeros(0), "flux": np.zeros(0)}).write(tmp_path / "empty.fits")
    with pytest.raises(SpectrumFileError, match=r"the binary table in HDU 1 has no rows"):
        read_spectrum(tmp_path / "empty.fits")
    Table({"wavelength": [W, W], "flux": [W, W]}).write(tmp_path / "two.fits")
    with pytest.raises(SpectrumFileError, match=r"column 'wavelength' holds 2 rows of arrays"):
        read_spectrum(tmp_path / "two.fits")


def test_ecsv_column_units(tmp_path):
    w_nm = 500.0 + 0.005 * np.arange(N)
    Table({"wavelength": w_nm * u.nm, "flux": np.ones(N)}).write(tmp_path / "s.ecsv")
    r = read_spectrum(tmp_path / "s.ecsv")
    np.testing.assert_allclose(r.wavelength, w_nm * 10, rtol=1e-15)
    assert r.meta["wavelength_unit"] == "nm" and not r.meta["wavelength_unit_assumed"]


def test_commented_header(tmp_path):
    # astropy's commented-header convention: the first line "# name name" names the columns.
    path = bad_csv(tmp_path, "# lambda flux\n" + rows(W, np.ones(20)).replace(",", " "), "c.txt")
    assert read_spectrum(path).meta["columns"] == {"wavelength": "lambda", "flux": "flux"}
