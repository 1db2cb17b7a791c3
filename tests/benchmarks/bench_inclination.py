"""Slower checks of vsini.inclination (not collected by pytest; run ``python tests/benchmarks/bench_inclination.py``).

1. Grid posterior vs direct Monte Carlo, averaged over seeds (bias of the quadrature, degrees).
2. Deprojection recovery over 20 simulated samples per case: mean error and max CDF distance for the
   default stop rule and for fixed iteration counts.

Simulated stars only (isotropic axes, seeded); the numbers are quoted in docs/inclination.md.
"""

import numpy as np
from scipy import stats

from vsini.deprojection import deproject
from vsini.inclination import VEQ_KMS_PER_RSUN_PER_DAY, infer_inclination

Q = np.array([0.158655, 0.5, 0.841345])


def direct_mc(u, su, p, sp, r, sr, *, limit=False, n=1_000_000, seed=0):
    """Importance-weighted percentiles of i under the forward model (see tests/test_inclination.py)."""
    rng = np.random.default_rng(seed)
    c, rr, pp = rng.uniform(size=n), rng.normal(r, sr, n), rng.normal(p, sp, n)
    ok = (rr > 0) & (pp > 0)
    c, rr, pp = c[ok], rr[ok], pp[ok]
    ut = VEQ_KMS_PER_RSUN_PER_DAY * rr / pp * np.sqrt(1 - c**2)
    w = stats.norm.cdf((u - ut) / su) if limit else np.exp(-0.5 * ((u - ut) / su) ** 2)
    inc = np.degrees(np.arccos(c))
    o = np.argsort(inc)
    cw = np.cumsum(w[o])
    return np.interp(Q, cw / cw[-1], inc[o])


def posterior_vs_mc(n_seeds=8):
    cases = [
        ((3.0, 0.3, 10.0, 0.2, 1.0, 0.05), False),
        ((4.5, 0.4, 10.0, 0.5, 1.0, 0.10), False),
        ((1.0, 0.5, 10.0, 1.0, 1.0, 0.10), False),
        ((2.0, 0.5, 10.0, 0.5, 1.0, 0.10), True),
    ]
    for args, limit in cases:
        post = infer_inclination(*args, vsini_is_upper_limit=limit)
        grid = np.array([post.inclination_lo_deg, post.inclination_deg, post.inclination_hi_deg])
        mc = np.array([direct_mc(*args, limit=limit, seed=s) for s in range(n_seeds)])
        diff = mc.mean(axis=0) - grid
        err = mc.std(axis=0, ddof=1) / np.sqrt(n_seeds)
        print(
            f"{args} limit={limit}: grid 16/50/84 = {np.round(grid, 3)} deg; MC - grid = {np.round(diff, 4)} "
            f"+- {np.round(err, 4)} deg"
        )


def deprojection_recovery(n_real=20):
    def draw(kind, n, rng):
        if kind == "gauss":
            return rng.normal(150, 30, n)
        return np.where(rng.uniform(size=n) < 0.4, rng.normal(50, 10, n), rng.normal(200, 25, n))

    for kind in ("gauss", "bimodal"):
        for n in (200, 2000):
            for n_iter in (None, 5, 20, 200):
                errs, ks = [], []
                for seed in range(n_real):
                    rng = np.random.default_rng(seed)
                    v = draw(kind, n, rng)
                    y = v * np.sqrt(1 - rng.uniform(size=n) ** 2)
                    d = deproject(y, n_iter=n_iter, n_bootstrap=0)
                    cdf = np.concatenate([[0], np.cumsum(d.f_pdf * np.diff(d.edges_kms))])
                    errs.append(d.mean_v_kms / v.mean() - 1)
                    ks.append(np.max(np.abs(cdf - stats.ecdf(v).cdf.evaluate(d.edges_kms))))
                errs = np.array(errs)
                print(
                    f"{kind:8s} N={n:5d} n_iter={str(n_iter):5s}: mean error {errs.mean():+.4f} "
                    f"(rms {np.sqrt(np.mean(errs**2)):.4f}), max CDF distance {np.mean(ks):.4f}"
                )


if __name__ == "__main__":
    posterior_vs_mc()
    deprojection_recovery()
