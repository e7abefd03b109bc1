"""Benchmark: auditable notebook export and verification of the bundled demo case.

Times, for the main invented demo case with every step accepted and signed off:

* ``build``   — worksheet record -> sealed export record -> notebook, no execution and no file
  (target < 0.3 s);
* ``export``  — :func:`export_notebook` with execution in a fresh kernel (nbclient) and write;
* ``verify``  — :func:`verify_notebook` with re-execution in a fresh kernel, including kernel
  start (target < 5 s);
* ``verify --no-execute`` — record, chain, recomputation and cell checks in-process.

Each is run ``--repeat`` times after one warm-up (build only); best and median are printed (the
machine is shared, the minimum is the usual estimate of cost under background load).

    python benchmarks/bench_export.py
    python benchmarks/bench_export.py --repeat 5 --case prism_bus_driver
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import pftwork
from pftwork.export import auto_worksheet
from pftwork.export.notebook import build_notebook, export_notebook
from pftwork.export.verify import verify_notebook

TARGETS = {"build": 0.3, "verify": 5.0}


def _time(fn: Callable[[], object], repeat: int) -> list[float]:
    out = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        out.append(time.perf_counter() - start)
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--case", default=pftwork.DEMO_CASE, help="bundled demo case name")
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()

    record = auto_worksheet(pftwork.data_path(args.case), "benchmark reviewer")
    build_notebook(record)  # warm-up: imports, reference tables
    with tempfile.TemporaryDirectory(prefix="pftwork-bench-") as tmp:
        path = Path(tmp) / "ws.ipynb"
        results = {
            "build": _time(lambda: build_notebook(record), max(args.repeat, 5)),
            "export": _time(lambda: export_notebook(record, path, execute=True), args.repeat),
            "verify": _time(lambda: verify_notebook(path, execute=True), args.repeat),
            "verify --no-execute": _time(lambda: verify_notebook(path, execute=False),
                                         args.repeat),
        }
        status = verify_notebook(path, execute=False).status
        size_kb = path.stat().st_size / 1024
    print(f"pftwork {pftwork.__version__}, Python {platform.python_version()}, "
          f"{os.cpu_count()} CPU, case {args.case}, notebook {size_kb:.0f} KB, verify: {status}")
    for name, times in results.items():
        target = TARGETS.get(name)
        verdict = "" if target is None else (
            f"  target < {target:g} s: {'met' if min(times) < target else 'MISSED'}")
        print(f"{name:22s} best {min(times):7.3f} s   median {statistics.median(times):7.3f} s"
              f"{verdict}")


if __name__ == "__main__":
    main()
