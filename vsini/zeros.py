"""Zero positions :math:`q_k` of rotation kernels' Fourier transforms, and their calibration.

The k-th zero of the transform of a rotationally broadened line lies at :math:`\\sigma_k = q_k/(v\\sin i)`,
with :math:`q_k` fixed by the limb-darkening law (Carroll 1933 [1]_; Gray 2005 [2]_; Dravins, Lindegren &
Torkelsson 1990 [3]_). The ratio :math:`q_2/q_1` is about 1.76 for a rigid rotator with linear limb
darkening 0.6 and falls with solar-like differential rotation (Reiners & Schmitt 2002 [4]_).

* :func:`rotation_zeros`: :math:`(q_1, q_2)` of a rigid rotator: closed-form roots (linear law) or the
  table ``kernels/q1_quadratic.ecsv`` (quadratic law; :func:`build_zero_table`, :func:`write_zero_table`,
  :func:`load_zero_table`; ``python -m vsini.zeros`` regenerates it from a source checkout).
* :func:`macro_zero_positions`: the zeros of the joint rotation + radial-tangential macroturbulence kernel,
  which do move with :math:`\\zeta/v\\sin i`.
* :func:`rigid_q2_q1_range`: the :math:`q_2/q_1` a rigid rotator can show for a law known to a tolerance.

The estimator that uses them is :func:`vsini.fourier.fourier_vsini`.

References
----------
.. [1] Carroll, J. A. 1933, MNRAS 93, 478 (first use of Fourier zeros for rotation; from memory).
.. [2] Gray, D. F. 2005, *The Observation and Analysis of Stellar Photospheres*, 3rd ed., CUP, ch. 17-18.
.. [3] Dravins, D., Lindegren, L. & Torkelsson, U. 1990, A&A 237, 137 (volume and page from memory).
.. [4] Reiners, A. & Schmitt, J. H. M. M. 2002, A&A 384, 155; Reiners, A. 2006, A&A 446, 267 (from memory).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from .errors import InputError, MeasurementError
from .kernels import rotation_rt_transform
from .limbdark import as_limb_darkening, bessel_a, bessel_b, bessel_c

__all__ = [
    "ZERO_TABLE_NAME",
    "rotation_zeros",
    "macro_zero_positions",
    "rigid_q2_q1_range",
    "build_zero_table",
    "write_zero_table",
    "load_zero_table",
]

#: File name of the quadratic-law zero table in the package data (top-level ``kernels/``).
ZERO_TABLE_NAME = "q1_quadratic.ecsv"

_TWO_PI = 2.0 * np.pi


# --------------------------------------------------------------------------------------------- zero positions q_k


def _quadratic_numerator(u, a, b):
    """Transform of the quadratic-law kernel times its flux normalisation (same zeros), any (a, b)."""
    return (1.0 - a - b) * bessel_a(u) + (2.0 / 3.0) * (a + 2.0 * b) * bessel_b(u) - 0.5 * b * bessel_c(u)


def _first_roots(func, count, u_max=30.0, n=6000, levels=2, sub=64):
    """First ``count`` positive roots of a vectorised ``func`` (NaN where missing).

    Sign changes on a grid of ``n`` points up to ``u_max``; each bracket is then resampled ``levels`` times
    with ``sub`` points (all brackets in one call) and the root linearly interpolated in the last interval
    (relative error ~1e-11 for smooth functions with the defaults).
    """
    u = np.linspace(1e-3, u_max, n)
    g = func(u)
    idx = np.flatnonzero(np.sign(g[:-1]) * np.sign(g[1:]) < 0)[:count]
    out = np.full(count, np.nan)
    if idx.size == 0:
        return out
    lo, hi = u[idx], u[idx + 1]
    t = np.linspace(0.0, 1.0, sub + 1)
    for _ in range(levels):
        pts = lo[:, None] + (hi - lo)[:, None] * t[None, :]
        val = func(pts.ravel()).reshape(pts.shape)
        j = np.argmax(np.sign(val[:, :-1]) * np.sign(val[:, 1:]) <= 0, axis=1)
        rows = np.arange(lo.size)
        lo, hi = pts[rows, j], pts[rows, j + 1]
        f_lo, f_hi = val[rows, j], val[rows, j + 1]
    with np.errstate(invalid="ignore", divide="ignore"):
        root = np.where(f_hi != f_lo, lo - f_lo * (hi - lo) / (f_hi - f_lo), 0.5 * (lo + hi))
    out[: idx.size] = root
    return out


def _quadratic_roots(a, b, count=2):
    """First ``count`` roots u of :func:`_quadratic_numerator` for arrays of (a, b): grid bracketing, then a
    vectorised Illinois regula falsi to a bracket below 1e-14 (every row at once)."""
    a, b = np.asarray(a, dtype=float)[:, None], np.asarray(b, dtype=float)[:, None]
    u = np.linspace(1e-3, 6.0 * np.pi, 1900)  # q2 < 1.5 for every law in the table: two roots below u = 6 pi
    basis = (bessel_a(u), bessel_b(u), bessel_c(u))
    g = (1.0 - a - b) * basis[0] + (2.0 / 3.0) * (a + 2.0 * b) * basis[1] - 0.5 * b * basis[2]
    change = np.sign(g[:, :-1]) * np.sign(g[:, 1:]) < 0
    out = np.full((a.shape[0], count), np.nan)
    for k in range(count):
        idx = np.argmax(np.cumsum(change, axis=1) == k + 1, axis=1)
        has = np.sum(change, axis=1) > k
        lo, hi = u[idx], u[idx + 1]
        flo, fhi = g[np.arange(a.shape[0]), idx], g[np.arange(a.shape[0]), idx + 1]
        side = np.zeros(lo.shape, dtype=int)
        for _ in range(40):  # Illinois regula falsi (superlinear; the kept end's value is halved when kept twice)
            with np.errstate(invalid="ignore", divide="ignore"):
                m = np.where(fhi != flo, (lo * fhi - hi * flo) / (fhi - flo), 0.5 * (lo + hi))
            fm = _quadratic_numerator(m, a[:, 0], b[:, 0])
            left = np.sign(fm) == np.sign(flo)
            flo, fhi = np.where(~left & (side == -1), 0.5 * flo, flo), np.where(left & (side == 1), 0.5 * fhi, fhi)
            lo, flo = np.where(left, m, lo), np.where(left, fm, flo)
            hi, fhi = np.where(left, hi, m), np.where(left, fhi, fm)
            side = np.where(left, 1, -1)
            if np.all((hi - lo <= 1e-15 * hi) | (fm == 0) | ~has):
                break
        out[:, k] = np.where(has, np.where(fm == 0, m, 0.5 * (lo + hi)), np.nan)
    return out


#: Grid of the quadratic-law table (a, b), step 0.05: a wide rectangle around the usual coefficients. Points
#: with a + b > 1 (negative limb intensity) are mathematical extensions kept only as interpolation support.
_TABLE_A = np.round(np.arange(-0.1, 1.2 + 1e-9, 0.05), 10) + 0.0
_TABLE_B = np.round(np.arange(-0.5, 1.0 + 1e-9, 0.05), 10) + 0.0


def build_zero_table(a_values=None, b_values=None):
    """The table of the first two zeros :math:`q_1, q_2` of the quadratic-law rotation transform.

    Parameters
    ----------
    a_values, b_values : 1-D array_like, optional
        Grid of the coefficients of :math:`I = 1 - a(1-\\mu) - b(1-\\mu)^2`; default a = -0.1..1.2,
        b = -0.5..1.0 in steps of 0.05.

    Returns
    -------
    astropy.table.Table
        Columns ``a``, ``b``, ``q1``, ``q2`` (cycles: :math:`\\sigma_k v\\sin i`), ``physical`` (limb
        intensity >= 0), with provenance in ``meta``.

    Notes
    -----
    The zeros are the roots of the closed-form transform
    :math:`(1-a-b)\\,2J_1(u)/u + \\tfrac23(a+2b)\\,3j_1(u)/u - \\tfrac b2\\,8J_2(u)/u^2`
    (:meth:`vsini.limbdark.LimbDarkening.transform`), bracketed on a grid and refined by Illinois regula
    falsi to a bracket below 1e-14, divided by :math:`2\\pi`. For b = 0 they reduce to the linear law,
    checked in the tests against the polynomial of Dravins, Lindegren & Torkelsson (1990) [3]_. Regenerate
    the shipped file with ``python -m vsini.zeros`` (see :func:`write_zero_table`).
    """
    from astropy.table import Table

    a_values = _TABLE_A if a_values is None else np.asarray(a_values, dtype=float)
    b_values = _TABLE_B if b_values is None else np.asarray(b_values, dtype=float)
    aa, bb = (g.ravel() for g in np.meshgrid(a_values, b_values, indexing="ij"))
    u = _quadratic_roots(aa, bb)
    mu = np.linspace(0.0, 1.0, 101)[:, None]
    physical = np.all(1.0 - aa * (1 - mu) - bb * (1 - mu) ** 2 >= -1e-12, axis=0)
    t = Table([aa, bb, u[:, 0] / _TWO_PI, u[:, 1] / _TWO_PI, physical], names=("a", "b", "q1", "q2", "physical"))
    for col, text in (("a", "linear coefficient of I = 1 - a(1-mu) - b(1-mu)^2"),
                      ("b", "quadratic coefficient"),
                      ("q1", "first zero of the rotation kernel's transform, sigma_1 * vsini (cycles)"),
                      ("q2", "second zero, sigma_2 * vsini (cycles)"),
                      ("physical", "limb intensity >= 0 (rows with False are interpolation support only)")):
        t[col].description = text
    t.meta.update({
        "title": "First two Fourier zeros of the quadratic-limb-darkening rotation kernel",
        "source": "roots of the closed-form transform (vsini.limbdark.LimbDarkening.transform; project reference "
                  "notes section 4), bracketed on a grid and refined by Illinois regula falsi to 1e-14; b = 0 "
                  "agrees with the Dravins, Lindegren & Torkelsson 1990 (A&A 237, 137) polynomial to 2e-4",
        "regenerate": "python -m vsini.zeros   (vsini.zeros.write_zero_table)",
        "grid": f"a {a_values[0]:g}..{a_values[-1]:g}, b {b_values[0]:g}..{b_values[-1]:g}",
    })
    return t


def write_zero_table(path=None):
    """Write :func:`build_zero_table` as ECSV (default: ``kernels/q1_quadratic.ecsv`` of the source tree).

    Returns the path written. Run as ``python -m vsini.zeros`` from a source checkout.
    """
    from .datafiles import data_path

    target = data_path(ZERO_TABLE_NAME) if path is None else path
    build_zero_table().write(str(target), format="ascii.ecsv", overwrite=True)
    load_zero_table.cache_clear()
    _zeros_cached.cache_clear()
    return str(target)


@lru_cache(maxsize=1)
def load_zero_table():
    """The shipped quadratic-law zero table (:func:`build_zero_table`) as ``(a_grid, b_grid, q1, q2)`` splines.

    Returns
    -------
    a, b : 1-D ndarray
        The grid.
    spline_q1, spline_q2 : scipy.interpolate.RectBivariateSpline
        Bicubic interpolants of :math:`q_1(a, b)` and :math:`q_2(a, b)`.
    """
    from astropy.table import Table
    from scipy.interpolate import RectBivariateSpline

    from .datafiles import data_path

    path = data_path(ZERO_TABLE_NAME)
    try:
        t = Table.read(str(path), format="ascii.ecsv")
    except FileNotFoundError as e:
        raise MeasurementError(f"zero table {ZERO_TABLE_NAME} is missing from the package data; regenerate "
                               "it with 'python -m vsini.zeros'") from e
    a, b = np.unique(t["a"]), np.unique(t["b"])
    order = np.lexsort((t["b"], t["a"]))
    q1 = np.asarray(t["q1"])[order].reshape(a.size, b.size)
    q2 = np.asarray(t["q2"])[order].reshape(a.size, b.size)
    return a, b, RectBivariateSpline(a, b, q1), RectBivariateSpline(a, b, q2)


@lru_cache(maxsize=256)
def _zeros_cached(law, coefficients):
    ld = as_limb_darkening((law, *coefficients))
    if law == "quadratic":
        a_grid, b_grid, s1, s2 = load_zero_table()
        a, b = coefficients
        if a_grid[0] <= a <= a_grid[-1] and b_grid[0] <= b <= b_grid[-1]:
            return float(s1(a, b)[0, 0]), float(s2(a, b)[0, 0])
    q = ld.transform_zeros(2)  # linear law (closed-form transform), or a quadratic law outside the table
    return float(q[0]), float(q[1])


def rotation_zeros(limb_darkening=0.6):
    """First two zeros :math:`(q_1, q_2)` of a rigid rotator's transform, in :math:`\\sigma v\\sin i` (cycles).

    Linear law: roots of the closed-form transform (Gray 2005 [2]_; :math:`q_1 = 0.660` at
    :math:`\\epsilon = 0.6`). Quadratic law: bicubic interpolation in ``kernels/q1_quadratic.ecsv``
    (:func:`build_zero_table`; error < 1e-6), or the direct roots outside the tabulated range.
    """
    ld = as_limb_darkening(limb_darkening)
    return _zeros_cached(ld.law, ld.coefficients)


def macro_zero_positions(ratio, limb_darkening=0.6, radial_fraction=0.5):
    """Zeros :math:`(q_1, q_2)` of the joint rotation + radial-tangential macroturbulence kernel.

    Parameters
    ----------
    ratio : float
        :math:`\\zeta/v\\sin i` (:math:`\\zeta` the 1/e half-width of the radial-tangential model).
    limb_darkening : LimbDarkening or float
    radial_fraction : float
        :math:`A_R`.

    Returns
    -------
    (2,) ndarray
        In :math:`\\sigma v\\sin i` (cycles); NaN where the zero no longer exists (the kernel's transform
        only dips: for :math:`\\epsilon = 0.6` the zeros vanish near :math:`\\zeta/v\\sin i \\approx 0.7`).

    Notes
    -----
    The joint kernel (:func:`vsini.kernels.rotation_rt_transform`, Gray 2005 [2]_ ch. 17-18) depends on
    v sin i and :math:`\\zeta` only through their ratio, :math:`K(\\sigma; v, \\zeta) = K(\\sigma v; 1,
    \\zeta/v)`. Its first zero moves up with the ratio (+0.03 %, +0.2 %, +1.4 %, +3.3 % at 0.2, 0.3, 0.5,
    0.6 for :math:`\\epsilon = 0.6`), so :math:`q_1/\\sigma_1` with the rigid :math:`q_1` comes out low,
    and :math:`q_2/q_1` drops (1.753, 1.721, 1.535 at 0.2, 0.3, 0.5).
    """
    ld = as_limb_darkening(limb_darkening)
    ratio = float(ratio)
    if not (np.isfinite(ratio) and ratio >= 0):
        raise InputError(f"macro_zero_positions: zeta/vsini must be >= 0, got {ratio}")
    if ratio == 0:
        return np.array(rotation_zeros(ld))
    u = _first_roots(lambda t: rotation_rt_transform(t / _TWO_PI, 1.0, ratio, ld, radial_fraction), 2,
                     u_max=10.0, n=400)
    return u / _TWO_PI


def _macro_q(sigma1, zeta, ld, radial_fraction):
    """Self-consistent (q1, q2) and zeta/vsini for a measured first zero; None if the joint kernel has none.

    Solves :math:`v = q_1^\\mathrm{joint}(\\zeta/v)/\\sigma_1` by fixed-point iteration (the right side
    falls slowly with v), with bisection on :math:`[q_1/\\sigma_1, 1.25\\,q_1/\\sigma_1]` as the fallback
    when an iterate lands where the joint kernel has no zero.
    """

    def q_at(v):
        return macro_zero_positions(zeta / v, ld, radial_fraction)

    v = rotation_zeros(ld)[0] / sigma1
    lo, hi = v, 1.25 * v
    for _ in range(40):
        q = q_at(v)
        if not np.isfinite(q[0]):
            break
        v_new = q[0] / sigma1
        if abs(v_new - v) <= 1e-9 * v:
            return q, zeta / v_new
        v = v_new
    if not np.isfinite(q_at(hi)[0]) or q_at(hi)[0] / sigma1 > hi:
        return None
    for _ in range(60):  # h(v) = v - q1(zeta/v)/sigma1 rises with v; "no zero" counts as h < 0
        mid = 0.5 * (lo + hi)
        q = q_at(mid)
        if np.isfinite(q[0]) and mid >= q[0] / sigma1:
            hi = mid
        else:
            lo = mid
        if hi - lo <= 1e-9 * hi:
            break
    q = q_at(hi)
    return q, zeta / hi


def rigid_q2_q1_range(limb_darkening=0.6, *, tolerance=0.1, macro_ratio=0.0, radial_fraction=0.5):
    """The q2/q1 a rigid rotator can show for a limb-darkening law known to ``tolerance``.

    Parameters
    ----------
    limb_darkening : LimbDarkening or float
    tolerance : float
        Uncertainty of each coefficient: the range spans the law with each coefficient moved by
        :math:`\\pm` ``tolerance`` (linear :math:`\\epsilon` clipped to 0..1).
    macro_ratio : float
        :math:`\\zeta/v\\sin i` of radial-tangential macroturbulence; the range is shifted by its effect on the
        rigid ratio (:func:`macro_zero_positions`).
    radial_fraction : float

    Returns
    -------
    (lo, nominal, hi) : tuple of float

    Notes
    -----
    Linear law: q2/q1 = 1.831 (:math:`\\epsilon` = 0), 1.761 (0.6), 1.719 (1), the rigid range "about 1.72 to
    1.83" of Reiners & Schmitt (2002) [4]_; values below it need solar-like differential rotation.
    """
    ld = as_limb_darkening(limb_darkening)
    q = rotation_zeros(ld)
    nominal = q[1] / q[0]
    if ld.law == "linear":
        eps = ld.coefficients[0]
        variants = [(min(max(eps + s, 0.0), 1.0),) for s in (-tolerance, tolerance)]
    else:
        a, b = ld.coefficients
        variants = [(a + sa, b + sb) for sa in (-tolerance, tolerance) for sb in (-tolerance, tolerance)]
    ratios = [nominal]
    for c in variants:
        try:
            qq = _zeros_cached(ld.law, tuple(float(x) for x in c))
        except InputError:  # a corner with negative limb intensity: use the table's extension instead
            qq = _table_extension(c)
        ratios.append(qq[1] / qq[0])
    shift = 0.0
    if macro_ratio > 0:
        qm = macro_zero_positions(macro_ratio, ld, radial_fraction)
        shift = qm[1] / qm[0] - nominal if np.all(np.isfinite(qm)) else math.nan
    return float(min(ratios) + shift), float(nominal + shift), float(max(ratios) + shift)


def _table_extension(coefficients):
    u = _quadratic_roots([coefficients[0]], [coefficients[1]])[0]
    return float(u[0] / _TWO_PI), float(u[1] / _TWO_PI)


def _main():  # pragma: no cover - exercised by hand: ``python -m vsini.zeros`` regenerates the table
    write_zero_table()


if __name__ == "__main__":  # pragma: no cover
    _main()
