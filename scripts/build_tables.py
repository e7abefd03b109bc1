"""Build pftwork's compact GLI tables (``pftwork/tables/*.json``) from the pyspiro distribution.

The GLI coefficients and age-spline look-up tables are published figures (see the citations in
``SETS`` below). This script reads the copies shipped as data in the MIT-licensed PyPI package
``pyspiro`` 1.0.0 and rewrites them in pftwork's own layout: one JSON file per equation set with

* ``header``: citation, DOI, the distribution and files read, their sha256, and
  ``content_sha256`` — the sha256 of the canonical JSON of ``content`` (see
  :func:`pftwork.tables.content_sha256`), which the engine re-checks on load and exposes as
  ``EquationSet.table_sha256``;
* ``content``: parameters, published age ranges, equation forms, coefficients and spline columns.

Only pyspiro's CSV files are read (``pyspiro.data``); none of its code is run. Run with the
project's virtualenv::

    python scripts/build_tables.py            # rewrite pftwork/tables/*.json
    python scripts/build_tables.py --check    # exit 1 if a checked-in table differs
"""

from __future__ import annotations

import argparse
import csv
import hashlib
import io
import json
import math
import sys
from importlib import metadata, resources
from pathlib import Path
from typing import Any

from pftwork.tables import TABLE_FORMAT, content_sha256

OUT_DIR = Path(__file__).resolve().parent.parent / "pftwork" / "tables"
DISTRIBUTION = "pyspiro"
EXPECTED_VERSION = "1.0.0"
AGE_STEP = 0.25
SEXES = (("female", "females"), ("male", "males"))

# Each parameter: (pftwork name, pyspiro column stem, unit or None, published age range,
# M form, S form, L form, model-to-API scale, restriction or None).
# Forms: M = exp(a0 + a1*H(height) + a2*A(age) + ancestry + Mspline);
#        S = exp(p0 + p1*A(age) + ancestry + Sspline);  L = q0 + q1*ln(age) + Lspline.
LOG, LIN = "log", "linear"

SETS: dict[str, dict[str, Any]] = {
    "gli-global-2022": {
        "title": "GLI Global (race-neutral) spirometry, 2022",
        "citation": (
            "Bowerman C, Bhakta NR, Brazzale D, et al. A race-neutral approach to the "
            "interpretation of lung function measurements. Am J Respir Crit Care Med "
            "2023;207(6):768-774."
        ),
        "doi": "10.1164/rccm.202205-0963OC",
        "erratum": None,
        "stem": "bowerman_2022",
        "ancestry_terms": False,
        "parameters": [
            ("FEV1", "FEV1", None, (3.0, 95.0), (LOG, LOG), LOG, False, 1.0, None),
            ("FVC", "FVC", None, (3.0, 95.0), (LOG, LOG), LOG, False, 1.0, None),
            ("FEV1/FVC", "FEV1FVC", None, (3.0, 95.0), (LOG, LOG), LOG, True, 1.0, None),
        ],
    },
    "gli-2012": {
        "title": "GLI-2012 multi-ethnic spirometry",
        "citation": (
            "Quanjer PH, Stanojevic S, Cole TJ, et al. Multi-ethnic reference values for "
            "spirometry for the 3-95-yr age range: the global lung function 2012 equations. "
            "Eur Respir J 2012;40(6):1324-1343."
        ),
        "doi": "10.1183/09031936.00080312",
        "erratum": None,
        "stem": "gli_2012",
        "ancestry_terms": True,
        "parameters": [
            ("FEV1", "FEV1", None, (3.0, 95.0), (LOG, LOG), LOG, True, 1.0, None),
            ("FVC", "FVC", None, (3.0, 95.0), (LOG, LOG), LOG, True, 1.0, None),
            ("FEV1/FVC", "FEV1FVC", None, (3.0, 95.0), (LOG, LOG), LOG, True, 1.0, None),
            ("FEF25_75", "FEF25_75", None, (3.0, 90.0), (LOG, LOG), LOG, True, 1.0, None),
            ("FEF75", "FEF75", None, (3.0, 90.0), (LOG, LOG), LOG, True, 1.0, None),
            # Equation-only (no spline table), published for Caucasian (european) 3-7 y only.
            # FEV0.75 uses age itself, FEV0.75/FVC ln(age) (as in the GLI look-up workbook).
            ("FEV0_75", "FEV075", None, (3.0, 7.0), (LOG, LIN), LIN, False, 1.0,
             {"ancestry": ["european"], "age": [3.0, 7.0]}),
            ("FEV0_75/FVC", "FEV075FVC", None, (3.0, 7.0), (LOG, LOG), LOG, False, 1.0,
             {"ancestry": ["european"], "age": [3.0, 7.0]}),
        ],
    },
    "gli-2017": {
        "title": "GLI TLCO (DLCO, KCO, VA), 2017 with the 2020 correction",
        "citation": (
            "Stanojevic S, Graham BL, Cooper BG, et al. Official ERS technical standards: Global "
            "Lung Function Initiative reference values for the carbon monoxide transfer factor "
            "for Caucasians. Eur Respir J 2017;50(3):1700010. Erratum: Eur Respir J "
            "2020;56(4):1750010."
        ),
        "doi": "10.1183/13993003.00010-2017",
        "erratum": "10.1183/13993003.50010-2017",
        "stem": "gli_2017",
        "ancestry_terms": False,
        # Published range 5-85 y; the look-up table itself runs to 90 y.
        "parameters": [
            ("DLCO", "TLCO", "SI", (5.0, 85.0), (LOG, LOG), LOG, False, 1.0, None),
            ("DLCO", "DLCO", "traditional", (5.0, 85.0), (LOG, LOG), LOG, False, 1.0, None),
            ("KCO", "KCO_SI", "SI", (5.0, 85.0), (LOG, LOG), LOG, False, 1.0, None),
            ("KCO", "KCO_trad", "traditional", (5.0, 85.0), (LOG, LOG), LOG, False, 1.0, None),
            ("VA", "VA", None, (5.0, 85.0), (LOG, LOG), LOG, False, 1.0, None),
        ],
    },
    "gli-2021": {
        "title": "GLI static lung volumes, 2021 (European ancestry)",
        "citation": (
            "Hall GL, Filipow N, Ruppel G, et al. Official ERS technical standard: Global Lung "
            "Function Initiative reference values for static lung volumes in individuals of "
            "European ancestry. Eur Respir J 2021;57(3):2000289."
        ),
        "doi": "10.1183/13993003.00289-2020",
        "erratum": None,
        "stem": "gli_2021",
        "ancestry_terms": False,
        # this source's columns: a1 = age coefficient, a2 = height coefficient
        "m_columns": {"age": "a1", "height": "a2"},
        # M forms (height, age) and S age form as printed in Hall 2021 table 3 (standards.md 1.6.1).
        "parameters": [
            ("TLC", "TLC", None, (5.0, 80.0), (LOG, LOG), LIN, False, 1.0, None),
            ("FRC", "FRC", None, (5.0, 80.0), (LOG, LOG), LOG, False, 1.0, None),
            ("RV", "RV", None, (5.0, 80.0), (LIN, LIN), LIN, False, 1.0, None),
            # modelled in percent; pftwork's API uses fractions
            ("RV/TLC", "RV_TLC", None, (5.0, 80.0), (LIN, LIN), LIN, False, 0.01, None),
            ("ERV", "ERV", None, (5.0, 80.0), (LOG, LIN), LIN, False, 1.0, None),
            ("IC", "IC", None, (5.0, 80.0), (LOG, LIN), LIN, False, 1.0, None),
            ("VC", "VC", None, (5.0, 80.0), (LOG, LIN), LIN, False, 1.0, None),
        ],
    },
}

ANCESTRY_M = {"african_american": "a3", "north_east_asian": "a4", "south_east_asian": "a5", "other": "a6"}
ANCESTRY_S = {"african_american": "p2", "north_east_asian": "p3", "south_east_asian": "p4", "other": "p5"}


def _read_source(name: str) -> tuple[bytes, str]:
    data = (resources.files("pyspiro") / "data" / name).read_bytes()
    return data, f"pyspiro/data/{name}"


def _rows(data: bytes) -> list[dict[str, str]]:
    text = data.decode("utf-8")
    reader = csv.DictReader(io.StringIO(text), delimiter=";")
    return [dict(r) for r in reader]


def _number(text: str | None) -> float | None:
    if text is None or text.strip() in ("", "NA"):
        return None
    value = float(text)
    if not math.isfinite(value):
        raise ValueError(f"non-finite number {text!r} in source table")
    return value


def _coefficients(rows: list[dict[str, str]]) -> dict[str, dict[str, float | None]]:
    """``{column: {var: value}}`` from a coefficient CSV (``var`` column, one column per model)."""
    table: dict[str, dict[str, float | None]] = {}
    for row in rows:
        var = row["var"]
        for column, text in row.items():
            if column in ("var", "") or column is None:
                continue
            table.setdefault(column, {})[var] = _number(text)
    return table


def _spline_columns(rows: list[dict[str, str]], prefix: str) -> tuple[float, int, dict[str, Any]]:
    """Ages and spline columns of one model; the age grid is checked to be uniform."""
    ages: list[float] = []
    cols: dict[str, list[float | None]] = {"M": [], "S": [], "L": []}
    for row in rows:
        values = {k: _number(row.get(f"{prefix}_{k}spline")) for k in cols}
        if values["M"] is None:
            continue  # the model's table ends earlier (GLI-2012 FEF25-75/FEF75: 90 y)
        ages.append(float(row["age"]))
        for k, v in values.items():
            cols[k].append(v)
    for a, b in zip(ages[:-1], ages[1:], strict=True):
        if abs((b - a) - AGE_STEP) > 1e-12:
            raise ValueError(f"{prefix}: age grid not uniform at {a} -> {b}")
    splines: dict[str, Any] = {}
    for k, values in cols.items():
        if all(v is None for v in values) or all(v == 0.0 for v in values):
            splines[k] = None  # no spline term in this part of the model
        elif any(v is None for v in values):
            raise ValueError(f"{prefix}: {k}spline has gaps")
        else:
            splines[k] = values
    return ages[0], len(ages), splines


def _model(spec: dict[str, Any], param: tuple, sex: str, sex_label: str,
           coeffs: dict[str, dict[str, float | None]], spline_rows: list[dict[str, str]]) -> dict[str, Any]:
    name, stem, unit, _age_range, (h_form, a_form), s_form, l_log_age, scale, restriction = param
    column = f"{stem}_{sex_label}"
    c = coeffs[column]
    m_cols = spec.get("m_columns", {"height": "a1", "age": "a2"})

    def get(key: str) -> float:
        value = c.get(key)
        return 0.0 if value is None else value

    model: dict[str, Any] = {
        "parameter": name,
        "unit": unit,
        "sex": sex,
        "scale": scale,
        "m": {"intercept": get("a0"), "height": get(m_cols["height"]), "height_form": h_form,
              "age": get(m_cols["age"]), "age_form": a_form},
        "s": {"intercept": get("p0"), "age": get("p1"), "age_form": s_form},
        "l": {"intercept": get("q0"), "log_age": get("q1") if l_log_age else 0.0},
        "restriction": restriction,
    }
    if spec["ancestry_terms"] and restriction is None:
        model["m"]["ancestry"] = {k: get(v) for k, v in ANCESTRY_M.items()}
        model["s"]["ancestry"] = {k: get(v) for k, v in ANCESTRY_S.items()}
    if restriction is None:
        start, count, splines = _spline_columns(spline_rows, column)
        model["grid"] = {"start": start, "step": AGE_STEP, "count": count}
        model["splines"] = splines
    else:
        model["grid"] = None
        model["splines"] = {"M": None, "S": None, "L": None}
    return model


def build(set_id: str) -> dict[str, Any]:
    """The JSON document of one equation set."""
    spec = SETS[set_id]
    version = metadata.version(DISTRIBUTION)
    if version != EXPECTED_VERSION:
        raise SystemExit(f"{DISTRIBUTION} {version} installed; this script reads {EXPECTED_VERSION}")
    coef_bytes, coef_path = _read_source(f"{spec['stem']}_coefficients.csv")
    spl_bytes, spl_path = _read_source(f"{spec['stem']}_splines.csv")
    coeffs = _coefficients(_rows(coef_bytes))
    spline_rows = _rows(spl_bytes)
    models = [
        _model(spec, param, sex, label, coeffs, spline_rows)
        for param in spec["parameters"]
        for sex, label in SEXES
    ]
    parameters: list[str] = []
    for p in spec["parameters"]:
        if p[0] not in parameters:
            parameters.append(p[0])
    content = {
        "set": set_id,
        "parameters": parameters,
        "age_ranges": {p[0]: list(p[3]) for p in spec["parameters"]},
        "ancestries": (["european", *ANCESTRY_M] if spec["ancestry_terms"] else []),
        "models": models,
    }
    source = f"{DISTRIBUTION} {version}, {coef_path} + {spl_path}"
    header = {
        "id": set_id,
        "title": spec["title"],
        "citation": spec["citation"],
        "doi": spec["doi"],
        "erratum_doi": spec["erratum"],
        "source": source,
        "source_files": [
            {"distribution": f"{DISTRIBUTION} {version}", "path": coef_path,
             "sha256": hashlib.sha256(coef_bytes).hexdigest()},
            {"distribution": f"{DISTRIBUTION} {version}", "path": spl_path,
             "sha256": hashlib.sha256(spl_bytes).hexdigest()},
        ],
        "content_sha256": content_sha256(content),
        "content_sha256_method": (
            "sha256 of json.dumps(content, sort_keys=True, separators=(',', ':'), "
            "allow_nan=False) encoded as UTF-8"
        ),
        "built_by": "scripts/build_tables.py",
    }
    return {"format": TABLE_FORMAT, "header": header, "content": content}


def render(document: dict[str, Any]) -> str:
    """The file text: header readable, content compact (one model per line)."""
    header = json.dumps(document["header"], indent=2, sort_keys=True)
    content = document["content"]
    lines = [f'  "format": {json.dumps(document["format"])},',
             '  "header": ' + header.replace("\n", "\n  ") + ",",
             '  "content": {']
    keys = sorted(content)
    for i, key in enumerate(keys):
        comma = "," if i < len(keys) - 1 else ""
        if key == "models":
            inner = ",\n".join("    " + json.dumps(m, sort_keys=True, separators=(",", ":"))
                               for m in content[key])
            lines.append(f'   "models": [\n{inner}\n   ]{comma}')
        else:
            lines.append(f"   {json.dumps(key)}: "
                         f"{json.dumps(content[key], sort_keys=True)}{comma}")
    lines.append("  }")
    return "{\n" + "\n".join(lines) + "\n}\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--check", action="store_true", help="compare with the checked-in tables")
    parser.add_argument("--out", type=Path, default=OUT_DIR, help="output folder")
    args = parser.parse_args(argv)
    status = 0
    for set_id in SETS:
        text = render(build(set_id))
        path = args.out / f"{set_id}.json"
        if args.check:
            if not path.exists() or path.read_text(encoding="utf-8") != text:
                print(f"differs: {path}")
                status = 1
        else:
            path.write_text(text, encoding="utf-8")
            print(f"wrote {path} ({len(text)} bytes)")
    return status


if __name__ == "__main__":
    sys.exit(main())
