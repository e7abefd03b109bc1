"""The command line contract (design.md §4): outputs, and exit 2 with one line on bad input."""

from __future__ import annotations

import json
import math
import subprocess
import sys

import pytest

import pftwork
from pftwork.cli import main
from pftwork.reference import reference_values


def run_cli(*args: str) -> subprocess.CompletedProcess:
    """Run ``python -m pftwork.cli`` in a subprocess, as a user would."""
    return subprocess.run([sys.executable, "-m", "pftwork.cli", *args], capture_output=True,
                          text=True, timeout=120)


class TestInterpret:
    """``pftwork interpret``."""

    def test_json_values_match_the_reference_engine(self, capsys):
        """Every value printed equals a direct reference-engine computation (GLI Global 2022)."""
        path = pftwork.data_path("copd_hyperinflation_retired_welder")
        case = pftwork.load_case(path)

        assert 0 == main(["interpret", str(path), "--json"])
        doc = json.loads(capsys.readouterr().out)

        fev1 = doc["values"]["pre"]["FEV1"]
        direct = reference_values("gli-global-2022", "FEV1", "male", case.subject.age_years,
                                  case.subject.height_cm, measured=fev1["measured"])
        assert math.isclose(fev1["predicted"], float(direct.predicted), rel_tol=1e-12)
        assert math.isclose(fev1["lln"], float(direct.lln), rel_tol=1e-12)
        assert math.isclose(fev1["z"], float(direct.z), rel_tol=1e-12)
        assert "pftwork-interpretation/1" == doc["format"]
        assert {"FEV1", "FVC", "FEV1/FVC"} <= set(doc["values"]["pre"])
        assert {"TLC", "RV", "RV/TLC"} <= set(doc["values"]["volumes"])
        assert {"DLCO", "KCO", "VA"} <= set(doc["values"]["diffusion"])

    def test_every_demo_case_interprets(self, capsys):
        """Each bundled demo case gives a JSON document with the contract's summary keys."""
        keys = {"pattern", "obstruction", "obstruction_severity", "restriction", "hyperinflation",
                "air_trapping", "dlco", "kco", "bdr", "bdr_2005", "borderline"}
        for path in pftwork.demo_cases():
            assert 0 == main(["interpret", str(path), "--json"])
            doc = json.loads(capsys.readouterr().out)
            assert keys <= set(doc["summary"]), path.name

    def test_readable_form_shows_values_and_steps(self, capsys):
        """The readable form prints the value table and the step chain with the cautions."""
        assert 0 == main(["interpret", str(pftwork.data_path("normal_harbour_pilot"))])
        out = capsys.readouterr().out

        assert "FEV1/FVC" in out
        assert "LLN" in out
        assert "signing physician" in out

    def test_equations_option(self, capsys):
        """--equations gli-2012 switches the spirometry set and the document says so."""
        path = str(pftwork.data_path("normal_harbour_pilot"))

        assert 0 == main(["interpret", path, "--json", "--equations", "gli-2012"])
        assert "gli-2012" == json.loads(capsys.readouterr().out)["equations"]["spirometry"]


class TestErrors:
    """Bad input exits 2 with one line on stderr naming field, value and expectation."""

    def test_value_in_wrong_unit(self, tmp_path):
        """An FVC entered in mL is refused with the field named (issue #2 example)."""
        raw = json.loads(pftwork.data_path("prism_bus_driver").read_text())
        raw["spirometry"]["pre"]["trials"][0]["FVC"] = 2600
        path = tmp_path / "bad.json"
        path.write_text(json.dumps(raw))

        result = run_cli("interpret", str(path))

        assert 2 == result.returncode
        lines = result.stderr.strip().splitlines()
        assert 1 == len(lines)
        assert "spirometry.pre.trials[0].FVC = 2600" in lines[0]
        assert "was this entered in mL?" in lines[0]
        assert "Traceback" not in result.stderr

    def test_missing_file(self, tmp_path):
        """A missing case file is named, exit 2."""
        result = run_cli("interpret", str(tmp_path / "nope.json"))

        assert 2 == result.returncode
        assert "nope.json" in result.stderr
        assert "Traceback" not in result.stderr

    @pytest.mark.parametrize("bad", ["gli-2099", "GLI-2012"])
    def test_unknown_equation_set(self, bad):
        """An unknown equation set id is named with the valid ones."""
        result = run_cli("interpret", str(pftwork.data_path("normal_harbour_pilot")),
                         "--equations", bad)

        assert 2 == result.returncode
        assert bad in result.stderr
        assert "gli-global-2022" in result.stderr
        assert "Traceback" not in result.stderr
