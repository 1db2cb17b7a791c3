"""Inclination of a star from its v sin i, rotation period and radius (Masuda & Winn 2020).

* :func:`infer_inclination` -- the posterior of :math:`\\cos i` for one star from its v sin i, its rotation
  period and its radius. The equatorial velocity :math:`v = 2\\pi R/P` and :math:`u = v\\sin i` are *not*
  independent (:math:`u \\le v`), so the posterior is built from their joint model (Masuda & Winn 2020) [1]_.
* :func:`infer_table` runs it over a survey results table joined with a star list;
  :func:`inclination_samples` draws from a posterior.

The distribution of equatorial velocities of a whole sample (deprojection) is in :mod:`vsini.deprojection`;
how the surface model biases the measured v sin i is in :mod:`vsini.sensitivity`.

Velocities are in km/s, radii in solar radii, periods in days, angles in degrees at the interface.
The maths, the assumptions and the cautions are written out in ``docs/inclination.md``.

References
----------
.. [1] Masuda, K. & Winn, J. N. 2020, AJ 159, 81 (volume/page from memory), doi:10.3847/1538-3881/ab65be.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final

import astropy.units as u
import numpy as np
from astropy.constants import R_sun
from astropy.table import Table
from scipy import special

from .errors import InputError

__all__ = [
    "VEQ_KMS_PER_RSUN_PER_DAY",
    "INCLINATION_FLAGS",
    "DEFAULT_RADIUS_FRAC_ERR",
    "DEFAULT_PERIOD_FRAC_ERR",
    "InclinationPosterior",
    "infer_inclination",
    "inclination_samples",
    "infer_table",
]

#: :math:`2\pi R_\odot / 1\,\mathrm{d}` in km/s: :math:`v_\mathrm{eq} = 50.59\,(R/R_\odot)/(P/\mathrm{d})` km/s.
VEQ_KMS_PER_RSUN_PER_DAY: Final[float] = float(2.0 * np.pi * R_sun.to_value(u.km) / u.day.to(u.s))

#: Flags set by :func:`infer_inclination` and :func:`infer_table` (short lower-case words).
INCLINATION_FLAGS: Final[dict[str, str]] = {
    "vsini_limit": "v sin i is only an upper limit: the inclination is only bounded from above "
    "(quote inclination_hi_deg as the bound), the median is not a measurement",
    "vsini_exceeds_veq": "v sin i exceeds 2 pi R / P by more than 2 combined sigma: the inputs disagree "
    "(period, radius, v sin i or differential rotation); the posterior piles up at i = 90 deg",
    "prior_dominated": "the data add less than 0.1 nat of information to the isotropic prior: the "
    "inclination is not constrained",
    "radius_poorly_known": "radius error above one third of the radius: the Gaussian error model is poor",
    "period_poorly_known": "period error above one third of the period: the Gaussian error model is poor",
    "missing_input": "v sin i, period or radius is missing or NaN for this star: no inclination",
    "bad_input": "an input value is out of range (e.g. negative error, non-positive period): no inclination",
}

#: Fractional radius error used by :func:`infer_table` when the star list has none (choice of this module).
DEFAULT_RADIUS_FRAC_ERR: Final[float] = 0.10
#: Fractional period error used by :func:`infer_table` when the star list has none (choice of this module,
#: of the order of the spread of spot periods with latitude in a solar-like differential rotator).
DEFAULT_PERIOD_FRAC_ERR: Final[float] = 0.05

_INFO_GAIN_MIN_NAT: Final[float] = 0.1  # threshold of the 'prior_dominated' flag
_N_SIGMA_PERIOD: Final[float] = 7.0  # half-width of the period quadrature, in sigma
_QUANTILES: Final[tuple[float, float, float]] = (0.158655, 0.5, 0.841345)  # -1, 0, +1 sigma of a Gaussian


def _check_number(name, value, *, positive=False, nonnegative=False, where=""):
    """Return ``value`` as a float, raising :class:`InputError` naming ``name`` if it is unusable."""
    try:
        x = float(value)
    except (TypeError, ValueError) as e:
        raise InputError(f"{where}{name} must be a number, got {value!r}") from e
    if not np.isfinite(x):
        raise InputError(f"{where}{name} must be finite, got {x}; remove the star or supply a value")
    if positive and x <= 0:
        raise InputError(f"{where}{name} must be positive, got {x}")
    if nonnegative and x < 0:
        raise InputError(f"{where}{name} must be non-negative, got {x}; errors are standard deviations")
    return x


# ----------------------------------------------------------------------------------------------------------
# Inclination of one star
# ----------------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class InclinationPosterior:
    """Posterior of the inclination of one star (isotropic prior, :math:`0 \\le i \\le 90^\\circ`).

    Attributes
    ----------
    inclination_grid_deg, inclination_pdf : (N,) ndarray
        Grid in :math:`i` (degrees, ascending) and the posterior density per degree.
    cos_i_grid, cos_i_pdf : (N,) ndarray
        The same nodes in :math:`\\cos i` (ascending) and the posterior density of :math:`\\cos i`.
    inclination_deg, inclination_lo_deg, inclination_hi_deg : float
        Posterior median and 15.87th / 84.13th percentiles of :math:`i`, degrees.
    cos_i_median : float
        Posterior median of :math:`\\cos i` (equal to ``cos(inclination_deg)``).
    veq_kms, veq_err_kms : float
        :math:`2\\pi R/P` at the measured values and its first-order error, km/s.
    information_gain_nat : float
        Kullback-Leibler divergence of the posterior from the prior, nat (0 = data say nothing).
    is_limit : bool
        True if v sin i was an upper limit.
    flags : tuple of str
        Words from :data:`INCLINATION_FLAGS`.
    """

    inclination_grid_deg: np.ndarray
    inclination_pdf: np.ndarray
    cos_i_grid: np.ndarray
    cos_i_pdf: np.ndarray
    inclination_deg: float
    inclination_lo_deg: float
    inclination_hi_deg: float
    cos_i_median: float
    veq_kms: float
    veq_err_kms: float
    information_gain_nat: float
    is_limit: bool
    flags: tuple[str, ...]


def _period_nodes(p0, sp, r0, sr, su, v0):
    """Trapezoid nodes and log-weights for the Gaussian period error (truncated at P > 0)."""
    if sp == 0.0:
        return np.array([p0]), np.array([0.0])
    lo = max(p0 - _N_SIGMA_PERIOD * sp, 1e-3 * p0)
    hi = p0 + _N_SIGMA_PERIOD * sp
    # the integrand's relative width in P is at least max(sr/r0, su/v0): keep >= 4 nodes across it
    rel_width = max(sr / r0, su / v0, 1e-4)
    n = int(np.clip(np.ceil((hi - lo) / (0.25 * rel_width * p0)), 101, 20001))
    nodes = np.linspace(lo, hi, n)
    w = np.full(n, nodes[1] - nodes[0])
    w[[0, -1]] *= 0.5
    return nodes, np.log(w) - 0.5 * ((nodes - p0) / sp) ** 2


def _log_posterior_cos_i(inc_rad, u_obs, su, p_nodes, p_logw, r0, sr, limit):
    """Unnormalised log posterior density of cos i at inclinations ``inc_rad`` (flat prior in cos i).

    The radius is integrated analytically (u is linear in R at fixed P and i), the period by quadrature.
    """
    a = VEQ_KMS_PER_RSUN_PER_DAY * np.sin(inc_rad)[:, None] / p_nodes[None, :]  # u = a R
    mean = a * r0
    s2 = (a * sr) ** 2 + su**2
    if limit:
        # int N(R; r0, sr) Phi((L - a R)/su) dR = Phi((L - a r0)/S), S^2 = a^2 sr^2 + su^2; S = 0: a step
        s = np.sqrt(s2)
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.where(
                s > 0, (u_obs - mean) / np.where(s > 0, s, 1.0), np.where(u_obs >= mean, np.inf, -np.inf)
            )
        ll = special.log_ndtr(z)
    else:
        # N(R; r0, sr) N(u; a R, su) = N(u; a r0, S) N(R; m, tau) (product of Gaussians); R > 0 gives Phi(m/tau)
        ll = -0.5 * (u_obs - mean) ** 2 / s2 - 0.5 * np.log(2.0 * np.pi * s2)
        if sr > 0:
            m = r0 + a * sr**2 * (u_obs - mean) / s2
            tau = sr * su / np.sqrt(s2)
            ll = ll + special.log_ndtr(m / tau)
    return special.logsumexp(ll + p_logw[None, :], axis=1)


def _grid_posterior(n_grid, logpost):
    """Evaluate ``logpost`` on a grid uniform in i, refined where the posterior is narrow."""
    grid = np.linspace(0.0, 0.5 * np.pi, n_grid)
    logp = logpost(grid)
    for _ in range(3):
        keep = np.flatnonzero(logp - logp.max() > np.log(1e-12))
        if keep.size >= 200:
            break
        lo, hi = grid[max(keep[0] - 1, 0)], grid[min(keep[-1] + 1, grid.size - 1)]
        fine = np.linspace(lo, hi, n_grid)
        grid, idx = np.unique(np.concatenate([grid, fine]), return_index=True)
        logp = np.concatenate([logp, logpost(fine)])[idx]
    return grid, logp


def infer_inclination(
    vsini_kms,
    vsini_err_kms,
    period_days,
    period_err_days,
    radius_rsun,
    radius_err_rsun,
    *,
    n_grid=1001,
    vsini_is_upper_limit=False,
):
    """Posterior of the inclination of one star from v sin i, rotation period and radius.

    Parameters
    ----------
    vsini_kms, vsini_err_kms : float
        Measured v sin i (or its upper limit) and its Gaussian error, km/s. The error must be positive for a
        measured value; for a limit it may be 0 (a hard limit).
    period_days, period_err_days : float
        Rotation period and its Gaussian error, days (error may be 0).
    radius_rsun, radius_err_rsun : float
        Stellar radius and its Gaussian error, solar radii (error may be 0).
    n_grid : int, optional
        Number of nodes uniform in :math:`i \\in [0, 90^\\circ]` (refined automatically where the posterior
        is narrower than the grid).
    vsini_is_upper_limit : bool, optional
        ``vsini_kms`` is an upper limit: the likelihood is :math:`\\Phi((L - u)/\\sigma_u)` (a step if the
        error is 0) instead of a Gaussian.

    Returns
    -------
    InclinationPosterior

    Raises
    ------
    InputError
        Non-finite input, negative error, non-positive period or radius, zero v sin i error on a measured
        value, or ``n_grid`` < 101.

    Notes
    -----
    Following Masuda & Winn (2020) [1]_, :math:`v = 2\\pi R/P` and :math:`u = v\\sin i` are treated jointly:

    .. math:: p(\\cos i\\mid D) \\propto p(\\cos i) \\int_0^\\infty\\!dP\\,N(P;\\hat P,\\sigma_P)
              \\int_0^\\infty\\!dR\\,N(R;\\hat R,\\sigma_R)\\,L_u\\!\\left(\\frac{2\\pi R}{P}\\sqrt{1-\\cos^2 i}\\right)

    with :math:`p(\\cos i)` uniform on [0, 1] (isotropic axes) and flat priors on :math:`R, P > 0`, so that
    :math:`p(v\\mid R, P\\ \\mathrm{data})` is the distribution of the ratio :math:`2\\pi R/P`. At fixed
    :math:`P` and :math:`i`, :math:`u = aR` with :math:`a = 2\\pi\\sin i/P` is linear in :math:`R`, so the
    :math:`R` integral is closed-form (product of Gaussians): :math:`N(\\hat u; a\\hat R, S)\\,\\Phi(m/\\tau)`,
    :math:`S^2 = a^2\\sigma_R^2 + \\sigma_u^2`, :math:`m = \\hat R + a\\sigma_R^2(\\hat u - a\\hat R)/S^2`,
    :math:`\\tau = \\sigma_R\\sigma_u/S`. For an upper limit it is :math:`\\Phi((L - a\\hat R)/S)`, neglecting
    the truncation at :math:`R > 0` (absolute error below :math:`\\Phi(-\\hat R/\\sigma_R)`; flagged
    ``radius_poorly_known`` when :math:`\\hat R/\\sigma_R < 3`). The :math:`P` integral is a trapezoid sum over
    :math:`\\hat P \\pm 7\\sigma_P` (truncated at :math:`P > 0`) with nodes finer than a quarter of the
    integrand's width. The result is evaluated on a grid uniform in :math:`i`, which resolves both
    :math:`i \\to 0` and :math:`i \\to 90^\\circ`; percentiles come from the trapezoid CDF.

    References
    ----------
    .. [1] Masuda, K. & Winn, J. N. 2020, AJ 159, 81 (from memory), doi:10.3847/1538-3881/ab65be.

    Examples
    --------
    >>> post = infer_inclination(3.0, 0.3, 10.0, 0.2, 1.0, 0.05)
    >>> 30 < post.inclination_deg < 50
    True
    """
    where = "infer_inclination: "
    limit = bool(vsini_is_upper_limit)
    u_obs = _check_number("vsini_kms", vsini_kms, nonnegative=True, positive=limit, where=where)
    su = _check_number("vsini_err_kms", vsini_err_kms, nonnegative=True, where=where)
    p0 = _check_number("period_days", period_days, positive=True, where=where)
    sp = _check_number("period_err_days", period_err_days, nonnegative=True, where=where)
    r0 = _check_number("radius_rsun", radius_rsun, positive=True, where=where)
    sr = _check_number("radius_err_rsun", radius_err_rsun, nonnegative=True, where=where)
    if not limit and su == 0.0:
        raise InputError(
            f"{where}vsini_err_kms must be positive for a measured v sin i, got 0; give its error"
        )
    if int(n_grid) != n_grid or n_grid < 101:
        raise InputError(f"{where}n_grid must be an integer >= 101, got {n_grid!r}")

    v0 = VEQ_KMS_PER_RSUN_PER_DAY * r0 / p0
    sv = v0 * np.hypot(sr / r0, sp / p0)
    p_nodes, p_logw = _period_nodes(p0, sp, r0, sr, su, v0)

    def logpost(inc):
        return _log_posterior_cos_i(inc, u_obs, su, p_nodes, p_logw, r0, sr, limit)

    inc, logp = _grid_posterior(int(n_grid), logpost)
    pc = np.exp(logp - logp.max())  # density of cos i, unnormalised
    sin_i = np.sin(inc)
    pc /= np.trapezoid(pc * sin_i, inc)  # int p(c) dc = int p(cos i) sin i di
    p_inc_rad = pc * sin_i
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (p_inc_rad[1:] + p_inc_rad[:-1]) * np.diff(inc))])
    cdf /= cdf[-1]
    lo, med, hi = np.degrees(np.interp(_QUANTILES, cdf, inc))
    info = float(np.trapezoid(special.xlogy(pc, pc) * sin_i, inc))  # KL(post || uniform in cos i)

    flags = []
    if limit:
        flags.append("vsini_limit")
    elif u_obs - v0 > 2.0 * np.hypot(su, sv):
        flags.append("vsini_exceeds_veq")
    if info < _INFO_GAIN_MIN_NAT:
        flags.append("prior_dominated")
    if sr > r0 / 3.0:
        flags.append("radius_poorly_known")
    if sp > p0 / 3.0:
        flags.append("period_poorly_known")

    inc_deg = np.degrees(inc)
    arrays = [inc_deg, p_inc_rad * np.pi / 180.0, np.cos(inc)[::-1], pc[::-1]]
    for a in arrays:
        a.setflags(write=False)
    return InclinationPosterior(
        inclination_grid_deg=arrays[0],
        inclination_pdf=arrays[1],
        cos_i_grid=arrays[2],
        cos_i_pdf=arrays[3],
        inclination_deg=float(med),
        inclination_lo_deg=float(lo),
        inclination_hi_deg=float(hi),
        cos_i_median=float(np.cos(np.radians(med))),
        veq_kms=float(v0),
        veq_err_kms=float(sv),
        information_gain_nat=info,
        is_limit=limit,
        flags=tuple(flags),
    )


def inclination_samples(posterior, size, *, rng=None):
    """Draw inclinations (degrees) from an :class:`InclinationPosterior` by inverting its CDF.

    Parameters
    ----------
    posterior : InclinationPosterior
    size : int or tuple of int
        Number (shape) of samples.
    rng : None, int or numpy.random.Generator, optional
        Seed or generator (``np.random.default_rng(rng)``).

    Returns
    -------
    ndarray, degrees
        Samples in [0, 90].

    Notes
    -----
    Inverse-transform sampling of the piecewise-linear (trapezoid) CDF on the posterior grid (common practice).
    """
    rng = np.random.default_rng(rng)
    x = posterior.inclination_grid_deg
    p = posterior.inclination_pdf
    cdf = np.concatenate([[0.0], np.cumsum(0.5 * (p[1:] + p[:-1]) * np.diff(x))])
    cdf /= cdf[-1]
    return np.interp(rng.uniform(size=size), cdf, x)


def _column(table, name, unit, where):
    """Column ``name`` as a float array in ``unit`` (masked -> NaN), or None if absent."""
    if name not in table.colnames:
        return None
    col = table[name]
    mask = np.ma.getmaskarray(col) if np.ma.isMaskedArray(col) else None
    try:
        if isinstance(col, u.Quantity):
            values = col.to_value(unit)
        elif getattr(col, "unit", None) is not None:
            values = col.quantity.to_value(unit)
        else:
            values = np.array(np.ma.getdata(col), dtype=float)
    except u.UnitConversionError as e:
        raise InputError(
            f"{where}column {name!r} is in {col.unit}, not convertible to {unit}; fix its unit"
        ) from e
    except (TypeError, ValueError) as e:
        raise InputError(f"{where}column {name!r} must be numeric; check the table") from e
    values = np.array(values, dtype=float)
    if mask is not None:
        values[mask] = np.nan
    return values


def infer_table(
    results_table,
    starlist_table,
    *,
    radius_frac_err=DEFAULT_RADIUS_FRAC_ERR,
    period_frac_err=DEFAULT_PERIOD_FRAC_ERR,
    n_grid=1001,
):
    """Inclination posteriors for every star of a survey results table.

    Parameters
    ----------
    results_table : astropy.table.Table
        Survey results with columns ``star``, ``vsini_adopted`` (km/s), ``vsini_adopted_err`` (km/s) and
        optionally ``vsini_adopted_is_limit`` (bool) and ``flags`` (space-separated words).
    starlist_table : astropy.table.Table
        Star list with ``star``, ``period_days``, ``radius_rsun`` and optionally ``period_err_days`` and
        ``radius_err_rsun``. Missing or NaN errors are replaced by ``period_frac_err * period`` and
        ``radius_frac_err * radius``.
    radius_frac_err, period_frac_err : float, optional
        Default fractional errors (10 % and 5 %; a choice of this module, not a published value).
    n_grid : int, optional
        Passed to :func:`infer_inclination`.

    Returns
    -------
    astropy.table.Table
        One row per results row, in its order: ``star``, ``inclination_deg`` (median), ``inclination_lo_deg``,
        ``inclination_hi_deg`` (15.87/84.13 percentiles), ``cos_i_median``, ``veq_kms``, ``flags``
        (:data:`INCLINATION_FLAGS` words) and ``vsini_flags`` (the survey's flags, passed through). Stars
        without a usable input get NaN and ``missing_input`` or ``bad_input``.

    Raises
    ------
    InputError
        A required column is missing, a column is not numeric, a star is listed twice in the star list,
        or a default fractional error is negative.
    """
    where = "infer_table: "
    for tab, label, needed in (
        (results_table, "results table", ("star", "vsini_adopted", "vsini_adopted_err")),
        (starlist_table, "star list", ("star", "period_days", "radius_rsun")),
    ):
        missing = [c for c in needed if c not in tab.colnames]
        if missing:
            raise InputError(f"{where}{label} lacks column(s) {', '.join(missing)}; add them")
    _check_number("radius_frac_err", radius_frac_err, nonnegative=True, where=where)
    _check_number("period_frac_err", period_frac_err, nonnegative=True, where=where)

    names = [str(s) for s in starlist_table["star"]]
    dupes = sorted({s for s in names if names.count(s) > 1})
    if dupes:
        raise InputError(f"{where}star list has duplicate star(s) {', '.join(dupes)}; keep one row each")
    row_of = {s: i for i, s in enumerate(names)}
    kms, day, rsun = u.km / u.s, u.day, u.R_sun
    vs = _column(results_table, "vsini_adopted", kms, where)
    vs_err = _column(results_table, "vsini_adopted_err", kms, where)
    period = _column(starlist_table, "period_days", day, where)
    radius = _column(starlist_table, "radius_rsun", rsun, where)
    period_err = _column(starlist_table, "period_err_days", day, where)
    radius_err = _column(starlist_table, "radius_err_rsun", rsun, where)
    is_limit = (
        np.ma.filled(np.ma.asarray(results_table["vsini_adopted_is_limit"]), False).astype(bool)
        if "vsini_adopted_is_limit" in results_table.colnames
        else np.zeros(len(results_table), dtype=bool)
    )
    survey_flags = (
        [str(f) if f is not np.ma.masked else "" for f in results_table["flags"]]
        if "flags" in results_table.colnames
        else [""] * len(results_table)
    )

    rows = []
    for k, star in enumerate(str(s) for s in results_table["star"]):
        j = row_of.get(star)
        nan_row = [star, np.nan, np.nan, np.nan, np.nan, np.nan]
        if j is None or not np.all(np.isfinite([vs[k], vs_err[k], period[j], radius[j]])):
            rows.append([*nan_row, "missing_input", survey_flags[k]])
            continue
        pe = (
            period_err[j]
            if period_err is not None and np.isfinite(period_err[j])
            else period_frac_err * period[j]
        )
        re = (
            radius_err[j]
            if radius_err is not None and np.isfinite(radius_err[j])
            else radius_frac_err * radius[j]
        )
        try:
            post = infer_inclination(
                vs[k],
                vs_err[k],
                period[j],
                pe,
                radius[j],
                re,
                n_grid=n_grid,
                vsini_is_upper_limit=is_limit[k],
            )
        except InputError:  # recorded in the row as a flag; the other stars go on
            rows.append([*nan_row, "bad_input", survey_flags[k]])
            continue
        rows.append(
            [
                star,
                post.inclination_deg,
                post.inclination_lo_deg,
                post.inclination_hi_deg,
                post.cos_i_median,
                post.veq_kms,
                " ".join(post.flags),
                survey_flags[k],
            ]
        )
    names_out = (
        "star",
        "inclination_deg",
        "inclination_lo_deg",
        "inclination_hi_deg",
        "cos_i_median",
        "veq_kms",
        "flags",
        "vsini_flags",
    )
    dtypes = (str, float, float, float, float, float, str, str)
    out = Table(rows=rows or None, names=names_out, dtype=dtypes)
    for name in ("inclination_deg", "inclination_lo_deg", "inclination_hi_deg"):
        out[name].unit = u.deg
    out["veq_kms"].unit = kms
    out.meta.update(
        {
            "method": "Masuda & Winn 2020 joint posterior, isotropic prior (vsini.inclination.infer_inclination)",
            "inclination_lo_hi": "15.87th and 84.13th posterior percentiles",
            "default_radius_frac_err": float(radius_frac_err),
            "default_period_frac_err": float(period_frac_err),
            "flags": dict(INCLINATION_FLAGS),
        }
    )
    return out
