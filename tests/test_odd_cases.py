"""Valid but unusual cases run the whole flow: interpretation, worksheet record, notebook.

Contract (design.md §2 and §5): every block but ``subject`` is optional, what is missing is not
interpreted and said so (booleans ``null``), unusual values are computed with warnings. The
interpretation document must be strict JSON (RFC 8259 has no NaN/Infinity: checked with
``json.dumps(..., allow_nan=False)``, Python 3.11 json). Ranges probed are the loader's
documented limits (design.md §2: age 3-100 y, height 80-250 cm; GLI Global 2022 and GLI 2012
cover 3-95 y, GLI 2017 and GLI 2021 5-85 y and 5-80 y — from memory; outside them the values
are extrapolated with a caution).
"""

from __future__ import annotations

import copy
import json
from typing import Any

import nbformat
import pytest

import pftwork
from pftwork.case import ANCESTRIES
from pftwork.errors import CurveError
from pftwork.export.html import render_html
from pftwork.export.notebook import build_notebook
from pftwork.export.verify import verify_notebook
from pftwork.quality.synthetic import synthetic_manoeuvre
from pftwork.worksheet.record import WorksheetRecord

SUBJECT = {"id": "odd-1", "sex": "female", "age_years": 47.0, "height_cm": 165.0,
           "weight_kg": 66.0}
PRE = {"trials": [{"FEV1": 2.61, "FVC": 3.32, "BEV": 0.04, "FET": 9.1, "plateau": True,
                   "FIVC": 3.30},
                  {"FEV1": 2.58, "FVC": 3.29, "BEV": 0.05, "FET": 8.7, "plateau": True,
                   "FIVC": 3.27},
                  {"FEV1": 2.55, "FVC": 3.25, "BEV": 0.03, "FET": 10.2, "plateau": True,
                   "FIVC": 3.22}]}
POST = {"FEV1": 2.83, "FVC": 3.41}
VOLUMES = {"method": "plethysmography", "TLC": 5.2, "RV": 1.7, "FRC": 2.8,
           "trials": [{"FRC": 2.81}, {"FRC": 2.77}, {"FRC": 2.84}]}
DIFFUSION = {"unit": "SI", "hemoglobin_g_dl": 13.1,
             "trials": [{"DLCO": 7.2, "VA": 4.9, "IVC": 3.2, "breath_hold_s": 10.0},
                        {"DLCO": 7.4, "VA": 5.0, "IVC": 3.25, "breath_hold_s": 9.8}]}
RESISTANCE = {"sRaw": 0.9, "unit": "kPa*s"}


def case(**blocks: Any) -> dict[str, Any]:
    """An invented case with ``SUBJECT`` and the given blocks (``subject=`` entries override)."""
    subject = {**SUBJECT, **blocks.pop("subject", {})}
    out = {"format": "pftwork-case/1", "subject": subject, "test": {"date": "2026-05-04"}}
    out.update(copy.deepcopy(blocks))
    return out


def full(**subject: Any) -> dict[str, Any]:
    """Every block present."""
    return case(subject=subject, spirometry={"pre": PRE, "post": POST},
                volumes=VOLUMES, diffusion=DIFFUSION, airway_resistance=RESISTANCE)


def _curve_trial(vc: float, pef: float, label: str) -> dict[str, Any]:
    m = synthetic_manoeuvre(vc_l=vc, pef_l_s=pef)
    return {"label": label, "curve": {"time_s": m.curve.time_s.tolist(),
                                      "volume_l": m.curve.volume_l.tolist()}}


UNUSABLE = {"trials": [
    {"FEV1": 2.1, "FVC": 2.9, "cough": True, "FET": 2.0, "plateau": False},
    {"FEV1": 2.5, "FVC": 3.0, "BEV": 0.6, "glottic_closure": True},
    {"FEV1": 1.2, "FVC": 1.9, "leak": True, "early_termination": True, "FET": 1.1},
]}

ODD: dict[str, dict[str, Any]] = {
    "post-BD set only": case(spirometry={"post": POST}),
    "post-BD trials only": case(spirometry={"post": PRE}),
    "volumes only": case(volumes=VOLUMES),
    "volumes trials only (FRC)": case(volumes={"trials": VOLUMES["trials"]}),
    "diffusion only": case(diffusion=DIFFUSION),
    "diffusion reported KCO only": case(diffusion={"unit": "SI", "KCO": 1.45}),
    "airway resistance only (sRaw)": case(airway_resistance=RESISTANCE),
    "airway resistance only (Raw, cmH2O*s)": case(airway_resistance={"Raw": 2.5,
                                                                      "unit": "cmH2O*s"}),
    "subject only": case(),
    "trials with raw curves only": case(subject={"sex": "male", "height_cm": 178.0},
                                        spirometry={"pre": {"trials": [
                                            _curve_trial(4.5, 9.0, "c1"),
                                            _curve_trial(4.45, 8.8, "c2"),
                                            _curve_trial(4.4, 8.9, "c3")]}}),
    "all pre trials unusable": case(spirometry={"pre": UNUSABLE, "post": POST}),
    "all pre and post trials unusable": case(spirometry={"pre": UNUSABLE, "post": UNUSABLE}),
    "one FVC-only trial": case(spirometry={"pre": {"trials": [{"FVC": 3.3}]}}),
    "sex both, every block": full(sex="both"),
    "sex both, spirometry only": case(subject={"sex": "both"}, spirometry={"pre": PRE}),
    **{f"age {a:g}, every block": full(age_years=a, height_cm=h, weight_kg=None)
       for a, h in [(3.0, 95.0), (5.9, 112.0), (6.0, 116.0), (85.5, 160.0), (95.5, 158.0),
                    (100.0, 155.0)]},
    "height 80 cm (age 3)": full(age_years=3.0, height_cm=80.0, weight_kg=None),
    "height 230 cm": full(sex="male", age_years=25.0, height_cm=230.0, weight_kg=None),
    "height in inches": full(height_cm=None, height_in=65.0),
    **{f"gli-2012, ancestry {a}": {**full(ancestry=a), "reference": {"spirometry": "gli-2012"}}
       for a in (*ANCESTRIES, None)},
    "history entries with only DLCO": {**full(), "history": [
        {"test": {"date": "2024-05-01"}, "diffusion": {"unit": "SI", "DLCO": 7.9}},
        {"test": {"date": "2025-05-01"}, "diffusion": {"unit": "traditional", "DLCO": 22.5}},
        {"test": {"date": "2023-05-01"}, "subject": {"age_years": 44.0},
         "diffusion": {"unit": "SI", "trials": [{"DLCO": 8.1, "VA": 5.0}]}}]},
    "history without dates": {**full(), "history": [
        {"spirometry": {"pre": {"FEV1": 2.9, "FVC": 3.5}}}, {"volumes": {"TLC": 5.3}}]},
    "history only, no current spirometry": {**case(volumes=VOLUMES), "history": [
        {"test": {"date": "2025-01-01"}, "spirometry": {"pre": {"FEV1": 2.9, "FVC": 3.5}}}]},
    "lab reference for FEV1 and sRaw": {**full(), "lab_reference": {
        "FEV1": {"predicted": 2.9, "lln": 2.3, "source": "lab"},
        "sRaw": {"predicted": 0.9, "uln": 1.2, "unit": "kPa*s"}}},
    "lab reference only lln, no resistance block": {**case(spirometry={"pre": PRE}),
                                                    "lab_reference": {"sRaw": {"uln": 1.2}}},
    "diffusion traditional + Hb, COHb, altitude, pressure": {
        **case(spirometry={"pre": PRE}, volumes=VOLUMES,
               diffusion={"unit": "traditional", "hemoglobin_g_dl": 9.1, "cohb_percent": 6.5,
                          "trials": [{"DLCO": 21.4, "VA": 4.8, "IVC": 3.1},
                                     {"DLCO": 22.0, "VA": 4.9, "IVC": 3.2}]}),
        "test": {"date": "2026-05-04", "altitude_m": 2400, "barometric_kpa": 75.6}},
    "diffusion traditional, reported, no Hb": case(diffusion={"unit": "traditional",
                                                              "DLCO": 15.0, "VA": 4.1}),
    "values at the loader's limits": case(spirometry={"pre": {"FEV1": 0.1, "FVC": 0.5}},
                                          volumes={"TLC": 0.5, "RV": 0.1}),
}


@pytest.fixture(scope="module", params=sorted(ODD), ids=str)
def flow(request):
    """Case -> interpretation document -> signed worksheet record, once per odd case."""
    loaded = pftwork.load_case(ODD[request.param])
    doc = pftwork.interpret(loaded).to_dict()
    record = WorksheetRecord.from_case(loaded)
    record.accept_all("x")
    record.sign_off("x")
    return request.param, loaded, doc, record


def test_interpretation_is_strict_json(flow):
    """The interpretation document serialises without NaN/Infinity (RFC 8259; design.md §5)."""
    name, _, doc, _ = flow
    text = json.dumps(doc, allow_nan=False)
    assert "pftwork-interpretation/1" == json.loads(text)["format"], name
    assert {"pattern", "obstruction", "restriction", "dlco", "bdr"} <= set(doc["summary"])


def test_missing_blocks_give_null(flow):
    """A block that is absent leaves its summary booleans null, not a guess (design.md §5)."""
    _, loaded, doc, _ = flow
    s = doc["summary"]
    if loaded.spirometry is None:
        assert s["obstruction"] is None
    if loaded.spirometry is None or loaded.spirometry.post is None:
        assert s["bdr"] is None and s["bdr_2005"] is None
    if loaded.volumes is None:
        assert s["hyperinflation"] is None and s["air_trapping"] is None
    if loaded.diffusion is None:
        assert s["dlco"] is None and s["kco"] is None


def test_worksheet_and_notebook_build(flow):
    """The signed record and its notebook (not executed) build, and the record is complete."""
    name, _, _, record = flow
    assert record.is_signed_off, name
    nb = build_notebook(record)
    assert "pftwork" in nb.metadata
    assert nb.cells
    nb_deid = build_notebook(record, deidentify=True, key=b"k")
    assert "odd-1" not in json.dumps(nb_deid.metadata["pftwork"]["record"].get("case", {}))


def test_notebook_verifies_without_kernel(flow, tmp_path):
    """The unexecuted notebook passes ``verify --no-execute`` (record chain and recomputation)
    and the HTML copy renders: odd cases survive the whole export path."""
    name, _, _, record = flow
    path = tmp_path / "odd.ipynb"
    nbformat.write(build_notebook(record), str(path))
    report = verify_notebook(path, execute=False)
    assert 0 == report.exit_code, (name, report.format_report())
    assert "<html" in render_html(record, deidentify=True).lower()


@pytest.mark.parametrize("name, extrapolated", [
    ("age 3, every block", True),     # below GLI 2017 / GLI 2021 (5 y, from memory)
    ("age 6, every block", False),    # inside every GLI range
    ("age 85.5, every block", True),  # above GLI 2021 volumes (80 y, from memory)
    ("age 100, every block", True),   # above every GLI range (95 y at most)
])
def test_extrapolation_is_flagged(name, extrapolated):
    """Ages outside the equations' ranges are computed and flagged ``extrapolated``."""
    doc = pftwork.interpret(pftwork.load_case(ODD[name])).to_dict()
    assert extrapolated is doc["summary"]["extrapolated"]


def test_age_above_95_warns_at_load():
    """Age 100 loads (design.md §2 allows 3-100 y) with a warning naming subject.age_years."""
    loaded = pftwork.load_case(ODD["age 100, every block"])
    assert any(w.startswith("subject.age_years") for w in loaded.warnings)


def test_history_in_traditional_units_is_converted():
    """A history DLCO in mL/min/mmHg is compared in SI: 22.5 / 2.987 = 7.53 mmol/min/kPa
    (ATS/ERS 2017 DLCO standard, unit conversion; standards.md §4.6)."""
    doc = pftwork.interpret(pftwork.load_case(ODD["history entries with only DLCO"])).to_dict()
    change = next(s for s in doc["steps"] if s["id"] == "change")
    assert "7.53 -> 7.30 mmol/min/kPa" in change["conclusion"]


def test_lab_reference_is_used_for_sraw():
    """With no pftwork equation for sRaw the lab's ULN is used and labelled (design.md §2)."""
    doc = pftwork.interpret(pftwork.load_case(ODD["lab reference for FEV1 and sRaw"])).to_dict()
    step = next(s for s in doc["steps"] if s["id"] == "resistance")
    assert "laboratory" in step["conclusion"] and "1.20" in step["conclusion"]


def test_pattern_is_null_without_spirometry():
    """No spirometry: the ventilatory pattern cannot be named (design.md §5: null, not a guess)."""
    doc = pftwork.interpret(pftwork.load_case(ODD["volumes only"])).to_dict()
    assert doc["summary"]["pattern"] is None


def test_resistance_only_is_reported():
    """sRaw alone is a measured value: the resistance step reports it (design.md §2: every
    block but subject is optional)."""
    doc = pftwork.interpret(pftwork.load_case(ODD["airway resistance only (sRaw)"])).to_dict()
    step = next(s for s in doc["steps"] if s["id"] == "resistance")
    assert "sRaw 0.90" in step["conclusion"]


@pytest.mark.parametrize("name, curve, field", [
    ("3 samples", {"time_s": [0.0, 0.1, 0.2], "volume_l": [0.0, 1.0, 2.0]}, "curve.time_s"),
    ("time backwards", {"time_s": [i / 100 for i in range(99, -1, -1)],
                        "volume_l": [i / 30 for i in range(100)]}, "curve.time_s[1]"),
    ("flat volume", {"time_s": [i / 100 for i in range(300)], "volume_l": [1.0] * 300},
     "curve.volume_l"),
    ("millilitres", {"time_s": [i / 100 for i in range(300)],
                     "volume_l": [i * 10.0 for i in range(300)]}, "curve.volume_l"),
])
def test_curve_the_quality_step_refuses(name, curve, field):
    """A curve the loader accepts but that cannot be a forced manoeuvre (ATS/ERS 2019 §
    acceptability: >= 100 Hz sampling, volume in litres) raises CurveError naming it — a clean
    error the command line turns into exit 2, never another exception type."""
    loaded = pftwork.load_case(case(spirometry={"pre": {"trials": [{"curve": curve}]}}))
    with pytest.raises(CurveError) as info:
        pftwork.interpret(loaded)
    assert info.value.field.startswith("spirometry.pre.trials[0]." + field.split("[")[0]), name


@pytest.mark.parametrize("cell", [[1], ["male"], {"a": 1}], ids=["list", "list of text", "dict"])
def test_batch_row_with_a_non_scalar_sex_cell(cell):
    """A list or dict in a cell (possible in Parquet list columns or in-memory tables) gives
    that row an error naming ``sex``; the other rows are computed (design.md §6). It used to
    raise IndexError: numpy turned the list cell into a second array dimension."""
    import pandas as pd

    from pftwork.batch import interpret_table

    row = {"id": "b", "sex": "male", "age_years": 40.0, "height_cm": 180.0,
           "FEV1_pre": 3.5, "FVC_pre": 4.5}
    out = interpret_table(pd.DataFrame([{**row, "id": "a", "sex": cell}, row]))
    assert out.loc[0, "error"].startswith("row 1: sex = ")
    assert "" == out.loc[1, "error"]
    assert "normal" == out.loc[1, "pattern"]


# -- regressions: unusable manoeuvres give no bronchodilator verdict --------------------------
def test_bdr_is_null_when_every_trial_is_unusable():
    """Unusable manoeuvres cannot show (or exclude) a bronchodilator response."""
    doc = pftwork.interpret(pftwork.load_case(ODD["all pre and post trials unusable"])).to_dict()
    assert doc["summary"]["bdr"] is None and doc["summary"]["bdr_2005"] is None
