"""Least-squares primitives of the profile fit, and what the data cannot tell: limits and chi-square maps.

:func:`detection_limit` gives the smallest v sin i the data can tell from zero; a macroturbulence that
ends at zero gets a profile-likelihood upper limit (:data:`MACRO_LIMIT_DCHI2`); :func:`chi2_map` gives the
profile chi-square over (v sin i, macroturbulence); the Monte Carlo refits and the intrinsic-width
systematic of the fit's errors are here too. The fit itself is :func:`vsini.fit.fit_vsini`, which
uses the primitives here and re-exports the public names.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .errors import InputError

__all__ = ["Chi2Map", "chi2_map", "detection_limit", "DELTA_CHI2_2PARAM", "DETECTION_DCHI2", "MACRO_LIMIT_DCHI2",
           "VSINI_MAX", "MACRO_MAX", "MICRO_ERR_KMS"]

#: Delta chi-square of the 68.3 %, 95.4 % and 99.73 % joint confidence regions of two parameters
#: (Press et al. 2007, Numerical Recipes 3rd ed., section 15.6, table of Delta chi^2 for nu = 2).
DELTA_CHI2_2PARAM = {1: 2.30, 2: 6.18, 3: 11.8}
#: Rotation counts as detected when fixing v sin i = 0 raises chi-square by at least this (3 sigma for one
#: parameter, Press et al. 2007, Numerical Recipes 3rd ed., sec. 15.6); see :func:`detection_limit`.
DETECTION_DCHI2 = 9.0
#: A macroturbulence that ends at zero is reported as the upper limit where the profile chi-square (every
#: other free parameter re-fitted) has risen by this much: 2 sigma for one parameter (Press et al. 2007,
#: Numerical Recipes 3rd ed., sec. 15.6), about a 97.7 % one-sided limit at the bound.
MACRO_LIMIT_DCHI2 = 4.0
#: Uncertainty (km/s) assumed for the microturbulence when the intrinsic line width is fixed: the
#: microturbulent part of every width is changed by this much either way, and half the change of the
#: best-fit v sin i (one Gauss-Newton step) is its systematic error (``vsini_sys_kms``). Microturbulence of FGK stars is rarely
#: known better than about 0.5 km/s (common practice).
MICRO_ERR_KMS = 0.5
VSINI_MAX = 1000.0  # km/s, upper bound of the fit
MACRO_MAX = 150.0  # km/s


# --------------------------------------------------------------------------------------------- least squares


def _make_params(model, start, free):
    """lmfit Parameters of ``model`` from a dict of starting values; ``free`` names the shared ones that vary."""
    import lmfit

    p = lmfit.Parameters()
    p.add("vsini", value=min(max(start["vsini"], 0.05), VSINI_MAX - 1), min=0.0, max=VSINI_MAX, vary="vsini" in free)
    p.add("rv", value=start["rv"], min=start["rv"] - 100.0, max=start["rv"] + 100.0, vary="rv" in free)
    p.add("macro", value=start.get("macro", 0.0), min=0.0, max=MACRO_MAX, vary="macro" in free)
    if model.feature_b is None:
        p.add("bint", value=start["bint"], min=0.05, max=60.0, vary=True)
    bound = model.shift_bound
    for name in model.shift_names():
        p.add(name, value=float(np.clip(start.get(name, 0.0), -bound, bound)), min=-bound, max=bound, vary=True)
    for name in model.ew_names() + model.continuum_names():
        p.add(name, value=start[name], vary=True)
    return p


def _lmfit(model, params, y, sigma, scale_covar):
    """Least-squares fit (Levenberg-Marquardt) of ``model`` to ``y``; ``params`` is not changed (lmfit copies it)."""
    import lmfit

    def resid(p, data):
        return (model.evaluate(p.valuesdict()) - data) / sigma

    def jac(p, data):
        names = [n for n, par in p.items() if par.vary]
        return model.jacobian(p.valuesdict(), names) / sigma[:, None]

    mini = lmfit.Minimizer(resid, params, fcn_args=(y,), scale_covar=scale_covar)
    return mini.minimize(method="leastsq", Dfun=jac, col_deriv=0)


# --------------------------------------------------------------------------------------------- limits


def detection_limit(model, values, free, sigma, *, n_sigma=3.0):
    """The smallest v sin i the data can tell from zero, from the Fisher information at v sin i = 0.

    Near zero the model depends on :math:`s = (v\\sin i)^2` (the profile is even in v sin i), so the
    bound is computed for :math:`s`: :math:`\\sigma_s^2 = (F^{-1})_{ss}` with the full Fisher matrix
    :math:`F = J^T J` of all free parameters (columns divided by the pixel sigma). The detection limit
    is :math:`v_\\mathrm{det} = \\sqrt{n\\,\\sigma_s}`; it generalises the :math:`\\sqrt{2n w_0 \\delta w/k}`
    rule of REFERENCES section 9 ("Small-v sin i behaviour", derived there from
    :math:`w^2 = w_0^2 + k (v\\sin i)^2`) to the full profile and to any set of free parameters.

    Returns
    -------
    v_det : float
        km/s.
    sigma_s : float
        One-sigma uncertainty of :math:`(v\\sin i)^2` at zero rotation, km^2/s^2.
    """
    base = dict(values, vsini=0.0)
    delta = 0.25 * max(model.gauss_b, 0.5)
    cols = [(model.evaluate(dict(base, vsini=delta)) - model.evaluate(base)) / delta**2]
    others = [n for n in free if n != "vsini"]
    if "macro" in others and base["macro"] < delta:  # even in zeta too: use zeta^2 near zero
        base["macro"] = 0.0
        others.remove("macro")
        cols.append((model.evaluate(dict(base, macro=delta)) - model.evaluate(base)) / delta**2)
    if others:
        cols.append(model.jacobian(base, others))
    jac = np.column_stack(cols) / sigma[:, None]
    cov = np.linalg.pinv(jac.T @ jac)
    sigma_s = math.sqrt(max(cov[0, 0], 0.0))
    return math.sqrt(n_sigma * sigma_s), sigma_s


def _delta_chi2_zero(model, res, sigma):
    """Chi-square increase when v sin i is fixed at 0 and every other free parameter is re-fitted."""
    p = res.params.copy()
    p["vsini"].set(value=0.0, vary=False)
    zero = _lmfit(model, p, model.y, sigma, False)
    return float(zero.chisqr - res.chisqr)


def _macro_upper_limit(model, res, sigma, factor):
    """Macroturbulence (km/s) where the profile chi-square rises by :data:`MACRO_LIMIT_DCHI2` above the best fit.

    At each trial :math:`\\zeta` every other free parameter is fitted again (profile likelihood). Near
    the bound the profile depends on :math:`s = \\zeta^2`, so the rise is modelled as
    :math:`\\Delta\\chi^2 = a s + b s^2`. The first trial comes from the linearised model at the best fit
    (Fisher matrix of :math:`s` and every other free parameter, as in :func:`detection_limit`); later
    ones from the quadratic through the trials so far. It stops within 0.1 of the level (typically after
    2-3 trials). ``factor`` divides chi-square (the reduced chi-square when the spectrum had no
    uncertainties). Returns :data:`MACRO_MAX` if even that is allowed.
    """
    warm = res.params.copy()
    warm["macro"].set(vary=False)

    def rise(zeta):
        warm["macro"].set(value=zeta)
        fit = _lmfit(model, warm, model.y, sigma, False)
        for name, par in fit.params.items():  # start the next trial from this one
            warm[name].set(value=par.value)
        return (fit.chisqr - res.chisqr) / factor

    level, s_max = MACRO_LIMIT_DCHI2, MACRO_MAX**2
    a, b = _macro_rise_linearised(model, res, sigma, factor)
    points = []  # (s, rise)
    lo, hi = 0.0, np.inf  # bracket in s
    for _ in range(12):
        if b > 0:
            s_new = (-a + math.sqrt(max(a * a + 4.0 * b * level, 0.0))) / (2.0 * b)
        else:
            s_new = level / a if a > 0 else np.inf
        s_new = min(s_new, 16.0 * lo if lo > 0 else s_max, s_max)
        if not lo < s_new < hi:  # outside the bracket: bisect it (or grow it)
            s_new = 0.5 * (lo + hi) if np.isfinite(hi) else min(4.0 * max(lo, 1.0), s_max)
        d = rise(math.sqrt(s_new))
        points.append((s_new, d))
        if abs(d - level) < 0.1:
            return math.sqrt(s_new)
        lo, hi = (max(lo, s_new), hi) if d < level else (lo, min(hi, s_new))
        if lo >= s_max:
            return MACRO_MAX
        pts = sorted(points, key=lambda q: abs(q[1] - level))[:2]
        if len(pts) == 1 or abs(pts[0][0] - pts[1][0]) < 1e-12:  # keep the linearised slope at zero
            b = (pts[0][1] - a * pts[0][0]) / pts[0][0] ** 2
        else:
            (s1, d1), (s2, d2) = pts
            b = (d1 / s1 - d2 / s2) / (s1 - s2)
            a = d1 / s1 - b * s1
    return math.sqrt(0.5 * (lo + hi)) if np.isfinite(hi) else MACRO_MAX


def _macro_rise_linearised(model, res, sigma, factor):
    """Coefficients (a, b) of the chi-square rise a s + b s^2 in s = zeta^2 (km^2/s^2) of the linearised model.

    With the Fisher matrix :math:`F = J^T J` (columns divided by the pixel sigma; the column of
    :math:`s` is a finite difference at :math:`\\zeta = 0`) and the unconstrained step
    :math:`\\hat s = (F^{-1} J^T r)_s` from the residuals :math:`r`, the profile rise is
    :math:`(s^2 - 2 s \\hat s)/\\sigma_s^2` with :math:`\\sigma_s^2 = (F^{-1})_{ss}`.
    """
    values = res.params.valuesdict()
    others = [n for n, par in res.params.items() if par.vary and n != "macro"]
    base = dict(values, macro=0.0)
    delta = 0.25 * max(model.gauss_b, 0.5)
    m0 = model.evaluate(base)
    col_s = (model.evaluate(dict(base, macro=delta)) - m0) / delta**2
    jac = np.column_stack([col_s, model.jacobian(base, others)]) / sigma[:, None]
    cov = np.linalg.pinv(jac.T @ jac)
    s_hat = float((cov @ (jac.T @ ((model.y - m0) / sigma)))[0])
    var_s = max(float(cov[0, 0]), 1e-300) * factor
    return max(-2.0 * s_hat / var_s, 0.0), 1.0 / var_s


# --------------------------------------------------------------------------------------------- chi-square map


@dataclass(frozen=True, eq=False)
class Chi2Map:
    """Chi-square over a (v sin i, macroturbulence) grid, every other parameter re-fitted at each node.

    ``chi2[i, j]`` belongs to ``macro_kms[i]``, ``vsini_kms[j]``. ``levels`` are the Delta chi-square
    values of the 1, 2 and 3 sigma joint regions of two parameters (:data:`DELTA_CHI2_2PARAM`).
    When the spectrum had no uncertainties, chi-square is divided by the best fit's reduced chi-square
    (``scaled`` is True).
    """

    vsini_kms: np.ndarray
    macro_kms: np.ndarray
    chi2: np.ndarray
    chi2_min: float
    best: tuple
    levels: dict
    scaled: bool
    name: str = ""


def chi2_map(result, vsini_grid=None, macro_grid=None, *, n=15):
    """Chi-square map over (v sin i, macroturbulence) for a :class:`FitResult` (profile likelihood).

    Parameters
    ----------
    result : FitResult
    vsini_grid, macro_grid : (M,) ndarray, km/s, optional
        Default: ``n`` points within 5 sigma of the best fit (clipped at 0; the detection limit
        stands in for an unmeasured v sin i error).
    n : int
        Points per default grid.

    Returns
    -------
    Chi2Map
    """
    model = result.model
    if model is None:
        raise InputError("chi2_map: the result carries no model (build it with fit_vsini)")
    v0, m0 = result.vsini_best_kms, result.params.get("macro", 0.0)
    v_err = result.vsini_err_kms if np.isfinite(result.vsini_err_kms) else result.detection_limit_kms
    m_err = result.macroturbulence_err_kms if np.isfinite(result.macroturbulence_err_kms) else 0.5 * max(m0, 2.0)
    if vsini_grid is None:
        vsini_grid = np.linspace(max(v0 - 5.0 * v_err, 0.0), v0 + 5.0 * v_err, n)
    if macro_grid is None and np.isfinite(result.macroturbulence_upper_limit_kms):  # zeta at 0: up to the limit
        macro_grid = np.linspace(0.0, 1.5 * result.macroturbulence_upper_limit_kms, n)
    elif macro_grid is None:
        macro_grid = np.linspace(max(m0 - 5.0 * m_err, 0.0), m0 + 5.0 * m_err, n)
    vs, ms = np.asarray(vsini_grid, dtype=float), np.asarray(macro_grid, dtype=float)
    if np.any(vs < 0) or np.any(ms < 0) or vs.ndim != 1 or ms.ndim != 1:
        raise InputError("chi2_map: grids must be 1-D and non-negative (km/s)")
    sigma, scale = result.sigma, result.scaled_errors
    best = _make_params(model, result.params, set(result.free) - {"vsini", "macro"})
    chi2 = np.empty((ms.size, vs.size))
    for i, m in enumerate(ms):
        start = best.copy()
        for j, v in enumerate(vs):
            start["vsini"].set(value=v, vary=False)
            start["macro"].set(value=m, vary=False)
            res = _lmfit(model, start, model.y, sigma, False)
            chi2[i, j] = res.chisqr
            start = res.params
    factor = result.redchi if scale else 1.0
    chi2 = chi2 / factor
    return Chi2Map(vs, ms, chi2, float(result.chi2 / factor), (v0, m0), dict(DELTA_CHI2_2PARAM), scale, result.name)


# --------------------------------------------------------------------------------------------- errors


def _on_lower_bound(name, par):
    """True for a free v sin i or macroturbulence resting on its lower bound (zero)."""
    return name in ("vsini", "macro") and par.vary and par.value < par.min + 1e-3


def _off_lower_bound(params, step=0.5):
    """A copy of ``params`` with free v sin i and macroturbulence moved ``step`` km/s up from a start at zero.

    A bounded parameter starting on its bound has a zero gradient in lmfit's internal (sine) variables, and
    Levenberg-Marquardt can then stop at once without moving any parameter; a refit from the best fit (of
    other noise, as in :func:`_monte_carlo`) must start just inside the range."""
    out = params.copy()
    for name, par in out.items():
        if _on_lower_bound(name, par):
            par.value = par.min + step
    return out


def _width_systematic(model, res, sigma, microturbulence):
    """Systematic error of v sin i from the assumed intrinsic width.

    The microturbulent part :math:`\\xi` of every width :math:`b = \\sqrt{b_\\mathrm{th}^2 + \\xi^2}`
    (Gray 2005, ch. 11) is changed by :data:`MICRO_ERR_KMS` either way (the lower one floored at zero);
    the best fit's response is one Gauss-Newton step, :math:`\\delta\\theta = (J^TJ)^{-1}J^T(r - \\delta m)`,
    with :math:`J` the weighted Jacobian of the free parameters (those resting on their lower bound held
    there), :math:`r` the residuals and :math:`\\delta m` the change of the model. Half the difference of
    the two v sin i steps is returned. Below about c/R, where the rotational and intrinsic widths add
    almost in quadrature, this dominates the error; there the first-order step is within about 10 % of
    full refits (checked by hand on independent test spectra).
    """
    values = res.params.valuesdict()
    names = [n for n, p in res.params.items() if p.vary and not _on_lower_bound(n, p)]
    if "vsini" not in names:
        return float("nan")
    jac = model.jacobian(values, names) / sigma[:, None]
    base = model.evaluate(values)
    resid = (model.y - base) / sigma
    xi = max(float(microturbulence), 0.0)
    b2 = model.feature_b**2 - xi**2
    steps = []
    for x in (xi + MICRO_ERR_KMS, max(xi - MICRO_ERR_KMS, 0.0)):
        alt = model.with_intrinsic_widths(np.sqrt(np.clip(b2 + x**2, 1e-4, None)))
        delta = (alt.evaluate(values) - base) / sigma
        steps.append(np.linalg.lstsq(jac, resid - delta, rcond=None)[0][names.index("vsini")])
    return float(0.5 * abs(steps[0] - steps[1]))


def _monte_carlo(model, params, sig_eff, n, rng):
    """Refit ``n`` noise realisations around the best-fit model; returns (n, 2) v sin i and macroturbulence."""
    gen = np.random.default_rng(rng)
    best = model.evaluate(params.valuesdict())
    out = np.empty((n, 2))
    params = _off_lower_bound(params)
    for k in range(n):
        res = _lmfit(model, params, best + sig_eff * gen.standard_normal(best.size), sig_eff, False)
        out[k] = res.params["vsini"].value, res.params["macro"].value
    return out
