"""Quadrature machinery of the joint rotation + radial-tangential kernel (private).

Used by :func:`vsini.kernels.rotation_rt_transform`, whose docstring gives the integral and its source
(Gray 2005, ch. 17-18). Nothing here is public API.
"""

from __future__ import annotations

import bisect
import functools
import math

import numpy as np
from scipy import linalg, special

__all__: list[str] = []

# ------------------------------------------------------------------ joint rotation + RT: quadrature machinery
#
# K(sigma) is a 1-D integral over the polar angle t of the disc (see rotation_rt_transform). With
# a = 2 pi sigma vsini, b = pi zeta_R sigma, c = pi zeta_T sigma the integrand is
# I(cos t) sin t cos t J0(a sin t) [A_R exp(-b^2 cos^2 t) + A_T exp(-c^2 sin^2 t)]. It is evaluated by
# Gauss rules sized to that integrand (in rho = sin^2 t for the whole disc, on truncated intervals for
# narrow Gaussians), and, when many frequencies are asked for, only at the Chebyshev points of
# [0, max sigma], then interpolated.

_GAUSS_CUT = 6.2  # exp(-6.2^2) = 2e-17: a Gaussian factor is dropped beyond this many 1/e widths
_WHOLE_DISC_MAX = 10.0  # a Gaussian narrower than 1/10 of the disc gets its own, truncated, interval
_MAX_FLUX_NODES = 256  # largest single rule in rho (its construction costs O(n^2))
_MAX_PANEL_NODES = 128  # longer Gauss-Legendre rules are split into equal panels
#: node counts, rounded up to this ladder (steps of ~8 %) so frequencies share rules and batch as 2-D arrays
_NODE_LADDER = np.unique(np.ceil(4.0 * 1.08 ** np.arange(80)).astype(int))
_NODE_LIST = _NODE_LADDER.tolist()
_BATCH_OVERHEAD = 200  # fixed cost of one batch of numpy calls, in integrand evaluations (measured)
_BATCH_ELEMENTS = 1 << 20  # largest (frequencies x nodes) array built at once (8 MB)
_CHEB_TAIL = 1e-13  # the last Chebyshev coefficients must be below this to accept the interpolant
_BARY_CACHE_ELEMENTS = 1 << 18  # interpolation matrices up to this size (2 MB) are cached, 8 at most


@functools.lru_cache(maxsize=256)
def _gauss_legendre(nodes):
    """Gauss-Legendre nodes and weights on [-1, 1] (scipy)."""
    return special.roots_legendre(nodes)


@functools.lru_cache(maxsize=64)
def _unit_rule(nodes, panels):
    """Composite Gauss-Legendre rule on [0, 1]: ``panels`` equal panels of ``nodes`` nodes (x, w)."""
    x, w = _gauss_legendre(nodes)
    h = 1.0 / panels
    left = h * np.arange(panels)[:, None]
    return (left + 0.5 * h * (x + 1.0)).ravel(), np.tile(0.5 * h * w, panels)


@functools.lru_cache(maxsize=32)
def _disc_rule(nodes, panels, ld):
    """Rule over t in [0, pi/2] for the whole disc: mu^2, r^2, r and the flux weights.

    The weights include the limb-darkened flux element :math:`I(\\cos t)\\sin t\\cos t\\,dt` divided by
    its integral :math:`\\int_0^1 I(\\mu)\\mu\\,d\\mu` (so the transform is 1 at sigma = 0).
    """
    x, w = _unit_rule(nodes, panels)
    t = 0.5 * np.pi * x
    mu, r = np.cos(t), np.sin(t)
    weight = 0.5 * np.pi * w * ld.intensity(mu) * r * mu / (0.5 * ld.flux_norm())
    return mu * mu, r * r, r, weight


@functools.lru_cache(maxsize=128)
def _flux_rule(nodes, ld):
    """Gauss rule of ``nodes`` nodes for the limb-darkened flux of the disc, in :math:`\\rho = r^2`.

    With :math:`\\rho = \\sin^2 t` the flux element is :math:`I(\\sqrt{1-\\rho})\\,d\\rho/2`, a positive weight
    on [0, 1]; the joint integrand is then smooth in :math:`\\rho` (even in r), so this rule needs about
    40 % fewer nodes than Gauss-Legendre in t. Built by the discretised Stieltjes procedure (Gautschi
    2004, *Orthogonal Polynomials: Computation and Approximation*, OUP, sect. 2.2.3; from memory) on a
    Gauss-Legendre discretisation in :math:`\\mu` that is exact for the inner products involved, then the
    Golub & Welsch (1969, Math. Comp. 23, 221) eigenvalue method. Returns mu^2, r^2, r and weights
    summing to 1, like :func:`_disc_rule`.
    """
    x, w = _gauss_legendre(2 * nodes + 8)
    mu = 0.5 * (x + 1.0)
    weight = w * mu * ld.intensity(mu)  # int f(rho) I drho = int f(1 - mu^2) I(mu) 2 mu dmu, mu on [0, 1]
    weight /= weight.sum()
    rho = 1.0 - mu * mu
    alpha, beta = np.empty(nodes), np.zeros(nodes)
    prev, cur = np.zeros_like(rho), np.ones_like(rho)
    for k in range(nodes):  # orthonormal polynomials of the discrete measure, three-term recurrence
        alpha[k] = weight @ (rho * cur * cur)
        nxt = (rho - alpha[k]) * cur - math.sqrt(beta[k]) * prev
        norm2 = weight @ (nxt * nxt)
        if k + 1 < nodes:
            beta[k + 1] = norm2
        prev, cur = cur, nxt / math.sqrt(norm2)
    r2, vectors = linalg.eigh_tridiagonal(alpha, np.sqrt(beta[1:]))
    r2 = np.clip(r2, 0.0, 1.0)
    return 1.0 - r2, r2, np.sqrt(r2), vectors[0] ** 2


def _plan(required, base, max_nodes=_MAX_PANEL_NODES):
    """Batches ``((nodes, panels), job slice)`` for jobs needing ``required`` (ascending) nodes.

    Each job gets the next count on ``_NODE_LADDER`` (split into equal panels beyond ``max_nodes``;
    ``base`` is the part of the count every panel needs). Jobs share the largest rule of their batch
    (more nodes never lose accuracy here); a batch is split where that saves more evaluations than the
    fixed cost of another batch of numpy calls, and no batch exceeds ``_BATCH_ELEMENTS``.
    """
    top = float(required[-1])
    if top <= max_nodes:  # usual case: one panel, runs found by one search
        i0 = bisect.bisect_left(_NODE_LIST, float(required[0]))
        i1 = bisect.bisect_left(_NODE_LIST, top) + 1
        sizes = _NODE_LIST[i0:i1]
        rules = [(m, 1) for m in sizes]
        ends = required.searchsorted(_NODE_LADDER[i0:i1], side="right").tolist()
    else:
        panels = np.ceil(required / max_nodes).astype(int)
        nodes = _NODE_LADDER[np.searchsorted(_NODE_LADDER, (required - base) / panels + base)]
        total = nodes * panels
        ends = [*(np.flatnonzero(total[1:] != total[:-1]) + 1).tolist(), total.size]
        sizes = [int(total[e - 1]) for e in ends]
        rules = [(int(nodes[e - 1]), int(panels[e - 1])) for e in ends]
    out = []
    top = len(ends) - 1
    while True:  # split the batch where moving the jobs below onto a smaller rule saves the most
        best, saving = -1, _BATCH_OVERHEAD
        for k in range(top):
            if ends[k] * (sizes[top] - sizes[k]) > saving:
                best, saving = k, ends[k] * (sizes[top] - sizes[k])
        out.append((rules[top], slice(ends[best] if best >= 0 else 0, ends[top])))
        if best < 0:
            break
        top = best
    if max((sl.stop - sl.start) * m * p for (m, p), sl in out) <= _BATCH_ELEMENTS:
        return out
    chunked = []
    for (m, p), sl in out:
        rows = max(1, _BATCH_ELEMENTS // (m * p))
        chunked.extend(((m, p), slice(j, min(j + rows, sl.stop))) for j in range(sl.start, sl.stop, rows))
    return chunked


def _whole_disc_batches(a, g):
    """Batches ``(nodes, panels, slice)`` for whole-disc quadrature at Bessel phases ``a`` (ascending).

    ``g`` is the Gaussian parameter (<= 10). Rules: :func:`_flux_rule` in :math:`\\rho` with
    :math:`\\max(\\sqrt{n_J^2 + (3.5 g)^2}, n_J + 0.15 g^2) + 2.5` nodes, where
    :math:`n_J = 0.27 a + 3 + 7\\tanh(a/15)` is for the Bessel factor (panels = 0 marks these rules);
    beyond ``_MAX_FLUX_NODES`` nodes, composite Gauss-Legendre in t with 0.42 a + 24 + 2.4 g nodes, in
    panels of at most ``_MAX_PANEL_NODES`` (0.42 a / panels + 24 each). Both counts were fit to a
    convergence study to 1e-13 (Bessel phase up to 700 and 4000, every law and radial fraction), with a
    margin of at least one node.
    """
    bessel = 0.27 * a + 3.0 + 7.0 * np.tanh(a * (1.0 / 15.0))
    g2 = g * g
    required = np.maximum(np.sqrt(bessel * bessel + 12.25 * g2), bessel + 0.15 * g2)
    required += 2.5
    np.maximum.accumulate(required, out=required)
    cut = int(required.searchsorted(_MAX_FLUX_NODES, side="right"))
    batches = [(m, 0, sl) for (m, _), sl in _plan(required[:cut], 0.0, _MAX_FLUX_NODES)] if cut else []
    if cut < a.size:  # very large Bessel phase: composite Gauss-Legendre in t
        big = np.maximum.accumulate(0.42 * a[cut:] + 24.0 + 2.4 * g[cut:])
        batches += [(m, p, slice(sl.start + cut, sl.stop + cut)) for (m, p), sl in _plan(big, 24.0)]
    return batches


def _round_up(x):
    """``x`` rounded up to a grid of 2 % steps (0 stays 0), so nearby parameters share cached plans."""
    if x <= 0.0:
        return 0.0
    y = 1.02 ** math.ceil(math.log(x) / math.log(1.02))
    return y if y >= x else y * 1.02


@functools.lru_cache(maxsize=64)
def _chebyshev_batches(n, a_top, g_top):
    """:func:`_whole_disc_batches` at the n + 1 Chebyshev points for the phases ``a_top`` and Gaussian
    parameter ``g_top`` at the last point (rounded up by :func:`_round_up`: more nodes, same plan)."""
    x = _chebyshev_points(n)
    return tuple(_whole_disc_batches(a_top * x, g_top * x))


def _joint_whole_disc(s, kv, kr, kt, cr, ct, ld, batches=None):
    """Quadrature over the whole disc at frequencies ``s`` (ascending).

    The Bessel argument is ``kv * s`` and the squared Gaussian parameters ``kr * s**2`` (radial, weight
    ``cr``) and ``kt * s**2`` (tangential, weight ``ct``); rules from :func:`_whole_disc_batches` unless
    ``batches`` is given.
    """
    a = kv * s
    if batches is None:
        batches = _whole_disc_batches(a, math.sqrt(max(kr if cr else 0.0, kt if ct else 0.0)) * s)
    s2 = s * s
    out = np.empty(s.size)
    one_exp = bool(cr and ct and kr == kt)
    if one_exp:
        # A_R exp(-b^2 mu^2) + A_T exp(-b^2 r^2) = A_T [q / E + E], E = exp(-b^2 r^2), q = A_R/A_T exp(-b^2):
        # one exponential per node (b^2 <= 100 here, so 1/E cannot overflow)
        q = (cr / ct) * np.exp(-kr * s2)
        s2 *= -kt
    for m, p, sl in batches:
        mu2, r2, r, weight = _flux_rule(m, ld) if p == 0 else _disc_rule(m, p, ld)
        if one_exp:
            e = np.multiply.outer(s2[sl], r2)
            np.exp(e, out=e)
            f = np.divide(q[sl, None], e)
            f += e
        else:
            f = cr * np.exp(np.multiply.outer(-kr * s2[sl], mu2)) if cr else 0.0
            if ct:
                f = f + ct * np.exp(np.multiply.outer(-kt * s2[sl], r2))
        if kv:
            u = np.multiply.outer(a[sl], r)
            f *= special.j0(u, out=u)
        np.dot(f, weight, out=out[sl])
    if one_exp:
        out *= ct
    return out


def _joint_truncated(s, kv, kg, coef, radial, ld):
    r"""One narrow component, integrated only where its Gaussian exceeds exp(-6.2^2) (g = sqrt(kg) s > 10).

    Tangential (``radial`` False): :math:`\int_0^{r_T} I(\mu) J_0(ar) e^{-c^2r^2} r\,dr` with
    :math:`r_T = 6.2/c`; radial: :math:`\int_0^{\mu_R} I(\mu) J_0(a\sqrt{1-\mu^2}) e^{-b^2\mu^2}\mu\,d\mu`
    with :math:`\mu_R = 6.2/b`. Both ends are below 0.62, where :math:`\sqrt{1-y^2}` is smooth. Node count:
    0.3 x (largest Bessel phase rate x interval) + 22.
    """
    a = kv * s
    g2 = kg * s * s
    h = _GAUSS_CUT / np.sqrt(g2)
    phase = a * h * h / np.sqrt(1.0 - h * h) if radial else a * h
    order = np.argsort(phase, kind="stable")
    out = np.empty(s.size)
    for (m, p), sl in _plan(0.3 * phase[order] + 22.0, 22.0):
        k = order[sl]
        x, w = _unit_rule(m, p)
        y = np.multiply.outer(h[k], x)  # r (tangential) or mu (radial)
        z = np.sqrt(1.0 - y * y)
        mu, r = (y, z) if radial else (z, y)
        f = np.exp(-g2[k, None] * (y * y)) * ld.intensity(mu) * y
        if kv:
            f *= special.j0(a[k, None] * r)
        out[k] = (f @ w) * h[k]
    return coef / (0.5 * ld.flux_norm()) * out


def _joint_quadrature(s, vsini, zeta, zt, ld, ar, chebyshev=None):
    """The joint transform at frequencies ``s`` (1-D, >= 0, ascending) by the rules above.

    ``chebyshev`` = n says that ``s`` are the n + 1 Chebyshev points of [0, s[-1]] (cached plans).
    """
    at = 1.0 - ar
    kv, kr, kt = 2.0 * np.pi * abs(vsini), (np.pi * zeta) ** 2, (np.pi * zt) ** 2
    # below these frequencies a component is integrated over the whole disc (prefixes, as s ascends)
    i_r = int(s.searchsorted(_WHOLE_DISC_MAX / (np.pi * zeta), side="right")) if ar else 0
    i_t = int(s.searchsorted(_WHOLE_DISC_MAX / (np.pi * zt), side="right")) if at else 0
    lo, hi = min(i_r, i_t), max(i_r, i_t)
    if lo == s.size:  # usual case: both components over the whole disc at every frequency
        batches = None
        if chebyshev:
            smax = float(s[-1])
            g_top = _round_up(math.sqrt(max(kr if ar else 0.0, kt if at else 0.0)) * smax)
            batches = _chebyshev_batches(chebyshev, _round_up(kv * smax), g_top)
        return _joint_whole_disc(s, kv, kr, kt, ar, at, ld, batches)
    out = np.zeros(s.size)
    if lo:
        out[:lo] = _joint_whole_disc(s[:lo], kv, kr, kt, ar, at, ld)
    if hi > lo:
        cr, ct = (ar, 0.0) if i_r > i_t else (0.0, at)
        out[lo:hi] = _joint_whole_disc(s[lo:hi], kv, kr, kt, cr, ct, ld)
    if at and i_t < s.size:
        out[i_t:] += _joint_truncated(s[i_t:], kv, kt, at, False, ld)
    if ar and i_r < s.size:
        out[i_r:] += _joint_truncated(s[i_r:], kv, kr, ar, True, ld)
    return out


@functools.lru_cache(maxsize=64)
def _chebyshev_points(n):
    """The n + 1 Chebyshev points of the second kind mapped to [0, 1], ascending."""
    return 0.5 * (1.0 - np.cos(np.pi * np.arange(n + 1) / n))


def _chebyshev_degree(smax, vsini, zmax):
    """Degree that interpolates the joint transform on [0, smax] to ~1e-13 (from the convergence study).

    W = pi smax vsini is the Bessel phase over half the interval, G = pi smax zeta_max the Gaussian
    width parameter; rounded up to a multiple of 8 so nearby parameters share interpolation matrices.
    """
    w, g = np.pi * smax * abs(vsini), np.pi * smax * zmax
    n = math.hypot(w, 1.1 * g) + max(7.5 * w ** (1.0 / 3.0), min(10.0 * math.sqrt(g), 70.0)) + 12.0
    return 8 * math.ceil(n / 8.0)


@functools.lru_cache(maxsize=64)
def _chebyshev_tail_rows(n):
    """Rows of the DCT-I giving the last four Chebyshev coefficients from values at the n + 1 points."""
    k = np.arange(n - 3, n + 1)[:, None]
    j = np.arange(n + 1)
    rows = np.cos(np.pi * k * j / n) * np.where((j == 0) | (j == n), 1.0, 2.0) / n
    rows[-1] *= 0.5
    return rows


def _chebyshev_tail(values):
    """Largest of the last four Chebyshev coefficients of the interpolant through ``values``."""
    return max(map(abs, (_chebyshev_tail_rows(values.size - 1) @ values).tolist()))


def _barycentric_matrix(x, smax, n):
    """Matrix taking values at the Chebyshev points of [0, smax] to the frequencies ``x``.

    Barycentric formula of the second kind (Berrut & Trefethen 2004, SIAM Review 46, 501; from memory).
    """
    nodes = smax * _chebyshev_points(n)
    w = np.ones(n + 1)
    w[1::2] = -1.0
    w[[0, -1]] *= 0.5
    with np.errstate(divide="ignore", invalid="ignore"):
        q = w / np.subtract.outer(x, nodes)
        q /= q.sum(axis=1, keepdims=True)
    rows = np.flatnonzero(~np.isfinite(q).all(axis=1))  # a frequency on a node: take the node's value
    if rows.size:
        q[rows] = 0.0
        q[rows, np.abs(np.subtract.outer(x[rows], nodes)).argmin(axis=1)] = 1.0
    return q


@functools.lru_cache(maxsize=8)
def _cached_barycentric_matrix(key, smax, n):
    """:func:`_barycentric_matrix` for the frequencies whose exact bytes are ``key`` (the fit calls
    with the same grid many times); used for matrices of at most ``_BARY_CACHE_ELEMENTS``."""
    return _barycentric_matrix(np.frombuffer(key), smax, n)


def _joint_transform(s, smax, vsini, zeta, zt, ld, ar):
    """Joint transform at frequencies ``s`` (1-D, >= 0, largest ``smax``): Chebyshev interpolation or
    direct quadrature."""
    zmax = max(zeta if ar > 0 else 0.0, zt if ar < 1 else 0.0)
    n = _chebyshev_degree(smax, vsini, zmax)
    if smax > 0 and n < 0.8 * s.size:
        points = smax * _chebyshev_points(n)
        values = _joint_quadrature(points, vsini, zeta, zt, ld, ar, chebyshev=n)
        tail = _chebyshev_tail(values)
        while tail > _CHEB_TAIL and 2 * n < 0.8 * s.size:  # not resolved yet: double (nested points)
            finer = np.empty(2 * n + 1)
            finer[::2] = values
            finer[1::2] = _joint_quadrature(smax * _chebyshev_points(2 * n)[1::2], vsini, zeta, zt, ld, ar)
            n, values = 2 * n, finer
            tail = _chebyshev_tail(values)
        if tail <= _CHEB_TAIL:
            if s.size * (n + 1) <= _BARY_CACHE_ELEMENTS:
                return _cached_barycentric_matrix(s.tobytes(), smax, n) @ values
            rows = max(1, _BATCH_ELEMENTS // (n + 1))
            return np.concatenate(
                [_barycentric_matrix(s[i : i + rows], smax, n) @ values for i in range(0, s.size, rows)]
            )
    order = np.argsort(s, kind="stable")
    out = np.empty(s.size)
    out[order] = _joint_quadrature(s[order], vsini, zeta, zt, ld, ar)
    return out


_GL16 = np.polynomial.legendre.leggauss(16)


@functools.lru_cache(maxsize=64)
def _quadrature_nodes(panels):
    """Composite 16-point Gauss-Legendre nodes and weights on [0, pi/2] in ``panels`` equal panels."""
    x, w = _GL16
    h = 0.5 * np.pi / panels
    left = h * np.arange(panels)[:, None]
    return (left + 0.5 * h * (x + 1.0)).ravel(), np.tile(0.5 * h * w, panels)


def _joint_reference(s, vsini, zeta, zt, ld, ar, panels):
    """The joint transform by a fixed composite 16-point rule of ``panels`` panels (the reference)."""
    t, w = _quadrature_nodes(panels)
    mu, r = np.cos(t), np.sin(t)
    weight = w * ld.intensity(mu) * r * mu
    weight = weight / weight.sum()
    out = np.empty(s.size)
    for i in range(0, s.size, 128):
        ss = s[i : i + 128, None]
        local = ar * np.exp(-((np.pi * zeta * ss * mu) ** 2)) + (1.0 - ar) * np.exp(-((np.pi * zt * ss * r) ** 2))
        rot = special.j0(2.0 * np.pi * ss * vsini * r) if vsini else 1.0
        out[i : i + 128] = (rot * local) @ weight
    return out
