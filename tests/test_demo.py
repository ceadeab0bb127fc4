"""The bundled fictional demo: pinned headline figures, every output, reproducible input."""

from __future__ import annotations

import hashlib
import importlib.util
import json
import sys
from pathlib import Path

import pytest
from pypdf import PdfReader
from typer.testing import CliRunner

from verify.cli import app
from verify.engine import run
from verify.results_json import results_validator

DEMO = Path(__file__).resolve().parents[1] / "demo_projects" / "forest_demo.xlsx"


@pytest.fixture(scope="module")
def document():
    return run(DEMO).to_dict()


def test_demo_headline_figures_are_pinned(document):
    # Pinned when the demo was generated; a change here is a change of the engine's numbers
    # and must be explained in the change that makes it.
    totals = document["totals"]
    assert totals["issuable_credits"] == 16030
    assert totals["net_removals_tco2e"] == pytest.approx(21895.2, abs=0.05)
    assert totals["gross_removals_tco2e"] == pytest.approx(24450.2, abs=0.05)
    assert totals["buffer_pct"] == 15.0
    assert [(v["vintage"], v["issuable_credits"]) for v in document["vintages"]] == [
        (2023, 4035), (2024, 8026), (2025, 3969)]
    assert [s["estimator"] for s in document["strata"]] == ["paired", "paired", "independent"]


def test_demo_shows_the_verifier_tools(document):
    assert document["reconciliation"]["material"] is True
    assert document["reconciliation"]["misstatement_tco2e"] == 17795 - 16030
    assert document["check_plots"]["n_plots"] == 6
    assert "overstate" in document["check_plots"]["verdict"]
    assert not any(f["severity"] == "error" for f in document["findings"])


def test_demo_results_match_the_schema(document):
    assert list(results_validator().iter_errors(document)) == []


def test_demo_workbook_is_what_its_generator_writes(tmp_path):
    spec = importlib.util.spec_from_file_location("make_forest_demo", DEMO.with_name("make_forest_demo.py"))
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses resolve their module while being built
    spec.loader.exec_module(module)
    regenerated = module.write_demo(tmp_path / "demo.xlsx")
    assert hashlib.sha256(regenerated.read_bytes()).hexdigest() == hashlib.sha256(DEMO.read_bytes()).hexdigest()


def test_verify_demo_writes_all_three_outputs(tmp_path):
    result = CliRunner().invoke(app, ["demo", "--out", str(tmp_path)])
    assert result.exit_code == 0, result.output
    written = json.loads((tmp_path / "results.json").read_text())
    assert written["totals"]["issuable_credits"] == 16030
    text = "".join(page.extract_text() for page in PdfReader(tmp_path / "summary.pdf").pages)
    assert "16,030" in text
    assert "not an assurance opinion" in text
    assert (tmp_path / "results.xlsx").stat().st_size > 0
    assert f"wrote {tmp_path / 'summary.pdf'}" in result.output
