"""Benchmark: one composed model evaluation against a bare FFT pair of the same size.

Run: ``python tests/benchmarks/bench_model.py``. Prints, side by side in one run, the time of one
evaluation of the composed forward model (intrinsic x rotation x macroturbulence x instrument, 8 line
windows of 512 pixels, one line each, pixel-integrated) and the time of one bare numpy rfft + irfft pair
over the same total number of samples (8 x 512), their ratio (target: at most 5) and evaluations per
second. All are timed interleaved with the same protocol (timeit, best of several repeats).
"""

import argparse
import timeit

import numpy as np

from vsini.model import Broadening, synthesize

N_WIN, N_PIX = 8, 512


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--number", type=int, default=200, help="calls per timing")
    parser.add_argument("--repeat", type=int, default=15, help="timings; the best is reported")
    args = parser.parse_args()

    rng = np.random.default_rng(1)
    dv = 1.0  # km/s per pixel (R ~ 100 000 sampled at ~3 px per resolution element)
    offsets = 256.0 + rng.uniform(-2, 2, N_WIN)
    ew = rng.uniform(1.0, 5.0, N_WIN)
    window = np.arange(N_WIN)
    x = rng.standard_normal(N_WIN * N_PIX)

    def bare_fft():
        np.fft.irfft(np.fft.rfft(x), n=x.size)

    cases = [
        ("rotation + Gaussian instrument + thermal", Broadening(vsini=20.0, intrinsic_width=1.5, resolution=60000)),
        ("+ RT macroturbulence (product)",
         Broadening(vsini=20.0, intrinsic_width=1.5, resolution=60000, macroturbulence=4.0, rt_mode="product")),
        ("+ RT macroturbulence (joint disc integral)",
         Broadening(vsini=20.0, intrinsic_width=1.5, resolution=60000, macroturbulence=4.0, rt_mode="joint")),
    ]
    funcs = [bare_fft]
    for _, b in cases:
        def model(b=b):
            synthesize(b, dv, N_PIX, offsets, ew, line_window=window, n_windows=N_WIN)

        funcs.append(model)
    # interleaved: every repeat times the bare FFT and each model one after the other, so a busy moment
    # of the machine inflates them alike; the best of the repeats is reported for each
    best = [float("inf")] * len(funcs)
    for _ in range(args.repeat):
        for k, f in enumerate(funcs):
            best[k] = min(best[k], timeit.timeit(f, number=args.number) / args.number)
    t_fft = best[0]
    print(f"bare numpy rfft+irfft of {N_WIN * N_PIX} samples: {t_fft * 1e6:9.1f} us")
    print(f"{'model (8 windows x 512 px)':45s} {'time (us)':>10s} {'ratio':>7s} {'evals/s':>9s}")
    for (label, _), t in zip(cases, best[1:], strict=True):
        print(f"{label:45s} {t * 1e6:10.1f} {t / t_fft:7.2f} {1 / t:9.0f}")

if __name__ == "__main__":
    main()
