"""Deprojection of v sin i distributions: the isotropic projection kernel and Lucy's iteration.

:func:`deproject` recovers the distribution :math:`f(v)` of equatorial velocities of a sample with
isotropic spin axes from its v sin i values (upper limits allowed), by Lucy's (1974) iteration [2]_ on the
bin-integrated projection kernel of Chandrasekhar & Münch (1950) [1]_ (:func:`projection_kernel`,
:func:`projection_cdf`, :func:`projection_matrix`), with bootstrap bands.

Velocities are in km/s. The maths, the assumptions and the cautions are written out in
``docs/inclination.md`` (section 2). The inclination of a single star is in :mod:`vsini.inclination`.

References
----------
.. [1] Chandrasekhar, S. & Münch, G. 1950, ApJ 111, 142 (page from memory).
.. [2] Lucy, L. B. 1974, AJ 79, 745.
.. [3] Turnbull, B. W. 1976, J. R. Stat. Soc. B 38, 290 (from memory): self-consistent (EM) estimate of a
   distribution from censored data.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final

import numpy as np
from scipy import special

from .errors import InputError

__all__ = [
    "DEPROJECTION_FLAGS",
    "projection_kernel",
    "projection_cdf",
    "projection_matrix",
    "Deprojection",
    "deproject",
]

#: Flags set by :func:`deproject`.
DEPROJECTION_FLAGS: Final[dict[str, str]] = {
    "not_converged": "the log-likelihood was still rising by more than tol_lnl after max_iter iterations",
    "many_limits": "more than 20 per cent of the values are upper limits: the low-velocity end of f(v) "
    "rests on the censored-data assumption",
    "few_stars": "fewer than 50 stars: f(v) is coarse and the bootstrap band is rough",
}

_QUANTILES: Final[tuple[float, float, float]] = (0.158655, 0.5, 0.841345)  # -1, 0, +1 sigma of a Gaussian


def projection_kernel(y_kms, v_kms):
    """Density of :math:`y = v\\sin i` for equatorial velocity ``v`` and isotropic axes.

    Parameters
    ----------
    y_kms : float or ndarray, km/s
        Projected velocity.
    v_kms : float or ndarray, km/s, > 0
        Equatorial velocity (broadcast against ``y_kms``).

    Returns
    -------
    ndarray, per km/s
        :math:`K(y\\mid v) = y / (v\\sqrt{v^2 - y^2})` for :math:`0 \\le y < v`, else 0.

    Notes
    -----
    With :math:`\\cos i` uniform, :math:`P(y \\le Y\\mid v) = 1 - \\sqrt{1 - (Y/v)^2}`; its derivative is the
    kernel of Chandrasekhar & Münch (1950) [1]_, :math:`\\varphi(y) = \\int_y^\\infty f(v)K(y\\mid v)\\,dv`.

    References
    ----------
    .. [1] Chandrasekhar, S. & Münch, G. 1950, ApJ 111, 142 (page from memory).
    """
    y, v = np.broadcast_arrays(np.asarray(y_kms, dtype=float), np.asarray(v_kms, dtype=float))
    inside = (y >= 0) & (y < v)
    out = np.zeros(y.shape)
    out[inside] = y[inside] / (v[inside] * np.sqrt(v[inside] ** 2 - y[inside] ** 2))
    return out


def projection_cdf(y_kms, v_kms):
    """:math:`P(v\\sin i \\le y\\mid v) = 1 - \\sqrt{1 - (y/v)^2}` for :math:`0 \\le y < v` (1 above, 0 below 0).

    The integral of :func:`projection_kernel` (Chandrasekhar & Münch 1950, ApJ 111, 142, page from memory);
    follows from :math:`\\sin i \\le y/v \\iff \\cos i \\ge \\sqrt{1-(y/v)^2}` with :math:`\\cos i` uniform.
    """
    y, v = np.broadcast_arrays(np.asarray(y_kms, dtype=float), np.asarray(v_kms, dtype=float))
    x = np.clip(np.divide(y, v, out=np.ones(y.shape), where=v > 0), 0.0, 1.0)
    return 1.0 - np.sqrt(1.0 - x**2)


def _mean_survival(y, a, b):
    """Mean over v uniform in [a, b] of :math:`P(v\\sin i > y\\mid v) = \\sqrt{1-(y/v)^2}` (0 for v <= y).

    Uses :math:`\\int\\sqrt{1 - y^2/v^2}\\,dv = \\sqrt{v^2 - y^2} - y\\arccos(y/v)` (derived; check by
    differentiation), zero at :math:`v = y`.
    """

    def prim(v):
        vv = np.maximum(v, y)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(vv > 0, y / np.where(vv > 0, vv, 1.0), 1.0)
        return np.sqrt(np.maximum(vv**2 - y**2, 0.0)) - y * np.arccos(np.clip(ratio, 0.0, 1.0))

    return (prim(b) - prim(a)) / (b - a)


def projection_matrix(edges_kms):
    """Bin-integrated projection kernel: ``K[j, k] = P(y in bin j | v uniform in bin k)``.

    Parameters
    ----------
    edges_kms : (n+1,) ndarray, km/s
        Common bin edges for :math:`y = v\\sin i` and :math:`v`, strictly increasing from 0.

    Returns
    -------
    (n, n) ndarray
        Upper-triangular (``y <= v``); every column sums to 1.

    Notes
    -----
    For a single :math:`v`, :math:`P(y_\\mathrm{lo} < y < y_\\mathrm{hi}\\mid v) = \\sqrt{1-(y_\\mathrm{lo}/v)^2}
    - \\sqrt{1-(y_\\mathrm{hi}/v)^2}` (each root set to 0 where its :math:`y \\ge v`), from the CDF in
    :func:`projection_cdf` (Chandrasekhar & Münch 1950). With :math:`f(v)` constant inside a bin, each term
    is averaged over :math:`v \\in [v_a, v_b]` in closed form with
    :math:`\\int\\sqrt{1-y^2/v^2}\\,dv = \\sqrt{v^2-y^2} - y\\arccos(y/v)` (derived here).
    """
    e = np.asarray(edges_kms, dtype=float)
    if e.ndim != 1 or e.size < 2 or e[0] != 0.0 or not np.all(np.diff(e) > 0) or not np.all(np.isfinite(e)):
        raise InputError("projection_matrix: edges_kms must be finite, strictly increasing and start at 0")
    surv = _mean_survival(e[:, None], e[None, :-1], e[None, 1:])  # (n+1, n): P(y > e_j | v-bin k)
    return surv[:-1] - surv[1:]


@dataclass(frozen=True)
class Deprojection:
    """Distribution of equatorial velocities recovered from projected ones.

    Attributes
    ----------
    edges_kms, centres_kms : ndarray
        Common bin edges (n+1) and centres (n) of :math:`v` and :math:`y = v\\sin i`, km/s.
    f_pdf, f_lo, f_hi : (n,) ndarray, per km/s
        Estimate of :math:`f(v)` (piecewise constant, integrates to 1) and its bootstrap 15.87/84.13 band.
    phi_model_pdf, phi_observed_pdf : (n,) ndarray, per km/s
        :math:`\\varphi(y)` predicted by ``f_pdf`` and the observed v sin i histogram (upper limits spread
        below their limits in proportion to the model).
    mean_v_kms, mean_v_lo_kms, mean_v_hi_kms : float
        Mean of :math:`f(v)` and its bootstrap 15.87/84.13 percentiles.
    n_iter : int
        Lucy iterations used (also used for each bootstrap resample).
    chi2 : float
        Pearson chi-square of the observed histogram against the model counts at stop.
    n_stars, n_limits, n_bootstrap : int
    flags : tuple of str
        Words from :data:`DEPROJECTION_FLAGS`.
    """

    edges_kms: np.ndarray
    centres_kms: np.ndarray
    f_pdf: np.ndarray
    f_lo: np.ndarray
    f_hi: np.ndarray
    phi_model_pdf: np.ndarray
    phi_observed_pdf: np.ndarray
    mean_v_kms: float
    mean_v_lo_kms: float
    mean_v_hi_kms: float
    n_iter: int
    chi2: float
    n_stars: int
    n_limits: int
    n_bootstrap: int
    flags: tuple[str, ...]


def _lucy(kmat, det_counts, limit_frac, n_iter, max_iter, tol_lnl):
    """Lucy (1974) iteration with censored values redistributed by the current model (EM).

    Returns (psi, phi, h_obs, iterations, chi2, converged); ``psi`` is the mass per v bin.
    """
    n_bins = kmat.shape[1]
    n_tot = det_counts.sum() + limit_frac.shape[0]
    psi = np.full(n_bins, 1.0 / n_bins)
    fixed = n_iter is not None
    it, lnl_old, converged = 0, -np.inf, fixed
    while True:
        phi = kmat @ psi  # phi_j = sum_k K_jk psi_k  (discrete CM 1950 integral)
        h = det_counts.astype(float)
        # observed-data log-likelihood: detections in their bins, each limit anywhere below it
        lnl = float(np.sum(special.xlogy(det_counts, phi)))
        if limit_frac.shape[0]:
            below = limit_frac @ phi
            lnl += float(np.sum(np.log(below)))
            # self-consistent share of each limit over the bins below it (Turnbull 1976)
            h = h + ((limit_frac * phi[None, :]) / below[:, None]).sum(axis=0)
        if fixed and it >= n_iter:
            break
        if not fixed and lnl - lnl_old < tol_lnl:  # EM: lnl rises monotonically; stop when the gain is small
            converged = True
            break
        if not fixed and it >= max_iter:
            break
        lnl_old = lnl
        ratio = np.divide(h / n_tot, phi, out=np.zeros(n_bins), where=phi > 0)
        psi = psi * (kmat.T @ ratio)  # Lucy 1974: f <- f * int (phi_obs / phi) K dy, in discrete form
        psi /= psi.sum()
        it += 1
    model = n_tot * phi
    pos = model > 0
    chi2 = float(np.sum((h[pos] - model[pos]) ** 2 / model[pos]))
    return psi, phi, h, it, chi2, converged


def deproject(
    vsini_kms,
    *,
    upper_limits=None,
    bins=None,
    n_iter=None,
    max_iter=2000,
    tol_lnl=0.01,
    n_bootstrap=200,
    rng=None,
):
    """Distribution of equatorial velocities from a sample of v sin i, assuming isotropic spin axes.

    Parameters
    ----------
    vsini_kms : (N,) array_like, km/s
        Measured v sin i values (or upper limits), finite and non-negative.
    upper_limits : (N,) array_like of bool, optional
        True where the value is only an upper limit (must then be > 0).
    bins : int or (n+1,) array_like, optional
        Number of bins on [0, 1.1 max(v sin i)] or explicit edges (from 0, above the largest value). Default:
        ``clip(ceil(2 N^(1/3)), 8, 60)`` bins (Rice rule; common practice).
    n_iter : int, optional
        Fixed number of Lucy iterations. Default: iterate until one iteration raises the log-likelihood by
        less than ``tol_lnl``, at most ``max_iter`` times (then flag ``not_converged``).
    max_iter : int, optional
        Cap on the iterations when ``n_iter`` is None.
    tol_lnl : float, optional
        Stop threshold on the log-likelihood gain per iteration (0.01, far below the 0.5 of a one-sigma
        change of one parameter; a choice of this module).
    n_bootstrap : int, optional
        Bootstrap resamples of the stars (with replacement) for the bands; 0 gives NaN bands.
    rng : None, int or numpy.random.Generator, optional
        Seed or generator for the bootstrap.

    Returns
    -------
    Deprojection

    Raises
    ------
    InputError
        Fewer than 10 values, non-finite or negative values, a zero upper limit, mismatched
        ``upper_limits``, bad bins or iteration counts.

    Notes
    -----
    With isotropic axes the projected distribution is (Chandrasekhar & Münch 1950 [1]_)

    .. math:: \\varphi(y) = \\int_y^\\infty f(v)\\,\\frac{y}{v\\sqrt{v^2-y^2}}\\,dv .

    On common bins the kernel is :func:`projection_matrix` (exact bin integrals, :math:`f` constant in each
    bin) and Lucy's iteration [2]_ reads :math:`\\psi_k \\leftarrow \\psi_k \\sum_j (h_j/N\\varphi_j)K_{jk}`
    with :math:`\\varphi = K\\psi`, :math:`h` the histogram, starting from a flat :math:`\\psi`. It keeps
    :math:`\\psi \\ge 0` and :math:`\\sum\\psi = 1`, and is the EM algorithm for this multinomial model, so each
    upper limit is added as in the EM estimate for censored data [3]_: its unit count is shared over the
    bins below it in proportion to the current :math:`\\varphi` (a partly covered bin by its covered
    fraction). This assumes the limits are non-informative (set by the spectra, not by :math:`v`); the
    shape of :math:`f` below the typical limit is then fixed by the iteration, not by data.

    The iteration raises the observed-data log-likelihood at every step; it stops when the gain falls below
    ``tol_lnl``. The only regularisation is the bin width (coarse bins limit the noise amplification of
    an unregularised deconvolution). The bootstrap bands apply the same number of iterations to each
    resample of the stars: they show sampling noise, not the bias of the binning.

    References
    ----------
    .. [1] Chandrasekhar, S. & Münch, G. 1950, ApJ 111, 142 (page from memory).
    .. [2] Lucy, L. B. 1974, AJ 79, 745.
    .. [3] Turnbull, B. W. 1976, J. R. Stat. Soc. B 38, 290 (from memory).
    """
    where = "deproject: "
    y = np.asarray(vsini_kms, dtype=float).ravel()
    if y.size < 10:
        raise InputError(f"{where}need at least 10 v sin i values, got {y.size}")
    if not np.all(np.isfinite(y)) or np.any(y < 0):
        bad = np.count_nonzero(~(y >= 0) | ~np.isfinite(y))
        raise InputError(f"{where}vsini_kms must be finite and non-negative; drop the {bad} bad value(s)")
    lim = (
        np.zeros(y.size, dtype=bool) if upper_limits is None else np.asarray(upper_limits, dtype=bool).ravel()
    )
    if lim.shape != y.shape:
        raise InputError(
            f"{where}upper_limits has {lim.size} entries for {y.size} v sin i values; give one per star"
        )
    if np.any(y[lim] <= 0):
        raise InputError(f"{where}an upper limit of 0 km/s carries no information; drop it or give its value")
    for name, val, least in (
        ("n_iter", n_iter, 1),
        ("max_iter", max_iter, 1),
        ("n_bootstrap", n_bootstrap, 0),
    ):
        if val is not None and not (isinstance(val, (int, np.integer)) and val >= least):
            raise InputError(f"{where}{name} must be an integer >= {least}, got {val!r}")
    if not (isinstance(tol_lnl, (int, float, np.integer, np.floating)) and np.isfinite(tol_lnl) and tol_lnl > 0):
        raise InputError(f"{where}tol_lnl must be positive and finite, got {tol_lnl!r}")
    top = 1.1 * y.max() if y.max() > 0 else 1.0
    if bins is None:
        bins = int(np.clip(np.ceil(2.0 * y.size ** (1.0 / 3.0)), 8, 60))
    if np.ndim(bins) == 0:
        if int(bins) != bins or bins < 2:
            raise InputError(f"{where}bins must be an integer >= 2 or an array of edges, got {bins!r}")
        edges = np.linspace(0.0, top, int(bins) + 1)
    else:
        edges = np.asarray(bins, dtype=float)
        if edges.ndim != 1 or edges.size < 3 or edges[0] != 0 or np.any(np.diff(edges) <= 0):
            raise InputError(f"{where}bin edges must be strictly increasing from 0 (at least 2 bins)")
        if edges[-1] <= y.max():
            raise InputError(
                f"{where}last bin edge {edges[-1]} km/s must exceed the largest v sin i {y.max()} km/s"
            )
    kmat = projection_matrix(edges)
    width = np.diff(edges)
    centres = 0.5 * (edges[1:] + edges[:-1])
    n_bins = width.size

    def run(yy, ll, n_it):
        det = np.histogram(yy[~ll], bins=edges)[0]
        frac = np.clip((yy[ll][:, None] - edges[None, :-1]) / width[None, :], 0.0, 1.0)
        return _lucy(kmat, det, frac, n_it, max_iter, tol_lnl)

    psi, phi, h, used, chi2, converged = run(y, lim, None if n_iter is None else int(n_iter))
    rng = np.random.default_rng(rng)
    boot = np.empty((int(n_bootstrap), n_bins))
    for b in range(int(n_bootstrap)):
        idx = rng.integers(0, y.size, y.size)
        boot[b] = run(y[idx], lim[idx], max(used, 1))[0]
    if n_bootstrap:
        f_lo, f_hi = np.percentile(boot / width, [100 * _QUANTILES[0], 100 * _QUANTILES[2]], axis=0)
        m_lo, m_hi = np.percentile(boot @ centres, [100 * _QUANTILES[0], 100 * _QUANTILES[2]])
    else:
        f_lo = f_hi = np.full(n_bins, np.nan)
        m_lo = m_hi = np.nan

    flags = []
    if not converged:
        flags.append("not_converged")
    if lim.mean() > 0.2:
        flags.append("many_limits")
    if y.size < 50:
        flags.append("few_stars")
    arrays = [edges, centres, psi / width, f_lo, f_hi, phi / width, h / h.sum() / width]
    for a in arrays:
        a.setflags(write=False)
    return Deprojection(
        edges_kms=arrays[0],
        centres_kms=arrays[1],
        f_pdf=arrays[2],
        f_lo=arrays[3],
        f_hi=arrays[4],
        phi_model_pdf=arrays[5],
        phi_observed_pdf=arrays[6],
        mean_v_kms=float(psi @ centres),
        mean_v_lo_kms=float(m_lo),
        mean_v_hi_kms=float(m_hi),
        n_iter=int(used),
        chi2=chi2,
        n_stars=int(y.size),
        n_limits=int(lim.sum()),
        n_bootstrap=int(n_bootstrap),
        flags=tuple(flags),
    )
