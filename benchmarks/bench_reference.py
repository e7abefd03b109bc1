"""Benchmark: pftwork.reference.reference_values vs pyspiro 1.0.0's vectorised ``compute``.

Both run in this process on the same seeded subjects (default 1,000,000). For pyspiro the
fastest path is ``Reference.compute(DataFrame, parameter, value_col=..., metrics=(percent,
zscore, lln, uln))``; pftwork's call returns predicted, LLN, ULN, z, % predicted (percentile on first access)
and the extrapolated flag. The two libraries are timed alternately (the machine is shared),
``--repeat`` runs each after a warm-up run; the best (minimum) time of each is reported, the
usual estimate of cost under background load, and the median is printed beside it.
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


def _times(fns: list[Callable[[], Any]], repeat: int) -> list[list[float]]:
    """Run the functions alternately, ``repeat`` times each after a warm-up; their run times."""
    for fn in fns:
        fn()  # warm-up: loads tables, touches memory
    times: list[list[float]] = [[] for _ in fns]
    for _ in range(repeat):
        for fn, bucket in zip(fns, times, strict=True):
            start = time.perf_counter()
            result = fn()
            bucket.append(time.perf_counter() - start)
            del result
    return times


def _peak_mb(fn: Callable[[], Any]) -> float:
    tracemalloc.start()
    result = fn()
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    del result
    return peak / 1e6


def _case(s: dict[str, np.ndarray], frame: pd.DataFrame, case: tuple, repeat: int) -> None:
    label, set_id, parameter, unit, cls, theirs, needs_anc = case
    n = len(s["age"])
    equation = getattr(pyspiro, cls)()
    codes = s["eth"] - 1 if needs_anc else None
    predicted = reference_values(set_id, parameter, s["sex"], s["age"], s["height"],
                                 ancestry=codes, unit=unit).predicted
    measured = predicted * s["value"]  # measured values near the predicted value
    frame = frame.assign(value=measured)
    kwargs = {"ethnicity_col": "eth"} if needs_anc else {}

    def ours(anc: Any = codes) -> Any:
        return reference_values(set_id, parameter, s["sex"], s["age"], s["height"],
                                measured=measured, ancestry=anc, unit=unit)

    def theirs_fn() -> Any:
        return equation.compute(frame, equation.Parameters[theirs], value_col="value", **kwargs)

    t_ours, t_theirs = _times([ours, theirs_fn], repeat)
    peak = _peak_mb(ours)
    best, other = min(t_ours), min(t_theirs)
    print(f"{label:22s} {n / best:14,.0f} {n / other:14,.0f} {other / best:6.1f} {peak:8.0f}"
          f"   (median ratio {statistics.median(t_theirs) / statistics.median(t_ours):.1f})")
    if needs_anc:
        names = np.array(ANCESTRIES)[s["eth"] - 1]
        (t_names,) = _times([lambda: ours(names)], repeat)
        print(f"{'  ancestry as names':22s} {n / min(t_names):14,.0f}")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=1_000_000, help="number of subjects")
    parser.add_argument("--repeat", type=int, default=5, help="timed runs per library")
    args = parser.parse_args(argv)
    s = _subjects(args.n)
    frame = pd.DataFrame({"sex": s["sex"], "age": s["age"], "height": s["height"], "eth": s["eth"]})
    print(f"subjects: {args.n:,}; best of {args.repeat} alternating runs; python "
          f"{platform.python_version()}, numpy {np.__version__}, pandas {pd.__version__}, pyspiro 1.0.0")
    print(f"cpu: {platform.processor() or platform.machine()}, cores: {os.cpu_count()}, "
          f"OPENBLAS_CORETYPE={os.environ.get('OPENBLAS_CORETYPE', '(unset)')}, "
          f"NUMPY_MADVISE_HUGEPAGE={os.environ.get('NUMPY_MADVISE_HUGEPAGE', '(unset)')}")
    print(f"{'case':22s} {'pftwork rec/s':>14s} {'pyspiro rec/s':>14s} {'ratio':>6s} {'peak MB':>8s}")
    for case in CASES:
        _case(s, frame, case, args.repeat)
    text_sex = np.where(s["sex"] == 1, "male", "female")
    (t_text,) = _times([lambda: reference_values("gli-global-2022", "FEV1", text_sex, s["age"],
                                                 s["height"], measured=1.0)], args.repeat)
    print(f"{'GLI Global FEV1, sex as strings (pftwork only)':48s} {args.n / min(t_text):14,.0f}")


if __name__ == "__main__":
    main()
