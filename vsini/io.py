"""Reading and writing 1-D spectra: FITS images with a wavelength WCS, FITS tables, CSV and text.

:func:`read_spectrum` recognises the format from the file's content (a FITS file starts with the
``SIMPLE`` card; anything else must be a text table), reads it with :mod:`astropy.io.fits`,
:mod:`astropy.wcs` or :mod:`astropy.table`, converts the wavelengths to Angstrom and returns a
validated :class:`~vsini.spectrum.Spectrum`. :func:`write_spectrum` writes exactly the formats the
reader reads. The accepted layouts, names, units and messages are listed in
``docs/input-formats.md``.

Every problem with a file is raised as one :class:`~vsini.errors.SpectrumFileError` naming the
file. Warnings that astropy emits while reading a header (non-standard keywords and the like) are
not lost and not raised: they are kept, one line each, in ``spectrum.meta["read_warnings"]``.
"""

from __future__ import annotations

import codecs
import gzip
import re
import warnings
from contextlib import contextmanager
from pathlib import Path

import astropy.units as u
import numpy as np
from astropy.io import fits
from astropy.io.ascii import InconsistentTableError
from astropy.table import Table
from astropy.wcs import WCS

from .errors import SpectrumFileError, VsiniError
from .spectrum import Spectrum

__all__ = [
    "WAVELENGTH_NAMES",
    "FLUX_NAMES",
    "UNCERTAINTY_NAMES",
    "UNCERTAINTY_EXTNAMES",
    "FITS_SUFFIXES",
    "TEXT_SUFFIXES",
    "read_spectrum",
    "write_spectrum",
]

#: Column names (case-insensitive) tried, in order, for the wavelength. ``loglam`` is
#: :math:`\log_{10}(\lambda/\mathrm{Angstrom})`.
WAVELENGTH_NAMES = ("wavelength", "wave", "lambda", "wl", "loglam")
#: Column names tried for the flux.
FLUX_NAMES = ("flux", "f", "intensity")
#: Column names tried for the uncertainty, each with what it holds: one-sigma uncertainty,
#: inverse variance or variance.
UNCERTAINTY_NAMES = {
    "flux_err": "sigma", "flux_error": "sigma", "err": "sigma", "error": "sigma", "sigma": "sigma",
    "uncertainty": "sigma", "ivar": "ivar", "variance": "var", "var": "var",
}
#: FITS extension names (EXTNAME, case-insensitive) of an uncertainty image and what they hold.
UNCERTAINTY_EXTNAMES = {
    "ERR": "sigma", "ERROR": "sigma", "SIGMA": "sigma", "UNCERT": "sigma", "IVAR": "ivar",
    "VARIANCE": "var", "VAR": "var",
}
#: File-name endings written as FITS (each also with ``.gz``).
FITS_SUFFIXES = (".fits", ".fit", ".fts")
#: File-name endings written as text: ``.csv`` comma-separated, the others whitespace-separated.
TEXT_SUFFIXES = (".csv", ".txt", ".dat")

# CTYPE1 values accepted for the wavelength axis of an image ("" = no CTYPE1: plain linear axis).
_CTYPES = {"": "unknown", "LINEAR": "unknown", "WAVE": "vacuum", "AWAV": "air",
           "WAVE-LOG": "vacuum", "AWAV-LOG": "air"}
# A column header "name[unit]" or "name (unit)".
_NAME_UNIT = re.compile(r"^\s*(?P<name>[^\[\(]*?)\s*(?:\[(?P<u1>[^\]]*)\]|\((?P<u2>[^\)]*)\))?\s*$")
_NO_ROWS = "no data rows (the file holds only a header, comments or blank lines)"
# Library exceptions turned into a SpectrumFileError.
_LIBRARY_ERRORS = (OSError, EOFError, ValueError, TypeError, KeyError, IndexError)


def read_spectrum(path, *, wavelength_unit=None, name=None) -> Spectrum:
    """Read a 1-D spectrum from a FITS image, a FITS binary table, or a CSV / whitespace text table.

    Parameters
    ----------
    path : str or path-like
        The file. FITS files may be gzip-compressed; the format is recognised from the content.
    wavelength_unit : str or astropy unit, optional
        Unit of the wavelengths in the file. It *overrides* whatever the file states (use it when
        a header is wrong or silent). Default: the file's own unit (CUNIT1, TUNITn, ``[unit]`` in
        a text header, an ECSV unit), else Angstrom; ``meta["wavelength_unit_assumed"]`` is True
        in that last case, because an unstated unit is a guess.
    name : str, optional
        Name of the spectrum. Default: the OBJECT keyword of a FITS file, else the file name.

    Returns
    -------
    Spectrum
        Wavelengths in Angstrom, increasing (a spectrum stored with decreasing wavelengths is
        reversed, and ``meta["reversed"]`` says so). NaN or infinite flux and uncertainty pixels
        are masked. ``meta`` records ``format``, ``hdu``, ``columns``, ``wavelength_unit``,
        ``wavelength_unit_assumed``, ``medium`` ('air', 'vacuum' or 'unknown'), ``flux_unit``,
        ``reversed`` and ``read_warnings``.

    Raises
    ------
    SpectrumFileError
        With one line naming the file and the problem: missing or empty file, content that is
        neither FITS nor a text table, no spectrum in a FITS file, missing columns, unknown or
        non-length units, mismatched lengths, wavelengths not monotonic or duplicated,
        uncertainties zero or negative, every pixel masked. Exceptions raised by astropy while
        parsing are chained (``from``) into it.
    """
    path = Path(path)
    if not path.exists():
        raise SpectrumFileError(path, "file not found; check the path")
    if path.is_dir():
        raise SpectrumFileError(path, "is a directory, not a spectrum file")
    if path.stat().st_size == 0:
        raise SpectrumFileError(path, "file is empty")
    unit = None if wavelength_unit is None else _parse_unit(wavelength_unit, path, "the wavelength_unit argument")

    meta, is_fits = {}, None
    try:
        head = _head(path)
        is_fits = head.startswith(b"SIMPLE  =")
        if not is_fits and _suffix(path) in FITS_SUFFIXES:
            raise SpectrumFileError(path, "has a FITS file name but no FITS header (no SIMPLE card); "
                                          "the file is damaged or not FITS")
        if not is_fits and not _is_text(head):
            raise SpectrumFileError(path, "not a spectrum: binary content that is neither FITS nor text")
        with _recorded_warnings(meta):
            if is_fits:
                wave, flux, err, default_name = _read_fits(path, unit, meta)
            else:
                wave, flux, err = _read_text(path, unit, meta)
                default_name = ""
    except VsiniError:
        raise
    except _LIBRARY_ERRORS as e:
        kind = {True: "FITS", False: "a text table", None: "a spectrum"}[is_fits]
        raise SpectrumFileError(path, f"cannot be read as {kind} ({type(e).__name__}: {_first_line(e)})") from e

    meta["reversed"] = bool(wave.size > 1 and np.all(np.diff(wave) < 0))
    if meta["reversed"]:
        wave, flux = wave[::-1], flux[::-1]
        err = None if err is None else err[::-1]
    if name is None:
        name = default_name or Path(path.name.removesuffix(".gz")).stem
    return Spectrum(wave, flux, err, name=name, path=str(path), meta=meta)


def write_spectrum(spectrum, path, *, overwrite=False):
    """Write a spectrum in a format that :func:`read_spectrum` reads back.

    Parameters
    ----------
    spectrum : Spectrum
    path : str or path-like
        The format follows the file name:

        * ``.fits``, ``.fit``, ``.fts`` (optionally ``.gz``): a 1-D primary image with a linear
          wavelength WCS when the pixels are uniform in wavelength (to 1e-6 of a step), a
          ``WAVE-LOG`` WCS when they are uniform in :math:`\\ln\\lambda`, otherwise an empty primary
          HDU and a binary table (``wavelength`` [Angstrom], ``flux``, ``flux_err``). The
          uncertainty goes in an image extension ``ERR`` with the same WCS.
        * ``.csv`` (comma-separated) or ``.txt`` / ``.dat`` (whitespace-separated): a header
          line ``wavelength,flux[,flux_err]`` and wavelengths in Angstrom.
    overwrite : bool
        Replace an existing file.

    Notes
    -----
    Masked pixels are written with NaN flux, so the mask survives the round trip but the flux
    values of masked pixels do not. The spectrum's name is written as OBJECT (FITS only);
    ``meta["medium"] == "air"`` gives CTYPE1 ``AWAV``/``AWAV-LOG``, "vacuum" gives ``WAVE``/``WAVE-LOG``;
    an unknown medium gives a linear axis with no CTYPE1, or ``WAVE-LOG`` for a log axis (a log axis
    needs a spectral CTYPE1), which reads back as vacuum.

    Raises
    ------
    SpectrumFileError
        If the file exists and ``overwrite`` is False, the name has no known ending, or the
        file cannot be written.
    """
    path = Path(path)
    suffix = _suffix(path)
    if suffix not in FITS_SUFFIXES + TEXT_SUFFIXES:
        raise SpectrumFileError(path, f"unknown output format {suffix or '(no extension)'!r}; "
                                      "use .fits, .fits.gz, .csv, .txt or .dat")
    if path.exists() and not overwrite:
        raise SpectrumFileError(path, "file exists; pass overwrite=True to replace it")
    flux = np.where(spectrum.mask, np.nan, spectrum.flux)
    try:
        if suffix in FITS_SUFFIXES:
            _write_fits(spectrum, flux, path)
        else:
            table = Table({"wavelength": spectrum.wavelength, "flux": flux})
            if spectrum.flux_err is not None:
                table["flux_err"] = spectrum.flux_err
            table.write(path, format="ascii.csv" if suffix == ".csv" else "ascii.basic", overwrite=True)
    except OSError as e:
        raise SpectrumFileError(path, f"cannot be written ({_first_line(e)})") from e


# --- reading -----------------------------------------------------------------------------------


def _read_fits(path, unit, meta):
    """(wavelength in Angstrom, flux, sigma or None, OBJECT name) from a FITS file."""
    with fits.open(path, memmap=False) as hdul:
        default_name = str(hdul[0].header.get("OBJECT", "")).strip()
        images = [i for i, h in enumerate(hdul) if isinstance(h, (fits.PrimaryHDU, fits.ImageHDU))
                  and h.data is not None and h.data.size > 0 and _extname(h) not in UNCERTAINTY_EXTNAMES]
        if images:
            return (*_read_fits_image(path, hdul, images[0], unit, meta), default_name)
        tables = [i for i, h in enumerate(hdul) if isinstance(h, fits.BinTableHDU) and h.data is not None]
        if not tables:
            raise SpectrumFileError(path, "not a spectrum: no HDU holds an image or a binary table with data")
        hdu = hdul[tables[0]]
        meta.update(format="fits-table", hdu=tables[0], medium="unknown")
        if len(hdu.data) == 0:
            raise SpectrumFileError(path, f"the binary table in HDU {tables[0]} has no rows")
        columns = {c.name: (hdu.data[c.name], c.unit) for c in hdu.columns}
        wave, flux, err = _from_columns(path, columns, unit, meta, f"the table in HDU {tables[0]}")
        return wave, flux, err, default_name or str(hdu.header.get("OBJECT", "")).strip()


def _read_fits_image(path, hdul, index, unit, meta):
    """Wavelengths from the WCS of image HDU ``index``, its flux, and an uncertainty extension."""
    hdu = hdul[index]
    where = f"HDU {index}"
    flux = _one_dimensional(hdu.data, path, where)
    header = hdu.header.copy()
    ctype = str(header.get("CTYPE1", "")).strip().upper()
    if ctype not in _CTYPES:
        raise SpectrumFileError(path, f"CTYPE1 = {ctype!r} in {where} is not a supported wavelength axis; "
                                      "use WAVE, AWAV, WAVE-LOG, AWAV-LOG or a plain linear axis")
    if "CRVAL1" not in header or not ({"CDELT1", "CD1_1"} & set(header)):
        raise SpectrumFileError(path, f"the image in {where} has no wavelength solution; "
                                      "it needs CRVAL1, CDELT1 (or CD1_1) and CRPIX1")
    unit, assumed = _choose_unit(unit, header.get("CUNIT1"), path, f"CUNIT1 of {where}")
    # Tell WCS the unit: with no CUNIT1, wcslib would take spectral axes to be in metres.
    header["CUNIT1"] = unit.to_string("fits")
    wcs = WCS(header, naxis=1)
    native = wcs.pixel_to_world_values(np.arange(flux.size, dtype=float))
    log10_linear = header.get("DC-FLAG") == 1 and ctype in ("", "LINEAR")
    if log10_linear:  # IRAF convention: the linear axis is log10 of the wavelength (common practice)
        native = 10.0**native
    wave = native * u.Unit(wcs.wcs.cunit[0]).to(u.AA)

    err = None
    for i, ext in enumerate(hdul):
        kind = UNCERTAINTY_EXTNAMES.get(_extname(ext))
        if kind and i != index and isinstance(ext, fits.ImageHDU) and ext.data is not None:
            name = _extname(ext)
            values = _one_dimensional(ext.data, path, f"the {name} extension")
            if values.size != flux.size:
                raise SpectrumFileError(path, f"the {name} extension has {values.size} pixels but the flux "
                                              f"has {flux.size}; they must match")
            err = _to_sigma(values, kind, path, f"the {name} extension")
            meta["uncertainty_source"] = name
            break
    meta.update(format="fits-image", hdu=index, wcs_ctype=ctype, medium=_CTYPES[ctype],
                wavelength_unit=unit.to_string(), wavelength_unit_assumed=assumed,
                log10_wavelength=log10_linear, flux_unit=_str_or_none(hdu.header.get("BUNIT")))
    return wave, flux, err


def _read_text(path, unit, meta):
    """(wavelength in Angstrom, flux, sigma or None) from a CSV, whitespace or ECSV text table."""
    # astropy guesses the dialect: comma/whitespace/tab separated, header or none, '#' comments.
    try:
        table = Table.read(path, format="ascii")
    except InconsistentTableError as e:
        raise SpectrumFileError(path, "not a readable table: the lines have different numbers of columns or "
                                      "no common delimiter; use comma- or whitespace-separated columns") from e
    except IndexError as e:  # what astropy raises when nothing but comments and blank lines is left
        raise SpectrumFileError(path, _NO_ROWS) from e
    meta.update(format="text", medium="unknown")
    if len(table) == 0:
        raise SpectrumFileError(path, _NO_ROWS)
    names = table.colnames
    if names == [f"col{i}" for i in range(1, len(names) + 1)]:  # astropy's names for a headerless table
        if len(names) not in (2, 3):
            raise SpectrumFileError(path, f"{len(names)} columns and no header; expected 2 or 3 columns "
                                          "(wavelength, flux[, flux_err]) or a header line naming them")
        table.rename_columns(names, ["wavelength", "flux", "flux_err"][: len(names)])
    columns = {c: (table[c], None if table[c].unit is None else table[c].unit.to_string()) for c in table.colnames}
    return _from_columns(path, columns, unit, meta, "the header")


def _from_columns(path, columns, unit, meta, where):
    """Pick wavelength, flux and uncertainty from ``{name: (values, unit string or None)}``.

    Names match case-insensitively after a ``[unit]`` or ``(unit)`` suffix is split off; such a
    suffix takes precedence over the column's own unit.
    """
    found = {}
    for original, (values, col_unit) in columns.items():
        m = _NAME_UNIT.match(original)
        base, bracket = (m["name"], m["u1"] or m["u2"]) if m else (original, None)
        found.setdefault(base.strip().lower(), (original, values, bracket or col_unit))
    keys = {}
    for role, names in (("wavelength", WAVELENGTH_NAMES), ("flux", FLUX_NAMES)):
        keys[role] = next((n for n in names if n in found), None)
        if keys[role] is None:
            raise SpectrumFileError(path, f"no {role} column in {where} (looked for {', '.join(names)}; "
                                          f"found {', '.join(columns)}); name the columns "
                                          "wavelength, flux[, flux_err]")
    keys["flux_err"] = next((n for n in UNCERTAINTY_NAMES if n in found), None)
    meta["columns"] = {role: found[k][0] for role, k in keys.items() if k is not None}

    def values(key):
        original, v, _ = found[key]
        return _numeric(v, path, f"column {original!r}")

    wave = values(keys["wavelength"])
    if keys["wavelength"] == "loglam":
        wave = 10.0**wave
        unit, assumed = u.AA, False
    else:
        unit, assumed = _choose_unit(unit, found[keys["wavelength"]][2], path,
                                     f"the unit of column {found[keys['wavelength']][0]!r}")
        wave = wave * unit.to(u.AA)
    flux = values(keys["flux"])
    err = None
    if keys["flux_err"] is not None:
        err = _to_sigma(values(keys["flux_err"]), UNCERTAINTY_NAMES[keys["flux_err"]], path,
                        f"column {found[keys['flux_err']][0]!r}")
    meta.update(wavelength_unit=unit.to_string(), wavelength_unit_assumed=assumed,
                flux_unit=_str_or_none(found[keys["flux"]][2]))
    return wave, flux, err


# --- writing -----------------------------------------------------------------------------------


def _write_fits(spectrum, flux, path):
    """FITS image with a linear or log WCS if the grid allows, else a binary table."""
    w = spectrum.wavelength
    header = fits.Header()
    if spectrum.name:
        header["OBJECT"] = spectrum.name
    if spectrum.meta.get("flux_unit"):
        header["BUNIT"] = spectrum.meta["flux_unit"]
    air = spectrum.meta.get("medium") == "air"
    medium_known = spectrum.meta.get("medium") in ("air", "vacuum")
    if _uniform(w):
        if medium_known:
            header["CTYPE1"] = "AWAV" if air else "WAVE"
        header.update(CRPIX1=1.0, CRVAL1=w[0], CDELT1=(w[-1] - w[0]) / (w.size - 1), CUNIT1="Angstrom")
    elif _uniform(np.log(w)):
        # '-LOG' axis (Greisen et al. 2006, A&A 446, 747; from memory):
        # lambda = CRVAL1 * exp(CDELT1 * (p - CRPIX1) / CRVAL1), so CDELT1 = CRVAL1 * d(ln lambda).
        header["CTYPE1"] = "AWAV-LOG" if air else "WAVE-LOG"
        if not medium_known:
            header["COMMENT"] = "air or vacuum wavelengths: not known (WAVE-LOG is the FITS default)"
        dln = np.log(w[-1] / w[0]) / (w.size - 1)
        header.update(CRPIX1=1.0, CRVAL1=w[0], CDELT1=w[0] * dln, CUNIT1="Angstrom")
    else:
        table = Table({"wavelength": w * u.AA, "flux": flux})
        if spectrum.flux_err is not None:
            table["flux_err"] = spectrum.flux_err
        fits.HDUList([fits.PrimaryHDU(header=header), fits.table_to_hdu(table)]).writeto(path, overwrite=True)
        return
    hdus = [fits.PrimaryHDU(flux, header=header)]
    if spectrum.flux_err is not None:
        err_header = header.copy()
        err_header.pop("BUNIT", None)
        hdus.append(fits.ImageHDU(np.asarray(spectrum.flux_err), header=err_header, name="ERR"))
    fits.HDUList(hdus).writeto(path, overwrite=True)


# --- helpers -----------------------------------------------------------------------------------


def _uniform(x, rtol=1e-6):
    """True if ``x`` is an arithmetic sequence to within ``rtol`` of its step."""
    step = (x[-1] - x[0]) / (x.size - 1)
    return bool(np.max(np.abs(x - (x[0] + step * np.arange(x.size)))) <= rtol * abs(step))


def _parse_unit(text, path, where):
    """An astropy length unit from a unit or a string; Angstroms/ANGSTROM/microns also accepted."""
    if isinstance(text, u.UnitBase):
        unit, label = text, text.to_string()
    else:
        label = str(text).strip()
        for candidate in (label, label.lower(), label.lower().removesuffix("s")):
            try:
                unit = u.Unit(candidate)
                break
            except ValueError:
                continue
        else:
            raise SpectrumFileError(path, f"unknown wavelength unit {label!r} in {where}; "
                                          "use Angstrom, nm, um or m, or pass wavelength_unit=")
    if unit.physical_type != "length":
        raise SpectrumFileError(path, f"wavelength unit {label!r} in {where} is a unit of {unit.physical_type}, "
                                      "not a length; use Angstrom, nm, um or m")
    return unit


def _choose_unit(override, stated, path, where):
    """(unit, assumed): the override, else the stated unit, else Angstrom (assumed=True)."""
    if override is not None:
        return override, False
    stated = _str_or_none(stated)
    if stated is None:
        return u.AA, True
    return _parse_unit(stated, path, where), False


def _numeric(values, path, what):
    """A float ndarray (masked entries NaN); a single-row array column becomes its row."""
    v = np.ma.asarray(values)
    if v.dtype.kind not in "biuf":
        raise SpectrumFileError(path, f"{what} is not numeric (dtype {v.dtype}); check the header and delimiter")
    v = np.asarray(np.ma.filled(v.astype(float), np.nan))
    if v.ndim == 2 and v.shape[0] == 1:
        v = v[0]
    if v.ndim != 1:
        raise SpectrumFileError(path, f"{what} holds {v.shape[0]} rows of arrays; "
                                      "expected one value per row, or a single row holding the spectrum")
    return v


def _one_dimensional(data, path, where):
    """Image data as a float 1-D array; degenerate axes (e.g. shape (1, N)) are dropped."""
    a = np.asarray(data, dtype=float)
    if a.ndim > 1 and a.size == a.shape[-1]:
        a = a.reshape(-1)
    if a.ndim != 1:
        raise SpectrumFileError(path, f"{where} holds an image of shape {a.shape}; need a 1-D spectrum "
                                      "(extract one order or fibre first)")
    return a


def _to_sigma(values, kind, path, where):
    """One-sigma uncertainties from sigma, inverse variance (0 -> inf, masked) or variance."""
    if kind == "sigma":
        return values
    negative = np.count_nonzero(values < 0)
    if negative:
        label = "inverse variances" if kind == "ivar" else "variances"
        raise SpectrumFileError(path, f"{where} has {negative} negative {label}; they must be >= 0")
    with np.errstate(divide="ignore"):
        return 1.0 / np.sqrt(values) if kind == "ivar" else np.sqrt(values)


@contextmanager
def _recorded_warnings(meta):
    """Collect warnings raised inside into ``meta["read_warnings"]`` (one line each)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        yield
    meta["read_warnings"] = [f"{w.category.__name__}: {' '.join(str(w.message).split())}" for w in caught]


def _head(path, size=2880):
    """The first ``size`` bytes of a file, decompressed if it is gzip."""
    with open(path, "rb") as fh:
        head = fh.read(size)
    if head[:2] == b"\x1f\x8b":
        with gzip.open(path, "rb") as fh:
            head = fh.read(size)
    return head


def _is_text(head):
    """True if ``head`` looks like UTF-8 text (no NUL bytes, decodes)."""
    if b"\x00" in head:
        return False
    try:
        codecs.getincrementaldecoder("utf-8")().decode(head, final=False)
    except UnicodeDecodeError:
        return False
    return True


def _suffix(path):
    """Lower-case file ending without a trailing .gz ('x.fits.gz' -> '.fits')."""
    suffixes = [s.lower() for s in path.suffixes]
    if suffixes and suffixes[-1] == ".gz":
        suffixes.pop()
    return suffixes[-1] if suffixes else ""


def _extname(hdu):
    return str(hdu.header.get("EXTNAME", "")).strip().upper()


def _str_or_none(value):
    text = "" if value is None else str(value).strip()
    return text or None


def _first_line(obj):
    lines = [line.strip() for line in str(obj).splitlines() if line.strip()]
    return lines[0] if lines else type(obj).__name__
