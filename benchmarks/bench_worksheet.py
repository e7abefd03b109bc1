"""Benchmark of the worksheet's response time (edit -> every panel redrawn and autosaved).

Cases:

1. the bundled demo case (``pftwork.data_path()``), reported values and trials, no raw curves;
2. the same case with raw curves: three pre- and three post-bronchodilator forced manoeuvres,
   15 s at 1 kHz each (pftwork's synthetic manoeuvres), i.e. a "full" case.

For each case the time is measured, without a browser, from assigning a new value to a form
field (post-BD FEV1) until the callback returns: revalidation, interpretation, curve analysis,
redraw of every panel and figure, and the atomic autosave. Also timed: one ``Accept`` click.
Target: < 100 ms per edit for a full case.

Run: ``python benchmarks/bench_worksheet.py [--repeat 30]``.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import tempfile
import time
from typing import Any


def _curve(seed: int, vc: float, pef: float) -> dict[str, list[float]]:
    from pftwork.quality.synthetic import synthetic_manoeuvre

    m = synthetic_manoeuvre(expiration_time_s=15.0, rate_hz=1000.0, noise_l=0.002, seed=seed,
                            vc_l=vc, pef_l_s=pef, curvature=1.8)
    return {"time_s": m.curve.time_s.tolist(), "volume_l": m.curve.volume_l.tolist()}


def _with_curves(raw: dict[str, Any]) -> dict[str, Any]:
    raw = json.loads(json.dumps(raw))
    raw["subject"]["id"] = raw["subject"]["id"] + "-curves"
    raw["spirometry"]["pre"] = {"trials": [{"curve": _curve(i, 3.1 + 0.05 * i, 5.0)}
                                           for i in range(3)]}
    raw["spirometry"]["post"] = {"trials": [{"curve": _curve(10 + i, 3.3 + 0.05 * i, 5.4)}
                                            for i in range(3)]}
    return raw


def _time(action, repeat: int) -> list[float]:
    times = []
    for i in range(repeat):
        start = time.perf_counter()
        action(i)
        times.append((time.perf_counter() - start) * 1000.0)
    return times


def _row(label: str, times: list[float]) -> str:
    q = statistics.quantiles(times, n=10)
    return (f"| {label} | {statistics.median(times):.1f} | {q[8]:.1f} | {min(times):.1f} | "
            f"{len(times)} |")


def main(argv: list[str] | None = None) -> None:
    """Run the benchmark and print a Markdown table (milliseconds)."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=30, help="edits per case")
    args = parser.parse_args(argv)
    os.environ["PFTWORK_AUTOSAVE_DIR"] = tempfile.mkdtemp(prefix="pftwork-bench-")

    import pftwork
    from pftwork.case import read_case_file
    from pftwork.ui.widget_worksheet import Worksheet

    base = read_case_file(pftwork.data_path())
    print("| action | median ms | p90 ms | best ms | n |\n|---|---:|---:|---:|---:|")
    for label, raw in (("demo case", base), ("demo case + 6 raw curves (15 s, 1 kHz)",
                                             _with_curves(base))):
        start = time.perf_counter()
        ws = Worksheet(raw, reviewer="bench")
        print(f"| {label}: open worksheet | {(time.perf_counter() - start) * 1000:.0f} | | | 1 |")
        post = raw["spirometry"]["post"].get("FEV1")
        if post is None:  # trials only: edit the subject's weight instead (still a full update)
            path, values = "subject.weight_kg", [70 + (i % 2) for i in range(args.repeat)]
        else:
            path, values = "spirometry.post.FEV1", [post + 0.01 * (i % 2 + 1)
                                                    for i in range(args.repeat)]
        times = _time(lambda i, p=path, v=values, w=ws: w.form.set_value(p, f"{v[i]:.2f}"),
                      args.repeat)
        print(_row(f"{label}: edit {path} -> redrawn + saved", times))
        steps = [p.step_id for p in ws.panels]
        times = _time(lambda i, w=ws, s=steps: w.panel(s[i % len(s)]).accept_button.click(),
                      len(steps))
        print(_row(f"{label}: Accept click -> saved", times))


if __name__ == "__main__":
    main()
