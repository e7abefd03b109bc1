"""Benchmark: pftwork.reference.reference_values vs pyspiro 1.0.0's vectorised ``compute``.

Both run in this process on the same seeded subjects (default 1,000,000). For pyspiro the
fastest path is ``Reference.compute(DataFrame, parameter, value_col=..., metrics=(percent,
zscore, lln, uln))``; pftwork's call returns predicted, LLN, ULN, z, % predicted, percentile
and the extrapolated flag. Times are the median of ``--repeat`` runs after one warm-up run.
Peak memory of one pftwork call is measured with tracemalloc (numpy reports its buffers to it).

    python benchmarks/bench_reference.py            # 1,000,000 subjects, about 30 s
    python benchmarks/bench_reference.py --n 100000
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import time
import tracemalloc
import warnings
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd

from pftwork.reference import ANCESTRIES, reference_values

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    import pyspiro

# (label, pftwork set, parameter, unit, pyspiro class, pyspiro parameter, ancestry?)
CASES = [
    ("GLI Global FEV1", "gli-global-2022", "FEV1", "SI", "BOWERMAN_2022", "FEV1", False),
    ("GLI-2012 FEV1/FVC", "gli-2012", "FEV1/FVC", "SI", "GLI_2012", "FEV1FVC", True),
    ("GLI-2017 DLCO (SI)", "gli-2017", "DLCO", "SI", "GLI_2017", "TLCO", False),
    ("GLI-2021 TLC", "gli-2021", "TLC", "SI", "GLI_2021", "TLC", False),
]


def _subjects(n: int, seed: int = 2026) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    return {
        "sex": rng.integers(0, 2, n),
        "age": rng.uniform(5.0, 80.0, n),  # inside every set's range
        "height": rng.uniform(110.0, 200.0, n),
        "eth": rng.integers(1, 6, n),
        "value": rng.uniform(0.6, 1.2, n),
    }


def _median_time(fn: Callable[[], Any], repeat: int) -> float:
    fn()  # warm-up: loads tables, touches memory
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - start)
        del result
    return statistics.median(times)


def _peak_mb(fn: Callable[[], Any]) -> float:
    tracemalloc.start()
    result = fn()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    del result
    return peak / 1e6


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=1_000_000, help="number of subjects")
    parser.add_argument("--repeat", type=int, default=3, help="timed runs per library")
    args = parser.parse_args(argv)
    n = args.n
    s = _subjects(n)
    ancestry_names = np.array(ANCESTRIES)[s["eth"] - 1]
    frame = pd.DataFrame({"sex": s["sex"], "age": s["age"], "height": s["height"], "eth": s["eth"]})

    print(f"subjects: {n:,}; repeats: {args.repeat} (median); python {platform.python_version()}, "
          f"numpy {np.__version__}, pandas {pd.__version__}, pyspiro 1.0.0")
    print(f"cpu: {platform.processor() or platform.machine()}, cores: {os.cpu_count()}, "
          f"OPENBLAS_CORETYPE={os.environ.get('OPENBLAS_CORETYPE', '(unset)')}, "
          f"NUMPY_MADVISE_HUGEPAGE={os.environ.get('NUMPY_MADVISE_HUGEPAGE', '(unset)')}")
    print(f"{'case':22s} {'pftwork rec/s':>14s} {'pyspiro rec/s':>14s} {'ratio':>6s} {'peak MB':>8s}")
    for label, set_id, parameter, unit, cls, theirs, needs_anc in CASES:
        equation = getattr(pyspiro, cls)()
        # measured values near the predicted value
        predicted = reference_values(set_id, parameter, s["sex"], s["age"], s["height"],
                                     ancestry=s["eth"] - 1 if needs_anc else None, unit=unit).predicted
        measured = predicted * s["value"]
        frame["value"] = measured

        def ours(anc: Any = s["eth"] - 1 if needs_anc else None) -> Any:
            return reference_values(set_id, parameter, s["sex"], s["age"], s["height"],
                                    measured=measured, ancestry=anc, unit=unit)

        def theirs_fn() -> Any:
            kwargs = {"ethnicity_col": "eth"} if needs_anc else {}
            return equation.compute(frame, equation.Parameters[theirs], value_col="value", **kwargs)

        t_ours = _median_time(ours, args.repeat)
        t_theirs = _median_time(theirs_fn, args.repeat)
        peak = _peak_mb(ours)
        print(f"{label:22s} {n / t_ours:14,.0f} {n / t_theirs:14,.0f} {t_theirs / t_ours:6.1f} {peak:8.0f}")
        if needs_anc:
            t_names = _median_time(lambda: ours(ancestry_names), args.repeat)
            print(f"{'  (ancestry as names)':22s} {n / t_names:14,.0f}")
    text_sex = np.where(s["sex"] == 1, "male", "female")
    t_text = _median_time(lambda: reference_values("gli-global-2022", "FEV1", text_sex, s["age"],
                                                   s["height"], measured=1.0), args.repeat)
    print(f"{'  GLI Global FEV1, sex as strings':34s} {n / t_text:14,.0f} rec/s (pftwork)")


if __name__ == "__main__":
    main()
