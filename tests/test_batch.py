"""The batch table (design.md §6): every row equals ``pftwork.interpret`` on the same test.

External checks and their sources:
- Values and summary fields are compared with :func:`pftwork.interpret.interpret` run on the
  same test as a pftwork-case/1 dictionary (design.md §6: "Values in a row equal what
  ``interpret`` gives for the same test"); the reference engine behind both is cross-checked
  against other implementations in ``tests/test_reference_crosscheck.py``.
- Row errors are compared with the message :func:`pftwork.case.load_case` raises for the same
  test (design.md §6 + the batch task contract: same ranges and messages as the case loader).
- Column names, exit codes and one-line errors: design.md §4 and §6.
Cases here are invented.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import pftwork
from pftwork.batch import (
    BOTH_MESSAGE,
    COMPARE_SUMMARY,
    STATISTICS,
    SUMMARY_COLUMNS,
    BatchError,
    _level,
    _severity,
    apply_mapping,
    interpret_table,
    read_mapping,
    read_table,
    write_table,
)
from pftwork.cli import main
from pftwork.errors import CaseError
from pftwork.interpret import interpret
from pftwork.interpret.finding import level, severity
from pftwork.reference import reference_values

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "batch_example.csv"
SPIRO = ("FEV1", "FVC")
VOLUMES = ("TLC", "RV", "FRC", "ERV")
DIFFUSION = ("DLCO", "VA", "KCO")
# case-file field path -> batch column (design.md §2 vs §6), written out independently here
FIELD_COLUMN = {
    "subject.sex": "sex", "subject.age_years": "age_years", "subject.height_cm": "height_cm",
    "subject.ancestry": "ancestry", "test.altitude_m": "altitude_m",
    "test.barometric_kpa": "barometric_kpa", "diffusion.unit": "diffusion_unit",
    "diffusion.hemoglobin_g_dl": "hemoglobin_g_dl", "diffusion.cohb_percent": "cohb_percent",
    **{f"spirometry.{ph}.{p}": f"{p}_{ph}" for ph in ("pre", "post") for p in SPIRO},
    **{f"volumes.{p}": p for p in VOLUMES},
    **{f"diffusion.{p}": p for p in DIFFUSION},
}


# --------------------------------------------------------------------------- helpers
def _missing(v) -> bool:
    return v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v))


def case_of(row: dict) -> dict:
    """A pftwork-case/1 dictionary holding one table row (reported values only)."""
    def block(pairs):
        return {k: row[c] for c, k in pairs if not _missing(row.get(c))}

    case = {"format": "pftwork-case/1",
            "subject": {"id": str(row["id"]), "sex": None if _missing(row.get("sex")) else row["sex"],
                        "age_years": None if _missing(row.get("age_years")) else row["age_years"],
                        "height_cm": None if _missing(row.get("height_cm")) else row["height_cm"],
                        "ancestry": None if _missing(row.get("ancestry")) else row["ancestry"]}}
    test = block([("altitude_m", "altitude_m"), ("barometric_kpa", "barometric_kpa")])
    if test:
        case["test"] = test
    spiro = {ph: block([(f"{p}_{ph}", p) for p in SPIRO]) for ph in ("pre", "post")}
    if any(spiro.values()):
        case["spirometry"] = {ph: b for ph, b in spiro.items() if b}
    vols = block([(p, p) for p in VOLUMES])
    if vols:
        case["volumes"] = vols
    diff = block([(p, p) for p in DIFFUSION])
    if diff:
        diff["unit"] = None if _missing(row.get("diffusion_unit")) else row["diffusion_unit"]
        diff.update(block([("hemoglobin_g_dl", "hemoglobin_g_dl"), ("cohb_percent", "cohb_percent")]))
        case["diffusion"] = diff
    return case


def _close(actual, expected) -> bool:
    if expected is None:
        return _missing(actual)
    return not _missing(actual) and abs(actual - expected) <= 1e-9 * max(1.0, abs(expected))


def _plain(v):
    if _missing(v):
        return None
    return bool(v) if isinstance(v, (bool, np.bool_)) else v


def assert_row_equals_interpret(out: pd.Series, result, tag: str = "",
                                summary_keys=SUMMARY_COLUMNS) -> int:
    """Every value column of ``out`` present in ``result.values`` and every summary key match.

    Returns the number of numbers compared (so callers can check the test did compare).
    """
    compared = 0
    blocks = {"pre": "_pre", "post": "_post", "volumes": "", "diffusion": ""}
    for block, suffix in blocks.items():
        for param, item in result.values[block].items():
            base = param.replace("/", "") + suffix
            if f"{base}_z{tag}" not in out.index:
                continue
            for stat, key in STATISTICS.items():
                col = f"{base}_{stat}{tag}"
                assert _close(out[col], item[key]), (out["id"], col, out[col], item[key])
                compared += 1
            adjusted = item.get("adjusted")
            if adjusted and not tag:
                for stat, key in STATISTICS.items():
                    col = f"{base}_adj_{stat}"
                    assert _close(out[col], adjusted[key]), (out["id"], col)
                    compared += 1
    for key in summary_keys:
        assert result.summary[key] == _plain(out[f"{key}{tag}"]), (out["id"], key)
    return compared


def demo_table() -> tuple[pd.DataFrame, list]:
    """One row per bundled demo case, holding the measured values ``interpret`` selected."""
    rows, results = [], []
    for path in pftwork.demo_cases():
        case = pftwork.load_case(path)
        result = interpret(case)
        v = result.values
        s = case.subject
        row = {"id": s.id, "sex": s.sex, "age_years": s.age_years, "height_cm": s.height_cm,
               "ancestry": s.ancestry, "altitude_m": case.test.altitude_m}
        for ph in ("pre", "post"):
            row.update({f"{p}_{ph}": v[ph][p]["measured"] for p in SPIRO if p in v[ph]})
        row.update({p: v["volumes"][p]["measured"] for p in VOLUMES if p in v["volumes"]})
        row.update({p: v["diffusion"][p]["measured"] for p in DIFFUSION if p in v["diffusion"]})
        if case.diffusion is not None:
            row["diffusion_unit"] = case.diffusion.unit
            row["hemoglobin_g_dl"] = case.diffusion.hemoglobin_g_dl
        rows.append(row)
        results.append(result)
    return pd.DataFrame(rows), results


def random_table(n: int, seed: int, bad_fraction: float = 0.0) -> pd.DataFrame:
    """Invented tests around each subject's predicted values, some columns empty per row.

    With ``bad_fraction`` some cells are replaced by typical entry mistakes (mL for L,
    text, out-of-range, unknown sex or unit, RV above TLC …).
    """
    rng = np.random.default_rng(seed)
    sex = rng.choice(["male", "female"], n)
    age = np.round(rng.uniform(6.0, 92.0, n), 1)
    height = np.round(np.where(age < 14, rng.uniform(115, 165, n), rng.uniform(150, 195, n)), 1)

    def pred(set_id, param, **kw):
        return reference_values(set_id, param, sex, age, height, **kw).predicted

    fvc = pred("gli-global-2022", "FVC") * rng.uniform(0.45, 1.2, n)
    ratio = np.where(rng.random(n) < 0.4, rng.uniform(0.35, 0.68, n), rng.uniform(0.7, 0.95, n))
    tlc = np.maximum(pred("gli-2021", "TLC") * rng.uniform(0.6, 1.35, n), fvc * 1.05)
    rv = tlc * rng.uniform(0.18, 0.55, n)
    frc = np.minimum(rv + rng.uniform(0.3, 1.6, n), tlc)
    unit = rng.choice(["SI", "traditional"], n)
    dlco = pred("gli-2017", "DLCO") * rng.uniform(0.35, 1.3, n)
    va = np.minimum(tlc * rng.uniform(0.7, 1.0, n), 13.0)
    t = pd.DataFrame({
        "id": [f"r{i:04d}" for i in range(n)], "sex": sex, "age_years": age, "height_cm": height,
        "ancestry": rng.choice(["european", "african_american", "north_east_asian",
                                "south_east_asian", "other", None], n),
        "FEV1_pre": np.round(fvc * ratio, 2), "FVC_pre": np.round(fvc, 2),
        "FEV1_post": np.round(fvc * ratio * rng.uniform(0.97, 1.3, n), 2),
        "FVC_post": np.round(fvc * rng.uniform(0.98, 1.12, n), 2),
        "TLC": np.round(tlc, 2), "RV": np.round(rv, 2), "FRC": np.round(frc, 2),
        "ERV": np.round((frc - rv) * 0.9, 2),
        "DLCO": np.round(np.where(unit == "SI", dlco, dlco * 2.987), 2), "VA": np.round(va, 2),
        "KCO": np.nan, "diffusion_unit": unit,
        "hemoglobin_g_dl": np.round(rng.uniform(8.0, 17.5, n), 1),
        "cohb_percent": np.round(rng.uniform(0.5, 6.0, n), 1),
        "altitude_m": np.round(rng.uniform(0, 2500, n)),
    })
    t["FEV1_post"] = np.minimum(t["FEV1_post"], t["FVC_post"])
    for col, p in (("FEV1_post", 0.6), ("FVC_post", 0.6), ("TLC", 0.35), ("RV", 0.4),
                   ("FRC", 0.4), ("ERV", 0.6), ("DLCO", 0.4), ("VA", 0.45),
                   ("hemoglobin_g_dl", 0.5), ("cohb_percent", 0.8), ("altitude_m", 0.6)):
        t.loc[rng.random(n) < p, col] = np.nan
    t.loc[rng.random(n) < 0.05, ["FEV1_pre", "FVC_pre"]] = np.nan
    kco_rows = t["DLCO"].notna() & t["VA"].notna() & (rng.random(n) < 0.5)
    t.loc[kco_rows, "KCO"] = np.round(t.loc[kco_rows, "DLCO"] / t.loc[kco_rows, "VA"], 3)
    if bad_fraction:
        t = t.astype(dict.fromkeys(t.columns, object))
        mistakes = [("FVC_pre", lambda v: v * 1000), ("FEV1_pre", lambda v: "1,8"),
                    ("age_years", lambda v: None), ("height_cm", lambda v: 1.72),
                    ("sex", lambda v: "both"), ("sex", lambda v: "F"),
                    ("ancestry", lambda v: "caucasian"), ("RV", lambda v: 9.9),
                    ("DLCO", lambda v: 25.0), ("diffusion_unit", lambda v: None),
                    ("hemoglobin_g_dl", lambda v: 130.0), ("TLC", lambda v: -1.0),
                    ("FEV1_pre", lambda v: 9.5), ("altitude_m", lambda v: 9000.0)]
        for i in np.flatnonzero(rng.random(n) < bad_fraction):
            col, fn = mistakes[rng.integers(len(mistakes))]
            t.at[i, col] = fn(t.at[i, col])
    return t


def expected_error(row_number: int, exc: CaseError) -> str:
    """The batch error text for a loader error: the field named by its batch column."""
    column = FIELD_COLUMN[exc.field]
    return f"row {row_number}: {CaseError(column, exc.value, exc.expected, exc.hint)}"


def check_table(table: pd.DataFrame, out: pd.DataFrame, equations=None) -> dict:
    """Compare every row with interpret / load_case; return counts of what was checked."""
    seen = {"valid": 0, "errors": 0, "numbers": 0, "patterns": set(), "extrapolated": 0}
    for i, row in enumerate(table.to_dict("records")):
        got = out.iloc[i]
        try:
            result = interpret(case_of(row), equations=equations)
        except CaseError as exc:
            assert expected_error(i + 1, exc) == got["error"]
            assert _missing(got["pattern"]) and _missing(got["extrapolated"])
            seen["errors"] += 1
            continue
        if row["sex"] == "both":
            assert f"row {i + 1}: {BOTH_MESSAGE}" == got["error"]
            seen["errors"] += 1
            continue
        assert "" == got["error"], got["error"]
        seen["numbers"] += assert_row_equals_interpret(got, result)
        seen["valid"] += 1
        seen["patterns"].add(result.summary["pattern"])
        seen["extrapolated"] += result.summary["extrapolated"]
    return seen


# --------------------------------------------------------------------------- tests
class TestDemoCases:
    """Rows built from every bundled demo case."""

    def test_values_and_summary_equal_interpret(self):
        """Each demo row's pred/LLN/ULN/z/%pred (to 1e-9) and summary equal interpret's."""
        table, results = demo_table()
        out = interpret_table(table)

        compared = sum(assert_row_equals_interpret(out.iloc[i], r) for i, r in enumerate(results))
        assert len(results) == len(out) >= 10
        assert compared > 400
        assert {"obstruction", "restriction", "mixed", "non-specific", "PRISm", "normal"} == \
            {r.summary["pattern"] for r in results}
        assert (out["error"] == "").all()

    def test_output_columns_follow_the_contract(self):
        """Input columns first, then <PARAM>_<stat> per parameter, then summary, then error."""
        table, _ = demo_table()
        out = interpret_table(table)

        assert list(table.columns) == list(out.columns[: len(table.columns)])
        assert list(SUMMARY_COLUMNS) + ["error"] == list(out.columns[-12:])
        for name in ("FEV1_pre", "FVC_pre", "FEV1FVC_pre", "FEV1_post", "FEV1FVC_post", "TLC",
                     "RV", "RVTLC", "FRC", "DLCO", "KCO", "VA"):
            for stat in ("pred", "lln", "uln", "z", "pctpred"):
                assert f"{name}_{stat}" in out.columns

    def test_only_present_parameters_get_columns(self):
        """A table with spirometry only has no volume or diffusion columns (design.md §6)."""
        table, _ = demo_table()
        out = interpret_table(table[["id", "sex", "age_years", "height_cm", "FEV1_pre", "FVC_pre"]])

        assert "FEV1FVC_pre_z" in out.columns
        assert not any(c.startswith(("TLC_", "DLCO_", "FEV1_post_", "RVTLC_")) for c in out.columns)


class TestRandomTables:
    """Seeded invented tables covering units, adjustments, missing columns and entry mistakes."""

    def test_valid_rows_equal_interpret(self):
        """Every row of a 160-row table equals interpret (values to 1e-9, summary exactly)."""
        table = random_table(160, seed=11)
        seen = check_table(table, interpret_table(table))

        assert seen["valid"] >= 150
        assert 0 < seen["extrapolated"] < seen["valid"]
        assert seen["numbers"] > 5000
        assert {"obstruction", "restriction", "mixed", "non-specific", "PRISm", "normal"} <= \
            seen["patterns"]

    def test_bad_rows_get_the_loaders_message_and_others_still_compute(self):
        """Rows with entry mistakes carry the case loader's message; the rest equal interpret."""
        table = random_table(160, seed=12, bad_fraction=0.3)
        out = interpret_table(table)
        seen = check_table(table, out)

        assert seen["errors"] >= 25
        assert seen["valid"] >= 80

    def test_compare_mode_equals_interpret_under_each_set(self):
        """@gli-2012 columns equal interpret(equations="gli-2012"); pattern_changes compares."""
        table = random_table(90, seed=13)
        out = interpret_table(table, compare=("gli-global-2022", "gli-2012"))
        changes = 0
        for i, row in enumerate(table.to_dict("records")):
            case = case_of(row)
            assert_row_equals_interpret(out.iloc[i], interpret(case))
            other = interpret(case, equations="gli-2012")
            assert_row_equals_interpret(out.iloc[i], other, "@gli-2012", COMPARE_SUMMARY)
            differs = interpret(case).summary["pattern"] != other.summary["pattern"]
            assert differs == bool(out.iloc[i]["pattern_changes"])
            changes += differs
        assert "FEV1_pre_z@gli-2012" in out.columns
        assert "TLC_z@gli-2012" not in out.columns
        assert 0 < changes < len(table)


class TestRowErrors:
    """Row validation (design.md §6, messages of pftwork.case)."""

    def test_ml_entry_message_names_row_and_column(self):
        """The contract's example: FVC 2600 entered in mL on row 17 is named with its hint."""
        table = random_table(20, seed=14)
        table.loc[:, ["FEV1_post", "FVC_post", "TLC"]] = np.nan
        table.loc[16, "FVC_pre"] = 2600
        out = interpret_table(table)

        assert ("row 17: FVC_pre = 2600: expected litres BTPS between 0.1 and 10 — was this "
                "entered in mL?") == out.loc[16, "error"]
        assert (out.drop(index=16)["error"] == "").all()
        others = out.drop(index=16)
        assert others.loc[others["FEV1_pre"].notna(), "pattern"].notna().all()
        assert math.isnan(out.loc[16, "FEV1_pre_z"])

    def test_sex_both_is_refused_per_row(self):
        """sex "both" gets the documented batch error; the row's neighbours are computed."""
        table = random_table(5, seed=15)
        table.loc[2, "sex"] = "both"
        out = interpret_table(table)

        assert f"row 3: {BOTH_MESSAGE}" == out.loc[2, "error"]
        assert (out.drop(index=2)["error"] == "").all()

    @pytest.mark.parametrize(("column", "value", "expected"), [
        ("age_years", None, "row 1: age_years = None: expected a number in years"),
        ("sex", "F", "row 1: sex = 'F': expected one of \"male\", \"female\", \"both\" (sex at birth)"),
        ("FEV1_pre", "abc", "row 1: FEV1_pre = 'abc': expected a number in litres BTPS between "
                            "0.1 and 10"),
        ("diffusion_unit", None, "row 1: diffusion_unit = None: expected \"SI\" (mmol/min/kPa) "
                                 "or \"traditional\" (mL/min/mmHg): pftwork never guesses the "
                                 "diffusion unit"),
    ])
    def test_messages_match_the_case_loader(self, column, value, expected):
        """Typical mistakes read exactly as pftwork.case words them, with the batch column."""
        table = pd.DataFrame([{"id": "x", "sex": "female", "age_years": 50.0, "height_cm": 165.0,
                               "FEV1_pre": 2.5, "FVC_pre": 3.2, "DLCO": 7.0, "VA": 4.5,
                               "diffusion_unit": "SI"}], dtype=object)
        table.loc[0, column] = value
        out = interpret_table(table)

        assert expected == out.loc[0, "error"]

    def test_cross_field_check(self):
        """FVC above TLC is refused as the case loader refuses it (named on FVC_pre)."""
        table = pd.DataFrame([{"id": "x", "sex": "male", "age_years": 40.0, "height_cm": 180.0,
                               "FEV1_pre": 3.0, "FVC_pre": 6.0, "TLC": 5.5}])
        out = interpret_table(table)

        assert ("row 1: FVC_pre = 6: expected at most TLC (5.5 L): a vital capacity cannot "
                "exceed TLC") == out.loc[0, "error"]

    def test_empty_table_gives_the_columns_and_no_rows(self):
        """A table with a header and no rows gives an empty result with every column."""
        table, _ = demo_table()
        out = interpret_table(table.iloc[:0])

        assert 0 == len(out)
        assert {"FEV1FVC_pre_z", "DLCO_adj_z", "pattern", "error"} <= set(out.columns)

    def test_missing_required_column_is_a_file_error(self):
        """A table without height_cm cannot be interpreted at all (BatchError)."""
        table = pd.DataFrame({"id": ["a"], "sex": ["male"], "age_years": [40.0]})

        with pytest.raises(BatchError, match="height_cm"):
            interpret_table(table)


class TestRules:
    """The numpy forms of scalar rules equal the rules in pftwork.interpret."""

    def test_level_and_severity_equal_the_scalar_functions(self):
        """_level/_severity equal finding.level/severity on a grid including every band edge."""
        edges = [-4.0, -2.5, -1.645, 1.645]
        z = np.concatenate([np.linspace(-7, 4, 4401), edges,
                            np.nextafter(edges, -np.inf), np.nextafter(edges, np.inf), [np.nan]])

        assert [level(None if math.isnan(v) else float(v)) for v in z] == list(_level(z))
        assert [severity(None if math.isnan(v) else float(v)) for v in z] == list(_severity(z))

    def test_bronchodilator_thresholds_decided_as_interpret(self):
        """Changes at exactly 10 % of predicted, 12 % and 200 mL decide as the bronchodilator step."""
        rows = []
        for i, (sex, age, height) in enumerate([("female", 35.0, 165.0), ("male", 52.0, 178.0),
                                                ("female", 61.0, 158.0), ("male", 24.0, 185.0)]):
            p = reference_values("gli-global-2022", "FEV1", sex, age, height).predicted
            pre = 2.0
            for post in (pre + 0.1 * float(p), pre + 0.1 * float(p) + 1e-7, pre * 1.12,
                         pre + 0.2, pre + 0.19999999):
                rows.append({"id": f"b{i}-{len(rows)}", "sex": sex, "age_years": age,
                             "height_cm": height, "FEV1_pre": pre, "FVC_pre": 4.0,
                             "FEV1_post": post, "FVC_post": 4.0})
        table = pd.DataFrame(rows)
        out = interpret_table(table)
        decisions = set()
        for i, row in enumerate(rows):
            result = interpret(case_of(row))
            assert result.summary["bdr"] == bool(out.loc[i, "bdr"])
            assert result.summary["bdr_2005"] == bool(out.loc[i, "bdr_2005"])
            decisions.add((result.summary["bdr"], result.summary["bdr_2005"]))
        assert len(decisions) >= 3


class TestMapping:
    """Column-mapping files (design.md §6)."""

    def test_mapped_table_gives_the_same_result(self, tmp_path):
        """Other spellings renamed by a mapping file give the canonical table's results."""
        table, _ = demo_table()
        theirs = {"id": "PatientRef", "sex": "Gender", "FVC_pre": "FVC (L) pre", "TLC": "TLC_L"}
        src = table.rename(columns=theirs)
        src.to_csv(tmp_path / "in.csv", index=False)
        (tmp_path / "map.json").write_text(json.dumps({v: k for k, v in theirs.items()}))

        mapped = read_table(tmp_path / "in.csv", read_mapping(tmp_path / "map.json"))
        out = interpret_table(mapped)

        expected = interpret_table(table)
        assert list(table.columns) == list(mapped.columns)
        pd.testing.assert_frame_equal(expected.drop(columns=list(table.columns)),
                                      out.drop(columns=list(table.columns)), check_dtype=False)

    def test_unknown_target_and_clash_are_refused(self):
        """A target that is not a batch column, or two columns on one name, is a BatchError."""
        table = pd.DataFrame({"id": ["a"], "sex": ["male"], "age": [40], "height_cm": [180],
                              "age_years": [41]})

        with pytest.raises(BatchError, match="one of the batch columns"):
            apply_mapping(table, {"age": "age_in_years"})
        with pytest.raises(BatchError, match="one column per name"):
            apply_mapping(table, {"age": "age_years"})


class TestFiles:
    """Reading and writing tables."""

    def test_csv_round_trip_keeps_every_digit(self, tmp_path):
        """Values written to CSV read back equal (17 significant digits), ids stay text."""
        table = random_table(30, seed=16)
        table.loc[0, "id"] = "007"
        table.to_csv(tmp_path / "in.csv", index=False)
        out = interpret_table(read_table(tmp_path / "in.csv"))
        write_table(out, tmp_path / "out.csv")
        back = pd.read_csv(tmp_path / "out.csv", dtype={"id": str}, keep_default_na=False,
                           na_values=[""])

        assert "007" == back.loc[0, "id"]
        np.testing.assert_array_equal(out["FEV1_pre_z"].to_numpy(), back["FEV1_pre_z"].to_numpy())

    def test_csv_bytes_equal_pandas_to_csv(self, tmp_path, monkeypatch):
        """The chunked CSV writer gives exactly the bytes of pandas 3 ``to_csv(index=False)``."""
        import pftwork.batch

        monkeypatch.setattr(pftwork.batch, "_CSV_CHUNK", 7)
        table = random_table(40, seed=17, bad_fraction=0.3)
        table.loc[3, "id"] = 'quoted, "id"'
        out = interpret_table(table, compare=("gli-global-2022", "gli-2012"))
        write_table(out, tmp_path / "fast.csv")
        out.to_csv(tmp_path / "pandas.csv", index=False)

        assert (tmp_path / "pandas.csv").read_bytes() == (tmp_path / "fast.csv").read_bytes()

    def test_parquet_without_pyarrow_names_the_package(self, tmp_path, monkeypatch):
        """Without pyarrow, a Parquet path is refused with a message naming 'pyarrow'."""
        import importlib.util

        real = importlib.util.find_spec
        monkeypatch.setattr(importlib.util, "find_spec",
                            lambda name, *a: None if name == "pyarrow" else real(name, *a))
        (tmp_path / "t.parquet").write_bytes(b"PAR1")

        with pytest.raises(BatchError, match="pyarrow"):
            read_table(tmp_path / "t.parquet")
        with pytest.raises(BatchError, match="pyarrow"):
            write_table(pd.DataFrame({"a": [1]}), tmp_path / "o.parquet")

    def test_parquet_round_trip(self, tmp_path):
        """With pyarrow installed, Parquet in and out give the CSV path's results."""
        pytest.importorskip("pyarrow")
        table, _ = demo_table()
        table.to_parquet(tmp_path / "in.parquet")
        out = interpret_table(read_table(tmp_path / "in.parquet"))
        write_table(out, tmp_path / "out.parquet")

        pd.testing.assert_frame_equal(out, pd.read_parquet(tmp_path / "out.parquet"),
                                      check_dtype=False)


class TestCommandLine:
    """``pftwork batch`` (design.md §4: exit 0, or 2 with one line on stderr)."""

    def test_example_runs_and_reports_its_bad_rows(self, tmp_path, capsys):
        """The bundled example writes every row; its two deliberate mistakes are in 'error'."""
        out_path = tmp_path / "out.csv"

        assert 0 == main(["batch", str(EXAMPLE), "-o", str(out_path)])
        out = pd.read_csv(out_path, keep_default_na=False)
        assert "8 rows, 2 with an error" in capsys.readouterr().out
        assert 8 == len(out)
        assert out.loc[5, "error"].startswith("row 6: FVC_pre = 2520: expected litres BTPS")
        assert f"row 8: {BOTH_MESSAGE}" == out.loc[7, "error"]

    def test_compare_option_adds_suffixed_columns(self, tmp_path):
        """--compare writes the second set's columns and pattern_changes."""
        out_path = tmp_path / "out.csv"

        assert 0 == main(["batch", str(EXAMPLE), "-o", str(out_path), "--compare",
                          "gli-global-2022,gli-2012"])
        out = pd.read_csv(out_path)
        assert {"FEV1_pre_z@gli-2012", "pattern@gli-2012", "pattern_changes"} <= set(out.columns)

    @pytest.mark.parametrize(("setup", "needle"), [
        ("missing_column", "height_cm"),
        ("no_file", "no such file"),
        ("bad_suffix", ".csv or .parquet"),
        ("bad_mapping", "one of the batch columns"),
        ("bad_compare", "gli-2099"),
    ])
    def test_unusable_input_exits_2_with_one_line(self, tmp_path, capsys, setup, needle):
        """Each whole-file problem exits 2 with one stderr line naming it, no traceback."""
        good = tmp_path / "in.csv"
        pd.read_csv(EXAMPLE).to_csv(good, index=False)
        args = ["batch", str(good), "-o", str(tmp_path / "out.csv")]
        if setup == "missing_column":
            pd.read_csv(EXAMPLE).drop(columns="height_cm").to_csv(good, index=False)
        elif setup == "no_file":
            args[1] = str(tmp_path / "absent.csv")
        elif setup == "bad_suffix":
            args[3] = str(tmp_path / "out.xlsx")
        elif setup == "bad_mapping":
            (tmp_path / "m.json").write_text('{"height": "height_in_cm"}')
            args += ["--mapping", str(tmp_path / "m.json")]
        else:
            args += ["--compare", "gli-global-2022,gli-2099"]

        assert 2 == main(args)
        err = capsys.readouterr().err
        assert 1 == len(err.strip().splitlines())
        assert needle in err
        assert not (tmp_path / "out.csv").exists()

    def test_subprocess_has_no_traceback(self, tmp_path):
        """Run as a user would: a missing column gives exit 2 and a single stderr line."""
        bad = tmp_path / "bad.csv"
        bad.write_text("id,sex,age_years\na,male,40\n")
        proc = subprocess.run([sys.executable, "-m", "pftwork.cli", "batch", str(bad), "-o",
                               str(tmp_path / "o.csv")], capture_output=True, text=True,
                              timeout=120)

        assert 2 == proc.returncode
        assert "Traceback" not in proc.stderr
        assert 1 == len(proc.stderr.strip().splitlines())
