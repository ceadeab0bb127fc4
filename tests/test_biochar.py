"""Biochar pathway: F_perm classes, H/Corg route, period rule, uncertainty, demo run.

F_perm values are those of IPCC 2019 Refinement Vol. 4 Ch. 2 Appendix 4
(Table 4A.2; values from memory, check against the source) and of
Camps-Arbestain et al. (2015) (values from memory); uncertainties combine by
IPCC 2006 Guidelines Vol. 1 Ch. 3 Eqs. 3.1 and 3.2, recomputed here by hand.
"""

from __future__ import annotations

import datetime as dt
import json
import math
from pathlib import Path

import pytest
from scipy import stats

from conftest import project_rows, table, write_workbook
from verify import biochar
from verify.engine import run
from verify.results_json import results_validator
from verify.workbook import load_workbook

REPO = Path(__file__).resolve().parents[1]
CO2_PER_C = 44.0 / 12.0  # ratio of molecular weights, IPCC 2006 Guidelines Vol. 4


def batch(batch_id: str, **values) -> dict:
    record = {"batch_id": batch_id, "produced_on": dt.date(2024, 2, 1), "feedstock": "wood chips",
              "dry_mass_t": 10.0, "organic_carbon_pct": 80.0, "pyrolysis_temp_c": 650.0,
              "end_use": "soil amendment", "applied_on": dt.date(2024, 3, 1)}
    record.update(values)
    return record


def biochar_sheets(*batches: dict, **project) -> dict:
    return {"Project": project_rows(pathway="biochar", **project), "Batches": table("Batches", *batches)}


def run_sheets(tmp_path: Path, sheets: dict):
    return run(write_workbook(tmp_path / "biochar.xlsx", sheets), run_date=dt.date(2026, 1, 1))


# ---------------------------------------------------------------- F_perm


@pytest.mark.parametrize(
    ("temp_c", "f_perm", "uncertainty_pct"),
    [
        # IPCC 2019 Refinement Vol. 4 Ch. 2 Appendix 4, Table 4A.2 (from memory):
        (700.0, 0.89, 13.0),   # high temperature, > 600 C
        (600.0, 0.80, 11.0),   # medium, 450-600 C (boundary takes the lower class)
        (500.0, 0.80, 11.0),
        (450.0, 0.65, 15.0),   # low, 350-450 C (boundary takes the lower class)
        (350.0, 0.65, 15.0),
    ],
)
def test_f_perm_temperature_classes(temp_c, f_perm, uncertainty_pct):
    found = biochar.temperature_class(temp_c)
    assert (found.f_perm, found.uncertainty_pct) == (f_perm, uncertainty_pct)


def test_below_350_c_is_not_eligible(tmp_path):
    assert biochar.temperature_class(349.0) is None
    result = run_sheets(tmp_path, biochar_sheets(batch("B1"), batch("B2", pyrolysis_temp_c=320.0)))
    # Only B1 counts: 10 t x 80 % x 0.89 x 44/12.
    assert result.to_dict()["totals"]["gross_removals_tco2e"] == pytest.approx(10 * 0.8 * 0.89 * CO2_PER_C)
    assert [(f.severity, f.location) for f in result.findings if f.code == "biochar_not_eligible"] == [
        ("warning", "Batches!G3")
    ]


@pytest.mark.parametrize(
    ("h_corg", "f_perm"),
    # Camps-Arbestain et al. (2015): 70 % of Corg stable for 100 years below H/Corg 0.4,
    # 50 % from 0.4 to below 0.7, not biochar from 0.7 (values from memory).
    [(0.25, 0.70), (0.39, 0.70), (0.40, 0.50), (0.69, 0.50)],
)
def test_h_corg_classes(h_corg, f_perm):
    assert biochar.h_corg_class(h_corg).f_perm == f_perm


def test_h_corg_route_replaces_the_temperature_class(tmp_path):
    result = run_sheets(tmp_path, biochar_sheets(
        batch("B1", h_corg_molar=0.3), batch("B2", h_corg_molar=0.75)))
    document = result.to_dict()
    # B1: 10 t x 80 % x 0.70 (H/Corg < 0.4) x 44/12 = 20.5333 tCO2e; B2 is not biochar.
    assert document["totals"]["gross_removals_tco2e"] == pytest.approx(10 * 0.8 * 0.70 * CO2_PER_C)
    assert document["totals"]["gross_removals_tco2e"] == pytest.approx(20.5333, abs=1e-4)
    assert [(f.severity, f.location) for f in result.findings if f.code == "biochar_not_eligible"] == [
        ("warning", "Batches!F3")
    ]
    sources = " ".join(m["source"] for m in document["methods"])
    assert "Camps-Arbestain" in sources


# ---------------------------------------------------------------- the period


def test_batches_outside_the_period_or_not_applied_are_excluded(tmp_path):
    result = run_sheets(tmp_path, biochar_sheets(
        batch("B1"),
        batch("B2", applied_on=dt.date(2025, 1, 1)),    # the day after period_end
        batch("B3", applied_on=None),
        batch("B4", applied_on=dt.date(2024, 12, 31)),  # period_end itself counts
    ))
    assert result.to_dict()["totals"]["gross_removals_tco2e"] == pytest.approx(2 * 10 * 0.8 * 0.89 * CO2_PER_C)
    notes = {(f.code, f.location) for f in result.findings if f.severity == "note" and f.code.startswith("batch_")}
    assert notes == {("batch_applied_outside_period", "Batches!I3"), ("batch_not_applied", "Batches!I4")}


def test_application_before_production_is_an_error(tmp_path):
    sheets = biochar_sheets(batch("B1", applied_on=dt.date(2024, 1, 15)))
    book = load_workbook(write_workbook(tmp_path / "bad.xlsx", sheets))
    assert ("batch_applied_before_production", "Batches!I2") in {(f.code, f.location) for f in book.findings}


# ---------------------------------------------------------------- uncertainty


def test_uncertainty_by_eqs_3_1_and_3_2(tmp_path):
    result = run_sheets(tmp_path, biochar_sheets(
        batch("B1"),                                                   # defaults: 5 % and 10 %
        batch("B2", dry_mass_t=20.0, dry_mass_uncertainty_pct=2.0, organic_carbon_uncertainty_pct=4.0),
        batch("B3", pyrolysis_temp_c=500.0),
    ))
    # High class: organic C 8 t (u = sqrt(5^2 + 10^2) %) and 16 t (u = sqrt(2^2 + 4^2) %);
    # sum 24 t with hw = sqrt((8 x 0.1118)^2 + (16 x 0.04472)^2) (Eq. 3.1 then Eq. 3.2),
    # then x F_perm 0.89 whose 13 % is added once (Eq. 3.1).
    carbon_hw = math.hypot(8 * math.hypot(5, 10) / 100, 16 * math.hypot(2, 4) / 100)
    high_u = math.hypot(carbon_hw / 24 * 100, 13.0)
    high = 24 * 0.89 * CO2_PER_C
    # Medium class: one batch, 8 t x 0.80, u = sqrt(5^2 + 10^2 + 11^2) % (Eq. 3.1).
    medium = 8 * 0.80 * CO2_PER_C
    medium_u = math.sqrt(5**2 + 10**2 + 11**2)
    hw = math.hypot(high * high_u / 100, medium * medium_u / 100)  # Eq. 3.2 over the classes
    document = result.to_dict()
    assert document["totals"]["gross_removals_tco2e"] == pytest.approx(high + medium)
    assert document["half_widths_tco2e"]["gross"] == pytest.approx(hw)
    # Standard error for the chain's Monte Carlo: hw / z, z the normal quantile (scipy reference).
    assert result.estimate.gross.standard_error_tco2e == pytest.approx(hw / stats.norm.ppf(0.95))
    assert result.estimate.gross.df is None


def test_default_uncertainties_match_the_schema():
    schema = json.loads((REPO / "schemas" / "Batches.schema.json").read_text())["properties"]
    assert schema["dry_mass_uncertainty_pct"]["default"] == biochar.DEFAULT_DRY_MASS_UNCERTAINTY_PCT
    assert schema["organic_carbon_uncertainty_pct"]["default"] == biochar.DEFAULT_ORGANIC_CARBON_UNCERTAINTY_PCT


def test_monte_carlo_runs_on_biochar(tmp_path):
    result = run_sheets(tmp_path, biochar_sheets(
        batch("B1"), uncertainty_method="monte_carlo", monte_carlo_draws=2000))
    monte_carlo = result.to_dict()["monte_carlo"]
    assert monte_carlo["draws"] == 2000
    assert monte_carlo["lower_tco2e"] < result.to_dict()["totals"]["net_removals_tco2e"] < monte_carlo["upper_tco2e"]


# ---------------------------------------------------------------- the demo


def test_biochar_demo_headline_figures():
    result = run(REPO / "demo_projects" / "biochar_demo.xlsx", run_date=dt.date(2026, 1, 1))
    assert result.ok
    document = result.to_dict()
    # Pinned from the seeded demo (regression guard, not an outside reference).
    assert document["totals"]["issuable_credits"] == 1041
    assert document["totals"]["net_removals_tco2e"] == pytest.approx(1266.5, abs=0.1)
    assert document["totals"]["baseline_tco2e"] == 0.0  # no Baseline rows: zero
    assert document["strata"] == []
    assert sorted(results_validator().iter_errors(document), key=str) == []


def test_biochar_demo_generator_is_deterministic(tmp_path):
    from verify.demo_projects import make_biochar_demo

    regenerated = make_biochar_demo.write_demo(tmp_path / "demo.xlsx")
    assert regenerated.read_bytes() == (REPO / "demo_projects" / "biochar_demo.xlsx").read_bytes()
