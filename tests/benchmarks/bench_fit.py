"""Benchmark of the profile-fitting estimator (issue 3): prints tables, asserts nothing.

(a) Statistical efficiency: over 200 noise realisations at R = 50 000, S/N = 100 and v sin i = 10, 30 and
    100 km/s, the variance of the fitted v sin i divided by its Cramer-Rao bound. The bound is the
    (v sin i, v sin i) element of the full inverse Fisher matrix of the model with respect to all free
    parameters (v sin i, radial velocity, 8 equivalent widths, 16 continuum coefficients), from central
    numerical derivatives of the model at the true parameters (REFERENCES section 9; Bouchy, Pepe &
    Queloz 2001, A&A 374, 733 for the photon-noise form). Target: ratio <= 1.25. Two line families:
    weak lines (b = 1.65 km/s, EW 24-43 mA) and strong lines (b = 5 km/s, EW 70-130 mA). Next to it, the
    "ideal ML" column refits the same noise with the exact model on the true windows, started at the
    truth: where var/CRB exceeds 1 there too, the excess belongs to maximum likelihood at that S/N
    (lines barely deeper than the noise), not to the pipeline.
(b) Time to fit one star with 8 lines (no Monte Carlo), next to the time of one model evaluation; with
    radial-tangential macroturbulence free, the same fit with the exact joint kernel in every pass
    (instead of the product approximation in the passes and the joint kernel in the final fit) and the
    change of the answer in units of its error; and the CPU time of a star with detected lines.
(c) Recovery table: median bias of the fitted v sin i over R = 20 000 .. 110 000 and v sin i = 3 .. 300 km/s
    at S/N 200 and 1000 (spectra from vsini.simulate, 3 pixels per resolution element).

Run: python tests/benchmarks/bench_fit.py [--quick]
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np

import vsini.fit as fit_module
from vsini.fit import fit_vsini
from vsini.fitlimits import _lmfit, _make_params
from vsini.grid import C_KMS
from vsini.kernels import instrument_width
from vsini.linemodel import JointModel
from vsini.lines import window_half_width
from vsini.simulate import simulate_spectrum

DEPTHS = np.array([0.45, 0.7, 0.55, 0.8, 0.6, 0.5, 0.75, 0.65])


def star(vsini, resolution, snr, rng, *, n_lines=8, macroturbulence=0.0, rv=7.0, intrinsic_width=None):
    """A synthetic star: ``n_lines`` lines near 5500 A, spaced so their windows do not merge.

    ``intrinsic_width`` None: Fe lines at 5800 K with 1 km/s microturbulence (b = 1.65 km/s), as
    :func:`fit_vsini` assumes by default; hot-star lines are broader (b = 5 km/s is used below).
    """
    b = math.hypot(instrument_width(resolution), 1.65 if intrinsic_width is None else intrinsic_width)
    spacing = max(4.0, 2.4 * window_half_width(vsini, b, macroturbulence, step_kms=C_KMS / resolution / 3.0)
                  / C_KMS * 5500.0)
    centres = 5400.0 + spacing * (1 + np.arange(n_lines))
    step = 5500.0 / (3.0 * resolution)  # 3 pixels per resolution element c/R
    spec = simulate_spectrum([(c, d) for c, d in zip(centres, DEPTHS[:n_lines], strict=True)],
                             wave_range=(5400.0, centres[-1] + spacing), step=step, vsini=vsini,
                             resolution=resolution, macroturbulence=macroturbulence, snr=snr, rng=rng, rv=rv,
                             intrinsic_width=intrinsic_width)
    return spec, list(centres)


def fisher_bound(result, snr):
    """CRB of v sin i: full inverse Fisher matrix from central differences at the (noise-free) fit."""
    model, values, free = result.model, result.params, list(result.free)
    flux = model.evaluate(values)
    sigma = np.sqrt(np.clip(flux, 1e-6, None)) / snr  # the simulator's photon noise
    cols = []
    for name in free:
        h = 1e-3 * max(abs(values[name]), 0.05) if name != "rv" else 1e-3
        up, down = dict(values), dict(values)
        up[name] += h
        down[name] -= h
        cols.append((model.evaluate(up) - model.evaluate(down)) / (2.0 * h))
    jac = np.column_stack(cols) / sigma[:, None]
    cov = np.linalg.inv(jac.T @ jac)
    i = free.index("vsini")
    return float(cov[i, i])


def ideal_ml(ref, clean, spec, snr):
    """The ideal maximum-likelihood estimate for the same noise: the exact model on the true windows,
    started at the true parameters (no window choice, no starting guess, no line screening)."""
    model, truth = ref.model, dict(ref.params)
    idx = np.searchsorted(clean.wavelength, np.concatenate([w.wavelength[w.good] for w in model.windows]) - 1e-9)
    f0 = model.evaluate(truth)
    y = f0 + (spec.flux - clean.flux)[idx]
    res = _lmfit(model, _make_params(model, truth, set(ref.free)), y, np.sqrt(np.clip(f0, 1e-6, None)) / snr, False)
    return res.params["vsini"].value


def efficiency(n_real, vsinis=(10.0, 30.0, 100.0), widths=(None, 5.0), resolution=50000.0, snr=100.0):
    print(f"\n(a) efficiency: R = {resolution:.0f}, S/N = {snr:.0f}, 8 lines, macroturbulence off, {n_real} realisations")
    print("    b = intrinsic 1/e width: 1.65 km/s (Fe at 5800 K, weak lines, EW 24-43 mA) or 5 km/s (strong, EW 70-130 mA)")
    print("    depth/noise = mean central depth of the broadened lines over the per-pixel noise;")
    print("    ideal ML = the exact model on the true windows, started at the truth, same noise (what no pipeline can beat)")
    print(f"{'vsini':>6} {'b':>5} {'EW mA':>6} {'depth/noise':>11} {'mean':>8} {'std':>7} {'CRB sd':>7} {'var/CRB':>8} "
          f"{'ideal ML':>9} {'mean err':>9} {'pull sd':>8} {'dropped':>8}")
    for b in widths:
        for v in vsinis:
            clean, centres = star(v, resolution, None, None, intrinsic_width=b)
            ref = fit_vsini(clean, lines=centres, resolution=resolution, macroturbulence=None, intrinsic_width=b)
            crb = fisher_bound(ref, snr)
            depth = np.mean([1.0 - ref.model.evaluate(ref.params)[rows].min() / ref.params[f"c0_{w}"]
                             for w, rows in enumerate(ref.model.rows)])
            ew_ma = np.mean([ref.params[f"ew{f}"] for f in range(ref.model.n_features)]) / C_KMS * 5500.0 * 1e3
            est, err, ideal, dropped = [], [], [], 0
            for k in range(n_real):
                spec, _ = star(v, resolution, snr, 10_000 + k, intrinsic_width=b)
                r = fit_vsini(spec, lines=centres, resolution=resolution, macroturbulence=None, intrinsic_width=b)
                est.append(r.vsini_best_kms)
                err.append(r.vsini_err_kms)
                ideal.append(ideal_ml(ref, clean, spec, snr))
                dropped += len(r.dropped)
            est, err, ideal = np.array(est), np.array(err), np.array(ideal)
            pull = (est - v) / err
            print(f"{v:6.0f} {ref.intrinsic_width_kms:5.2f} {ew_ma:6.0f} {depth * snr:11.2f} {est.mean():8.3f} "
                  f"{est.std(ddof=1):7.4f} {math.sqrt(crb):7.4f} {est.var(ddof=1) / crb:8.3f} "
                  f"{ideal.var(ddof=1) / crb:9.3f} {np.nanmean(err):9.4f} {np.nanstd(pull, ddof=1):8.3f} {dropped:8d}",
                  flush=True)
    print("    sampling error of a var/CRB figure over n realisations: about sqrt(2/n) of it (0.10 for n = 200)")


def timing(resolution=50000.0, snr=100.0, vsini=30.0, repeats=5):
    print(f"(b) timing: one star, 8 lines, R = {resolution:.0f}, S/N = {snr:.0f}, v sin i = {vsini:.0f} km/s, no Monte Carlo")
    spec, centres = star(vsini, resolution, snr, 1, macroturbulence=4.0)
    for macro in (None, "free"):
        fit_vsini(spec, lines=centres, resolution=resolution, macroturbulence=macro)  # warm-up
        t0 = time.perf_counter()
        for _ in range(repeats):
            r = fit_vsini(spec, lines=centres, resolution=resolution, macroturbulence=macro)
        t_fit = (time.perf_counter() - t0) / repeats
        model, values = r.model, dict(r.params)
        n_eval = 50
        t0 = time.perf_counter()
        for k in range(n_eval):  # distinct v sin i each time: no cached profiles
            model.evaluate(dict(values, vsini=values["vsini"] * (1.0 + 1e-6 * (k + 1))))
        t_eval = (time.perf_counter() - t0) / n_eval
        label = "macroturbulence off" if macro is None else "macroturbulence free (joint RT kernel)"
        print(f"  {label:40s} fit {1e3 * t_fit:8.1f} ms   one model evaluation {1e3 * t_eval:7.3f} ms   "
              f"({r.model.n_data} pixels, {len(r.free)} free parameters, ratio {t_fit / t_eval:6.0f})")
    # the passes use the product approximation of rotation x RT macroturbulence; compare with joint everywhere
    original = fit_module.JointModel

    class AlwaysJoint(JointModel):
        def __init__(self, *args, rt_mode="joint", **kwargs):
            super().__init__(*args, rt_mode="joint", **kwargs)

    fit_module.JointModel = AlwaysJoint
    try:
        t0 = time.process_time()
        for _ in range(repeats):
            j = fit_vsini(spec, lines=centres, resolution=resolution, macroturbulence="free")
        t_joint = (time.process_time() - t0) / repeats
    finally:
        fit_module.JointModel = original
    t0 = time.process_time()
    for _ in range(repeats):
        r = fit_vsini(spec, lines=centres, resolution=resolution, macroturbulence="free")
    t_mixed = (time.process_time() - t0) / repeats
    print(f"  joint kernel in every pass: {1e3 * t_joint:.1f} ms CPU; product passes + joint final fit: "
          f"{1e3 * t_mixed:.1f} ms CPU; change of v sin i {(r.vsini_kms - j.vsini_kms) / r.vsini_err_kms:+.4f} sigma, "
          f"of zeta {(r.macroturbulence_kms - j.macroturbulence_kms) / r.macroturbulence_err_kms:+.4f} sigma")
    hand = simulate_spectrum("5250.2:0.5;5302.3:0.6;5324.2:0.6;5365.4:0.5;5371.5:0.7;5383.4:0.6",
                             wave_range=(5240, 5390), step=0.03, vsini=22, resolution=60000, macroturbulence=4,
                             snr=150, rng=4)
    t0 = time.process_time()
    for _ in range(repeats):
        r = fit_vsini(hand, resolution=60000)
    print(f"  6 detected lines (v sin i 22, zeta 4, R 60 000, S/N 150, seed 4), macroturbulence free: "
          f"{1e3 * (time.process_time() - t0) / repeats:.1f} ms CPU; {r.summary().splitlines()[1]}")


def recovery(n_real, snrs=(200.0, 1000.0)):
    print(f"\n(c) recovery: median bias and scatter of the best-fit v sin i (percent), {n_real} realisations per cell,")
    print("    8 lines (b = 1.65 km/s below 100 km/s, hot-star lines b = 5 km/s from 100 km/s), macroturbulence off;")
    print("    #limit = realisations reported as upper limits (their best-fit values still enter the median)")
    print(f"{'R':>7} {'c/R':>6} {'vsini':>6} " + " ".join(f"{'S/N ' + str(int(s)):>24}" for s in snrs))
    print(f"{'':>21}" + " ".join(f"{'bias%':>8}{'sd%':>8}{'#limit':>8}" for _ in snrs))
    for resolution in (20000.0, 50000.0, 110000.0):
        for v in (3.0, 5.0, 10.0, 30.0, 100.0, 300.0):
            b = 5.0 if v >= 100 else None
            cells = []
            for snr in snrs:
                est, lim = [], 0
                for k in range(n_real):
                    spec, centres = star(v, resolution, snr, 20_000 + k, intrinsic_width=b)
                    r = fit_vsini(spec, lines=centres, resolution=resolution, macroturbulence=None, intrinsic_width=b)
                    est.append(r.vsini_best_kms)
                    lim += r.is_upper_limit
                est = np.array(est)
                cells.append(f"{100 * (np.median(est) / v - 1):8.2f}{100 * est.std(ddof=1) / v:8.2f}{lim:8d}")
            print(f"{resolution:7.0f} {C_KMS / resolution:6.2f} {v:6.0f} " + " ".join(cells), flush=True)


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer realisations (a smoke run)")
    args = parser.parse_args()
    timing()
    efficiency(40 if args.quick else 200)
    recovery(5 if args.quick else 20)


if __name__ == "__main__":
    main()
