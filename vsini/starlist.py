"""Star lists: one star a row, read from CSV or ECSV, turned into measurement tasks.

A star list names each star and its spectrum file, and may set per-star options that override the
survey-wide defaults (see ``docs/survey.md``). Required columns: ``star`` and ``spectrum`` (a path,
relative to the folder of the star list unless absolute). Optional option columns:
:data:`OPTION_COLUMNS`. Optional descriptive columns ``period_days`` and ``radius_rsun`` and any other
column are carried through to the results unchanged.

A problem with the list as a whole (file missing or unreadable, a required column missing) raises
:class:`~vsini.errors.SpectrumFileError`, a fatal error. A problem with one row (an empty spectrum
path, an option value that cannot be read) does not: the row's task carries the message in
:attr:`StarTask.problem` and the survey gives that star a failed row while the others go on.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import SpectrumFileError

__all__ = [
    "REQUIRED_COLUMNS",
    "OPTION_COLUMNS",
    "DESCRIPTIVE_COLUMNS",
    "INPUT_UNITS",
    "StarTask",
    "StarList",
    "read_starlist",
    "parse_option",
    "measure_keywords",
]

#: Columns every star list must have.
REQUIRED_COLUMNS = ("star", "spectrum")
#: Columns that override a survey-wide default for their row (empty cell: the default).
OPTION_COLUMNS = ("resolution", "limb_darkening", "lines", "teff", "logg", "rv", "macroturbulence")
#: Known descriptive columns: carried to the results with a unit (used by the inclination tools).
DESCRIPTIVE_COLUMNS = ("period_days", "radius_rsun")
#: Units of the known input columns in the results table.
INPUT_UNITS = {"teff": "K", "rv": "km/s", "macroturbulence": "km/s", "period_days": "d", "radius_rsun": "solRad"}

_READ_FORMATS = {".ecsv": "ascii.ecsv", ".csv": "ascii.csv"}
_OFF_WORDS = ("off", "none", "no")


@dataclass(frozen=True)
class StarTask:
    """One star to measure: everything a worker process needs, and nothing large.

    Attributes
    ----------
    index : int
        Row number in the star list (0-based); the key of the journal and the order of the results.
    star : str
        Star name.
    spectrum : str
        Path of the spectrum file, absolute (made absolute against the star list's folder).
    options : dict
        Keyword arguments of :func:`vsini.compare.measure_star` after the row's overrides: ``resolution``,
        ``limb_darkening``, ``lines``, ``teff``, ``logg``, ``rv``, ``macroturbulence``, ``method``, ``mc``.
    seed : tuple of int
        Seed of this star's random numbers, ``(survey seed, index)``: the same for every executor and on resume.
    problem : str
        Non-empty when the row cannot be measured (no spectrum path, an unreadable option value).
    """

    index: int
    star: str
    spectrum: str
    options: dict = field(default_factory=dict)
    seed: tuple = (0, 0)
    problem: str = ""


def parse_option(name, value):
    """Turn a star-list cell (or a default) into the value :func:`vsini.compare.measure_star` takes.

    Parameters
    ----------
    name : str
        One of :data:`OPTION_COLUMNS`.
    value : object
        Cell value: a number, a string, or None / masked / empty for "use the default".

    Returns
    -------
    object
        None for an empty cell. ``resolution``, ``teff``, ``logg``, ``rv``: float. ``limb_darkening``: float or
        the string ``'a,b'`` (quadratic law). ``lines``: a string (centres separated by ``;`` or a line-set
        name). ``macroturbulence``: ``'free'``, a float (km/s, fixed), or ``'off'`` for none.

    Raises
    ------
    ValueError
        With a one-line message when the value cannot be read.
    """
    if value is None or value is np.ma.masked:
        return None
    if isinstance(value, (bytes, np.bytes_)):
        value = value.decode()
    if isinstance(value, (np.generic,)):
        value = value.item()
    if isinstance(value, str):
        value = value.strip()
        if value == "" or value == "--":
            return None
    if isinstance(value, float) and math.isnan(value):
        return None
    if name in ("resolution", "teff", "logg", "rv"):
        try:
            number = float(value)
        except (TypeError, ValueError):
            raise ValueError(f"{name} = {value!r} is not a number") from None
        if not math.isfinite(number):
            raise ValueError(f"{name} = {value!r} is not finite")
        if name in ("resolution", "teff") and number <= 0:
            raise ValueError(f"{name} = {value!r} must be positive")
        return number
    if name == "limb_darkening":
        if isinstance(value, str):
            try:
                return float(value)
            except ValueError:
                return value  # 'a,b' (quadratic); checked by the estimators
        return float(value)
    if name == "lines":
        return str(value)
    if name == "macroturbulence":
        if isinstance(value, str):
            word = value.lower()
            if word == "free":
                return "free"
            if word in _OFF_WORDS:
                return "off"
            try:
                value = float(value)
            except ValueError:
                raise ValueError(f"macroturbulence = {value!r}: use 'free', 'off' or a value in km/s") from None
        number = float(value)
        if not (math.isfinite(number) and number >= 0):
            raise ValueError(f"macroturbulence = {value!r} must be >= 0 km/s")
        return number
    raise ValueError(f"{name!r} is not a star-list option; options are {', '.join(OPTION_COLUMNS)}")


def measure_keywords(options):
    """``options`` (values of :func:`parse_option`) as keyword arguments of :func:`vsini.compare.measure_star`.

    ``macroturbulence='off'`` becomes None (no macroturbulence).
    """
    out = dict(options)
    if out.get("macroturbulence") == "off":
        out["macroturbulence"] = None
    return out


class StarList:
    """A star list read into memory (a few hundred bytes a row), from which tasks are made one at a time.

    Parameters
    ----------
    path : Path
        The file it was read from.
    table : astropy.table.Table
        Its rows, with lower-case column names.
    """

    def __init__(self, path, table):
        self.path = Path(path)
        self.folder = self.path.resolve().parent
        self.table = table

    def __len__(self):
        return len(self.table)

    @property
    def extra_columns(self):
        """Columns that are neither required nor options: carried through to the results."""
        return [c for c in self.table.colnames if c not in REQUIRED_COLUMNS + OPTION_COLUMNS]

    def cell(self, index, name):
        """The value of column ``name`` in row ``index`` (None if the column is absent or the cell empty)."""
        if name not in self.table.colnames:
            return None
        value = self.table[name][index]
        if value is np.ma.masked:
            return None
        if isinstance(value, np.generic):
            value = value.item()
        if isinstance(value, bytes):
            value = value.decode()
        return value

    def star_name(self, index):
        """The star's name, or ``row N`` (1-based) when the cell is empty."""
        name = self.cell(index, "star")
        text = "" if name is None else str(name).strip()
        return text or f"row {index + 1}"

    def task(self, index, defaults, seed=0):
        """The :class:`StarTask` of row ``index`` with the row's options over ``defaults``.

        ``defaults`` holds parsed values for :data:`OPTION_COLUMNS` plus ``method`` and ``mc``.
        """
        star = self.star_name(index)
        options = {k: defaults.get(k) for k in OPTION_COLUMNS}
        options["method"] = defaults.get("method", "both")
        options["mc"] = int(defaults.get("mc", 0))
        problems = []
        for name in OPTION_COLUMNS:
            try:
                value = parse_option(name, self.cell(index, name))
            except ValueError as e:
                problems.append(str(e))
                continue
            if value is not None:
                options[name] = value
        spectrum = self.cell(index, "spectrum")
        spectrum = "" if spectrum is None else str(spectrum).strip()
        if not spectrum:
            problems.insert(0, "no spectrum file given in the star list")
            path = ""
        else:
            p = Path(spectrum).expanduser()
            path = str(p if p.is_absolute() else self.folder / p)
        problem = ""
        if problems:
            problem = f"{self.path.name} row {index + 1} ({star}): " + "; ".join(problems)
        return StarTask(index=index, star=star, spectrum=path, options=options, seed=(int(seed), int(index)),
                        problem=problem)

    def inputs(self, index):
        """The row's input values for the results table, keyed by column name."""
        return {c: self.cell(index, c) for c in self.table.colnames if c != "star"}


def read_starlist(path):
    """Read a star list (CSV or ECSV; other text tables are guessed by astropy).

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    StarList

    Raises
    ------
    SpectrumFileError
        If the file is missing, empty or unreadable, has no rows, or lacks a required column
        (the message names the file and the column).
    """
    from astropy.io.ascii import InconsistentTableError
    from astropy.table import Table

    path = Path(path)
    if not path.exists():
        raise SpectrumFileError(path, "star list not found; check the path")
    if path.is_dir():
        raise SpectrumFileError(path, "is a directory, not a star list (CSV or ECSV file)")
    if path.stat().st_size == 0:
        raise SpectrumFileError(path, "star list is empty; it needs a header line with the columns star,spectrum")
    fmt = _READ_FORMATS.get(path.suffix.lower(), "ascii")
    try:
        table = Table.read(path, format=fmt)
    except InconsistentTableError as e:
        if fmt == "ascii.ecsv":
            raise SpectrumFileError(path, "star list is not a valid ECSV table (it must start with the line "
                                          "'# %ECSV 1.0'); write it with astropy or use CSV") from e
        raise SpectrumFileError(path, "star list cannot be read: the rows have different numbers of columns; "
                                      "write one star a row with the same columns as the header") from e
    except (OSError, ValueError, TypeError, KeyError, IndexError, UnicodeDecodeError) as e:
        first = next((ln.strip() for ln in str(e).splitlines() if ln.strip()), type(e).__name__)
        raise SpectrumFileError(path, f"star list cannot be read as a table ({type(e).__name__}: {first}); "
                                      "use CSV or ECSV with a header line") from e
    rename = {}
    for name in table.colnames:
        low = name.strip().lower()
        if low != name:
            rename[name] = low
    seen = set()
    for name in table.colnames:
        low = rename.get(name, name)
        if low in seen:
            raise SpectrumFileError(path, f"star list has the column {low!r} twice (names are not case-sensitive)")
        seen.add(low)
    if rename:
        table.rename_columns(list(rename), list(rename.values()))
    for name in REQUIRED_COLUMNS:
        if name not in table.colnames:
            found = ", ".join(table.colnames) or "none"
            raise SpectrumFileError(path, f"star list has no column {name!r} (found: {found}); the required "
                                          f"columns are {' and '.join(REQUIRED_COLUMNS)}")
    if len(table) == 0:
        raise SpectrumFileError(path, "star list has a header but no rows")
    return StarList(path, table)
