"""Benchmark: precision of the Fourier first-zero estimator against the Cramer-Rao bound and the profile fit.

Issue 4, item 9. For v sin i = 10, 30 and 100 km/s at R = 50 000 and S/N = 100 per pixel, the same 200
seeded realisations of a synthetic spectrum are measured by :func:`vsini.fourier.fourier_vsini` (mean
profile of all lines) and by :func:`vsini.fit.fit_vsini` (when that module is importable), and their scatter
is compared with the Cramer-Rao lower bound.

Scenario (synthetic, fictional): ten isolated lines, 10 Angstrom apart from 5000 Angstrom, intrinsic
Gaussians of central depth 0.6 and 1/e half-width 4 km/s, linear limb darkening 0.6, Gaussian instrument of
FWHM c/R, no macroturbulence, pixels of 0.03 Angstrom (1.8 km/s, 3.3 per resolution element), photon noise
:math:`\\sqrt F/(S/N)` (:func:`vsini.simulate.simulate_spectrum`).

Cramer-Rao bound: :math:`\\sigma^2(v\\sin i) \\ge [\\mathcal F^{-1}]_{vv}` with the Fisher matrix
:math:`\\mathcal F_{jk} = \\sum_i \\partial_j m_i\\,\\partial_k m_i/\\sigma_i^2` of the noiseless model
(project reference notes, section 9; Bouchy, Pepe & Queloz 2001, A&A 374, 733 for the photon-noise form),
derivatives by central differences. Two versions: v sin i alone (everything else known), and v sin i with the
radial velocity and the ten line depths as nuisance parameters (what a fit of this scenario must estimate).

Run: ``python tests/benchmarks/bench_fourier.py [--n 200] [--mc 0]`` (about 5 minutes on one core).

Pull table (``--pull``): honesty of the reported errors near the resolution limit. For R = 50 000 and
20 000, S/N = 50, 100, 300 and v sin i = 1, 1.5, 2, 3, 5 c/R, ``--n`` seeded realisations (default 100) of
the same ten-line scenario (pixels of c/(3.3 R), about 3.3 per resolution element) are measured with
``fourier_vsini(..., mc=--mc)``. Printed per cell: the fraction given only as a limit, the standard deviation
of the pull (estimate - truth)/error over all values, over unflagged values and over values flagged
``fourier_marginal``, the bias and the median reported error. Honest errors give a pull sd near 1 (0.8-1.25
is the target, with a sampling error of about 1/sqrt(2n)). ``python tests/benchmarks/bench_fourier.py --pull``
takes about 2 minutes with ``--mc 0`` (the default here), about 15 with ``--mc 200``.
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np

from vsini.fourier import fourier_vsini
from vsini.simulate import simulate_spectrum

R = 50_000.0
SNR = 100.0
LINES = [(5000.0 + 10.0 * k, 0.6) for k in range(10)]
B_INTR = 4.0
SIM = dict(wave_range=(4990.0, 5100.0), step=0.03, resolution=R, intrinsic_width=B_INTR, limb_darkening=0.6)


def model_flux(vsini, rv=0.0, depths=None):
    lines = LINES if depths is None else [(c, d) for (c, _), d in zip(LINES, depths, strict=True)]
    return simulate_spectrum(lines, vsini=vsini, rv=rv, **SIM).flux


def crlb(vsini):
    """Cramer-Rao bounds (km/s) on v sin i: (alone, with rv and line depths as nuisance parameters)."""
    f0 = model_flux(vsini)
    sigma = np.sqrt(np.clip(f0, 1e-6, None)) / SNR
    depths = np.array([d for _, d in LINES])
    derivs = []
    h = 1e-3 * vsini
    derivs.append((model_flux(vsini + h) - model_flux(vsini - h)) / (2 * h))
    derivs.append((model_flux(vsini, rv=0.01) - model_flux(vsini, rv=-0.01)) / 0.02)
    for k in range(depths.size):
        dp, dm = depths.copy(), depths.copy()
        dp[k] += 1e-3
        dm[k] -= 1e-3
        derivs.append((model_flux(vsini, depths=dp) - model_flux(vsini, depths=dm)) / 2e-3)
    d = np.array(derivs) / sigma[None, :]
    fisher = d @ d.T
    return 1.0 / np.sqrt(fisher[0, 0]), float(np.sqrt(np.linalg.inv(fisher)[0, 0]))


def robust_std(x):
    """1.4826 x median absolute deviation (common practice), next to the plain standard deviation."""
    x = np.asarray(x)
    return 1.482602 * np.median(np.abs(x - np.median(x)))


def pull_table(n, mc):
    """Print the pull table near c/R (see the module docstring); returns the rows as dicts."""
    from vsini.grid import C_KMS
    from vsini.spectrum import Spectrum

    centres = [c for c, _ in LINES]
    print(f"pull table: {n} realisations per cell, mc = {mc}; pull = (estimate - truth) / reported error")
    print(f"{'R':>6} {'S/N':>4} {'x c/R':>5} {'vsini':>6} | {'limit':>5} {'values':>6} {'pull sd':>7} | "
          f"{'unflag':>6} {'sd':>5} | {'marginal':>8} {'sd':>5} | {'bias%':>6} {'med err':>7}")
    rows = []
    for resolution in (50_000.0, 20_000.0):
        step = round(5000.0 / (3.3 * resolution), 4)
        for snr in (50.0, 100.0, 300.0):
            for x in (1.0, 1.5, 2.0, 3.0, 5.0):
                vsini = x * C_KMS / resolution
                base = simulate_spectrum(LINES, wave_range=(4990.0, 5100.0), step=step, vsini=vsini,
                                         resolution=resolution, intrinsic_width=B_INTR, limb_darkening=0.6)
                err = np.sqrt(np.clip(base.flux, 1e-6, None)) / snr  # as simulate_spectrum(snr=, rng=seed) draws it
                values, errors, marginal, limits = [], [], [], 0
                for seed in range(n):
                    noisy = base.flux + err * np.random.default_rng(seed).standard_normal(err.size)
                    res = fourier_vsini(Spectrum(base.wavelength, noisy, err), lines=centres, resolution=resolution,
                                        rv=0.0, mc=mc, rng=seed)
                    if res.vsini_kms is None:
                        limits += 1
                        continue
                    values.append(res.vsini_kms)
                    errors.append(res.vsini_err_kms)
                    marginal.append("fourier_marginal" in res.flags)
                values, errors, marginal = np.array(values), np.array(errors), np.array(marginal, dtype=bool)
                pull = (values - vsini) / errors

                def sd(p):
                    return float(np.std(p, ddof=1)) if p.size > 1 else float("nan")

                row = dict(resolution=resolution, snr=snr, x=x, vsini=vsini, limit_fraction=limits / n,
                           n_values=int(values.size), pull_sd=sd(pull), n_unflagged=int((~marginal).sum()),
                           pull_sd_unflagged=sd(pull[~marginal]), n_marginal=int(marginal.sum()),
                           pull_sd_marginal=sd(pull[marginal]),
                           bias=float(values.mean() / vsini - 1) if values.size else float("nan"),
                           median_err=float(np.median(errors)) if errors.size else float("nan"))
                rows.append(row)
                print(f"{resolution:6.0f} {snr:4.0f} {x:5.1f} {vsini:6.2f} | {row['limit_fraction']:5.2f} "
                      f"{row['n_values']:6d} {row['pull_sd']:7.2f} | {row['n_unflagged']:6d} "
                      f"{row['pull_sd_unflagged']:5.2f} | {row['n_marginal']:8d} {row['pull_sd_marginal']:5.2f} | "
                      f"{100 * row['bias']:6.2f} {row['median_err']:7.3f}", flush=True)
    print("limit = fraction given only as an upper limit; unflag / marginal = values without / with the flag "
          "fourier_marginal (whose errors use the model slope and are conservative).")
    return rows


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=None, help="realisations per v sin i (per cell with --pull)")
    parser.add_argument("--mc", type=int, default=0, help="Monte Carlo realisations inside each Fourier estimate")
    parser.add_argument("--vsini", type=float, nargs="*", default=[10.0, 30.0, 100.0])
    parser.add_argument("--pull", action="store_true", help="print the pull table near c/R instead")
    args = parser.parse_args()
    if args.pull:
        pull_table(args.n or 100, args.mc)
        return
    args.n = args.n or 200
    try:
        from vsini.fit import fit_vsini
    except ImportError:  # the fit helper's module is not there yet
        fit_vsini = None
    centres = [c for c, _ in LINES]
    print(f"R = {R:.0f}, S/N = {SNR:.0f}, {len(LINES)} lines (depth 0.6, b = {B_INTR} km/s), {args.n} realisations")
    print(f"c/R = {2.99792458e5 / R:.2f} km/s; fit: {'vsini.fit.fit_vsini' if fit_vsini else 'not available'}")
    header = (f"{'vsini':>6} {'CRLB':>7} {'CRLB+n':>7} | {'F ok':>5} {'F bias%':>8} {'F std':>7} {'F rstd':>7} "
              f"{'F err':>7} {'CRLB/F':>7} | {'fit ok':>6} {'fit bias%':>9} {'fit std':>7} {'CRLB/fit':>8} | "
              f"{'corr':>5} {'F/fit':>6} {'t F':>5} {'t fit':>5}")
    print(header)
    rows = []
    for vsini in args.vsini:
        c_alone, c_nuis = crlb(vsini)
        f_val, f_err, fit_val = [], [], []
        t_f = t_fit = 0.0
        n_limit = 0
        for seed in range(args.n):
            sp = simulate_spectrum(LINES, vsini=vsini, snr=SNR, rng=seed, **SIM)
            t0 = time.perf_counter()
            res = fourier_vsini(sp, lines=centres, resolution=R, rv=0.0, mc=args.mc, rng=seed)
            t_f += time.perf_counter() - t0
            f_val.append(np.nan if res.vsini_kms is None else res.vsini_kms)
            f_err.append(np.nan if res.vsini_err_kms is None else res.vsini_err_kms)
            n_limit += res.is_limit
            if fit_vsini is not None:
                t0 = time.perf_counter()
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    try:
                        fr = fit_vsini(sp, lines=centres, resolution=R, macroturbulence=None,
                                       intrinsic_width=B_INTR, rv=0.0)
                        fit_val.append(fr.vsini_kms)
                    except Exception:  # noqa: BLE001 - a failed fit is counted, not fatal, in a benchmark
                        fit_val.append(np.nan)
                t_fit += time.perf_counter() - t0
        f_val, f_err = np.array(f_val), np.array(f_err)
        ok = np.isfinite(f_val)
        fv = f_val[ok]
        f_std = float(np.std(fv, ddof=1)) if fv.size > 1 else np.nan
        line = (f"{vsini:6.1f} {c_alone:7.3f} {c_nuis:7.3f} | {ok.mean():5.2f} {100 * (fv.mean() / vsini - 1):8.2f} "
                f"{f_std:7.3f} {robust_std(fv):7.3f} {np.nanmedian(f_err):7.3f} {c_nuis / f_std:7.2f} | ")
        if fit_vsini is not None:
            fit_val = np.array(fit_val)
            okf = np.isfinite(fit_val)
            both = ok & okf
            fit_std = float(np.std(fit_val[okf], ddof=1)) if okf.sum() > 1 else np.nan
            corr = float(np.corrcoef(f_val[both], fit_val[both])[0, 1]) if both.sum() > 2 else np.nan
            line += (f"{okf.mean():6.2f} {100 * (fit_val[okf].mean() / vsini - 1):9.2f} {fit_std:7.3f} "
                     f"{c_nuis / fit_std:8.2f} | {corr:5.2f} {f_std / fit_std:6.2f} "
                     f"{t_f / args.n:5.2f} {t_fit / args.n:5.2f}")
        else:
            line += f"{'-':>6} {'-':>9} {'-':>7} {'-':>8} | {'-':>5} {'-':>6} {t_f / args.n:5.2f} {'-':>5}"
        print(line, flush=True)
        rows.append(line)
    print("columns: CRLB = bound with v sin i alone, CRLB+n = with rv and line depths as nuisance (km/s);")
    print("F = Fourier (mean profile): fraction with a value (else an upper limit), bias, standard deviation,")
    print("robust std (1.48 MAD), median reported error, efficiency CRLB+n/std; fit = profile fit (intrinsic")
    print("width fixed at the true value, no macroturbulence); corr = correlation of the two estimates;")
    print("F/fit = ratio of their standard deviations; t = seconds per realisation.")


if __name__ == "__main__":
    main()
