"""Benchmark of star-list surveys (issue 5, item 11): prints figures, asserts nothing.

(a) Throughput: the same list of synthetic stars measured with 1 worker (in the process) and with 2 local
    worker processes; stars per second over the whole run (start-up included) and in the steady state
    (from the first to the last finished star). Target: ratio 2 workers / 1 worker >= 1.7.
(b) Memory: the same kind of list with 200 and with 2000 stars (2 workers): peak resident memory of the
    parent process, peak of Python allocations in the parent (tracemalloc, in a second run: tracing
    inflates the resident memory), and the largest peak resident memory of a worker (reported by the
    workers themselves). Target: 2000 / 200 <= 1.2. The parent's peak is reached while the final table
    is written (astropy formats the whole table in memory), the only part that grows with the list.
(c) Processor time per star (sum over stars, from the workers), so a timing on a busy machine can be
    turned into an estimate for an idle one.

Each configuration runs in a fresh Python process (peak memory is per process). Spectra are small
(a few lines, a few hundred pixels) and shared between rows of the list: every row is still read from
disk and measured on its own.

Run: python tests/benchmarks/bench_survey.py [--quick]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

LINES = {
    "small": ([(5247.05, 0.5), (5250.21, 0.55)], (5244.0, 5254.0)),
    "medium": ([(5247.05, 0.5), (5250.21, 0.55), (5260.39, 0.45), (5264.81, 0.4)], (5240.0, 5272.0)),
}


def make_list(folder, n_stars, kind, n_spectra=8):
    """Write ``n_spectra`` synthetic spectra and a star list of ``n_stars`` rows cycling over them."""
    from vsini.io import write_spectrum
    from vsini.simulate import simulate_spectrum

    lines, wave_range = LINES[kind]
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    for k in range(n_spectra):
        path = folder / f"s{k}.fits"
        if not path.exists():
            spec = simulate_spectrum(lines, wave_range=wave_range, step=0.03, vsini=4.0 + 3.0 * k, resolution=60000.0,
                                     snr=150.0, rng=k, name=f"S{k}")
            write_spectrum(spec, path)
    starlist = folder / f"list_{kind}_{n_stars}.csv"
    with open(starlist, "w") as fh:
        fh.write("star,spectrum\n")
        for i in range(n_stars):
            fh.write(f"B-{i:06d},s{i % n_spectra}.fits\n")
    return starlist


def one_run(starlist, jobs, kind, trace):
    """Run one survey in this process and return its figures (called in a child process)."""
    import resource
    import sqlite3
    import tracemalloc

    from vsini.survey import run_survey

    lines, _ = LINES[kind]
    # medium: the full measurement (macroturbulence fitted); small: the cheapest (macroturbulence off)
    defaults = {"resolution": 60000.0, "lines": ";".join(str(c) for c, _ in lines),
                "macroturbulence": "free" if kind == "medium" else "off"}
    stamps = []

    class Stamps:
        def start(self, total, done=0):
            pass

        def advance(self, star, status, detail=""):
            stamps.append(time.perf_counter())

        def stage(self, text):
            pass

        def finish(self, summary):
            pass

    out = Path(starlist).with_suffix(f".jobs{jobs}.ecsv")
    if trace:
        tracemalloc.start()
    t0 = time.perf_counter()
    summary = run_survey(starlist, out, defaults=defaults, jobs=jobs, progress=Stamps())
    wall = time.perf_counter() - t0
    py_peak = tracemalloc.get_traced_memory()[1] if trace else -1
    with sqlite3.connect(summary.journal) as db:
        payloads = [json.loads(p) for (p,) in db.execute("SELECT payload FROM stars")]
    steady = (len(stamps) - 1) / (stamps[-1] - stamps[0]) if len(stamps) > 1 and stamps[-1] > stamps[0] else float("nan")
    return {
        "stars": summary.total,
        "jobs": jobs,
        "wall_s": wall,
        "rate": summary.total / wall,
        "steady_rate": steady,
        "failed": summary.failed,
        "cpu_s": sum(p.get("cpu_s", 0.0) for p in payloads),
        "parent_peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,
        "parent_python_peak_mb": py_peak / 2**20,
        "worker_peak_rss_mb": max(p.get("peak_rss_kb", -1) for p in payloads) / 1024.0,
    }


def in_child(starlist, jobs, kind, trace=False):
    """Run :func:`one_run` in a fresh interpreter and return its result."""
    cmd = [sys.executable, __file__, "--child", str(starlist), str(jobs), kind, "1" if trace else "0"]
    done = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise RuntimeError(done.stderr)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller lists")
    parser.add_argument("--child", nargs=4, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        starlist, jobs, kind, trace = args.child
        print(json.dumps(one_run(starlist, int(jobs), kind, trace == "1")))
        return
    n_speed = 24 if args.quick else 60
    sizes = (50, 500) if args.quick else (200, 2000)
    print(f"CPUs available: {len(os.sched_getaffinity(0)) if hasattr(os, 'sched_getaffinity') else os.cpu_count()}, "
          f"load average at start: {os.getloadavg()[0]:.2f}")
    with tempfile.TemporaryDirectory() as tmp:
        print(f"\n(a) throughput, {n_speed} stars of 4 lines (1067 pixels), both methods, macroturbulence fitted")
        print(f"{'workers':>8} {'wall s':>8} {'stars/s':>8} {'steady stars/s':>15} {'CPU s/star':>11}")
        rates = {}
        starlist = make_list(Path(tmp) / "speed", n_speed, "medium")
        for jobs in (1, 2):
            r = in_child(starlist, jobs, "medium")
            rates[jobs] = r
            print(f"{jobs:>8} {r['wall_s']:>8.1f} {r['rate']:>8.2f} {r['steady_rate']:>15.2f} "
                  f"{r['cpu_s'] / r['stars']:>11.3f}")
        print(f"ratio 2/1 workers: {rates[2]['rate'] / rates[1]['rate']:.2f} (whole run), "
              f"{rates[2]['steady_rate'] / rates[1]['steady_rate']:.2f} (steady state); target >= 1.7")
        print(f"\n(b) memory, 2 workers, stars of 2 lines (334 pixels, macroturbulence off): {sizes[0]} against "
              f"{sizes[1]} stars")
        print(f"{'stars':>6} {'wall s':>7} {'parent RSS MB':>14} {'parent Python MB':>17} {'worker RSS MB':>14}")
        mem = {}
        for n in sizes:
            starlist = make_list(Path(tmp) / "memory", n, "small")
            r = in_child(starlist, 2, "small")  # resident memory without tracemalloc's own overhead
            r["parent_python_peak_mb"] = in_child(starlist, 2, "small", trace=True)["parent_python_peak_mb"]
            mem[n] = r
            print(f"{n:>6} {r['wall_s']:>7.1f} {r['parent_peak_rss_mb']:>14.1f} {r['parent_python_peak_mb']:>17.2f} "
                  f"{r['worker_peak_rss_mb']:>14.1f}")
        a, b = mem[sizes[0]], mem[sizes[1]]
        print(f"ratio {sizes[1]}/{sizes[0]}: parent RSS {b['parent_peak_rss_mb'] / a['parent_peak_rss_mb']:.3f}, "
              f"parent Python {b['parent_python_peak_mb'] / a['parent_python_peak_mb']:.3f}, "
              f"worker RSS {b['worker_peak_rss_mb'] / a['worker_peak_rss_mb']:.3f}; target <= 1.2")
        print(f"load average at the end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
