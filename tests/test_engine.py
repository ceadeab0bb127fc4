"""End to end on a small workbook whose numbers are recomputed here from the published equations."""

from __future__ import annotations

import datetime as dt
import json
import math
import time

import openpyxl
import pytest
from scipy import stats
from typer.testing import CliRunner

from conftest import minimal_forest, minimal_tree_tco2e as tree_tco2e, project_rows, write_workbook
from verify.cli import app
from verify.engine import run
from verify.outputs import write_outputs
from verify.results_json import results_validator

runner = CliRunner()


@pytest.fixture
def result(tmp_path):
    return run(write_workbook(tmp_path / "w.xlsx", minimal_forest()), run_date=dt.date(2026, 1, 1))


def test_gross_removals_from_published_allometry(result):
    # Two identical permanent plots of 500 m2 (expansion 20 trees/ha per tree), two trees each,
    # DBH 20 -> 22 cm, in a 100 ha stratum: change = 100 ha x 20 x 2 x (tree(22) - tree(20)).
    expected = 100 * 20 * 2 * (tree_tco2e(22.0) - tree_tco2e(20.0))
    totals = result.to_dict()["totals"]
    assert totals["gross_removals_tco2e"] == pytest.approx(expected, rel=1e-12)


def test_chain_values_recomputed_by_hand(result):
    totals = result.to_dict()["totals"]
    gross = totals["gross_removals_tco2e"]
    baseline = 0.5 * 100 * 366 / 365.25          # 2024 has 366 days; Julian year 365.25 d
    emissions = 100 * 2.676 / 1000               # 100 L diesel at 2.676 kg CO2/L (GWP 1)
    net = gross - baseline - emissions
    # Identical plots: no sampling variance; Eq. 3.2 combines the baseline (20 %) and
    # emissions (5 %) half-widths only (IPCC 2006 Vol. 1 Ch. 3 Eq. 3.2).
    hw = math.hypot(baseline * 0.20, emissions * 0.05)
    buffer = 0.12 * (net - hw)
    assert totals["baseline_tco2e"] == pytest.approx(baseline)
    assert totals["project_emissions_tco2e"] == pytest.approx(emissions)
    assert totals["net_removals_tco2e"] == pytest.approx(net)
    assert totals["uncertainty_deduction_tco2e"] == pytest.approx(hw)
    assert totals["uncertainty_pct"] == pytest.approx(hw / net * 100)
    assert totals["buffer_tco2e"] == pytest.approx(buffer)
    assert totals["issuable_credits"] == math.floor(net - hw - buffer)


def test_sampling_half_width_uses_t_quantile(tmp_path):
    sheets = minimal_forest()
    # Plot P2 grows less: per-plot differences differ, so the paired estimator has variance.
    for row in sheets["Trees"][1:]:
        if row[0] == "P2" and row[1] == "end":
            row[4] = 21.0
    totals_by_plot = [20 * 2 * (tree_tco2e(22.0) - tree_tco2e(20.0)), 20 * 2 * (tree_tco2e(21.0) - tree_tco2e(20.0))]
    mean = sum(totals_by_plot) / 2
    s2 = sum((d - mean) ** 2 for d in totals_by_plot) / 1
    se = math.sqrt(100**2 * s2 / 2)                       # Cochran (1977) Eq. 5.2, no fpc
    half_width = stats.t.ppf(0.95, df=1) * se             # 90 % two-sided, df = n - 1 (scipy reference)
    document = run(write_workbook(tmp_path / "w.xlsx", sheets)).to_dict()
    assert document["strata"][0]["half_width_tco2e"] == pytest.approx(half_width)
    assert document["half_widths_tco2e"]["gross"] == pytest.approx(half_width)
    assert document["strata"][0]["df"] == pytest.approx(1.0)


def test_results_document_matches_its_schema(result):
    document = result.to_dict()
    errors = sorted(results_validator().iter_errors(document), key=str)
    assert errors == []
    assert set(document["totals"]) == {
        "gross_removals_tco2e", "baseline_tco2e", "project_emissions_tco2e", "leakage_tco2e",
        "net_removals_tco2e", "uncertainty_pct", "uncertainty_deduction_tco2e", "buffer_pct",
        "buffer_tco2e", "issuable_credits",
    }
    assert [v["vintage"] for v in document["vintages"]] == [2024]
    assert len(document["input"]["sha256"]) == 64


def test_vintages_sum_to_the_period(tmp_path):
    sheets = minimal_forest()
    sheets["Project"] = project_rows(period_start=dt.date(2023, 7, 1), period_end=dt.date(2025, 6, 30))
    document = run(write_workbook(tmp_path / "w.xlsx", sheets)).to_dict()
    vintages = document["vintages"]
    assert [(v["vintage"], v["days"]) for v in vintages] == [(2023, 184), (2024, 366), (2025, 181)]
    assert sum(v["issuable_credits"] for v in vintages) == document["totals"]["issuable_credits"]
    assert sum(v["net_removals_tco2e"] for v in vintages) == pytest.approx(document["totals"]["net_removals_tco2e"])


def test_outputs_written_and_input_untouched(tmp_path, result):
    before = result.book.path.read_bytes()
    written = write_outputs(result, tmp_path / "out", pdf=False)
    assert result.book.path.read_bytes() == before
    assert json.loads(written.json.read_text()) == result.to_dict()
    summary = openpyxl.load_workbook(written.xlsx)["Summary"]
    values = {row[0].value: row[1].value for row in summary.iter_rows()}
    assert values["Issuable credits (tCO2e, whole tonnes)"] == result.to_dict()["totals"]["issuable_credits"]
    assert [p.name for p in (tmp_path / "out").iterdir() if p.name.endswith(".part")] == []


def test_text_that_looks_like_a_formula_is_stored_as_text(tmp_path):
    path = write_workbook(tmp_path / "w.xlsx", minimal_forest())
    book = openpyxl.load_workbook(path)
    name_cell = book["Project"]["B2"]
    name_cell.value = "=HYPERLINK(\"http://example.invalid\")"
    name_cell.data_type = "s"  # text in the input, as a user typing '=... would store it
    book.save(path)
    result = run(path)
    written = write_outputs(result, tmp_path / "out", pdf=False)
    cell = openpyxl.load_workbook(written.xlsx)["Summary"]["B2"]
    assert cell.value == "=HYPERLINK(\"http://example.invalid\")"
    assert cell.data_type == "s"


def test_run_cli_refuses_invalid_workbook_and_writes_nothing(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][1][4] = -1.0
    path = write_workbook(tmp_path / "w.xlsx", sheets)
    result = runner.invoke(app, ["run", str(path), "--out", str(tmp_path / "out"), "--no-pdf"])
    assert result.exit_code == 1
    assert "Trees!E2" in result.output
    assert not (tmp_path / "out").exists()


def test_run_cli_writes_json_equal_to_library(tmp_path):
    path = write_workbook(tmp_path / "w.xlsx", minimal_forest())
    out = tmp_path / "out"
    cli = runner.invoke(app, ["run", str(path), "--out", str(out), "--no-pdf"])
    assert cli.exit_code == 0, cli.output
    written = json.loads((out / "results.json").read_text())
    library = run(path, run_date=dt.date.fromisoformat(written["tool"]["run_date"])).to_dict()
    assert written == library


def test_output_over_the_input_is_refused(tmp_path):
    path = write_workbook(tmp_path / "results.xlsx", minimal_forest())
    cli = runner.invoke(app, ["run", str(path), "--out", str(tmp_path), "--no-pdf"])
    assert cli.exit_code == 2
    assert "refusing to overwrite the input" in cli.output


def test_results_workbook_bytes_are_reproducible(tmp_path, result):
    # openpyxl stamps the clock into the archive; two writes a second apart must still match
    first = write_outputs(result, tmp_path / "a", pdf=False).xlsx.read_bytes()
    time.sleep(1.1)
    second = write_outputs(result, tmp_path / "b", pdf=False).xlsx.read_bytes()
    assert first == second
