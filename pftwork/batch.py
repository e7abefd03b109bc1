"""Vectorised interpretation of a table of tests, one row per test (design.md §6).

:func:`interpret_table` takes a :class:`pandas.DataFrame` and returns one: the input columns,
then for every parameter present ``<PARAM>_pred``, ``_lln``, ``_uln``, ``_z`` and ``_pctpred``
(spirometry with its phase, ``FEV1_pre_z``; ``FEV1/FVC`` spelled ``FEV1FVC_pre_z``; ``RVTLC_z``),
then the summary columns :data:`SUMMARY_COLUMNS` and ``error``. A row's values equal what
:func:`pftwork.interpret.interpret` gives for the same test given as reported values: reference
values come from :func:`pftwork.reference.reference_values`, one call per parameter for all
rows, and the decisions apply the interpretation package's own rules and constants
(``Z_LLN``/``Z_ULN``, ``pattern_of``, ``bdr_2022``/``bdr_2005``, ``hb_factor``, …) with numpy.

Columns
-------
Required: ``id, sex, age_years, height_cm``. Optional (design.md §6): ``ancestry, FEV1_pre,
FVC_pre, FEV1_post, FVC_post, TLC, RV, FRC, DLCO, VA, KCO, diffusion_unit, hemoglobin_g_dl``.
Optional extensions read the same way as the case file (design.md §2): ``ERV, IC, VC``
(static volumes), ``cohb_percent``, ``altitude_m``, ``barometric_kpa`` (the DLCO adjustments
of :mod:`pftwork.interpret.gas_transfer`). Other columns are passed through untouched.
When the table has an adjustment column (``hemoglobin_g_dl``, ``cohb_percent``, ``altitude_m``
or ``barometric_kpa``) the adjusted values of DLCO and KCO are added as
``DLCO_adj_<pred|lln|uln|z|pctpred>`` (empty in rows without an adjustment); ``dlco`` and
``kco`` are judged on them where they apply, as in ``interpret``.

Rows
----
Each row is validated with the case loader's ranges and messages (:mod:`pftwork.case`): a
vectorised screen against its limit tables finds the rows that may be invalid, and only those
are passed through :func:`pftwork.case.load_case`, whose message is reported with the column
name: ``row 17: FVC_pre = 2600: expected litres BTPS between 0.1 and 10 — was this entered in
mL?``. Rows are numbered from 1, the header not counted. A bad row gets its ``error`` text and
empty results; the other rows are still computed. ``sex`` ``"both"`` is not supported in a
batch (the row gets an error; interpret such a case individually). Hb, COHb and ``diffusion_unit``
are read only when the row has DLCO, VA or KCO, as a case's ``diffusion`` block is.

Compare mode (``compare=("gli-global-2022", "gli-2012")``): the plain columns use the first
set; the spirometry columns and :data:`COMPARE_SUMMARY` are repeated under the second set with
``@<set>`` appended (``FEV1_pre_z@gli-2012``), and ``pattern_changes`` is true where the two
patterns differ. ``gli-2012`` uses the row's ``ancestry``, or ``other`` when it is empty (as
``interpret`` does).

Only :func:`read_table`, :func:`read_mapping` and :func:`write_table` touch the file system.
"""

from __future__ import annotations

import csv
import importlib.util
import itertools
import json
import math
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import numpy.typing as npt
import pandas as pd

from pftwork.case import (
    ANCESTRIES,
    DIFFUSION_LIMITS_SI,
    DIFFUSION_UNITS,
    EQUATION_KINDS,
    SEXES,
    SPIRO_LIMITS,
    VOLUME_LIMITS,
    load_case,
)
from pftwork.errors import CaseError, FieldError
from pftwork.interpret.bronchodilator import bdr_2005, bdr_2022
from pftwork.interpret.finding import Z_LLN, Z_ULN
from pftwork.interpret.gas_transfer import (
    SI_TO_TRADITIONAL,
    altitude_factor,
    barometric_kpa_at,
    cohb_factor,
    hb_factor,
)
from pftwork.interpret.synthesis import pattern_of
from pftwork.reference import get_equation_set, reference_values

__all__ = [
    "COMPARE_SUMMARY",
    "EXTRA_COLUMNS",
    "INPUT_COLUMNS",
    "REQUIRED_COLUMNS",
    "STATISTICS",
    "SUMMARY_COLUMNS",
    "BatchError",
    "apply_mapping",
    "interpret_table",
    "read_mapping",
    "read_table",
    "write_table",
]

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]
Tri = npt.NDArray[np.int8]  # -1 unknown (None), 0 False, 1 True

#: Columns every table must have.
REQUIRED_COLUMNS = ("id", "sex", "age_years", "height_cm")
#: The input columns of design.md §6, in order.
INPUT_COLUMNS = REQUIRED_COLUMNS + (
    "ancestry", "FEV1_pre", "FVC_pre", "FEV1_post", "FVC_post", "TLC", "RV", "FRC", "DLCO",
    "VA", "KCO", "diffusion_unit", "hemoglobin_g_dl")
#: Optional extensions (same meaning and units as the case file, design.md §2).
EXTRA_COLUMNS = ("ERV", "IC", "VC", "cohb_percent", "altitude_m", "barometric_kpa")
#: Suffixes of the value columns and the ``reference_values`` field each one holds.
STATISTICS = {"pred": "predicted", "lln": "lln", "uln": "uln", "z": "z",
              "pctpred": "percent_predicted"}
#: Summary columns (design.md §6), followed by ``error``.
SUMMARY_COLUMNS = ("pattern", "obstruction", "obstruction_severity", "restriction",
                   "hyperinflation", "air_trapping", "dlco", "kco", "bdr", "bdr_2005",
                   "extrapolated")
#: Summary columns repeated under the second set in compare mode (those spirometry decides).
COMPARE_SUMMARY = ("pattern", "obstruction", "obstruction_severity", "bdr", "extrapolated")

BOTH_MESSAGE = "sex 'both' is not supported in batch; interpret the case individually"
_TEXT = ("id", "sex", "ancestry", "diffusion_unit")
_KNOWN = INPUT_COLUMNS + EXTRA_COLUMNS
_NUMERIC = tuple(c for c in _KNOWN if c not in _TEXT)
_PHASES = ("pre", "post")
_VOLUMES = ("TLC", "RV", "FRC", "ERV", "IC", "VC")  # the case loader's VOLUME_LIMITS keys
_DIFFUSION = ("DLCO", "VA", "KCO")
_SPIRO_DEFAULT = "gli-global-2022"
_LABEL = {"csv": "CSV", "parquet": "Parquet"}
_CSV_CHUNK = 10_000  # rows converted to text at a time when writing CSV


class BatchError(FieldError):
    """Raised when a batch table, its column mapping or an option cannot be used at all."""


# --------------------------------------------------------------------------- file I/O
def read_mapping(path: str | Path) -> dict[str, str]:
    """Read a column-mapping JSON file: an object ``{"their spelling": "our column"}``.

    Raises
    ------
    BatchError
        Unreadable file, not a JSON object of strings, or a target that is not a column of
        design.md §6 (or :data:`EXTRA_COLUMNS`).
    """
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except OSError as exc:
        raise BatchError(str(path), "<file>", "a readable column-mapping JSON file",
                         exc.strerror) from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise BatchError(str(path), "<file>", 'a JSON object {"their column": "our column"}',
                         _one_line(str(exc))) from None
    if not isinstance(data, dict):
        raise BatchError(str(path), type(data).__name__,
                         'a JSON object {"their column": "our column"}')
    return _checked_mapping(data, str(path))


def read_table(path: str | Path, mapping: Mapping[str, str] | None = None) -> pd.DataFrame:
    """Read a CSV or Parquet table of tests and rename its columns with ``mapping``.

    ``id``, ``sex``, ``ancestry`` and ``diffusion_unit`` are read as text (so ``007`` stays
    ``007``); other columns as pandas infers them (:func:`interpret_table` converts them).

    Raises
    ------
    BatchError
        Unreadable or empty file, an unknown file type, Parquet without ``pyarrow``, or a
        missing required column.
    """
    path = Path(path)
    kind = _kind(path, "input")
    mapping = _checked_mapping(mapping or {}, "mapping")
    if not path.is_file():
        raise BatchError(str(path), "<file>", "a readable CSV or Parquet file",
                         "no such file" if not path.exists() else "not a file")
    try:
        if kind == "parquet":
            _need_pyarrow(path)
            table = pd.read_parquet(path)
        else:
            header = pd.read_csv(path, nrows=0).columns
            text = {c: str for c in header if mapping.get(c, c) in _TEXT}
            table = pd.read_csv(path, dtype=text)  # type: ignore[arg-type]
    except BatchError:
        raise
    except (OSError, ValueError, UnicodeDecodeError, pd.errors.ParserError) as exc:
        raise BatchError(str(path), "<file>", f"a readable {_LABEL[kind]} table of tests",
                         _one_line(str(exc))) from None
    except Exception as exc:  # pyarrow's own errors (e.g. ArrowInvalid) on a damaged file
        raise BatchError(str(path), "<file>", f"a readable {_LABEL[kind]} table of tests",
                         _one_line(f"{type(exc).__name__}: {exc}")) from None
    table = apply_mapping(table, mapping)
    _require_columns(table, str(path))
    return table


def write_table(table: pd.DataFrame, path: str | Path) -> None:
    """Write the result table as CSV (``.csv``) or Parquet (``.parquet``, ``.pq``).

    Raises
    ------
    BatchError
        Unknown file type, Parquet without ``pyarrow``, or the file cannot be written.
    """
    path = Path(path)
    kind = _kind(path, "-o")
    try:
        if kind == "parquet":
            _need_pyarrow(path)
            table.to_parquet(path, index=False)
        else:
            _write_csv(table, path)
    except OSError as exc:
        raise BatchError(str(path), "<file>", "a writable output path", exc.strerror) from None


def _write_csv(table: pd.DataFrame, path: Path) -> None:
    """Write ``table`` as CSV: the bytes of ``DataFrame.to_csv(index=False)``, faster.

    Floats are written as their shortest round-trip text (``repr``, as pandas does), empty
    cells for nan/None/NA; the ``csv`` module quotes text that needs it.
    """
    with open(path, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow([str(c) for c in table.columns])
        for start in range(0, len(table), _CSV_CHUNK):  # bounded memory on large tables
            part = table.iloc[start:start + _CSV_CHUNK]
            columns = [_csv_cells(part[name]) for name in part.columns]
            writer.writerows(zip(*columns, strict=True))


def _csv_cells(column: pd.Series) -> list[str]:
    if column.dtype == np.float64:
        return ["" if v != v else repr(v) for v in column.to_numpy().tolist()]
    return ["" if _is_missing(v) else str(v) for v in column.to_numpy(dtype=object).tolist()]


def _kind(path: Path, field: str) -> str:
    suffix = path.suffix.lower()
    if suffix == ".csv":
        return "csv"
    if suffix in (".parquet", ".pq"):
        return "parquet"
    raise BatchError(field, str(path), "a file name ending in .csv or .parquet")


def _need_pyarrow(path: Path) -> None:
    if importlib.util.find_spec("pyarrow") is None:
        raise BatchError(str(path), "<file>", "a CSV file, or Parquet with the 'pyarrow' package "
                         "installed", "the package 'pyarrow' is missing: pip install pyarrow")


def _one_line(text: str) -> str:
    return " ".join(text.split())


# --------------------------------------------------------------------------- columns
def apply_mapping(table: pd.DataFrame, mapping: Mapping[str, str]) -> pd.DataFrame:
    """Rename columns onto design.md §6 names (``{"their spelling": "our column"}``).

    Sources absent from the table are ignored, so one mapping file may serve several exports.

    Raises
    ------
    BatchError
        A target that is not a known column, or a rename that would give two columns one name.
    """
    mapping = _checked_mapping(mapping, "mapping")
    renames = {src: dst for src, dst in mapping.items() if src in table.columns and src != dst}
    names = [renames.get(c, c) for c in table.columns]
    for name in set(names):
        if names.count(name) > 1:
            raise BatchError("mapping", name, "one column per name: the table already has a "
                             f"column {name!r} (or two columns are mapped onto it)")
    return table.rename(columns=renames)


def _checked_mapping(mapping: Mapping[Any, Any], where: str) -> dict[str, str]:
    out: dict[str, str] = {}
    for src, dst in mapping.items():
        if not isinstance(src, str) or not isinstance(dst, str):
            raise BatchError(f"{where}: {src!r}", dst, "a column name (text)")
        if dst not in _KNOWN:
            raise BatchError(f"{where}: {src!r}", dst,
                             "one of the batch columns " + ", ".join(_KNOWN))
        out[src] = dst
    return out


def _require_columns(table: pd.DataFrame, source: str) -> None:
    missing = [c for c in REQUIRED_COLUMNS if c not in table.columns]
    if missing:
        raise BatchError(source, f"no column {', '.join(missing)}",
                         "the required columns " + ", ".join(REQUIRED_COLUMNS),
                         "map other spellings onto them with --mapping MAP.json")


# --------------------------------------------------------------------------- input arrays
class _Inputs:
    """The table's known columns as arrays: floats (nan = empty) and text (None = empty)."""

    def __init__(self, table: pd.DataFrame) -> None:
        self.n = len(table)
        self.present = {c for c in _KNOWN if c in table.columns}
        self.num: dict[str, FloatArray] = {}
        self.raw: dict[str, npt.NDArray[Any]] = {}  # original cells of numeric columns
        self.not_number = np.zeros(self.n, dtype=bool)
        for col in _NUMERIC:
            if col not in table.columns:
                self.num[col] = np.full(self.n, np.nan)
                continue
            series = table[col]
            if pd.api.types.is_bool_dtype(series.dtype):
                values = np.full(self.n, np.nan)  # a boolean is not a number (case loader)
                self.not_number |= series.notna().to_numpy()
            else:
                values = pd.to_numeric(series, errors="coerce").to_numpy(dtype=float,
                                                                          na_value=np.nan)
                self.not_number |= np.isnan(values) & series.notna().to_numpy()
            self.num[col] = values
            self.raw[col] = series.to_numpy(dtype=object)
        self.text = {c: _text_array(table[c]) if c in table.columns
                     else np.full(self.n, None, dtype=object) for c in _TEXT}
        self.sex = np.empty(self.n, dtype=object)  # filled, not np.array(): a list cell stays one cell
        self.sex[:] = [s.lower() if isinstance(s, str) else s for s in self.text["sex"]]

    def cell(self, col: str, i: int) -> Any:
        """The value of one cell as the case loader should see it (None when empty)."""
        if col in _TEXT:
            return self.text[col][i]
        raw = self.raw.get(col)
        if raw is None or _is_missing(raw[i]):
            return None
        value = raw[i]
        if isinstance(value, (bool, np.bool_)):
            return bool(value)
        number = self.num[col][i]
        return value if np.isnan(number) else float(number)  # text that is not a number stays text


def _is_missing(value: Any) -> bool:
    return value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value))


def _text_array(series: pd.Series) -> npt.NDArray[Any]:
    out = series.to_numpy(dtype=object).copy()
    for i, v in enumerate(out):
        if _is_missing(v):
            out[i] = None
        elif not isinstance(v, str):
            out[i] = v.item() if isinstance(v, np.generic) else v
    return out


# --------------------------------------------------------------------------- validation
def _outside(x: FloatArray, lo: float, hi: float) -> BoolArray:
    """Present values that are not safely inside [lo, hi] (a small margin sends boundary
    values to the case loader, which then decides)."""
    eps_lo, eps_hi = 1e-9 * max(1.0, abs(lo)), 1e-9 * max(1.0, abs(hi))
    with np.errstate(invalid="ignore"):
        return ~np.isnan(x) & ~((x >= lo + eps_lo) & (x <= hi - eps_hi))


def _member(values: npt.NDArray[Any], allowed: Any) -> BoolArray:
    """Elementwise ``value in allowed`` for an object array (None and numbers are never in)."""
    allowed = set(allowed)
    return np.fromiter((isinstance(v, str) and v in allowed for v in values), dtype=bool,
                       count=len(values))


def _has_diffusion(inp: _Inputs) -> BoolArray:
    return np.logical_or.reduce([~np.isnan(inp.num[c]) for c in _DIFFUSION])


def _suspect_rows(inp: _Inputs) -> BoolArray:
    """Rows the case loader might reject: a superset, screened with its own limit tables."""
    num = inp.num
    sus = inp.not_number.copy()
    sus |= ~_member(inp.sex, SEXES)
    age, height = num["age_years"], num["height_cm"]
    sus |= np.isnan(age) | _outside(age, 3.0, 100.0)          # _Loader.subject
    sus |= np.isnan(height) | _outside(height, 80.0, 250.0)   # _Loader.height
    anc = inp.text["ancestry"]
    sus |= ~_member(anc, ANCESTRIES) & (anc != None)  # noqa: E711 (elementwise)
    sus |= _outside(num["altitude_m"], -500.0, 6000.0) | _outside(num["barometric_kpa"], 40.0, 110.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        for phase in _PHASES:
            fev1, fvc = num[f"FEV1_{phase}"], num[f"FVC_{phase}"]
            for key, x in (("FEV1", fev1), ("FVC", fvc)):
                sus |= _outside(x, *SPIRO_LIMITS[key][:2])
            sus |= fev1 > fvc * (1 - 1e-9)
            sus |= fev1 / fvc < 0.2 + 1e-9
            sus |= fvc > num["TLC"] * (1 - 1e-9)
        for key in _VOLUMES:
            sus |= _outside(num[key], *VOLUME_LIMITS[key][:2])
            if key != "TLC":
                sus |= num[key] > num["TLC"] * (1 - 1e-9)
        sus |= num["RV"] > num["FRC"] * (1 - 1e-9)
        diff = _has_diffusion(inp)
        unit = inp.text["diffusion_unit"]
        sus |= diff & ~_member(unit, DIFFUSION_UNITS)
        traditional = unit == "traditional"
        for key in ("DLCO", "KCO"):
            si = np.where(traditional, num[key] / SI_TO_TRADITIONAL, num[key])
            sus |= diff & _outside(si, *DIFFUSION_LIMITS_SI[key])
        sus |= diff & _outside(num["VA"], 0.3, 14.0)
        sus |= diff & _outside(num["hemoglobin_g_dl"], 3.0, 25.0)
        sus |= diff & _outside(num["cohb_percent"], 0.0, 40.0)
    return sus


def _case_dict(inp: _Inputs, i: int) -> dict[str, Any]:
    """The minimal pftwork-case/1 dictionary of row ``i`` (for the case loader's checks)."""
    def cells(names: Sequence[str], keys: Sequence[str] | None = None) -> dict[str, Any]:
        out = {}
        for name, key in zip(names, keys or names, strict=True):
            value = inp.cell(name, i)
            if value is not None:
                out[key] = value
        return out

    ident = inp.text["id"][i]
    case: dict[str, Any] = {
        "format": "pftwork-case/1",
        "subject": {"id": None if ident is None else str(ident),
                    "sex": inp.text["sex"][i], "age_years": inp.cell("age_years", i),
                    "height_cm": inp.cell("height_cm", i), "ancestry": inp.text["ancestry"][i]},
    }
    test = cells(("altitude_m", "barometric_kpa"))
    if test:
        case["test"] = test
    spiro = {p: cells((f"FEV1_{p}", f"FVC_{p}"), ("FEV1", "FVC")) for p in _PHASES}
    if any(spiro.values()):
        case["spirometry"] = {p: v for p, v in spiro.items() if v}
    volumes = cells(_VOLUMES)
    if volumes:
        case["volumes"] = volumes
    diffusion = cells(_DIFFUSION)
    if diffusion:
        diffusion["unit"] = inp.text["diffusion_unit"][i]
        diffusion.update(cells(("hemoglobin_g_dl", "cohb_percent")))
        case["diffusion"] = diffusion
    return case


def _column_of(field: str) -> str:
    """Batch column of a case-file field path (``spirometry.pre.FVC`` -> ``FVC_pre``)."""
    parts = field.split(".")
    if parts[0] == "spirometry" and len(parts) == 3:
        return f"{parts[2]}_{parts[1]}"
    if field == "diffusion.unit":
        return "diffusion_unit"
    return parts[-1]


def _row_errors(inp: _Inputs) -> npt.NDArray[Any]:
    """``error`` text of every row ("" when valid)."""
    errors = np.full(inp.n, "", dtype=object)
    for i in np.flatnonzero(_suspect_rows(inp)):
        try:
            load_case(_case_dict(inp, int(i)))
        except CaseError as exc:
            shown = CaseError(_column_of(exc.field), exc.value, exc.expected, exc.hint)
            errors[i] = f"row {i + 1}: {shown}"
    both = (inp.sex == "both") & (errors == "")
    errors[both] = np.array([f"row {i + 1}: {BOTH_MESSAGE}" for i in np.flatnonzero(both)],
                            dtype=object)
    return errors


# --------------------------------------------------------------------------- rules (numpy)
def _level(z: FloatArray) -> npt.NDArray[Any]:
    """:func:`pftwork.interpret.finding.level` over an array (nan -> None)."""
    out = np.full(z.shape, None, dtype=object)
    with np.errstate(invalid="ignore"):
        out[z <= Z_ULN] = "normal"
        out[z > Z_ULN] = "high"
        out[z < Z_LLN] = "low"
    return out


#: The bands of :func:`pftwork.interpret.finding.severity`, most severe first (upper limit, name).
_SEVERITY_BANDS = ((-4.0, "severe"), (-2.5, "moderate"), (Z_LLN, "mild"))


def _severity(z: FloatArray) -> npt.NDArray[Any]:
    """:func:`pftwork.interpret.finding.severity` over an array (nan or z >= LLN -> None)."""
    out = np.full(z.shape, None, dtype=object)
    with np.errstate(invalid="ignore"):
        for limit, name in reversed(_SEVERITY_BANDS):
            out[z < limit] = name
    return out


def _tri(flag: BoolArray, known: BoolArray) -> Tri:
    return np.where(known, flag.astype(np.int8), np.int8(-1)).astype(np.int8)


def _any_true(a: Tri, b: Tri) -> Tri:
    """:func:`pftwork.interpret.volumes._any_true` of two tri-state arrays."""
    return np.where((a == 1) | (b == 1), 1, np.where((a == -1) | (b == -1), -1, 0)).astype(np.int8)


def _pattern_table() -> npt.NDArray[Any]:
    """``pattern_of`` evaluated once for each of the 81 tri-state input combinations."""
    states = (None, False, True)
    table = np.empty((3, 3, 3, 3), dtype=object)
    for idx in itertools.product(range(3), repeat=4):
        table[idx] = pattern_of(*(states[k] for k in idx))
    return table


_PATTERNS = _pattern_table()


def _patterns(obstruction: Tri, restriction: Tri, nonspecific: Tri, prism: Tri) -> npt.NDArray[Any]:
    """:func:`pftwork.interpret.synthesis.pattern_of` per row, by look-up in its own table."""
    return _PATTERNS[obstruction + 1, restriction + 1, nonspecific + 1, prism + 1]


def _bdr_2022(pre: FloatArray, post: FloatArray, pred: FloatArray) -> Tri:
    """:func:`~pftwork.interpret.bronchodilator.bdr_2022` per row (unknown without the data).

    The change in % of predicted is computed as that function does; within 1e-3 of the 10 %
    threshold, where its rounding can matter, the function itself decides.
    """
    known = ~np.isnan(pre) & ~np.isnan(post) & ~np.isnan(pred) & (pred != 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        pct = (post - pre) * 100.0 / pred
        flag = pct > 10.0
    for i in np.flatnonzero(known & (np.abs(pct - 10.0) < 1e-3)):
        flag[i] = bdr_2022(float(pre[i]), float(post[i]), float(pred[i]))[1]
    return _tri(flag, known)


def _bdr_2005(pre: FloatArray, post: FloatArray) -> Tri:
    """:func:`~pftwork.interpret.bronchodilator.bdr_2005` per row; near 12 % or 200 mL the
    function itself decides."""
    known = ~np.isnan(pre) & ~np.isnan(post)
    with np.errstate(invalid="ignore", divide="ignore"):
        pct = (post - pre) * 100.0 / pre
        ml = (post - pre) * 1000.0
        flag = (pct >= 12.0) & (np.rint(ml) >= 200.0)
        near = known & ((np.abs(pct - 12.0) < 1e-3) | (np.abs(ml - 200.0) < 1.0))
    for i in np.flatnonzero(near):
        flag[i] = bdr_2005(float(pre[i]), float(post[i]))[2]
    return _tri(flag, known)


# --------------------------------------------------------------------------- values
def _column_name(param: str, phase: str | None = None) -> str:
    base = param.replace("/", "")
    return f"{base}_{phase}" if phase else base


class _Computation:
    """Reference values and decisions for the valid rows (arrays over those rows only)."""

    def __init__(self, inp: _Inputs, rows: npt.NDArray[np.intp]) -> None:
        self.rows = rows
        num = {k: v[rows] for k, v in inp.num.items()}
        self.num = num
        self.sex = np.asarray(inp.sex[rows], dtype=str) if rows.size else np.array([], dtype=str)
        self.age, self.height = num["age_years"], num["height_cm"]
        self.ancestry = inp.text["ancestry"][rows]
        self.unit = inp.text["diffusion_unit"][rows]
        self.m = rows.size
        self.has_diffusion = np.logical_or.reduce([~np.isnan(num[c]) for c in _DIFFUSION])

    # -- one parameter ----------------------------------------------------------------
    def entry(self, set_id: str, param: str, measured: FloatArray, *, ancestry: Any = None,
              unit: str = "SI", where: BoolArray | None = None) -> dict[str, FloatArray]:
        """``values`` entries (pftwork.interpret.values.entry) of rows with a measured value."""
        out = {k: np.full(self.m, np.nan) for k in (*STATISTICS.values(), "measured")}
        out["extrapolated"] = np.zeros(self.m, dtype=bool)
        sel = ~np.isnan(measured) if where is None else where & ~np.isnan(measured)
        idx = np.flatnonzero(sel)
        if idx.size == 0:
            return out
        anc = None if ancestry is None else ancestry[idx]
        rv = reference_values(set_id, param, self.sex[idx], self.age[idx], self.height[idx],
                              measured=measured[idx], ancestry=anc, unit=unit)
        for key in STATISTICS.values():
            out[key][idx] = getattr(rv, key)
        out["measured"][idx] = measured[idx]
        out["extrapolated"][idx] = rv.extrapolated
        return out

    def spirometry(self, set_id: str) -> dict[str, dict[str, FloatArray]]:
        """Pre and post FEV1, FVC, FEV1/FVC (pftwork.interpret.values.spirometry_measured)."""
        anc = None
        if get_equation_set(set_id).ancestries:
            anc = np.array([a if a is not None else "other" for a in self.ancestry], dtype=object)
        out = {}
        for phase in _PHASES:
            fev1, fvc = self.num[f"FEV1_{phase}"], self.num[f"FVC_{phase}"]
            with np.errstate(invalid="ignore"):
                ratio = fev1 / fvc
            for param, measured in (("FEV1", fev1), ("FVC", fvc), ("FEV1/FVC", ratio)):
                out[_column_name(param, phase)] = self.entry(set_id, param, measured, ancestry=anc)
        return out

    def volumes(self, present: set[str]) -> dict[str, dict[str, FloatArray]]:
        """Static volumes and RV/TLC under GLI-2021 (pftwork.interpret.values._volumes_measured)."""
        out = {}
        order = ("TLC", "RV", "RV/TLC", "FRC", "ERV", "IC", "VC")  # values._VOLUME_ORDER
        for param in order:
            if param == "RV/TLC":
                if {"RV", "TLC"} <= present:
                    with np.errstate(invalid="ignore"):
                        ratio = self.num["RV"] / self.num["TLC"]
                    out["RVTLC"] = self.entry("gli-2021", "RV/TLC", ratio)
            elif param in present:
                out[param] = self.entry("gli-2021", param, self.num[param])
        return out

    def diffusion(self, present: set[str]) -> tuple[dict[str, Any], dict[str, Any]]:
        """DLCO, KCO, VA in each row's own unit, and the Hb/COHb/altitude-adjusted entries.

        Mirrors ``pftwork.interpret.values._diffusion_values``: values are converted to SI as
        the case loader does, KCO = DLCO/VA when not given, then reported in the row's unit.
        """
        num, unit = self.num, self.unit
        traditional = unit == "traditional"
        si = {k: np.where(traditional, num[k] / SI_TO_TRADITIONAL, num[k])
              if k != "VA" else num[k].copy() for k in _DIFFUSION}
        si = {k: np.where(self.has_diffusion, v, np.nan) for k, v in si.items()}
        with np.errstate(invalid="ignore", divide="ignore"):
            derived = si["DLCO"] / si["VA"]
        si["KCO"] = np.where(np.isnan(si["KCO"]), derived, si["KCO"])
        adjustable = bool(present & {"hemoglobin_g_dl", "cohb_percent", "altitude_m",
                                     "barometric_kpa"})
        factor = self._adjustment_factor() if adjustable else None
        values: dict[str, Any] = {}
        adjusted: dict[str, Any] = {}
        params = [p for p in ("DLCO", "KCO", "VA") if p in present
                  or (p == "KCO" and {"DLCO", "VA"} <= present)]
        for param in params:
            scale = np.where(traditional, SI_TO_TRADITIONAL, 1.0) if param != "VA" else 1.0
            m = si[param] * scale
            item = self._by_unit(param, m, traditional)
            values[param] = item
            if param != "VA" and factor is not None:
                adjusted[param] = self._adjusted(param, m, item, factor, traditional)
        return values, adjusted

    def _by_unit(self, param: str, m: FloatArray, traditional: BoolArray) -> dict[str, Any]:
        si_rows = self.entry("gli-2017", param, m, unit="SI", where=~traditional)
        tr_rows = self.entry("gli-2017", param, m, unit="traditional", where=traditional)
        return {k: np.where(traditional, tr_rows[k], si_rows[k]) for k in si_rows}

    def _adjustment_factor(self) -> FloatArray:
        """``predicted_factor`` of ``pftwork.interpret.values._diffusion_factors`` per row."""
        num = self.num
        hb, cohb = num["hemoglobin_g_dl"], num["cohb_percent"]
        pb = np.where(np.isnan(num["barometric_kpa"]), barometric_kpa_at(num["altitude_m"]),
                      num["barometric_kpa"])
        with np.errstate(invalid="ignore"):
            f_hb = np.where(np.isnan(hb), 1.0, hb_factor(hb, self.sex, self.age))
            f_cohb = np.where(np.isnan(cohb), 1.0, cohb_factor(cohb))
            f_alt = np.where(np.isnan(pb), 1.0, altitude_factor(pb))
        return f_hb * f_cohb / f_alt

    def _adjusted(self, param: str, m: FloatArray, item: dict[str, Any], f: FloatArray,
                  traditional: BoolArray) -> dict[str, Any]:
        """``pftwork.interpret.values._adjusted``: limits scaled by f, z of measured / f."""
        applies = (f != 1.0) & ~np.isnan(m)
        with np.errstate(invalid="ignore", divide="ignore"):
            equivalent = self._by_unit(param, np.where(applies, m / f, np.nan), traditional)
            adj = {k: np.where(applies, item[k] * f, np.nan) for k in ("predicted", "lln", "uln")}
            adj["z"] = equivalent["z"]
            adj["percent_predicted"] = np.where(applies & (adj["predicted"] != 0),
                                                100.0 * m / adj["predicted"], np.nan)
        adj["applies"] = applies
        return adj


def _summary(comp: _Computation, spiro: dict[str, Any], vols: dict[str, Any],
             diff: dict[str, Any], adjusted: dict[str, Any]) -> dict[str, npt.NDArray[Any]]:
    """The design.md §6 summary of each valid row (pftwork.interpret steps 1-5 and 8)."""
    m = comp.m
    nan = np.full(m, np.nan)

    def z(block: dict[str, Any], key: str) -> FloatArray:
        return block[key]["z"] if key in block else nan

    measured = [item["measured"] for block in (spiro, vols, diff) for item in block.values()]
    stop = ~np.logical_or.reduce([~np.isnan(x) for x in measured]) if measured \
        else np.ones(m, dtype=bool)                                      # validity.validity
    go = ~stop
    # airflow.airflow
    ratio_z, fev1_z, fvc_z = z(spiro, "FEV1FVC_pre"), z(spiro, "FEV1_pre"), z(spiro, "FVC_pre")
    assessed = go & ~np.isnan(ratio_z)
    with np.errstate(invalid="ignore"):
        obstruction = _tri(ratio_z < Z_LLN, assessed)
        fev1_low = _tri(fev1_z < Z_LLN, assessed & ~np.isnan(fev1_z))
        fvc_low = _tri(fvc_z < Z_LLN, assessed & ~np.isnan(fvc_z))
    sev = _severity(fev1_z)
    sev[(obstruction == 1) & ~np.isnan(fev1_z) & (sev == None)] = "mild"  # noqa: E711
    sev[~((obstruction == 1) & ~np.isnan(fev1_z))] = None
    # volumes.volumes
    tlc_z, rvtlc_z = z(vols, "TLC"), z(vols, "RVTLC")
    spiro_low = _any_true(fev1_low, fvc_low)
    preserved = _tri(obstruction == 0, obstruction != -1)
    decided = (preserved != -1) & (spiro_low != -1)
    both_true = (preserved == 1) & (spiro_low == 1)
    has_tlc = ~np.isnan(tlc_z)
    tlc_level = _level(tlc_z)
    prism = np.where(has_tlc, 0, _tri(both_true, decided)).astype(np.int8)
    not_assessed = ~has_tlc & (preserved == -1) & (spiro_low == -1)
    restriction = _tri(tlc_level == "low", has_tlc)
    hyperinflation = _tri(tlc_level == "high", has_tlc)
    nonspecific = _tri(both_true & (tlc_level == "normal"), has_tlc & decided)
    with np.errstate(invalid="ignore"):
        air_trapping = _tri(rvtlc_z > Z_ULN, ~np.isnan(rvtlc_z) & ~not_assessed)
    for arr in (prism, restriction, hyperinflation, nonspecific, air_trapping):
        arr[stop | not_assessed] = -1
    # gas_transfer.gas_transfer (adjusted z when an adjustment applies, as _z_used)
    dlco_z = _z_used(diff, adjusted, "DLCO", nan)
    kco_z = np.where(np.isnan(dlco_z), np.nan, _z_used(diff, adjusted, "KCO", nan))
    # bronchodilator.bronchodilator
    bdr22, bdr05 = [], []
    for p in ("FEV1", "FVC"):
        pre, post = _measured(spiro, f"{p}_pre", nan), _measured(spiro, f"{p}_post", nan)
        pred = spiro[f"{p}_pre"]["predicted"] if f"{p}_pre" in spiro else nan
        bdr22.append(_bdr_2022(pre, post, pred))
        bdr05.append(_bdr_2005(pre, post))
    summary = {
        "pattern": np.where(stop, None, _patterns(obstruction, restriction, nonspecific, prism)),
        "obstruction": obstruction, "obstruction_severity": sev, "restriction": restriction,
        "hyperinflation": hyperinflation, "air_trapping": air_trapping,
        "dlco": np.where(stop, None, _level(dlco_z)), "kco": np.where(stop, None, _level(kco_z)),
        "bdr": _any_true(*bdr22), "bdr_2005": _any_true(*bdr05),
        "extrapolated": np.logical_or.reduce(
            [item["extrapolated"] for block in (spiro, vols, diff) for item in block.values()]
            or [np.zeros(m, dtype=bool)]),
    }
    for key in ("bdr", "bdr_2005", "obstruction"):
        summary[key][stop] = -1
    summary["obstruction_severity"][stop] = None
    return summary


def _measured(block: dict[str, Any], key: str, nan: FloatArray) -> FloatArray:
    return block[key]["measured"] if key in block else nan


def _z_used(diff: dict[str, Any], adjusted: dict[str, Any], param: str,
            nan: FloatArray) -> FloatArray:
    """``pftwork.interpret.gas_transfer._z_used``: adjusted z where an adjustment applies."""
    z = diff[param]["z"] if param in diff else nan
    if param not in adjusted:
        return z
    adj = adjusted[param]
    return np.where(adj["applies"] & ~np.isnan(adj["z"]), adj["z"], z)


# --------------------------------------------------------------------------- the table
def interpret_table(table: pd.DataFrame, *, spirometry: str = _SPIRO_DEFAULT,
                    compare: Sequence[str] | None = None) -> pd.DataFrame:
    """Interpret every row of a table of tests (design.md §6).

    Parameters
    ----------
    table : pandas.DataFrame
        One row per test, columns named as in design.md §6 (see the module notes); volumes in
        L BTPS, age in years, height in cm, DLCO/KCO in the row's ``diffusion_unit``.
    spirometry : str
        Spirometry equation set (``gli-global-2022`` or ``gli-2012``); volumes use
        ``gli-2021`` and diffusion ``gli-2017``, as ``interpret``'s defaults.
    compare : sequence of two str, optional
        Two spirometry sets; the first replaces ``spirometry``, the second adds ``@<set>``
        columns and ``pattern_changes``.

    Returns
    -------
    pandas.DataFrame
        The input columns, the value columns, the summary columns and ``error``. Value columns
        are float (nan where absent), yes/no columns nullable booleans, the others text.
        Input columns named like an output column (a re-run of a result) are replaced.

    Raises
    ------
    BatchError
        A required column is missing, or ``compare``/``spirometry`` is not valid.

    Examples
    --------
    >>> t = pd.DataFrame({"id": ["a"], "sex": ["female"], "age_years": [61.4],
    ...                   "height_cm": [159.0], "FEV1_pre": [1.42], "FVC_pre": [2.51]})
    >>> out = interpret_table(t)
    >>> out.loc[0, "pattern"], bool(out.loc[0, "obstruction"]), out.loc[0, "error"]
    ('obstruction', True, '')
    """
    _require_columns(table, "table")
    sets = _spirometry_sets(spirometry, compare)
    inp = _Inputs(table)
    errors = _row_errors(inp)
    rows = np.flatnonzero(errors == "")
    comp = _Computation(inp, rows)
    present = inp.present
    columns: dict[str, Any] = {}
    summaries = []
    diff, adjusted = comp.diffusion(present)
    vols = comp.volumes(present)
    for k, set_id in enumerate(sets):
        spiro = {key: item for key, item in comp.spirometry(set_id).items()
                 if _spiro_present(key, present)}
        if k == 0:
            _value_columns(columns, {**spiro, **vols, **diff}, "")
            _value_columns(columns, {f"{p}_adj": adj for p, adj in adjusted.items()}, "")
        else:
            _value_columns(columns, spiro, f"@{set_id}")
        summaries.append(_summary(comp, spiro, vols, diff, adjusted))
    n = inp.n
    new: dict[str, Any] = {name: _scatter(values, rows, n, np.nan)
                           for name, values in columns.items()}
    for key in SUMMARY_COLUMNS:
        new[key] = _as_column(summaries[0][key], rows, n)
    if len(sets) == 2:
        for key in COMPARE_SUMMARY:
            new[f"{key}@{sets[1]}"] = _as_column(summaries[1][key], rows, n)
        changed = summaries[0]["pattern"] != summaries[1]["pattern"]
        new["pattern_changes"] = _as_column(changed, rows, n)
    new["error"] = errors.astype(str)
    added = pd.DataFrame(new, index=table.index)
    out = pd.concat([table.drop(columns=[c for c in new if c in table.columns]), added], axis=1)
    return out


def _spirometry_sets(spirometry: str, compare: Sequence[str] | None) -> tuple[str, ...]:
    sets = tuple(compare) if compare is not None else (spirometry,)
    expected = "spirometry equation sets, e.g. gli-global-2022,gli-2012"
    if compare is not None and (len(sets) != 2 or sets[0] == sets[1]):
        raise BatchError("--compare", ",".join(map(str, sets)), "two different " + expected)
    for s in sets:
        get_equation_set(s)  # EquationSetError names an unknown identifier
        if s not in EQUATION_KINDS["spirometry"]:
            raise BatchError("--compare" if compare is not None else "spirometry", s,
                             "one of " + ", ".join(EQUATION_KINDS["spirometry"]))
    return sets


def _spiro_present(key: str, present: set[str]) -> bool:
    base, phase = key.rsplit("_", 1)
    if base == "FEV1FVC":
        return {f"FEV1_{phase}", f"FVC_{phase}"} <= present
    return key in present


def _value_columns(columns: dict[str, Any], block: dict[str, Any], tag: str) -> None:
    for name, item in block.items():
        for suffix, key in STATISTICS.items():
            columns[f"{name}_{suffix}{tag}"] = item[key]


def _scatter(values: npt.NDArray[Any], rows: npt.NDArray[np.intp], n: int,
             fill: Any) -> npt.NDArray[Any]:
    out = np.full(n, fill, dtype=values.dtype if fill is not None else object)
    out[rows] = values
    return out


def _as_column(values: npt.NDArray[Any], rows: npt.NDArray[np.intp], n: int) -> Any:
    """A pandas column: nullable booleans for tri-state and bool arrays, text otherwise."""
    if values.dtype == np.int8:
        full = _scatter(values, rows, n, -1)
        return pd.arrays.BooleanArray(full == 1, full == -1)
    if values.dtype == bool:
        full = np.zeros(n, dtype=bool)
        full[rows] = values
        mask = np.ones(n, dtype=bool)
        mask[rows] = False
        return pd.arrays.BooleanArray(full, mask)
    return pd.array(_scatter(values, rows, n, None), dtype=object)
