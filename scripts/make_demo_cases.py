"""Regenerate the invented demo cases in ``data/`` (run from the repository root).

Every person, date and scenario here is invented. Each case is specified by target z-scores
per parameter; measured values are placed at those z-scores with pftwork's own reference
engine (so the demo stays consistent with the equations), rounded as a lab would report them,
and a few manoeuvres are spread around the reported value. Run::

    python scripts/make_demo_cases.py

The output is deterministic (fixed seed per case).
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np

from pftwork.lms import value_at_z
from pftwork.quality.synthetic import synthetic_manoeuvre
from pftwork.reference import lms

ROOT = Path(__file__).resolve().parents[1]
OUT = ROOT / "data"


def at_z(set_id: str, param: str, sex: str, age: float, height: float, z: float,
         ancestry: str | None = None, unit: str = "SI") -> float:
    """The value of ``param`` lying at z-score ``z`` for this subject."""
    r = lms(set_id, param, sex, age, height, ancestry=ancestry, unit=unit) if set_id == "gli-2017" \
        else lms(set_id, param, sex, age, height, ancestry=ancestry)
    return float(value_at_z(z, r.L, r.M, r.S).ravel()[0])


def spiro_values(sex, age, height, z_fev1, z_fvc):
    fev1 = at_z("gli-global-2022", "FEV1", sex, age, height, z_fev1)
    fvc = at_z("gli-global-2022", "FVC", sex, age, height, z_fvc)
    return round(fev1, 2), round(fvc, 2)


def trials(rng, fev1, fvc, n=3, spread=0.06, pef=None, extra=None):
    """``n`` manoeuvres whose largest FEV1/FVC equal the reported ones (repeatable within spread)."""
    out = []
    for i in range(n):
        d1 = 0.0 if i == 0 else -abs(rng.normal(0, spread / 2)) - 0.01 * i
        d2 = 0.0 if i == (1 if n > 1 else 0) else -abs(rng.normal(0, spread / 2)) - 0.01 * i
        t = {"label": f"m{i + 1}", "FEV1": round(fev1 + d1, 2), "FVC": round(fvc + d2, 2),
             "BEV": round(float(rng.uniform(0.03, 0.08)), 3),
             "FET": round(float(rng.uniform(8.5, 12.5)), 1), "plateau": True}
        t["FEV1"] = min(t["FEV1"], t["FVC"])
        t["FIVC"] = round(t["FVC"] - float(rng.uniform(0.0, 0.05)), 2)
        if pef is not None:
            t["PEF"] = round(pef * (1 - 0.02 * i), 2)
        if extra:
            t.update(extra)
        out.append(t)
    return out


def curve_trials(specs):
    """Manoeuvres given only as raw volume-time curves (100 Hz) from pftwork's synthetic model."""
    out = []
    for i, spec in enumerate(specs):
        m = synthetic_manoeuvre(rate_hz=100.0, knee_flow_fraction=0.4, expiration_time_s=15.5,
                                noise_l=0.002, seed=i, **spec)
        out.append({"label": f"m{i + 1}",
                    "curve": {"time_s": [round(float(t), 2) for t in m.curve.time_s],
                              "volume_l": [round(float(v), 3) for v in m.curve.volume_l]}})
    return out


def volumes_block(sex, age, height, z_tlc, z_rv, frc_frac=None, trials_n=3, rng=None):
    tlc = at_z("gli-2021", "TLC", sex, age, height, z_tlc)
    rv = at_z("gli-2021", "RV", sex, age, height, z_rv)
    frc = at_z("gli-2021", "FRC", sex, age, height, (z_tlc + z_rv) / 2) if frc_frac is None \
        else rv + frc_frac * (tlc - rv)
    frc = max(frc, rv + 0.3)
    block = {"method": "plethysmography", "TLC": round(tlc, 2), "RV": round(rv, 2),
             "FRC": round(frc, 2), "ERV": round(frc - rv, 2)}
    if rng is not None:
        block["trials"] = [{"FRC": round(frc * (1 + float(rng.uniform(-0.015, 0.015))), 2)}
                           for _ in range(trials_n)]
    return block


def diffusion_block(sex, age, height, z_dlco, z_va, hb, rng, unit="SI", n=2, ivc=None):
    dlco = at_z("gli-2017", "DLCO", sex, age, height, z_dlco, unit=unit)
    va = at_z("gli-2017", "VA", sex, age, height, z_va)
    ts = []
    for i in range(n):
        f = 1 + (0 if i == 0 else float(rng.uniform(-0.03, 0.03)))
        ts.append({"DLCO": round(dlco * f, 2), "VA": round(va * (1 + (0 if i == 0 else 0.01)), 2),
                   "IVC": ivc if ivc else None, "breath_hold_s": round(float(rng.uniform(9.5, 10.8)), 1),
                   "inspiration_time_s": round(float(rng.uniform(1.6, 2.6)), 1),
                   "sample_time_s": round(float(rng.uniform(2.2, 3.2)), 1)})
    for t in ts:
        if t["IVC"] is None:
            del t["IVC"]
    return {"unit": unit, "hemoglobin_g_dl": hb, "cohb_percent": None, "trials": ts}


def case(cid, sex, age, height, weight, date, question, meta, **blocks):
    c = {"format": "pftwork-case/1",
         "subject": {"id": cid, "sex": sex, "age_years": age, "height_cm": height,
                     "weight_kg": weight, "ancestry": None, "name": None, "birth_date": None,
                     "record_number": None},
         "test": {"date": date, "altitude_m": 120, "question": question},
         "reference": {"spirometry": "gli-global-2022", "volumes": "gli-2021",
                       "diffusion": "gli-2017"},
         "meta": {"invented": True, **meta}}
    c.update({k: v for k, v in blocks.items() if v is not None})
    return c


def build() -> dict[str, dict]:
    cases: dict[str, dict] = {}

    # 1. Normal: a harbour pilot's fitness-for-duty check.
    rng = np.random.default_rng(1)
    sex, age, h = "male", 41.3, 181.0
    fev1, fvc = spiro_values(sex, age, h, 0.2, 0.35)
    cases["normal_harbour_pilot"] = case(
        "demo-normal-01", sex, age, h, 84.0, "2026-09-02", "fitness-for-duty review",
        {"scenario": "Harbour pilot, never smoker, routine fitness-for-duty spirometry, lung "
                     "volumes and gas transfer; no symptoms.", "expected_pattern": "normal"},
        spirometry={"pre": {"trials": trials(rng, fev1, fvc, pef=10.1)}},
        volumes=volumes_block(sex, age, h, 0.3, 0.1, rng=rng),
        diffusion=diffusion_block(sex, age, h, 0.1, 0.3, 15.1, rng, ivc=round(fvc * 0.96, 2)))

    # 2. Obstruction with a bronchodilator response: a choir singer with wheeze in cold air.
    rng = np.random.default_rng(2)
    sex, age, h = "female", 29.6, 166.0
    ratio_pre = 0.66
    fvc = round(at_z("gli-global-2022", "FVC", sex, age, h, -0.4), 2)
    fev1 = round(fvc * ratio_pre, 2)
    fvc_post = round(fvc + 0.22, 2)
    fev1_post = round(fev1 + 0.52, 2)
    cases["obstruction_reversible_singer"] = case(
        "demo-obs-bdr-02", sex, age, h, 61.0, "2026-10-07", "wheeze and chest tightness in cold air",
        {"scenario": "Choir singer with episodic wheeze after rehearsals in a cold church; "
                     "never smoker. Obstruction that responds to salbutamol.",
         "expected_pattern": "obstruction"},
        spirometry={"pre": {"trials": trials(rng, fev1, fvc, pef=5.4)},
                    "post": {"trials": trials(rng, fev1_post, fvc_post, pef=6.6)},
                    "bronchodilator": {"agent": "salbutamol", "dose": "400 microgram",
                                       "minutes_after": 15}})

    # 3. COPD, obstruction with hyperinflation and air trapping, low DLCO/KCO; with history.
    rng = np.random.default_rng(3)
    sex, age, h = "male", 67.8, 174.0
    fvc = round(at_z("gli-global-2022", "FVC", sex, age, h, -1.2), 2)
    fev1 = round(at_z("gli-global-2022", "FEV1", sex, age, h, -3.1), 2)
    rv = at_z("gli-2021", "RV", sex, age, h, 3.2)
    tlc = at_z("gli-2021", "TLC", sex, age, h, 2.1)
    frc = rv + 0.45 * (tlc - rv)
    vols = {"method": "plethysmography", "TLC": round(tlc, 2), "RV": round(rv, 2),
            "FRC": round(frc, 2), "ERV": round(frc - rv, 2),
            "trials": [{"FRC": round(frc * f, 2)} for f in (1.0, 1.012, 0.991)]}
    hist = []
    for years, dz in ((4.0, 0.75), (2.5, 0.45), (1.1, 0.2)):
        a = round(age - years, 1)
        f1 = round(at_z("gli-global-2022", "FEV1", sex, a, h, -3.1 + dz), 2)
        fv = round(at_z("gli-global-2022", "FVC", sex, a, h, -1.2 + dz / 2), 2)
        d = at_z("gli-2017", "DLCO", sex, a, h, -2.2 + dz)
        y = 2026 - int(years + 0.75)
        hist.append({"test": {"date": f"{y}-{'03' if years % 1 else '10'}-1{int(years)}"},
                     "spirometry": {"pre": {"FEV1": f1, "FVC": fv}},
                     "diffusion": {"unit": "SI", "DLCO": round(d, 2)}})
    cases["copd_hyperinflation_retired_welder"] = case(
        "demo-copd-03", sex, age, h, 70.0, "2026-10-21", "breathlessness on stairs; known COPD",
        {"scenario": "Retired shipyard welder, 45 pack-years, stopped smoking 3 years ago; "
                     "followed in clinic for COPD. Obstruction with hyperinflation and air "
                     "trapping, reduced gas transfer, decline over four years. The lab sent "
                     "the raw volume-time curves of every manoeuvre (100 Hz).",
         "expected_pattern": "obstruction"},
        spirometry={"pre": {"trials": curve_trials([
                        {"vc_l": 3.50, "pef_l_s": 3.8, "curvature": 2.0, "knee_at": 0.12},
                        {"vc_l": 3.46, "pef_l_s": 3.7, "curvature": 2.05, "knee_at": 0.12},
                        {"vc_l": 3.52, "pef_l_s": 3.6, "curvature": 2.1, "knee_at": 0.13}])},
                    "post": {"trials": curve_trials([
                        {"vc_l": 3.68, "pef_l_s": 4.1, "curvature": 1.95, "knee_at": 0.12},
                        {"vc_l": 3.64, "pef_l_s": 4.0, "curvature": 1.95, "knee_at": 0.12},
                        {"vc_l": 3.70, "pef_l_s": 4.05, "curvature": 2.0, "knee_at": 0.12}])},
                    "bronchodilator": {"agent": "salbutamol", "dose": "400 microgram",
                                       "minutes_after": 20}},
        volumes=vols,
        diffusion=diffusion_block(sex, age, h, -2.2, -0.6, 14.2, rng, ivc=3.05),
        airway_resistance={"sRaw": 2.9, "unit": "kPa*s"},
        lab_reference={"sRaw": {"predicted": 0.9, "uln": 1.2, "source": "laboratory's own normal range"}},
        history=hist)
    cases["copd_hyperinflation_retired_welder"]["test"]["copd"] = True

    # 4. Chest-wall restriction: thoracic scoliosis; low VA with high KCO.
    rng = np.random.default_rng(4)
    sex, age, h = "female", 46.2, 152.0
    fev1, fvc = spiro_values(sex, age, h, -2.6, -3.0)
    dl = diffusion_block(sex, age, h, -1.4, -3.6, 13.1, rng, ivc=round(fvc * 0.96, 2))
    cases["restriction_chest_wall_bookbinder"] = case(
        "demo-cw-04", sex, age, h, 50.0, "2026-08-19", "scoliosis; exertional breathlessness",
        {"scenario": "Bookbinder with a long-standing thoracic scoliosis and breathlessness "
                     "on hills. Extraparenchymal restriction: small lungs that transfer gas "
                     "well per litre (high KCO).", "expected_pattern": "restriction"},
        spirometry={"pre": {"trials": trials(rng, fev1, fvc, pef=4.6)}},
        volumes=volumes_block(sex, age, h, -2.9, -1.3, rng=rng),
        diffusion=dl)

    # 5. Neuromuscular restriction, FVC reduced out of proportion to TLC (complex restriction).
    rng = np.random.default_rng(5)
    sex, age, h = "male", 58.4, 178.0
    fev1, fvc = spiro_values(sex, age, h, -3.3, -3.7)
    cases["restriction_neuromuscular_beekeeper"] = case(
        "demo-nm-05", sex, age, h, 77.0, "2026-11-03", "orthopnoea; proximal weakness",
        {"scenario": "Beekeeper with progressive limb weakness and orthopnoea under "
                     "neurology review. TLC mildly low while FVC is disproportionately low, "
                     "RV preserved (expiratory muscle weakness).",
         "expected_pattern": "restriction"},
        spirometry={"pre": {"trials": trials(rng, fev1, fvc, pef=5.2)}},
        volumes=volumes_block(sex, age, h, -1.9, 0.9, frc_frac=0.35, rng=rng),
        diffusion=diffusion_block(sex, age, h, -1.2, -2.1, 14.9, rng, ivc=round(fvc * 0.96, 2)))

    # 6. Parenchymal restriction with low KCO.
    rng = np.random.default_rng(6)
    sex, age, h = "male", 71.2, 170.0
    fvc = round(at_z("gli-global-2022", "FVC", sex, age, h, -2.7), 2)
    fev1 = round(fvc * 0.84, 2)
    cases["restriction_parenchymal_potter"] = case(
        "demo-ild-06", sex, age, h, 79.0, "2026-09-30", "dry cough; basal crackles",
        {"scenario": "Retired potter with a dry cough and basal crackles; CT requested. "
                     "Restriction with reduced gas transfer per litre (low KCO).",
         "expected_pattern": "restriction"},
        spirometry={"pre": {"trials": trials(rng, fev1, fvc, pef=7.9)}},
        volumes=volumes_block(sex, age, h, -2.6, -1.9, rng=rng),
        diffusion=diffusion_block(sex, age, h, -3.6, -2.4, 14.6, rng, ivc=round(fvc * 0.96, 2)))

    # 7. Mixed defect.
    rng = np.random.default_rng(7)
    sex, age, h = "female", 62.5, 160.0
    fvc = round(at_z("gli-global-2022", "FVC", sex, age, h, -2.4), 2)
    fev1 = round(fvc * 0.58, 2)
    cases["mixed_defect_baker"] = case(
        "demo-mixed-07", sex, age, h, 95.0, "2026-07-15", "breathlessness; obesity; ex-smoker",
        {"scenario": "Baker, former smoker, body-mass index near 37, breathless on one flight of "
                     "stairs. Obstruction and a low TLC together.", "expected_pattern": "mixed"},
        spirometry={"pre": {"trials": trials(rng, fev1, fvc, pef=3.9)},
                    "post": {"trials": trials(rng, round(fev1 + 0.08, 2), round(fvc + 0.06, 2))},
                    "bronchodilator": {"agent": "salbutamol", "dose": "400 microgram",
                                       "minutes_after": 15}},
        volumes=volumes_block(sex, age, h, -2.2, -0.8, rng=rng),
        diffusion=diffusion_block(sex, age, h, -1.0, -2.0, 13.6, rng, ivc=round(fvc * 0.96, 2)))

    # 8. Isolated low DLCO (normal spirometry and volumes, normal VA, low KCO).
    rng = np.random.default_rng(8)
    sex, age, h = "female", 44.9, 168.0
    fev1, fvc = spiro_values(sex, age, h, -0.3, -0.1)
    cases["isolated_low_dlco_translator"] = case(
        "demo-dlco-08", sex, age, h, 64.0, "2026-10-28", "breathlessness; Raynaud's",
        {"scenario": "Translator with Raynaud's phenomenon and unexplained exertional "
                     "breathlessness. Normal spirometry and lung volumes, low gas transfer "
                     "with preserved VA: consider a pulmonary vascular process.",
         "expected_pattern": "normal"},
        spirometry={"pre": {"trials": trials(rng, fev1, fvc, pef=6.4)}},
        volumes=volumes_block(sex, age, h, 0.1, 0.2, rng=rng),
        diffusion=diffusion_block(sex, age, h, -2.6, -0.2, 12.9, rng, unit="traditional", ivc=round(fvc * 0.96, 2)))

    # 9. PRISm: preserved ratio, reduced FEV1 and FVC, no lung volumes.
    rng = np.random.default_rng(9)
    sex, age, h = "male", 55.0, 176.0
    fev1, fvc = spiro_values(sex, age, h, -2.1, -2.2)
    cases["prism_bus_driver"] = case(
        "demo-prism-09", sex, age, h, 101.0, "2026-06-11", "screening in a smoking-cessation clinic",
        {"scenario": "Bus driver, current smoker, seen in a smoking-cessation clinic; spirometry "
                     "only. Both FEV1 and FVC reduced with a preserved ratio.",
         "expected_pattern": "PRISm"},
        spirometry={"pre": {"trials": trials(rng, fev1, fvc, pef=7.0)}})

    # 10. Non-specific pattern: low FEV1 and FVC, normal ratio, normal TLC.
    rng = np.random.default_rng(10)
    sex, age, h = "female", 38.1, 171.0
    fev1, fvc = spiro_values(sex, age, h, -2.0, -2.1)
    cases["nonspecific_gardener"] = case(
        "demo-nsp-10", sex, age, h, 68.0, "2026-05-20", "intermittent cough",
        {"scenario": "Landscape gardener with intermittent cough; lung volumes done because "
                     "spirometry was low. Non-specific pattern: FEV1 and FVC low, ratio and TLC "
                     "normal.", "expected_pattern": "non-specific"},
        spirometry={"pre": {"trials": trials(rng, fev1, fvc, pef=6.1)}},
        volumes=volumes_block(sex, age, h, -0.9, 0.4, rng=rng))
    return cases


_NUMBER_LIST = re.compile(r"\[\s+(-?[\d.eE+-]+,\s+)*-?[\d.eE+-]+\s+\]")


def _dumps(data: dict) -> str:
    """Indented JSON, with lists of numbers (raw curves) kept on one line."""
    return _NUMBER_LIST.sub(lambda m: "[" + " ".join(m.group(0)[1:-1].split()) + "]",
                            json.dumps(data, indent=2))


def main() -> None:
    OUT.mkdir(exist_ok=True)
    for name, c in build().items():
        (OUT / f"{name}.json").write_text(_dumps(c) + "\n", encoding="utf-8")
        print("wrote", OUT / f"{name}.json")


if __name__ == "__main__":
    main()
