"""Line sets and line lists for the profile fit: the :class:`Line` feature and the shipped line sets.

A :class:`Line` is one absorption feature: a rest wavelength (air, Angstrom) and, for a blend of
known components (e.g. Mg II 4481), the components with their relative strengths. The fit gives each
feature one strength (equivalent width). Line sets ship as ECSV tables in the package data
(``vsini.data``, the top-level ``kernels/`` folder) and are read with :func:`load_line_set`;
:func:`as_lines` turns a user's choice (a set name, centres, or Line objects) into lines. Everything here
is re-exported by :mod:`vsini.lines`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import kernels as K
from .errors import InputError
from .grid import C_KMS

__all__ = ["Line", "DroppedLine", "available_line_sets", "line_set_table", "load_line_set", "as_lines"]


# --------------------------------------------------------------------------------------------- lines


@dataclass(frozen=True)
class Line:
    """One absorption feature to fit.

    Parameters
    ----------
    wavelength : float
        Rest wavelength in air, Angstrom: the strength-weighted mean of the components.
    species : str
        Element and ionisation stage, e.g. ``'Fe I'`` ('' if unknown).
    components : tuple of (float, float)
        ``(wavelength, weight)`` of each component of a blend, weights summing to 1; empty for a single line.
    label : str
        Text for tables and figures.
    """

    wavelength: float
    species: str = ""
    components: tuple = ()
    label: str = ""

    def __post_init__(self):
        w = float(self.wavelength)
        if not (np.isfinite(w) and w > 0):
            raise InputError(f"line: the wavelength must be a positive number of Angstrom, got {self.wavelength!r}")
        object.__setattr__(self, "wavelength", w)
        if not self.label:
            object.__setattr__(self, "label", f"{self.species} {w:.2f}".strip())

    @property
    def element(self):
        """Element symbol (``'Fe'`` for ``'Fe I'``), ``'Fe'`` when unknown: it sets the thermal width."""
        sym = self.species.split()[0] if self.species else ""
        return sym if sym in K.ATOMIC_MASS else "Fe"

    def offsets_kms(self, reference):
        """Component positions (km/s of :math:`c\\ln(\\lambda/\\lambda_\\mathrm{ref})`) and weights."""
        comps = self.components or ((self.wavelength, 1.0),)
        w = np.array([c[0] for c in comps], dtype=float)
        return C_KMS * np.log(w / reference), np.array([c[1] for c in comps], dtype=float)


@dataclass(frozen=True)
class DroppedLine:
    """A line left out of the fit, and why (one line of text)."""

    line: Line
    reason: str


def _data_files():
    from .datafiles import data_folder

    return data_folder()


def available_line_sets():
    """Names of the shipped line sets (files ``linesets_NAME.ecsv`` of the package data)."""
    names = [p.name for p in _data_files().iterdir()]
    return sorted(n[len("linesets_") : -len(".ecsv")] for n in names if n.startswith("linesets_") and n.endswith(".ecsv"))


def line_set_table(name):
    """The shipped line set ``name`` as an astropy Table, with its provenance in ``.meta``.

    Raises
    ------
    InputError
        If no line set of that name ships with the package.
    """
    from astropy.table import Table

    known = available_line_sets()
    if name not in known:
        raise InputError(f"line set {name!r} is not shipped; choose one of {', '.join(known)} or give centres in Angstrom")
    with _data_files().joinpath(f"linesets_{name}.ecsv").open("r") as fh:
        return Table.read(fh.read(), format="ascii.ecsv")


def load_line_set(name):
    """The lines of a shipped line set (air wavelengths), components of a blend grouped into one :class:`Line`."""
    table = line_set_table(name)
    groups = {}
    for row in table:
        groups.setdefault(str(row["feature"]), []).append((float(row["wavelength"]), str(row["species"]), float(row["weight"])))
    lines = []
    for label, rows in groups.items():
        w = np.array([r[0] for r in rows])
        wt = np.array([r[2] for r in rows])
        wt = wt / wt.sum()
        comps = tuple(zip(w.tolist(), wt.tolist(), strict=True)) if len(rows) > 1 else ()
        lines.append(Line(float(np.sum(w * wt)), rows[0][1], comps, label))
    return tuple(sorted(lines, key=lambda ln: ln.wavelength))


def as_lines(value):
    """Turn a user's line choice into a tuple of :class:`Line`, or None (detect lines automatically).

    Accepts None, a shipped line-set name, a string of centres in Angstrom separated by ``;`` or ``,``
    (``'6151.62;6173.34'``), a sequence of numbers, or a sequence of :class:`Line`.
    """
    if value is None:
        return None
    if isinstance(value, str):
        text = value.strip()
        if text in available_line_sets():
            return load_line_set(text)
        parts = [p for p in text.replace(",", ";").split(";") if p.strip()]
        try:
            value = [float(p) for p in parts]
        except ValueError:
            raise InputError(
                f"lines: cannot read {value!r}; give centres in Angstrom separated by ';' "
                f"or a line-set name ({', '.join(available_line_sets())})"
            ) from None
    out = tuple(v if isinstance(v, Line) else Line(float(v)) for v in value)
    if not out:
        raise InputError("lines: the list is empty; give at least one centre in Angstrom or a line-set name")
    return tuple(sorted(out, key=lambda ln: ln.wavelength))
