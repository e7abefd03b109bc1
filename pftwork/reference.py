"""GLI reference values: predicted (M), LLN, ULN, z-score, % predicted and percentile.

Vectorised over subjects: every argument is a scalar or an array, and all broadcast together;
one call evaluates a million subjects without a Python loop. Functions are named after what
they return (:func:`lms`, :func:`reference_values`); nothing here draws, prints or writes files
(the tables are read, once per set, by :mod:`pftwork.tables`).

Equation sets (:data:`EQUATION_SETS`)
-------------------------------------
``gli-global-2022``  FEV1, FVC, FEV1/FVC — race-neutral spirometry (Bowerman 2023); default.
``gli-2012``         FEV1, FVC, FEV1/FVC, FEF25_75, FEF75, FEV0_75, FEV0_75/FVC — needs
                     ``ancestry``: european, african_american, north_east_asian,
                     south_east_asian or other (Quanjer 2012).
``gli-2017``         DLCO, KCO (``unit="SI"`` mmol/min/kPa[/L] or ``"traditional"``
                     mL/min/mmHg[/L], each from the set's own table), VA in L (Stanojevic 2017,
                     2020 correction).
``gli-2021``         TLC, FRC, RV, RV/TLC, ERV, IC, VC (Hall 2021).

Conventions
-----------
* Height in cm, age in decimal years, volumes in L, flows in L/s.
* Ratios (FEV1/FVC, FEV0_75/FVC, RV/TLC) are **fractions** (0.68), whatever scale the
  published model uses (GLI-2021 models RV/TLC in percent: converted here).
* ``sex``: ``"male"``/``"female"`` (any case) or 1/0 (1 = male). ``"both"`` is refused: call
  once per sex.
* Splines are interpolated linearly between the quarter-year rows of the published table; the
  closed-form terms use the exact age (GLI method).
* ``extrapolated`` is True where the values are computed outside what the equations cover:
  age outside the parameter's published range (values still computed, with the edge spline
  row and the exact age — never clamped), height outside :data:`PLAUSIBLE_HEIGHT_CM` (a
  pftwork plausibility window, not a published limit: GLI publishes no height range), or a
  missing/invalid age or height (values nan).
* GLI-2012 FEV0_75 and FEV0_75/FVC are published as equations for european (Caucasian)
  children aged 3-7 y only: elsewhere their values are nan and ``extrapolated`` is True.
* GLI-2017 is published for 5-85 y; its table runs to 90 y, so 85-90 y uses real table rows
  but is still flagged.

Performance
-----------
The age grid is uniform (0.25 y), so the spline look-up is index arithmetic
(``row = floor((age - a0) / 0.25)``), not a search. Work is done in blocks of :data:`BLOCK`
subjects with reused block-sized temporaries, so a call allocates little beyond its outputs
(about 52 MB for a million subjects). See ``benchmarks/README.md`` for measured rates.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass, field
from functools import cache, cached_property
from typing import Any

import numpy as np
import numpy.typing as npt

from pftwork import lms as _lms
from pftwork.errors import CaseError, EquationSetError
from pftwork.tables import load_table, table_ids

__all__ = [
    "ANCESTRIES",
    "DEFAULT_SPIROMETRY_SET",
    "EQUATION_SETS",
    "PLAUSIBLE_HEIGHT_CM",
    "UNITS",
    "EquationSet",
    "LMSResult",
    "ReferenceValues",
    "get_equation_set",
    "lms",
    "reference_values",
    "table_checksums",
]

FloatArray = npt.NDArray[np.float64]
BoolArray = npt.NDArray[np.bool_]

DEFAULT_SPIROMETRY_SET = "gli-global-2022"
ANCESTRIES = ("european", "african_american", "north_east_asian", "south_east_asian", "other")
UNITS = ("SI", "traditional")
PLAUSIBLE_HEIGHT_CM = (80.0, 230.0)
"""Heights outside this window are flagged ``extrapolated`` (pftwork's choice, not published)."""

_SEXES = ("female", "male")  # code 0, 1 (tables store female first)
_ANCESTRY_ALIASES = {"caucasian": "european"}
_PARAMETER_ALIASES = {
    "FEV1FVC": "FEV1/FVC", "FEV1_FVC": "FEV1/FVC",
    "FEF2575": "FEF25_75", "FEF25-75": "FEF25_75",
    "FEV075": "FEV0_75", "FEV0.75": "FEV0_75",
    "FEV075FVC": "FEV0_75/FVC", "FEV0.75/FVC": "FEV0_75/FVC", "FEV0_75FVC": "FEV0_75/FVC",
    "TLCO": "DLCO",
    "RVTLC": "RV/TLC", "RV_TLC": "RV/TLC",
}


# --------------------------------------------------------------------------- equation sets


@dataclass(frozen=True)
class EquationSet:
    """One published GLI equation set as bundled with pftwork.

    Attributes
    ----------
    id : str
        Identifier (``gli-2012`` …); never changes meaning once released.
    title, citation, doi : str
        What it is and where it was published.
    parameters : tuple of str
        Parameters it predicts, in pftwork's spelling (``FEV1/FVC``, ``RV/TLC`` …).
    age_range : tuple of float
        Widest published age range in years (per parameter: :meth:`age_range_for`).
    table_sha256 : str
        Sha256 of the table content (verified when the table is loaded).
    source : str
        Distribution and files the table was built from.
    erratum_doi : str or None
        DOI of a correction the table includes.
    ancestries : tuple of str
        Ancestry groups of an ancestry-specific set (empty otherwise).
    age_ranges : tuple of (str, (float, float))
        Published age range of each parameter.
    """

    id: str
    title: str
    citation: str
    doi: str
    parameters: tuple[str, ...]
    age_range: tuple[float, float]
    table_sha256: str
    source: str
    erratum_doi: str | None = None
    ancestries: tuple[str, ...] = ()
    age_ranges: tuple[tuple[str, tuple[float, float]], ...] = field(default=(), repr=False)

    def age_range_for(self, parameter: str) -> tuple[float, float]:
        """Published age range (years) of one parameter of this set."""
        name = _parameter_name(self, parameter)
        return dict(self.age_ranges)[name]


class _EquationSets(Mapping[str, EquationSet]):
    """Read-only mapping ``id -> EquationSet``; tables are read only when a set is looked up."""

    def __getitem__(self, key: str) -> EquationSet:
        return get_equation_set(key)

    def __iter__(self) -> Iterator[str]:
        return iter(table_ids())

    def __len__(self) -> int:
        return len(table_ids())

    def __repr__(self) -> str:
        return f"EQUATION_SETS({', '.join(table_ids())})"


EQUATION_SETS: Mapping[str, EquationSet] = _EquationSets()
"""The bundled equation sets: iterate for the identifiers, index for an :class:`EquationSet`."""


def get_equation_set(name: str) -> EquationSet:
    """The :class:`EquationSet` of an identifier.

    Raises
    ------
    EquationSetError
        If ``name`` is not a bundled set (the message lists the valid identifiers).
    """
    if not isinstance(name, str) or name not in table_ids():
        raise EquationSetError(
            f"unknown equation set {name!r}; valid: {', '.join(table_ids())}"
        )
    return _equation_set(name)


@cache
def _equation_set(name: str) -> EquationSet:
    document = load_table(name)
    header, content = document["header"], document["content"]
    ranges = tuple((p, (float(lo), float(hi))) for p, (lo, hi) in content["age_ranges"].items())
    return EquationSet(
        id=header["id"],
        title=header["title"],
        citation=header["citation"],
        doi=header["doi"],
        parameters=tuple(content["parameters"]),
        age_range=(min(r[0] for _, r in ranges), max(r[1] for _, r in ranges)),
        table_sha256=header["content_sha256"],
        source=header["source"],
        erratum_doi=header["erratum_doi"],
        ancestries=tuple(content["ancestries"]),
        age_ranges=ranges,
    )


def table_checksums() -> dict[str, str]:
    """``{set id: table sha256}`` of every bundled set (what exported notebooks record)."""
    return {name: get_equation_set(name).table_sha256 for name in table_ids()}


def _parameter_name(eq: EquationSet, parameter: str) -> str:
    name = _PARAMETER_ALIASES.get(parameter, parameter) if isinstance(parameter, str) else parameter
    if name not in eq.parameters:
        raise EquationSetError(
            f"equation set {eq.id!r} has no parameter {parameter!r}; valid: {', '.join(eq.parameters)}"
        )
    return name


# --------------------------------------------------------------------------- compiled models


@dataclass(frozen=True)
class _Model:
    """One (set, parameter, unit) compiled for index arithmetic.

    Group code ``g = sex * n_ancestry + ancestry`` (sex 1 = male). For each part P in M, S, L
    the per-group intercept is folded into the group's spline column:
    ``table[P][g * count + i] = intercept_P[g] + Pspline_sex(g)[start + i * step]`` and
    ``slope[P]`` holds the row-to-row differences, so one look-up gives intercept + spline.
    Models without a spline table (``count == 0``) keep the intercepts in ``intercept``.
    """

    n_ancestry: int
    m_h: FloatArray
    m_a: FloatArray
    s_a: FloatArray
    l_a: FloatArray
    intercept: dict[str, FloatArray]
    table: dict[str, FloatArray]
    slope: dict[str, FloatArray]
    has_slope: dict[str, bool]
    uniform: dict[str, float | None]
    m_height_log: bool
    m_age_log: bool
    s_age_log: bool
    scale: float
    age_range: tuple[float, float]
    start: float
    step: float
    count: int
    restricted_ancestry: tuple[int, ...] | None

    @property
    def l_may_be_zero(self) -> bool:
        """True unless L is a per-group constant that is clearly non-zero."""
        if np.any(self.l_a != 0.0) or (self.count and np.any(self.slope["L"] != 0.0)):
            return True
        values = self.table["L"] if self.count else self.intercept["L"]
        return bool(np.any(np.abs(values) < 1e-3))


def _uniform_values(arrays: dict[str, FloatArray]) -> dict[str, float | None]:
    """The value shared by every group, per coefficient (None where groups differ)."""
    return {k: float(v[0]) if np.all(v == v[0]) else None for k, v in arrays.items()}


@cache
def _model(set_id: str, parameter: str, unit: str | None) -> _Model:
    content = load_table(set_id)["content"]
    ancestries = content["ancestries"] or ["-"]
    rows = {m["sex"]: m for m in content["models"] if m["parameter"] == parameter and m["unit"] == unit}
    by_sex = [rows[s] for s in _SEXES]
    groups = [(m, anc) for m in by_sex for anc in ancestries]

    def coefficient(part: str, key: str) -> FloatArray:
        return np.array([m[part][key] for m, _ in groups], dtype=np.float64)

    def intercept(part: str) -> FloatArray:
        return np.array([m[part]["intercept"] + m[part].get("ancestry", {}).get(anc, 0.0)
                         for m, anc in groups], dtype=np.float64)

    first = by_sex[0]
    grid = first["grid"]
    count = int(grid["count"]) if grid else 0
    intercepts = {"M": intercept("m"), "S": intercept("s"), "L": intercept("l")}
    table: dict[str, FloatArray] = {}
    slope: dict[str, FloatArray] = {}
    if count:
        for part in ("M", "S", "L"):
            columns = []
            for i, (m, _anc) in enumerate(groups):
                spline = m["splines"][part]
                column = np.zeros(count) if spline is None else np.asarray(spline, dtype=np.float64)
                columns.append(column + intercepts[part][i])
            t = np.concatenate(columns)
            d = np.zeros_like(t)
            d[:-1] = t[1:] - t[:-1]
            d[count - 1 :: count] = 0.0  # across a group boundary: never used
            table[part], slope[part] = t, d
    restriction = first["restriction"]
    return _Model(
        n_ancestry=len(ancestries),
        m_h=coefficient("m", "height"),
        m_a=coefficient("m", "age"),
        s_a=coefficient("s", "age"),
        l_a=coefficient("l", "log_age"),
        intercept=intercepts,
        table=table,
        slope=slope,
        has_slope={k: bool(np.any(v != 0.0)) for k, v in slope.items()},
        uniform=_uniform_values({"m_h": coefficient("m", "height"), "m_a": coefficient("m", "age"),
                                 "s_a": coefficient("s", "age"), "l_a": coefficient("l", "log_age"),
                                 "M": intercepts["M"], "S": intercepts["S"], "L": intercepts["L"]}),
        m_height_log=first["m"]["height_form"] == "log",
        m_age_log=first["m"]["age_form"] == "log",
        s_age_log=first["s"]["age_form"] == "log",
        scale=float(first["scale"]),
        age_range=(float(content["age_ranges"][parameter][0]), float(content["age_ranges"][parameter][1])),
        start=float(grid["start"]) if grid else 0.0,
        step=float(grid["step"]) if grid else 1.0,
        count=count,
        restricted_ancestry=(
            tuple(ancestries.index(a) for a in restriction["ancestry"]) if restriction else None
        ),
    )


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class LMSResult:
    """L, M, S of each subject (M in pftwork's units: ratios as fractions) and the flag.

    Attributes
    ----------
    L, M, S : ndarray of float64
        Box-Cox power, median (= predicted value) and coefficient of variation.
    extrapolated : ndarray of bool
        Outside the published age range, the plausible height window, or unsupported.
    """

    L: FloatArray
    M: FloatArray
    S: FloatArray
    extrapolated: BoolArray


@dataclass(frozen=True)
class ReferenceValues:
    """Reference values of one parameter for many subjects (numpy arrays of one shape).

    Attributes
    ----------
    predicted, lln, uln : ndarray of float64
        Median (M), 5th and 95th centiles (z = ∓1.645), in the parameter's unit.
    z, percent_predicted : ndarray of float64
        Of the measured value (nan where it is missing).
    percentile : ndarray of float64
        100·Φ(z) in %; computed on first access (most callers need only z and the limits).
    extrapolated : ndarray of bool
        See the module notes.
    set_id, parameter, unit : str
        What produced the values (``unit`` is ``None`` where the parameter has one unit only).
    """

    predicted: FloatArray
    lln: FloatArray
    uln: FloatArray
    z: FloatArray
    percent_predicted: FloatArray
    extrapolated: BoolArray
    set_id: str = ""
    parameter: str = ""
    unit: str | None = None

    _ARRAYS = ("predicted", "lln", "uln", "z", "percent_predicted", "percentile", "extrapolated")

    def __len__(self) -> int:
        return int(self.predicted.size)

    @cached_property
    def percentile(self) -> FloatArray:
        """100·Φ(z) in % (nan where z is nan)."""
        return _lms.percentile(self.z)

    def to_dict(self, i: int = 0) -> dict[str, Any]:
        """Plain Python values for subject ``i`` (flat index): floats, a bool and the labels."""
        out: dict[str, Any] = {}
        for name in self._ARRAYS:
            value = np.ravel(getattr(self, name))[i]
            out[name] = bool(value) if name == "extrapolated" else float(value)
        out.update(set_id=self.set_id, parameter=self.parameter, unit=self.unit)
        return out


# --------------------------------------------------------------------------- input handling


def _float_input(value: Any, field_path: str, expected: str) -> FloatArray:
    try:
        return np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise CaseError(field_path, value, expected) from None


def _sex_codes(sex: Any) -> npt.NDArray[np.intp] | np.intp:
    """1 for male, 0 for female, from strings or 1/0 (bool) values."""
    arr = np.asarray(sex)
    expected = "'male' or 'female' (or 1 = male, 0 = female)"
    if arr.dtype.kind in "biu":
        codes = arr.astype(np.intp, copy=False)
        if codes.size and (codes.min() < 0 or codes.max() > 1):
            bad = arr.flat[int(np.argmax((codes < 0) | (codes > 1)))]
            raise CaseError("subject.sex", bad, expected)
        return codes
    if arr.dtype.kind == "f":
        bad_mask = ~((arr == 0.0) | (arr == 1.0))
        if bad_mask.any():
            raise CaseError("subject.sex", arr.flat[int(np.argmax(bad_mask))], expected)
        return arr.astype(np.intp)
    if arr.dtype.kind not in "UO":
        raise CaseError("subject.sex", sex, expected)
    if arr.ndim == 0:
        text = arr.item()
        word = text.strip().lower() if isinstance(text, str) else None
        if word not in ("male", "female"):
            hint = ("the equations are sex-specific: call once per sex and report the range"
                    if word == "both" else None)
            raise CaseError("subject.sex", text, expected, hint)
        return np.intp(word == "male")
    male = np.asarray(arr == "male")
    female = np.asarray(arr == "female")
    unknown = ~(male | female)
    if unknown.any():
        lowered = np.char.lower(np.char.strip(np.asarray(arr[unknown], dtype=str)))
        male[unknown] = lowered == "male"
        female[unknown] = lowered == "female"
        bad_mask = ~(male | female)
        if bad_mask.any():
            bad = arr.flat[int(np.argmax(bad_mask))]
            hint = ("the equations are sex-specific: call once per sex and report the range"
                    if isinstance(bad, str) and bad.strip().lower() == "both" else None)
            raise CaseError("subject.sex", bad, expected, hint)
    return male.astype(np.intp)


def _ancestry_codes(eq: EquationSet, ancestry: Any) -> npt.NDArray[np.intp] | int:
    """Index into ``eq.ancestries`` of each subject (0 for sets without ancestry groups).

    Accepts the names (``caucasian`` is read as ``european``) or, for speed on large
    batches, integer codes that index :data:`ANCESTRIES`.
    """
    if not eq.ancestries:
        return 0
    expected = f"one of {', '.join(eq.ancestries)} (needed by {eq.id})"
    if ancestry is None:
        raise CaseError("subject.ancestry", None, expected)
    arr = np.asarray(ancestry)
    if arr.dtype.kind in "iu":
        bad_mask = (arr < 0) | (arr >= len(eq.ancestries))
        if bad_mask.any():
            raise CaseError("subject.ancestry", arr.flat[int(np.argmax(bad_mask))],
                            expected + f" or its index 0-{len(eq.ancestries) - 1}")
        return arr.astype(np.intp, copy=False)
    if arr.dtype.kind not in "UO":
        raise CaseError("subject.ancestry", ancestry, expected)
    lookup = {name: i for i, name in enumerate(eq.ancestries)}
    lookup.update({alias: lookup[name] for alias, name in _ANCESTRY_ALIASES.items()})
    if arr.ndim == 0:
        code = lookup.get(arr.item()) if isinstance(arr.item(), str) else None
        if code is None:
            raise CaseError("subject.ancestry", arr.item(), expected)
        return code
    codes = np.full(arr.shape, -1, dtype=np.intp)
    for name, i in lookup.items():
        codes[arr == name] = i
    if (codes < 0).any():
        raise CaseError("subject.ancestry", arr.flat[int(np.argmax(codes < 0))], expected)
    return codes


def _unit_key(eq: EquationSet, parameter: str, unit: str | None) -> str | None:
    if unit is None:
        unit = "SI"
    if not isinstance(unit, str) or unit.lower() not in ("si", "traditional"):
        raise CaseError("diffusion.unit", unit, "'SI' or 'traditional'")
    canonical = "SI" if unit.lower() == "si" else "traditional"
    table = load_table(eq.id)["content"]["models"]
    units = {m["unit"] for m in table if m["parameter"] == parameter}
    return canonical if canonical in units else None


# --------------------------------------------------------------------------- core


BLOCK = 1 << 16
"""Subjects per block: the work is done block by block so temporaries stay in cache."""


class _Scratch:
    """Block-sized float64 temporaries of one call, reused for every block."""

    def __init__(self, size: int) -> None:
        self.size = size
        self._arrays: dict[str, npt.NDArray[Any]] = {}

    def get(self, name: str, n: int, dtype: Any = np.float64) -> npt.NDArray[Any]:
        if name not in self._arrays:
            self._arrays[name] = np.empty(self.size, dtype=dtype)
        return self._arrays[name][:n]


def _evaluate(model: _Model, sex: Any, anc: Any, age: FloatArray, height: FloatArray,
              y: Any, out: dict[str, npt.NDArray[Any]]) -> None:
    """Fill the flat output arrays in ``out`` block by block (a loop over blocks, not rows).

    ``out`` holds "M" and "ext" and either "L" and "S" (for :func:`lms`) or "lln", "uln" and,
    with a measured ``y``, "z" and "pct".
    """
    n = age.shape[0]
    scratch = _Scratch(min(BLOCK, n))
    for start in range(0, n, BLOCK):
        sl = slice(start, min(start + BLOCK, n))
        block = {k: v[sl] for k, v in out.items()}
        _block(model, _part(sex, sl), _part(anc, sl), age[sl], height[sl], _part(y, sl),
               block, scratch)


def _part(x: Any, sl: slice) -> Any:
    return x[sl] if np.ndim(x) else x


def _block(model: _Model, sex: Any, anc: Any, age: FloatArray, height: FloatArray, y: Any,
           out: dict[str, npt.NDArray[Any]], scratch: _Scratch) -> None:
    """L, M, S of one block, then the requested outputs, in place."""
    n = age.shape[0]
    lo, hi = model.age_range
    hlo, hhi = PLAUSIBLE_HEIGHT_CM
    ext = out["ext"]
    with np.errstate(invalid="ignore"):
        np.greater_equal(age, lo, out=ext)
        ext &= age <= hi
        ext &= height >= hlo
        ext &= height <= hhi
        np.logical_not(ext, out=ext)
        has_nan = not age.min() > 0  # also catches nan
        if has_nan:
            age = np.where(age > 0, age, np.nan)
        if not height.min() > 0:
            height = np.where(height > 0, height, np.nan)
    g = sex * model.n_ancestry + anc if model.n_ancestry > 1 else sex
    m = out["M"]
    s = out["S"] if "S" in out else scratch.get("S", n)
    L = out["L"] if "L" in out else scratch.get("L", n)
    buf = scratch.get("buf", n)

    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        ln_age = np.log(age, out=scratch.get("ln_age", n))
        rows: Any = g
        frac = None
        if model.count:
            frac = scratch.get("frac", n)
            rows = scratch.get("rows", n, np.intp)
            _grid_position(model, g, age, frac, rows, buf, has_nan)

        # M = exp(m0 + m_h * H(height) + m_a * A(age) + Mspline)
        if model.m_height_log:
            np.log(height, out=m)
        else:
            np.copyto(m, height)
        _scale_by(m, model, "m_h", g, buf)
        _add_term(m, model, "m_a", g, ln_age if model.m_age_log else age, buf)
        _add_part(model, "M", m, rows, frac, buf)
        np.exp(m, out=m)
        if model.scale != 1.0:
            m *= model.scale

        # S = exp(s0 + s_a * A(age) + Sspline)
        _set_part(model, "S", s, rows, frac, buf)
        _add_term(s, model, "s_a", g, ln_age if model.s_age_log else age, buf)
        np.exp(s, out=s)

        # L = l0 + l_a * ln(age) + Lspline
        _set_part(model, "L", L, rows, frac, buf)
        _add_term(L, model, "l_a", g, ln_age, buf)

    if model.restricted_ancestry is not None:
        with np.errstate(invalid="ignore"):
            supported = np.isin(anc, model.restricted_ancestry) & (age >= lo) & (age <= hi)
        if not np.all(supported):
            unsupported = np.logical_not(supported, out=supported)
            m[unsupported] = np.nan
            s[unsupported] = np.nan
            ext |= unsupported
    if "lln" in out:
        _limits_and_z(model, L, m, s, y, out, scratch)


def _coefficient(model: _Model, key: str, g: Any) -> Any:
    """Scalar coefficient when every subject of the block shares it, else the per-group array."""
    shared = model.uniform[key]
    if shared is not None:
        return shared
    values = {"m_h": model.m_h, "m_a": model.m_a, "s_a": model.s_a, "l_a": model.l_a}.get(key)
    if values is None:
        values = model.intercept[key]
    return values[g] if np.ndim(g) == 0 else values


def _scale_by(acc: FloatArray, model: _Model, key: str, g: Any, buf: FloatArray) -> None:
    """``acc *= coefficient[g]``."""
    c = _coefficient(model, key, g)
    if np.ndim(c) == 0:
        acc *= c
    else:
        np.take(c, g, out=buf, mode="clip")
        acc *= buf


def _add_term(acc: FloatArray, model: _Model, key: str, g: Any, x: FloatArray,
              buf: FloatArray) -> None:
    """``acc += coefficient[g] * x`` without new arrays."""
    c = _coefficient(model, key, g)
    if np.ndim(c) == 0:
        if c != 0.0:
            np.multiply(x, c, out=buf)
            acc += buf
    else:
        np.take(c, g, out=buf, mode="clip")
        buf *= x
        acc += buf


def _set_part(model: _Model, part: str, acc: FloatArray, rows: Any, frac: FloatArray | None,
              buf: FloatArray) -> None:
    """``acc = intercept + spline`` of a part (M, S or L), interpolated between grid rows."""
    if frac is None:  # no spline table: the per-group intercept only (rows is the group)
        c = _coefficient(model, part, rows)
        if np.ndim(c) == 0:
            acc.fill(c)
        else:
            np.take(c, rows, out=acc, mode="clip")
        return
    np.take(model.table[part], rows, out=acc, mode="clip")
    if model.has_slope[part]:
        np.take(model.slope[part], rows, out=buf, mode="clip")
        buf *= frac
        acc += buf


def _add_part(model: _Model, part: str, acc: FloatArray, rows: Any, frac: FloatArray | None,
              buf: FloatArray) -> None:
    """``acc += intercept + spline`` of a part (M, S or L), interpolated between grid rows."""
    if frac is None:
        c = _coefficient(model, part, rows)
        if np.ndim(c) == 0:
            acc += c
        else:
            np.take(c, rows, out=buf, mode="clip")
            acc += buf
        return
    np.take(model.table[part], rows, out=buf, mode="clip")
    acc += buf
    if model.has_slope[part]:
        np.take(model.slope[part], rows, out=buf, mode="clip")
        buf *= frac
        acc += buf


def _grid_position(model: _Model, g: Any, age: FloatArray, frac: FloatArray,
                   rows: npt.NDArray[np.intp], buf: FloatArray, has_nan: bool) -> None:
    """Table row of each subject's lower grid age (``rows``) and the next row's weight (``frac``).

    Outside the grid the edge row is used (index and weight clipped), so the spline terms stay
    at their edge values while the closed-form terms keep the exact age.
    """
    np.subtract(age, model.start, out=frac)
    frac *= 1.0 / model.step
    if has_nan:
        np.copyto(frac, 0.0, where=np.isnan(frac))
    np.floor(frac, out=buf)
    last = model.count - 2
    inside = not has_nan and buf.min() >= 0 and buf.max() <= last and frac.max() <= last + 1
    if not inside:
        np.clip(buf, 0, last, out=buf)
    frac -= buf
    if not inside:
        np.clip(frac, 0.0, 1.0, out=frac)
    if np.ndim(g):
        np.multiply(g, model.count, out=rows)
        np.add(rows, buf, out=rows, casting="unsafe")
    else:
        np.copyto(rows, buf, casting="unsafe")
        if g:
            rows += int(g) * model.count


def _limits_and_z(model: _Model, L: FloatArray, M: FloatArray, S: FloatArray, y: Any,
                  out: dict[str, npt.NDArray[Any]], scratch: _Scratch) -> None:
    """LLN, ULN and, with a measured value, z, % predicted and percentile of one block.

    Same formulas as :mod:`pftwork.lms` (which is used as is when a block has an L within
    1e-3 of zero); here ``L*S`` is shared. S is overwritten.
    """
    if model.l_may_be_zero and not (L.min() > 1e-3 or L.max() < -1e-3):
        out["lln"][...] = _lms.lower_limit(L, M, S)
        out["uln"][...] = _lms.upper_limit(L, M, S)
        if y is not None:
            out["z"][...] = _lms.z_score(y, L, M, S)
            out["pct"][...] = _lms.percent_predicted(y, M)
        return
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        ls = S
        ls *= L
        undefined = scratch.get("undefined", ls.shape[0], np.bool_)
        for sign, name in ((-_lms.Z_LIMIT, "lln"), (_lms.Z_LIMIT, "uln")):
            w = np.multiply(ls, sign, out=out[name])
            np.less_equal(w, -1.0, out=undefined)
            np.log1p(w, out=w)
            w /= L
            np.exp(w, out=w)
            w *= M
            if undefined.any():
                w[undefined] = np.nan
        if y is None:
            return
        pct = np.divide(y, M, out=out["pct"])
        z = np.log(pct, out=out["z"])
        z *= L
        np.expm1(z, out=z)
        z /= ls
        pct *= 100.0


def _prepare(set_id: str, parameter: str, sex: Any, age: Any, height: Any, ancestry: Any,
             unit: str, measured: Any = None) -> tuple[Any, ...]:
    eq = get_equation_set(set_id)
    name = _parameter_name(eq, parameter)
    unit_out = _unit_key(eq, name, unit)
    model = _model(eq.id, name, unit_out)
    sex_c = _sex_codes(sex)
    anc_c = _ancestry_codes(eq, ancestry)
    age_a = _float_input(age, "subject.age_years", "a number of years")
    h_a = _float_input(height, "subject.height_cm", "a height in cm")
    y_a = None if measured is None else _float_input(measured, f"measured.{name}", "a number")
    inputs = (sex_c, anc_c, age_a, h_a) + (() if y_a is None else (y_a,))
    shape = np.broadcast_shapes(*(np.shape(x) for x in inputs))
    work = shape or (1,)
    age_a, h_a = _flat(age_a, work), _flat(h_a, work)
    if np.ndim(sex_c):
        sex_c = _flat(sex_c, work, np.intp)
    if np.ndim(anc_c):
        anc_c = _flat(anc_c, work, np.intp)
    if y_a is not None and np.ndim(y_a):
        y_a = _flat(y_a, work)
    return eq, name, model, unit_out, sex_c, anc_c, age_a, h_a, y_a, shape


def _outputs_for(n: int, names: tuple[str, ...]) -> dict[str, npt.NDArray[Any]]:
    out: dict[str, npt.NDArray[Any]] = {k: np.empty(n, dtype=np.float64) for k in names}
    out["ext"] = np.empty(n, dtype=np.bool_)
    return out


def _shaped(flat: npt.NDArray[Any], shape: tuple[int, ...]) -> npt.NDArray[Any]:
    return flat.reshape(shape)


def _flat(x: Any, shape: tuple[int, ...], dtype: Any = np.float64) -> npt.NDArray[Any]:
    """``x`` broadcast to ``shape`` and flattened (no copy when it already is flat and full)."""
    arr = np.asarray(x, dtype=dtype)
    if arr.shape != shape:
        arr = np.broadcast_to(arr, shape)
    return arr.reshape(-1)


def lms(set_id: str, parameter: str, sex: Any, age: Any, height: Any,
        ancestry: Any = None, unit: str = "SI") -> LMSResult:
    """L, M and S of a parameter for many subjects.

    Parameters
    ----------
    set_id : str
        Equation set identifier (:data:`EQUATION_SETS`).
    parameter : str
        Parameter of that set (``FEV1``, ``FEV1/FVC``, ``DLCO`` …).
    sex : array_like
        ``"male"``/``"female"`` or 1/0.
    age : array_like
        Age in decimal years.
    height : array_like
        Standing height in cm.
    ancestry : array_like of str, optional
        GLI-2012 only: european, african_american, north_east_asian, south_east_asian, other.
    unit : {"SI", "traditional"}
        GLI-2017 DLCO and KCO only; ignored elsewhere.

    Returns
    -------
    LMSResult
        Arrays of the broadcast shape of the inputs; M in pftwork's units.

    Raises
    ------
    EquationSetError
        Unknown set or parameter.
    CaseError
        Bad sex, ancestry, unit, or non-numeric age/height.
    """
    eq, name, model, _u, sex_c, anc_c, age_a, h_a, _y, shape = _prepare(
        set_id, parameter, sex, age, height, ancestry, unit)
    out = _outputs_for(age_a.shape[0], ("L", "M", "S"))
    _evaluate(model, sex_c, anc_c, age_a, h_a, None, out)
    return LMSResult(L=_shaped(out["L"], shape), M=_shaped(out["M"], shape),
                     S=_shaped(out["S"], shape), extrapolated=_shaped(out["ext"], shape))


def reference_values(set_id: str, parameter: str, sex: Any, age: Any, height: Any,
                     measured: Any = None, ancestry: Any = None, unit: str = "SI",
                     ) -> ReferenceValues:
    """Predicted value, limits of normal and, with a measured value, z, % predicted, percentile.

    Parameters
    ----------
    set_id : str
        Equation set identifier (:data:`EQUATION_SETS`).
    parameter : str
        Parameter of that set (``FEV1``, ``FEV1/FVC`` as a fraction, ``RV/TLC`` as a fraction …).
    sex : array_like
        ``"male"``/``"female"`` or 1/0; ``"both"`` raises :class:`~pftwork.errors.CaseError`.
    age : array_like
        Age in decimal years.
    height : array_like
        Standing height in cm.
    measured : array_like, optional
        Measured values in the parameter's unit; ``None`` or nan gives nan z/%/percentile.
    ancestry : array_like of str or int, optional
        Required by ``gli-2012`` (names, or integer codes indexing :data:`ANCESTRIES`);
        ignored by the other sets.
    unit : {"SI", "traditional"}
        Unit of GLI-2017 DLCO/KCO (each from its own published table); ignored elsewhere.

    Returns
    -------
    ReferenceValues
        Arrays of the broadcast shape of the inputs.

    Raises
    ------
    EquationSetError
        Unknown set or parameter (the message names it and lists the valid ones).
    CaseError
        Bad sex, ancestry, unit, or non-numeric age/height/measured.

    Examples
    --------
    >>> rv = reference_values("gli-global-2022", "FEV1", "female", 61.4, 159.0, measured=1.42)
    >>> rv.z.shape, bool(rv.z < -1.645)
    ((), True)
    """
    eq, name, model, unit_out, sex_c, anc_c, age_a, h_a, y_a, shape = _prepare(
        set_id, parameter, sex, age, height, ancestry, unit, measured)
    names = ("M", "lln", "uln", "z", "pct")
    out = _outputs_for(age_a.shape[0], names)
    _evaluate(model, sex_c, anc_c, age_a, h_a, y_a, out)
    if y_a is None:
        for name in ("z", "pct"):
            out[name].fill(np.nan)
    M, lln, uln, z, pct = (_shaped(out[k], shape) for k in names)
    ext = _shaped(out["ext"], shape)
    return ReferenceValues(
        predicted=M, lln=lln, uln=uln, z=z, percent_predicted=pct,
        extrapolated=ext,
        set_id=eq.id, parameter=name, unit=unit_out,
    )
