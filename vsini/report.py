"""Result tables in ECSV, CSV, FITS and AASTeX, written atomically through astropy's writers."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from .errors import InputError

__all__ = ["TABLE_FORMATS", "table_format", "write_table"]

#: File extension -> astropy.table writer format.
TABLE_FORMATS = {
    ".ecsv": "ascii.ecsv",
    ".csv": "ascii.csv",
    ".fits": "fits",
    ".fit": "fits",
    ".tex": "ascii.aastex",
    ".txt": "ascii.fixed_width_two_line",
}


def table_format(path):
    """The astropy writer format for ``path``'s extension (ECSV when there is none)."""
    suffix = Path(path).suffix.lower()
    if suffix == "":
        return "ascii.ecsv"
    if suffix not in TABLE_FORMATS:
        raise InputError(
            f"{path}: unknown table extension {suffix!r}; use one of {', '.join(sorted(TABLE_FORMATS))}"
        )
    return TABLE_FORMATS[suffix]


def write_table(table, path):
    """Write ``table`` to ``path`` atomically: a temporary file in the same folder, then a rename.

    A reader never sees a half-written file, and an interrupted write leaves the old file intact.
    """
    path = Path(path)
    fmt = table_format(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=path.suffix or ".ecsv", dir=path.parent)
    os.close(fd)
    try:
        table.write(tmp, format=fmt, overwrite=True)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return path
