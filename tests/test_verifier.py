"""Verifier tools: reconciliation, check plots, data-quality findings, each tied to its cell."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from conftest import minimal_forest, minimal_tree_tco2e, table, write_workbook
from verify.checkplots import bias_verdict, within_tolerance
from verify.engine import run
from verify.reconciliation import reconcile
from verify.workbook import load_workbook

CLAIM_LETTERS = {"vintage": "A", "gross_removals_tco2e": "B", "issuable_credits": "H"}


def codes_at(findings):
    return {(f.code, f.location) for f in findings}


# ---------------------------------------------------------------- reconciliation

def claims(*records):
    frame = pd.DataFrame(records)
    frame["row"] = range(2, 2 + len(frame))
    return frame


def test_reconciliation_differences_and_material_verdict():
    recomputed = [{"vintage": 2024, "gross_removals_tco2e": 1000.0, "issuable_credits": 700},
                  {"vintage": 2025, "gross_removals_tco2e": 500.0, "issuable_credits": 300}]
    result, findings = reconcile(
        claims({"vintage": 2024, "gross_removals_tco2e": 1100.0, "issuable_credits": 800},
               {"vintage": 2025, "gross_removals_tco2e": 500.0, "issuable_credits": 300}),
        recomputed, 5.0, CLAIM_LETTERS)
    first = result["rows"][0]
    # difference = claimed - recomputed, as % of the claimed figure (the claim is what is verified)
    assert (first["difference_tco2e"], first["difference_pct"]) == (100.0, pytest.approx(100 / 1100 * 100))
    assert result["misstatement_tco2e"] == 100.0
    assert result["misstatement_pct"] == pytest.approx(100 / 1100 * 100)   # 9.09 % > 5 %
    assert result["material"] is True
    assert ("claim_differs", "Claims!B2") in codes_at(findings)
    assert ("claim_differs", "Claims!H2") in codes_at(findings)
    assert ("material_misstatement", "Claims") in codes_at(findings)


def test_misstatement_at_the_threshold_is_not_material():
    # exactly 5 % of the claim: "exceeds the threshold" is required for materiality
    result, findings = reconcile(claims({"vintage": 2024, "issuable_credits": 1000}),
                                 [{"vintage": 2024, "issuable_credits": 950}], 5.0, CLAIM_LETTERS)
    assert result["misstatement_pct"] == pytest.approx(5.0)
    assert result["material"] is False
    assert findings == []


def test_claimed_vintage_outside_the_period():
    _, findings = reconcile(claims({"vintage": 2019, "issuable_credits": 10}),
                            [{"vintage": 2024, "issuable_credits": 10}], 5.0, CLAIM_LETTERS)
    assert ("claim_vintage_outside_period", "Claims!A2") in codes_at(findings)


def test_no_claims_sheet_gives_no_reconciliation(tmp_path):
    assert run(write_workbook(tmp_path / "w.xlsx", minimal_forest())).to_dict()["reconciliation"] is None


# ---------------------------------------------------------------- check plots

def test_tolerance_is_the_larger_of_absolute_and_relative():
    # 0.5 cm or 3 %: at 30 cm the relative tolerance (0.9 cm) governs, at 10 cm the absolute one
    flags = within_tolerance(np.array([30.0, 30.0, 10.0, 10.0]), np.array([30.8, 31.0, 10.5, 10.6]), 0.5, 3.0)
    assert flags.tolist() == [1.0, 0.0, 1.0, 0.0]


def check_plot_workbook(tmp_path, verifier_dbh):
    """The minimal workbook with its four end-event trees re-measured by a verifier."""
    sheets = minimal_forest()
    records = [{"plot_id": plot, "event": "end", "tree_id": tree, "dbh_cm": dbh, "height_m": 15.0}
               for (plot, tree), dbh in zip([("P1", "1"), ("P1", "2"), ("P2", "1"), ("P2", "2")], verifier_dbh)]
    sheets["CheckPlots"] = table("CheckPlots", *records)
    return write_workbook(tmp_path / "w.xlsx", sheets)


def test_check_plot_densities_and_paired_t_test_match_scipy(tmp_path):
    verifier_dbh = [21.5, 21.8, 21.0, 21.4]    # the proponent recorded 22.0 cm for all four
    document = run(check_plot_workbook(tmp_path, verifier_dbh)).to_dict()
    checks = document["check_plots"]
    # Densities from Chave et al. (2014) Eq. 4, 500 m2 plots: 20 trees/ha per tree.
    proponent = [20 * 2 * minimal_tree_tco2e(22.0)] * 2
    verifier = [20 * (minimal_tree_tco2e(21.5) + minimal_tree_tco2e(21.8)),
                20 * (minimal_tree_tco2e(21.0) + minimal_tree_tco2e(21.4))]
    assert [p["proponent_tco2e_per_ha"] for p in checks["plots"]] == pytest.approx(proponent)
    assert [p["verifier_tco2e_per_ha"] for p in checks["plots"]] == pytest.approx(verifier)
    reference = stats.ttest_rel(verifier, proponent)               # scipy reference implementation
    interval = reference.confidence_interval(confidence_level=0.90)
    assert checks["t_statistic"] == pytest.approx(reference.statistic)
    assert checks["p_value"] == pytest.approx(reference.pvalue)
    scale = 100 / np.mean(proponent)
    assert checks["bias_interval_pct"] == pytest.approx([interval.low * scale, interval.high * scale])
    # only 21.0 cm is off by more than max(0.5 cm, 3 % of 22 = 0.66 cm): 3 of 4 within
    assert checks["dbh_within_tolerance_pct"] == pytest.approx(75.0)
    outside = [f.location for f in run(check_plot_workbook(tmp_path, verifier_dbh)).findings
               if f.code == "check_dbh_outside_tolerance"]
    assert outside == ["CheckPlots!D4"]


@pytest.mark.parametrize("bias,low,high,words", [
    (0.5, -1.0, 2.0, "No significant bias"),
    (-3.5, -5.0, -2.1, "overstate the stock: the check plots hold 3.5 % less"),
    (4.0, 1.0, 7.0, "understate the stock"),
])
def test_bias_verdict_reads_the_interval(bias, low, high, words):
    assert words in bias_verdict(bias, low, high, 90.0, 6)


def test_nested_subplot_follows_the_proponents_dbh(tmp_path):
    """A re-measured DBH across the subplot threshold must not change the tree's expansion factor."""
    sheets = minimal_forest()
    for row in sheets["Plots"][1:]:
        row[5], row[6] = 100.0, 21.9       # subplot 100 m2 for DBH < 21.9 cm
    sheets["CheckPlots"] = table("CheckPlots", {"plot_id": "P1", "event": "end", "tree_id": "1", "dbh_cm": 21.8},
                                 {"plot_id": "P2", "event": "end", "tree_id": "1", "dbh_cm": 21.8})
    checks = run(write_workbook(tmp_path / "w.xlsx", sheets)).to_dict()["check_plots"]
    # both trees were recorded at 22.0 cm (main plot, 20 trees/ha): the verifier's tree keeps 20/ha
    assert checks["plots"][0]["verifier_tco2e_per_ha"] == pytest.approx(20 * minimal_tree_tco2e(21.8))


# ---------------------------------------------------------------- data quality

def trees_with(**changes):
    """The minimal workbook with Trees cells changed: {(row, column index): value}."""
    sheets = minimal_forest()
    for (row, col), value in changes["cells"].items():
        sheets["Trees"][row - 1][col] = value
    return sheets


def test_implausible_growth_and_shrinkage(tmp_path):
    # Trees rows: 2-3 P1 start, 4-5 P1 end, 6-7 P2 start, 8-9 P2 end (trees 1 and 2)
    sheets = trees_with(cells={(4, 4): 40.0, (5, 4): 18.0})
    findings = codes_at(load_workbook(write_workbook(tmp_path / "w.xlsx", sheets)).findings)
    assert ("implausible_growth", "Trees!E4") in findings      # 20 -> 40 cm in under a year
    assert ("implausible_shrinkage", "Trees!E5") in findings   # 20 -> 18 cm, beyond 1 cm / 5 %


def test_dead_tree_alive_again(tmp_path):
    sheets = trees_with(cells={(2, 6): "dead"})
    findings = codes_at(load_workbook(write_workbook(tmp_path / "w.xlsx", sheets)).findings)
    assert ("dead_tree_alive_again", "Trees!G4") in findings


def test_implausible_height_ratio(tmp_path):
    sheets = trees_with(cells={(3, 5): 60.0})   # 60 m on a 20 cm stem: height/diameter 300
    findings = codes_at(load_workbook(write_workbook(tmp_path / "w.xlsx", sheets)).findings)
    assert ("implausible_height_ratio", "Trees!F3") in findings


def test_plot_without_trees(tmp_path):
    sheets = minimal_forest()
    sheets["Plots"].append(["P3", "S1", "end", dt.date(2024, 12, 20), 500.0, None, None])
    sheets["Plots"].append(["P3", "S1", "start", dt.date(2024, 1, 10), 500.0, None, None])
    findings = codes_at(load_workbook(write_workbook(tmp_path / "w.xlsx", sheets)).findings)
    assert ("plot_without_trees", "Plots!A6") in findings
    assert ("plot_without_trees", "Plots!A7") in findings


def test_event_outside_the_period(tmp_path):
    sheets = minimal_forest()
    sheets["Plots"][1][3] = dt.date(2023, 6, 1)   # 214 days before period_start, grace 90 days
    findings = codes_at(load_workbook(write_workbook(tmp_path / "w.xlsx", sheets)).findings)
    assert ("event_outside_period", "Plots!D2") in findings


def test_stratum_with_fewer_than_two_plots_is_an_error(tmp_path):
    sheets = minimal_forest()
    sheets["Strata"].append(["S2", 50.0, "second"])
    sheets["Baseline"].append(["S2", 0.0, 0.0, None])
    sheets["Plots"][3][1] = "S2"                  # P2 start moves to S2; P2 end stays in S1
    book = load_workbook(write_workbook(tmp_path / "w.xlsx", sheets))
    assert not book.ok
    assert ("too_few_plots", "Strata!A2") in codes_at(book.findings)
    assert ("too_few_plots", "Strata!A3") in codes_at(book.findings)
