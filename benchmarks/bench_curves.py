"""Benchmark of raw-curve analysis (pftwork.quality.curves.analyse_curve).

1. One 15-s forced manoeuvre sampled at 1 kHz (plus the inspiratory limb): median time per
   analysis over ``--repeat`` runs (target < 5 ms).
2. A batch of ``--n`` manoeuvres (default 10,000; target < 30 s): curves are drawn in turn from
   a pool of 50 varied synthetic manoeuvres (15 s at 1 kHz, noise, obstruction, knees, coughs),
   built before timing so that only the analysis is timed.

Run: ``python benchmarks/bench_curves.py [--n 10000] [--repeat 200]``.
"""

from __future__ import annotations

import argparse
import statistics
import time

from pftwork.quality import curves
from pftwork.quality.synthetic import synthetic_manoeuvre


def analyse_curve(curve):
    """The full analysis every time: the cache of recent results is emptied first."""
    curves._RECENT.clear()
    return curves.analyse_curve(curve)


def _pool(size: int = 50) -> list:
    pool = []
    for i in range(size):
        pool.append(synthetic_manoeuvre(
            expiration_time_s=15.0, rate_hz=1000.0, noise_l=0.002, seed=i,
            vc_l=3.0 + 0.05 * i, pef_l_s=5.0 + 0.1 * i, curvature=1.0 + 0.05 * (i % 20),
            knee_at=0.15 if i % 7 == 0 else None, cough_at_s=0.4 if i % 11 == 0 else None,
        ).curve)
    return pool


def main(argv: list[str] | None = None) -> None:
    """Run both benchmarks and print the numbers."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=10_000, help="manoeuvres in the batch")
    parser.add_argument("--repeat", type=int, default=200, help="runs for the single-curve median")
    args = parser.parse_args(argv)

    one = synthetic_manoeuvre(expiration_time_s=15.0, rate_hz=1000.0, noise_l=0.002).curve
    analyse_curve(one)  # warm-up (filter coefficients are cached)
    times = []
    for _ in range(args.repeat):
        start = time.perf_counter()
        analyse_curve(one)
        times.append(time.perf_counter() - start)
    median_ms = 1000 * statistics.median(times)
    print(f"single manoeuvre: {one.time_s.size} samples (15 s expiration at 1 kHz + inspiration)")
    print(f"  median {median_ms:.2f} ms per curve over {args.repeat} runs "
          f"(target < 5 ms): {'OK' if median_ms < 5 else 'SLOW'}")

    pool = _pool()
    start = time.perf_counter()
    for i in range(args.n):
        analyse_curve(pool[i % len(pool)])
    total = time.perf_counter() - start
    print(f"batch: {args.n} manoeuvres in {total:.2f} s ({1000 * total / args.n:.2f} ms each; "
          f"target < 30 s for 10,000): {'OK' if total * 10_000 / args.n < 30 else 'SLOW'}")


if __name__ == "__main__":
    main()
