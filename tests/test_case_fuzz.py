"""Fuzzing the case loader: mutated demo cases load or raise ``CaseError`` naming the field.

Contract under test: design.md §2 (case format, units, ranges) and the preamble's error rule
(bad input raises ``CaseError`` with the field path, the value and the expectation; never a
``KeyError``/``TypeError``/``AttributeError`` from deep inside). Mutations are generated with
Hypothesis 6.170 (``derandomize=True``: the same examples on every run).
"""

from __future__ import annotations

import copy
import json
import math
import re
from typing import Any

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import pftwork
from pftwork.case import load_case, read_case_file
from pftwork.case_model import Case
from pftwork.errors import CaseError

DEMOS = {p.stem: json.loads(p.read_text(encoding="utf-8")) for p in pftwork.demo_cases()}
Path_ = tuple[Any, ...]


def _paths(node: Any, prefix: Path_ = ()) -> list[Path_]:
    """Every key/index path of ``node`` (long number lists: first two and last index only)."""
    out = [prefix] if prefix else []
    if isinstance(node, dict):
        for key, value in node.items():
            out += _paths(value, (*prefix, key))
    elif isinstance(node, list):
        n = len(node)
        for i in sorted({0, 1, n - 1} & set(range(n))) if n > 3 else range(n):
            out += _paths(node[i], (*prefix, i))
    return out


PATHS = {name: _paths(case) for name, case in DEMOS.items()}


def dotted(path: Path_) -> str:
    """The loader's spelling of a path: ``spirometry.pre.trials[0].FEV1``."""
    text = ""
    for key in path:
        text += f"[{key}]" if isinstance(key, int) else (f".{key}" if text else str(key))
    return text


def nested(depth: int) -> Any:
    """A list/dict nested ``depth`` levels deep."""
    value: Any = 1.0
    for i in range(depth):
        value = [value] if i % 2 else {"x": value}
    return value


SCALAR_JUNK = st.one_of(
    st.none(), st.booleans(), st.text(max_size=12), st.sampled_from(["", "ü∂ß€𝔉", "1.5", "NaN"]),
    st.floats(allow_nan=True, allow_infinity=True),
    st.floats(min_value=-1.0, max_value=300.0),  # in and around the physiological ranges
    st.integers(min_value=-10**6, max_value=10**6),
    st.integers(min_value=10**300, max_value=10**320),  # beyond the float range
    st.sampled_from([math.nan, math.inf, -math.inf, -1e308, 1e308]),
)
JUNK = st.one_of(
    SCALAR_JUNK,
    st.just([]), st.just({}),
    st.recursive(SCALAR_JUNK, lambda inner: st.lists(inner, max_size=3)
                 | st.dictionaries(st.text(max_size=6), inner, max_size=3), max_leaves=8),
    st.integers(min_value=50, max_value=400).map(nested),  # deeply nested junk
)


def mutate(case: dict[str, Any], path: Path_, how: str, value: Any) -> dict[str, Any]:
    """Copy of ``case`` with ``path`` deleted, replaced, or given a new unknown sibling key."""
    out = copy.deepcopy(case)
    parent = out
    for key in path[:-1]:
        parent = parent[key]
    last = path[-1]
    if how == "delete":
        del parent[last]
    elif how == "replace":
        parent[last] = value
    else:  # "add": an unknown key inside the mutated node (or beside it)
        target = parent[last] if isinstance(parent[last], dict) else parent
        if isinstance(target, dict):
            target["zz_unknown"] = value
    return out


def names_the_field(error: CaseError, path: Path_) -> bool:
    """Does the error name the mutated field (itself, a parent or child, or by its own key)?

    Cross-field checks (FEV1 > FVC, RV > TLC, time_s vs volume_l length, dates vs age) name
    the field they fail on and the other field by its key, e.g. "at most FVC (2.5 L)".
    """
    where, field = dotted(path), error.field
    if where.startswith(field) or field.startswith(where):
        return True
    keys = [k for k in path if isinstance(k, str)]
    return bool(keys) and re.search(rf"\b{re.escape(keys[-1])}\b", str(error)) is not None


@settings(max_examples=200, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(data=st.data())
def test_single_mutation_loads_or_names_the_field(data):
    """One deleted / retyped / added field: a Case, or a CaseError naming that field."""
    name = data.draw(st.sampled_from(sorted(DEMOS)), label="case")
    path = data.draw(st.sampled_from(PATHS[name]), label="path")
    how = data.draw(st.sampled_from(["delete", "replace", "replace", "add"]), label="how")
    value = data.draw(JUNK, label="value") if how != "delete" else None
    case = mutate(DEMOS[name], path, how, value)

    try:
        result = load_case(case)
    except CaseError as exc:
        text = str(exc)
        assert ": expected " in text, text
        if how == "add" and "zz_unknown" in json.dumps(case, default=str):
            assert "zz_unknown" in exc.field or names_the_field(exc, path), text
        else:
            assert names_the_field(exc, path), f"mutated {dotted(path)}; error: {text}"
        return
    assert isinstance(result, Case)


@settings(max_examples=60, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(data=st.data())
def test_several_mutations_never_crash(data):
    """Up to four mutations at once: only ``Case`` or ``CaseError`` ever comes out."""
    name = data.draw(st.sampled_from(sorted(DEMOS)), label="case")
    case = DEMOS[name]
    for _ in range(data.draw(st.integers(1, 4), label="n")):
        paths = _paths(case)
        if not paths:
            break
        path = data.draw(st.sampled_from(paths), label="path")
        how = data.draw(st.sampled_from(["delete", "replace", "add"]), label="how")
        case = mutate(case, path, how, data.draw(JUNK, label="value"))
    try:
        result = load_case(case)
    except CaseError as exc:
        assert ": expected " in str(exc)
        return
    assert isinstance(result, Case)


@pytest.mark.parametrize("top", [None, [], [DEMOS["normal_harbour_pilot"]], 3, True, b"{}"])
def test_non_object_case(top):
    """A case that is not a JSON object (or a path) is refused as a whole (design.md §2)."""
    with pytest.raises(CaseError, match="^case = "):
        load_case(top)


@pytest.mark.parametrize("content, field_part", [
    ("", "valid JSON"),
    ("{", "valid JSON"),
    ("[1, 2]", "a JSON object"),
    ('"text"', "a JSON object"),
    ("[" * 100_000 + "]" * 100_000, "depth"),  # json's recursion limit
    ('{"subject": {"age_years": 1' + "0" * 5000 + "}}", "ordinary size"),  # > 4300 digits
])
def test_unreadable_files(tmp_path, content, field_part):
    """Files that are not a readable JSON object raise CaseError naming the file (design.md §4)."""
    path = tmp_path / "case.json"
    path.write_text(content, encoding="utf-8")
    with pytest.raises(CaseError) as info:
        read_case_file(path)
    assert str(path) == info.value.field
    assert field_part in str(info.value)


def test_byte_order_mark_is_accepted(tmp_path):
    """A UTF-8 file saved with a byte-order mark (common on Windows) reads as plain UTF-8."""
    path = tmp_path / "case.json"
    path.write_text("\ufeff" + json.dumps(DEMOS["normal_harbour_pilot"]), encoding="utf-8")
    assert DEMOS["normal_harbour_pilot"] == read_case_file(path)


def test_binary_file(tmp_path):
    """A non-UTF-8 file raises CaseError (it used to leak UnicodeDecodeError)."""
    path = tmp_path / "case.json"
    path.write_bytes(b"\xff\xfe\x00\x01binary")
    with pytest.raises(CaseError, match="UTF-8"):
        load_case(path)


def test_directory_instead_of_file(tmp_path):
    """A directory in place of the case file raises CaseError naming it."""
    with pytest.raises(CaseError, match="readable case file"):
        load_case(tmp_path)


@pytest.mark.parametrize("path, value, field", [
    (("diffusion", "unit"), ["SI"], "diffusion.unit"),  # was TypeError: unhashable list
    (("diffusion", "unit"), {"SI": 1}, "diffusion.unit"),
    (("subject", "age_years"), 10**400, "subject.age_years"),  # was OverflowError
    (("spirometry", "pre", "trials", 0, "curve", "time_s", 1), 10**400,
     "spirometry.pre.trials[0].curve.time_s[1]"),  # was OverflowError
    (("spirometry", "pre", "trials", 0, "curve", "time_s", 1), math.nan,
     "spirometry.pre.trials[0].curve.time_s[1]"),
    (("spirometry", "pre", "trials", 0, "curve", "volume_l", 2), "0.5",
     "spirometry.pre.trials[0].curve.volume_l[2]"),  # text was silently converted by numpy
    (("spirometry", "pre", "trials", 0, "curve", "volume_l", 2), True,
     "spirometry.pre.trials[0].curve.volume_l[2]"),
    (("meta",), nested(5000), "meta"),  # was RecursionError
])
def test_former_crashes(path, value, field):
    """Inputs that crashed the loader before this review now raise CaseError on the field."""
    case = mutate(DEMOS["copd_hyperinflation_retired_welder"], path, "replace", value)
    with pytest.raises(CaseError) as info:
        load_case(case)
    assert info.value.field.startswith(field), str(info.value)


def test_history_date_names_age():
    """A history date before age 3 names the age it was computed from (subject.age_years)."""
    case = copy.deepcopy(DEMOS["copd_hyperinflation_retired_welder"])
    case["subject"]["age_years"] = 4.0
    case["history"] = [{"test": {"date": "2000-01-01"},
                        "spirometry": {"pre": {"FEV1": 1.0, "FVC": 1.2}}}]
    with pytest.raises(CaseError, match=r"subject\.age_years 4"):
        load_case(case)


def test_integer_too_long_to_print():
    """An integer beyond Python's printable length in a text field still gives a CaseError."""
    case = mutate(DEMOS["normal_harbour_pilot"], ("subject", "sex"), "replace", 10**5000)
    with pytest.raises(CaseError, match="subject.sex"):
        load_case(case)


def test_numpy_numbers_are_numbers():
    """numpy scalars (as a DataFrame row or ``list(array)`` gives them) load like Python
    numbers; a numpy boolean is refused like ``True`` (design.md §2: numbers in stated units)."""
    import numpy as np

    case = copy.deepcopy(DEMOS["copd_hyperinflation_retired_welder"])
    case["subject"]["age_years"] = np.int64(60)
    curve = case["spirometry"]["pre"]["trials"][0]["curve"]
    curve["time_s"] = list(np.asarray(curve["time_s"], dtype=np.float64))
    loaded = load_case(case)
    assert 60.0 == loaded.subject.age_years
    assert np.array_equal(np.asarray(curve["time_s"]),
                          loaded.spirometry.pre.trials[0].curve.time_s)

    curve["time_s"][3] = np.bool_(True)
    with pytest.raises(CaseError, match=r"curve\.time_s\[3\]"):
        load_case(case)
