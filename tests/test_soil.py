"""Soil pathway: layer stocks, common depth, equivalent soil mass, layer checks, demo run.

Expected values are computed by hand in the comments from the published
equations named beside them; numpy.interp is the reference implementation of
linear interpolation and scipy.stats.t of the t quantile.
"""

from __future__ import annotations

import datetime as dt
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from conftest import project_rows, table, write_workbook
from verify import soil
from verify.engine import run
from verify.results_json import results_validator
from verify.workbook import load_workbook

REPO = Path(__file__).resolve().parents[1]
CO2_PER_C = 44.0 / 12.0  # ratio of molecular weights, IPCC 2006 Guidelines Vol. 4

START, END = dt.date(2024, 1, 15), dt.date(2024, 12, 10)

# Two points, two events, layers 0-10 and 10-30 cm, no coarse fragments.
# (point, event): ((soc_pct, bulk_density_g_cm3) of 0-10 cm, (same) of 10-30 cm)
LAYERS = {
    ("P1", "start"): ((2.0, 1.2), (1.0, 1.4)),
    ("P2", "start"): ((3.0, 1.0), (1.5, 1.3)),
    ("P1", "end"): ((2.4, 1.1), (1.0, 1.4)),
    ("P2", "end"): ((3.2, 1.0), (1.6, 1.3)),
}


def sample(point: str, event: str, top: float, bottom: float, soc: float, bd: float, cf: float = 0.0) -> dict:
    return {"point_id": point, "stratum_id": "S1", "event": event,
            "measured_on": START if event == "start" else END, "depth_top_cm": top,
            "depth_bottom_cm": bottom, "soc_pct": soc, "bulk_density_g_cm3": bd, "coarse_fragments_pct": cf}


def soil_sheets(samples: list[dict], method: str = "fixed_depth") -> dict:
    return {
        "Project": project_rows(pathway="soil", soil_method=method),
        "Strata": table("Strata", {"stratum_id": "S1", "area_ha": 50.0}),
        "Baseline": table("Baseline", {"stratum_id": "S1", "baseline_tco2e_per_ha_yr": 0.0, "uncertainty_pct": 0.0}),
        "SoilSamples": table("SoilSamples", *samples),
    }


def hand_samples() -> list[dict]:
    rows = []
    for (point, event), ((soc1, bd1), (soc2, bd2)) in LAYERS.items():
        rows += [sample(point, event, 0, 10, soc1, bd1), sample(point, event, 10, 30, soc2, bd2)]
    return rows


def run_sheets(tmp_path: Path, sheets: dict):
    return run(write_workbook(tmp_path / "soil.xlsx", sheets), run_date=dt.date(2026, 1, 1))


# ---------------------------------------------------------------- layer equations


def test_layer_stock_hand_computed():
    # Accounting design section 1: SOC/100 x BD x thickness x (1 - CF/100) x 100.
    # 2.0 % x 1.3 g/cm3 x 15 cm x 0.9 = 0.351 g C/cm2; 1 g/cm2 = 1e8 cm2/ha / 1e6 g/t = 100 t/ha.
    assert soil.layer_soc_t_c_per_ha(2.0, 1.3, 15.0, 10.0) == pytest.approx(35.1, rel=1e-12)
    # Fine-earth mass of the same layer: 1.3 x 15 x 0.9 x 100 = 1755 t/ha (Ellert & Bettany 1995).
    assert soil.layer_fine_earth_t_per_ha(1.3, 15.0, 10.0) == pytest.approx(1755.0, rel=1e-12)


def test_amount_to_depth_takes_linear_share_of_the_crossing_layer():
    # Layers 0-10 (24 t C/ha) and 10-30 cm (28 t C/ha); to 20 cm: 24 + 28 x (20-10)/(30-10) = 38.
    assert soil.amount_to_depth([0, 10], [10, 30], [24.0, 28.0], 20.0) == pytest.approx(38.0)
    assert math.isnan(soil.amount_to_depth([0, 10], [10, 30], [24.0, 28.0], 35.0))


def test_esm_linear_interpolation_hand_example():
    # Ellert & Bettany (1995) Can. J. Soil Sci. 75:529-538; Wendt & Hauser (2013) Eur. J. Soil
    # Sci. 64:58-65: cumulative SOC read at a reference cumulative fine-earth mass.
    # P1 start: 0-10 cm 1.2 g/cm3 -> 1200 t/ha and 2 % -> 24 t C/ha; 10-30 cm 1.4 g/cm3 ->
    # 2800 t/ha and 1 % -> 28 t C/ha. Cumulative points (0, 0), (1200, 24), (4000, 52).
    # At 3800 t/ha: 24 + (3800 - 1200) x 28/2800 = 50.0 t C/ha.
    soc, extra = soil.soc_at_reference_mass([1200.0, 4000.0], [24.0, 52.0], 3800.0)
    assert soc == pytest.approx(50.0)
    assert extra == 0.0
    # numpy.interp as the reference implementation of linear interpolation.
    assert soc == pytest.approx(np.interp(3800.0, [0.0, 1200.0, 4000.0], [0.0, 24.0, 52.0]))
    # P2 start: (1000, 30), (3600, 69); 3800 is beyond the deepest layer: the missing 200 t/ha
    # carries the deepest layer's concentration 39/2600 = 1.5 %: 69 + 200 x 0.015 = 72.0.
    soc, extra = soil.soc_at_reference_mass([1000.0, 3600.0], [30.0, 69.0], 3800.0)
    assert soc == pytest.approx(72.0)
    assert extra == pytest.approx(200.0)


def test_equivalent_soil_mass_change_end_to_end(tmp_path):
    result = run_sheets(tmp_path, soil_sheets(hand_samples(), "equivalent_soil_mass"))
    document = result.to_dict()
    # Reference mass = mean first-event mass at 30 cm = (4000 + 3600)/2 = 3800 t/ha.
    methods = {m["name"]: m for m in document["methods"]}
    assert methods["Reference fine-earth mass"]["value"] == pytest.approx(3800.0)
    assert "linear" in methods["Equivalent soil mass interpolation"]["value"]
    # SOC at 3800 t/ha (hand, as in test_esm_linear_interpolation_hand_example):
    # P1 start 50.0; P2 start 72.0 (extrapolated);
    # P1 end (1100, 26.4), (3900, 54.4): 26.4 + 2700 x 0.01 = 53.4;
    # P2 end (1000, 32), (3600, 73.6): 73.6 + 200 x 0.016 = 76.8 (extrapolated).
    d = np.array([53.4 - 50.0, 76.8 - 72.0]) * CO2_PER_C  # tCO2e/ha per paired point
    expected = 50.0 * d.mean()                                # Cochran (1977) Eq. 5.1, A x mean
    se = math.sqrt(50.0**2 * d.var(ddof=1) / 2)              # Cochran (1977) Eq. 5.2, no fpc
    hw = stats.t.ppf(0.95, df=1) * se                        # 90 % two-sided, df = n - 1 (scipy)
    assert document["totals"]["gross_removals_tco2e"] == pytest.approx(expected)
    assert expected == pytest.approx(751.6667, abs=1e-3)
    assert document["strata"][0]["half_width_tco2e"] == pytest.approx(hw)
    assert document["strata"][0]["estimator"] == "paired"
    warnings = [f for f in result.findings if f.code == "esm_extrapolated"]
    # P2 start is the first profile extrapolated by the largest mass; its deepest layer is row 5.
    assert [(f.severity, f.location) for f in warnings] == [("warning", "SoilSamples!F5")]


def test_fixed_depth_change_end_to_end(tmp_path):
    document = run_sheets(tmp_path, soil_sheets(hand_samples())).to_dict()
    # Stocks to 30 cm: P1 52.0 -> 54.4, P2 69.0 -> 73.6 t C/ha; mean change 3.5 t C/ha.
    assert document["totals"]["gross_removals_tco2e"] == pytest.approx(50.0 * 3.5 * CO2_PER_C)
    methods = {m["name"]: m["value"] for m in document["methods"]}
    assert methods["Common depth"] == 30.0
    assert methods["Soil method"] == "fixed_depth"


def test_deeper_profiles_are_truncated_to_the_common_depth(tmp_path):
    samples = hand_samples() + [sample("P2", "end", 30, 45, 0.8, 1.45)]
    result = run_sheets(tmp_path, soil_sheets(samples))
    # The extra 30-45 cm layer of P2 at the end is cut off: same change as without it.
    assert result.to_dict()["totals"]["gross_removals_tco2e"] == pytest.approx(50.0 * 3.5 * CO2_PER_C)
    truncated = [(f.severity, f.location) for f in result.findings if f.code == "soil_profiles_truncated"]
    # The shallowest profile (30 cm) found first is P1 at start; its deepest layer is row 3.
    assert truncated == [("warning", "SoilSamples!F3")]


# ---------------------------------------------------------------- layer checks


def test_overlaps_gaps_and_inverted_layers_are_errors_by_cell(tmp_path):
    samples = hand_samples()
    samples[1]["depth_top_cm"] = 8.0     # row 3: P1 start 8-30 overlaps 0-10
    samples[3]["depth_top_cm"] = 12.0    # row 5: P2 start 12-30 leaves a gap after 10 cm
    samples[4]["depth_top_cm"] = 5.0     # row 6: P1 end 5-10 does not start at the surface
    samples[7]["depth_bottom_cm"] = 10.0  # row 9: P2 end 10-10 is not a layer
    book = load_workbook(write_workbook(tmp_path / "bad.xlsx", soil_sheets(samples)))
    found = {(f.code, f.location) for f in book.findings if f.severity == "error"}
    assert found == {
        ("soil_layer_overlap", "SoilSamples!E3"),
        ("soil_layer_gap", "SoilSamples!E5"),
        ("soil_layer_gap", "SoilSamples!E6"),
        ("soil_layer_inverted", "SoilSamples!F9"),
    }
    assert not run(book.path).ok


def test_physically_impossible_values_are_cell_errors(tmp_path):
    samples = hand_samples()
    samples[0]["soc_pct"] = 61.0               # SOC above 60 %
    samples[2]["bulk_density_g_cm3"] = 2.8     # above the 2.65 g/cm3 of quartz
    book = load_workbook(write_workbook(tmp_path / "bad.xlsx", soil_sheets(samples)))
    found = {(f.code, f.location) for f in book.findings if f.severity == "error"}
    assert found == {("out_of_range", "SoilSamples!G2"), ("out_of_range", "SoilSamples!H4")}


def test_point_in_two_strata_is_an_error(tmp_path):
    sheets = soil_sheets(hand_samples())
    sheets["Strata"] = table("Strata", {"stratum_id": "S1", "area_ha": 50.0}, {"stratum_id": "S2", "area_ha": 5.0})
    sheets["SoilSamples"][6][1] = "S2"  # row 7 (P1 end, 10-30 cm; list index 0 is the header)
    book = load_workbook(write_workbook(tmp_path / "bad.xlsx", sheets))
    assert ("soil_point_stratum_mismatch", "SoilSamples!B7") in {(f.code, f.location) for f in book.findings}


# ---------------------------------------------------------------- the demo


def test_soil_demo_headline_figures():
    result = run(REPO / "demo_projects" / "soil_demo.xlsx", run_date=dt.date(2026, 1, 1))
    assert result.ok
    document = result.to_dict()
    # Pinned from the seeded demo (regression guard, not an outside reference).
    assert document["totals"]["issuable_credits"] == 5389
    assert document["totals"]["net_removals_tco2e"] == pytest.approx(8621.3, abs=0.1)
    assert sorted(results_validator().iter_errors(document), key=str) == []
    assert [s["stratum_id"] for s in document["strata"]] == ["S1", "S2"]


def test_soil_demo_generator_is_deterministic(tmp_path):
    from verify.demo_projects import make_soil_demo

    regenerated = make_soil_demo.write_demo(tmp_path / "demo.xlsx")
    assert regenerated.read_bytes() == (REPO / "demo_projects" / "soil_demo.xlsx").read_bytes()
