"""Benchmark: ``pftwork.batch.interpret_table`` vs ``pftwork.interpret`` called once per row.

Both run in this process on the same seeded, invented table (default 100,000 rows with
spirometry pre/post, volumes and diffusion, some cells empty, about 1 % entry mistakes).
``interpret_table`` is timed on the whole table (best of ``--repeat`` runs after a warm-up);
``interpret`` is timed on a random sample of rows (``--sample``, default 300), each row given
as a pftwork-case/1 dictionary of reported values, and its rate is extrapolated. The CSV read
and write of the CLI are timed separately. The sample's summaries are checked equal to the
batch rows (a sanity check; the tests compare every value).

    python benchmarks/bench_batch.py                  # 100,000 rows, about 30 s
    python benchmarks/bench_batch.py --n 20000 --compare
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from pftwork.batch import SUMMARY_COLUMNS, interpret_table, read_table, write_table
from pftwork.errors import CaseError
from pftwork.interpret import interpret
from pftwork.reference import reference_values


def make_table(n: int, seed: int = 2026) -> pd.DataFrame:
    """An invented table of ``n`` tests around each subject's predicted values."""
    rng = np.random.default_rng(seed)
    sex = rng.choice(["male", "female"], n)
    age = np.round(rng.uniform(8.0, 90.0, n), 1)
    height = np.round(np.where(age < 14, rng.uniform(120, 165, n), rng.uniform(148, 198, n)), 1)

    def pred(set_id: str, param: str) -> np.ndarray:
        return reference_values(set_id, param, sex, age, height).predicted

    fvc = pred("gli-global-2022", "FVC") * rng.uniform(0.45, 1.2, n)
    ratio = np.where(rng.random(n) < 0.4, rng.uniform(0.35, 0.68, n), rng.uniform(0.7, 0.95, n))
    tlc = np.maximum(pred("gli-2021", "TLC") * rng.uniform(0.6, 1.35, n), fvc * 1.05)
    rv = tlc * rng.uniform(0.18, 0.55, n)
    unit = rng.choice(["SI", "traditional"], n)
    dlco = pred("gli-2017", "DLCO") * rng.uniform(0.35, 1.3, n)
    table = pd.DataFrame({
        "id": [f"t{i:06d}" for i in range(n)], "sex": sex, "age_years": age, "height_cm": height,
        "ancestry": None,
        "FEV1_pre": np.round(fvc * ratio, 2), "FVC_pre": np.round(fvc, 2),
        "FEV1_post": np.round(fvc * ratio * rng.uniform(0.97, 1.3, n), 2),
        "FVC_post": np.round(fvc * rng.uniform(1.0, 1.12, n), 2),
        "TLC": np.round(tlc, 2), "RV": np.round(rv, 2),
        "FRC": np.round(np.minimum(rv + rng.uniform(0.3, 1.6, n), tlc), 2),
        "DLCO": np.round(np.where(unit == "SI", dlco, dlco * 2.987), 2),
        "VA": np.round(np.minimum(tlc * rng.uniform(0.7, 1.0, n), 13.0), 2), "KCO": np.nan,
        "diffusion_unit": unit, "hemoglobin_g_dl": np.round(rng.uniform(9.0, 17.0, n), 1),
    })
    table["FEV1_post"] = np.minimum(table["FEV1_post"], table["FVC_post"])
    for col, p in (("FEV1_post", 0.5), ("FVC_post", 0.5), ("TLC", 0.3), ("RV", 0.3),
                   ("DLCO", 0.3), ("hemoglobin_g_dl", 0.5)):
        table.loc[rng.random(n) < p, col] = np.nan
    table.loc[rng.random(n) < 0.01, "FVC_pre"] *= 1000.0  # entered in mL: a row error
    return table


def case_of(row: dict) -> dict:
    """The pftwork-case/1 dictionary of one row (reported values only)."""
    def block(keys: dict[str, str]) -> dict:
        return {k: row[c] for c, k in keys.items() if not pd.isna(row.get(c))}

    case: dict = {"format": "pftwork-case/1",
                  "subject": {"id": row["id"], "sex": row["sex"], "age_years": row["age_years"],
                              "height_cm": row["height_cm"]}}
    spiro = {ph: block({f"FEV1_{ph}": "FEV1", f"FVC_{ph}": "FVC"}) for ph in ("pre", "post")}
    if any(spiro.values()):
        case["spirometry"] = {ph: b for ph, b in spiro.items() if b}
    if vols := block({"TLC": "TLC", "RV": "RV", "FRC": "FRC"}):
        case["volumes"] = vols
    if diff := block({"DLCO": "DLCO", "VA": "VA", "KCO": "KCO"}):
        case["diffusion"] = diff | {"unit": row["diffusion_unit"]} | block(
            {"hemoglobin_g_dl": "hemoglobin_g_dl"})
    return case


def per_row(rows: list[dict]) -> tuple[float, list[dict | None]]:
    """Seconds to interpret each row with ``pftwork.interpret``, and the summaries."""
    out: list[dict | None] = []
    start = time.perf_counter()
    for row in rows:
        try:
            out.append(interpret(case_of(row)).summary)
        except CaseError:
            out.append(None)
    return time.perf_counter() - start, out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=100_000, help="rows in the table")
    parser.add_argument("--sample", type=int, default=300, help="rows run through interpret")
    parser.add_argument("--repeat", type=int, default=3, help="timed batch runs")
    parser.add_argument("--compare", action="store_true",
                        help="also time --compare gli-global-2022,gli-2012")
    args = parser.parse_args()

    table = make_table(args.n)
    interpret_table(table.head(1000))  # warm-up: tables, models, imports
    times = []
    for _ in range(args.repeat):
        start = time.perf_counter()
        result = interpret_table(table)
        times.append(time.perf_counter() - start)
    best = min(times)

    rng = np.random.default_rng(7)
    pick = np.sort(rng.choice(args.n, size=min(args.sample, args.n), replace=False))
    rows = table.iloc[pick].to_dict("records")
    per_row(rows[:20])  # warm-up
    seconds, summaries = per_row(rows)
    scalar_rate = len(rows) / seconds
    agree = sum(
        s is None and result.iloc[i]["error"] != "" or s is not None and all(
            s[k] == (None if pd.isna(result.iloc[i][k]) else result.iloc[i][k])
            for k in SUMMARY_COLUMNS)
        for i, s in zip(pick, summaries, strict=True))

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "in.csv"
        table.to_csv(path, index=False)
        start = time.perf_counter()
        read_table(path)
        read_s = time.perf_counter() - start
        start = time.perf_counter()
        write_table(result, Path(tmp) / "out.csv")
        write_s = time.perf_counter() - start

    print(f"machine: {platform.machine()}, {os.cpu_count()} CPUs, Python {platform.python_version()}, "
          f"numpy {np.__version__}, pandas {pd.__version__}")
    print(f"rows: {args.n:,} ({int((result['error'] != '').sum()):,} with a row error)")
    print(f"interpret_table: best {best:.2f} s, median {statistics.median(times):.2f} s "
          f"-> {args.n / best:,.0f} rows/s")
    print(f"interpret per row: {len(rows)} rows in {seconds:.2f} s -> {scalar_rate:,.0f} rows/s "
          f"(100,000 rows would take about {100_000 / scalar_rate / 60:.1f} min)")
    print(f"ratio batch / per-row: {args.n / best / scalar_rate:,.0f}x")
    print(f"sample summaries equal to the batch rows: {agree}/{len(rows)}")
    print(f"CSV read {read_s:.2f} s, CSV write {write_s:.2f} s ({result.shape[1]} columns)")
    if args.compare:
        start = time.perf_counter()
        interpret_table(table, compare=("gli-global-2022", "gli-2012"))
        print(f"with --compare gli-global-2022,gli-2012: {time.perf_counter() - start:.2f} s")


if __name__ == "__main__":
    main()
