"""Tests of the accounting chain. Expected values are computed by hand in each test
from the cited equations (IPCC 2006 Guidelines Vol. 1 Ch. 3 Eq. 3.2; calendar day counts)."""

from __future__ import annotations

import math
from datetime import date

import pytest
from scipy.stats import norm

from verify.accounting import (
    TOTAL_KEYS,
    BaselineRow,
    ChainSettings,
    EmissionRow,
    GrossRemovals,
    LeakageRow,
    ReversalRow,
    buffer_share_pct,
    combine_in_quadrature,
    floor_whole_tonnes,
    period_years,
    run_chain,
    uncertainty_deduction_tco2e,
    vintage_days,
)

Y2024 = (date(2024, 1, 1), date(2024, 12, 31))  # 366 days (leap year)
YEARS_2024 = 366 / 365.25  # Julian year


def chain(
    gross_tco2e: float = 1000.0,
    gross_hw_tco2e: float = 0.0,
    period: tuple[date, date] = Y2024,
    baseline: list[BaselineRow] | None = None,
    emissions: list[EmissionRow] | None = None,
    leakage: list[LeakageRow] | None = None,
    risk: list[float] | None = None,
    reversals: list[ReversalRow] | None = None,
    **settings: object,
):
    return run_chain(
        period[0],
        period[1],
        GrossRemovals(gross_tco2e, gross_hw_tco2e / norm.ppf(0.95), None, gross_hw_tco2e),
        baseline or [],
        emissions or [],
        leakage or [],
        risk or [],
        reversals or [],
        ChainSettings(**settings),  # type: ignore[arg-type]
    )


def codes(result) -> list[str]:
    return [f.code for f in result.findings]


# ---------------------------------------------------------------- periods and vintages


def test_period_years_are_julian_years() -> None:
    # Julian year = 365.25 days; 2024 has 366 days, 2025 has 365 (Gregorian calendar).
    assert period_years(*Y2024) == pytest.approx(366 / 365.25)
    assert period_years(date(2025, 1, 1), date(2025, 12, 31)) == pytest.approx(365 / 365.25)
    assert period_years(date(2025, 3, 1), date(2025, 3, 1)) == pytest.approx(1 / 365.25)


def test_vintage_days_across_a_leap_year() -> None:
    # Hand count: Jul-Dec 2024 = 31+31+30+31+30+31 = 184; Jan-Jun 2025 = 31+28+31+30+31+30 = 181.
    assert vintage_days(date(2024, 7, 1), date(2025, 6, 30)) == [(2024, 184), (2025, 181)]
    # Dec 2023 = 31; Jan 1 to Mar 1 2024 = 31 + 29 (leap day) + 1 = 61.
    assert vintage_days(date(2023, 12, 1), date(2024, 3, 1)) == [(2023, 31), (2024, 61)]


def test_vintage_split_is_pro_rata_by_days() -> None:
    result = chain(gross_tco2e=730.0, period=(date(2024, 7, 1), date(2025, 6, 30)), buffer_minimum_pct=0.0)
    v2024, v2025 = result.vintages
    assert (v2024["vintage"], v2024["days"], v2025["vintage"], v2025["days"]) == (2024, 184, 2025, 181)
    assert v2024["share"] == pytest.approx(184 / 365)
    assert v2024["gross_removals_tco2e"] == pytest.approx(730.0 * 184 / 365)  # 368.0
    assert v2025["net_removals_tco2e"] == pytest.approx(730.0 * 181 / 365)  # 362.0
    # Baseline uses the Julian year: 365 days = 365/365.25 years.
    rows = [BaselineRow("A", 10.0, 2.0, 0.0)]
    b = chain(period=(date(2024, 7, 1), date(2025, 6, 30)), baseline=rows).totals["baseline_tco2e"]
    assert b == pytest.approx(2.0 * 10.0 * 365 / 365.25)


# ---------------------------------------------------------------- Eq. 3.2


def test_combine_in_quadrature_eq_3_2_worked_example() -> None:
    # IPCC 2006 Vol. 1 Ch. 3 Eq. 3.2, by hand: 100 t +-10 % and 50 t +-20 %:
    # U_total = sqrt((10*100)^2 + (20*50)^2) / |100 + 50| = sqrt(2e6)/150 = 9.428 %.
    hw = combine_in_quadrature([100 * 10 / 100, 50 * 20 / 100])
    assert hw == pytest.approx(math.sqrt(200.0))
    assert hw / 150 * 100 == pytest.approx(9.428090, abs=1e-6)
    assert combine_in_quadrature([3.0, 4.0]) == 5.0
    assert combine_in_quadrature([]) == 0.0


def test_chain_worked_by_hand() -> None:
    baseline = [BaselineRow("A", 10.0, 2.0, 10.0), BaselineRow("B", 5.0, -1.0, 20.0)]
    emissions = [
        EmissionRow("diesel", 1000.0, 2.676, "CO2", 5.0),  # 2.676 kg CO2/L, IPCC 2006 Vol. 2 Tables 1.2/2.2
        EmissionRow("manure", 10.0, 1.0, "CH4", 50.0),
        EmissionRow("fertiliser", 2.0, 0.5, "N2O", 100.0),
    ]
    leakage = [LeakageRow("market", "percent", 10.0, 20.0), LeakageRow("activity_shifting", "tonnes", 5.0, 10.0)]
    result = chain(1000.0, 60.0, baseline=baseline, emissions=emissions, leakage=leakage)

    y = YEARS_2024
    b = 2.0 * 10 * y - 1.0 * 5 * y
    hw_b = math.sqrt((20 * y * 0.10) ** 2 + (5 * y * 0.20) ** 2)
    # GWP100 AR6 (WG1 Ch. 7 Table 7.15): CH4 fossil 29.8, N2O 273.
    e = [1000 * 2.676 / 1000 * 1, 10 * 1.0 / 1000 * 29.8, 2 * 0.5 / 1000 * 273]
    hw_e = math.sqrt((e[0] * 0.05) ** 2 + (e[1] * 0.5) ** 2 + (e[2] * 1.0) ** 2)
    l_pct = 0.10 * (1000 - b)
    hw_l = math.sqrt((l_pct * 0.2) ** 2 + (5.0 * 0.1) ** 2)
    n = 1000 - b - sum(e) - l_pct - 5.0
    hw_n = math.sqrt(60**2 + hw_b**2 + hw_e**2 + hw_l**2)  # IPCC 2006 Vol. 1 Ch. 3 Eq. 3.2

    t = result.totals
    assert list(t) == list(TOTAL_KEYS)
    assert t["baseline_tco2e"] == pytest.approx(b)
    assert t["project_emissions_tco2e"] == pytest.approx(sum(e))
    assert t["leakage_tco2e"] == pytest.approx(l_pct + 5.0)
    assert t["net_removals_tco2e"] == pytest.approx(n)
    assert result.half_widths_tco2e == pytest.approx(
        {"gross": 60.0, "baseline": hw_b, "project_emissions": hw_e, "leakage": hw_l, "net": hw_n}
    )
    assert t["uncertainty_pct"] == pytest.approx(hw_n / n * 100)
    assert t["uncertainty_deduction_tco2e"] == pytest.approx(hw_n)
    assert t["buffer_pct"] == 10.0
    assert t["buffer_tco2e"] == pytest.approx(0.10 * (n - hw_n))
    assert t["issuable_credits"] == math.floor(0.9 * (n - hw_n))
    assert [d["gwp"] for d in result.emissions_detail] == [1.0, 29.8, 273.0]
    assert [d["tco2e"] for d in result.emissions_detail] == pytest.approx(e)
    assert result.monte_carlo is None
    assert result.findings == []


def test_ar5_gwp_in_chain() -> None:
    # IPCC AR5 WG1 Ch. 8 Table 8.7: CH4 28, N2O 265.
    rows = [EmissionRow("a", 1000.0, 1.0, "CH4", 0.0), EmissionRow("b", 1000.0, 1.0, "N2O", 0.0)]
    result = chain(emissions=rows, gwp_set="AR5")
    assert result.totals["project_emissions_tco2e"] == pytest.approx(28.0 + 265.0)
    names = [m["name"] for m in result.methods]
    assert "GWP100 CH4 (AR5)" in names and "GWP100 N2O (AR5)" in names


def test_methods_name_equation_3_2() -> None:
    sources = [m["source"] for m in chain().methods]
    assert "IPCC 2006 Guidelines Vol. 1 Ch. 3 Eq. 3.2" in sources
    assert all(set(m) == {"name", "value", "unit", "source"} for m in chain().methods)


# ---------------------------------------------------------------- deduction and buffer


def test_deduction_lower_bound_is_the_half_width() -> None:
    # Lower bound of N at the confidence level = N - hw_N (accounting chain section 6).
    result = chain(1000.0, 150.0, buffer_minimum_pct=0.0)
    assert result.totals["uncertainty_deduction_tco2e"] == pytest.approx(150.0)
    assert result.totals["issuable_credits"] == 850


def test_deduction_excess_over_threshold() -> None:
    # U = 150/1000 = 15 %; deduction = 1000 x (15 - 10)/100 = 50 (by hand).
    result = chain(1000.0, 150.0, uncertainty_rule="excess_over_threshold", buffer_minimum_pct=0.0)
    assert result.totals["uncertainty_pct"] == pytest.approx(15.0)
    assert result.totals["uncertainty_deduction_tco2e"] == pytest.approx(50.0)
    assert result.totals["issuable_credits"] == 950
    below = chain(1000.0, 150.0, uncertainty_rule="excess_over_threshold", uncertainty_threshold_pct=20.0)
    assert below.totals["uncertainty_deduction_tco2e"] == 0.0


def test_deduction_is_zero_when_net_is_not_positive() -> None:
    assert uncertainty_deduction_tco2e(-10.0, 5.0, None, "lower_bound", 10.0) == 0.0
    assert uncertainty_deduction_tco2e(0.0, 5.0, None, "excess_over_threshold", 10.0) == 0.0
    assert uncertainty_deduction_tco2e(100.0, -5.0, 1.0, "lower_bound", 10.0) == 0.0


def test_buffer_floor() -> None:
    assert buffer_share_pct([3.0, 2.0], 10.0) == 10.0
    assert buffer_share_pct([8.0, 7.0], 10.0) == 15.0
    # N = 1000, no uncertainty: buffer = 15 % of 1000 = 150; issuable 850.
    result = chain(1000.0, risk=[8.0, 7.0])
    assert result.totals["buffer_tco2e"] == pytest.approx(150.0)
    assert result.totals["issuable_credits"] == 850
    floored = chain(1000.0, risk=[3.0, 2.0])
    assert floored.totals["buffer_pct"] == 10.0
    assert floored.totals["buffer_tco2e"] == pytest.approx(100.0)


# ---------------------------------------------------------------- leakage


def test_percent_leakage_never_adds_credits() -> None:
    # Baseline 20 t/ha/yr x 10 ha x 366/365.25 yr > gross 100, so max(0, gross - B) = 0.
    result = chain(100.0, baseline=[BaselineRow("A", 10.0, 20.0, 0.0)], leakage=[LeakageRow("market", "percent", 10.0, 50.0)])
    assert result.totals["leakage_tco2e"] == 0.0
    assert result.half_widths_tco2e["leakage"] == 0.0
    assert result.totals["net_removals_tco2e"] == pytest.approx(100.0 - 200.0 * YEARS_2024)


def test_negative_leakage_is_clipped_with_a_finding() -> None:
    rows = [LeakageRow("other", "tonnes", -30.0, 10.0), LeakageRow("market", "percent", -5.0, 10.0)]
    result = chain(1000.0, leakage=rows)
    assert result.totals["leakage_tco2e"] == 0.0
    assert result.totals["net_removals_tco2e"] == 1000.0
    assert codes(result).count("negative_leakage") == 2


# ---------------------------------------------------------------- whole tonnes by vintage


def test_floor_whole_tonnes() -> None:
    assert floor_whole_tonnes(99.99999999999) == 100  # float noise around 100
    assert floor_whole_tonnes(99.9999) == 99
    assert floor_whole_tonnes(100.0) == 100
    assert floor_whole_tonnes(-3.2) == 0
    assert floor_whole_tonnes(float("nan")) == 0


def test_floor_applies_per_vintage() -> None:
    # N = 1000 over 365 days: 1000 x 184/365 = 504.11 -> 504; 1000 x 181/365 = 495.89 -> 495; total 999.
    result = chain(1000.0, period=(date(2024, 7, 1), date(2025, 6, 30)), buffer_minimum_pct=0.0)
    assert [v["issuable_credits"] for v in result.vintages] == [504, 495]
    assert result.totals["issuable_credits"] == 999
    assert all(isinstance(v["issuable_credits"], int) for v in result.vintages)


def test_vintage_rows_carry_all_total_keys() -> None:
    result = chain(1000.0, 50.0, period=(date(2024, 7, 1), date(2025, 6, 30)))
    for v in result.vintages:
        assert list(v) == ["vintage", "days", "share", *TOTAL_KEYS]
        assert v["uncertainty_pct"] == pytest.approx(result.totals["uncertainty_pct"])
        assert v["buffer_pct"] == result.totals["buffer_pct"]
    assert sum(v["buffer_tco2e"] for v in result.vintages) == pytest.approx(result.totals["buffer_tco2e"])


# ---------------------------------------------------------------- reversals


def test_net_loss_is_a_reversal() -> None:
    rows = [
        ReversalRow("A", date(2024, 5, 1), 30.0, True),
        ReversalRow("A", date(2024, 8, 1), 40.0, False),
    ]
    result = chain(-50.0, 10.0, reversals=rows)
    t = result.totals
    assert t["uncertainty_pct"] is None
    assert (t["uncertainty_deduction_tco2e"], t["buffer_tco2e"], t["issuable_credits"]) == (0.0, 0.0, 0)
    assert result.reversal == pytest.approx(
        {
            "measured_reversal_tco2e": 50.0,
            "reported_losses_tco2e": 70.0,
            "avoidable_tco2e": 30.0,
            "unavoidable_tco2e": 20.0,
            "to_cancel_from_buffer_tco2e": 50.0,
            "to_compensate_tco2e": 30.0,
        }
    )


def test_avoidable_part_is_capped_at_the_measured_loss() -> None:
    result = chain(-50.0, reversals=[ReversalRow("A", date(2024, 5, 1), 80.0, True)])
    assert result.reversal["avoidable_tco2e"] == 50.0
    assert result.reversal["unavoidable_tco2e"] == 0.0
    assert result.reversal["to_compensate_tco2e"] == 50.0


def test_unreported_loss_is_unavoidable_with_a_note() -> None:
    result = chain(-50.0)
    assert result.reversal["unavoidable_tco2e"] == 50.0
    assert result.reversal["to_compensate_tco2e"] == 0.0
    assert "reversal_cause_unreported" in codes(result)


def test_losses_with_positive_net_are_already_netted() -> None:
    rows = [ReversalRow("A", date(2024, 5, 1), 30.0, True), ReversalRow("A", date(2023, 5, 1), 99.0, True)]
    result = chain(500.0, reversals=rows)
    assert result.reversal["measured_reversal_tco2e"] == 0.0
    assert result.reversal["reported_losses_tco2e"] == 30.0  # the 2023 row is outside the period
    assert result.reversal["to_cancel_from_buffer_tco2e"] == 0.0
    assert "reversal_reflected_in_net" in codes(result)
    assert "reversal_outside_period" in codes(result)
    note = next(f for f in result.findings if f.code == "reversal_reflected_in_net")
    assert note.severity == "note"


# ---------------------------------------------------------------- bad data never raises


def test_bad_values_become_findings() -> None:
    result = chain(
        float("nan"),
        baseline=[BaselineRow("A", "ten", 2.0, -10.0)],  # type: ignore[arg-type]
        emissions=[EmissionRow("x", 1.0, 1.0, "SF6", 5.0), EmissionRow("y", -100.0, 1.0, "CO2", 5.0)],
        leakage=[LeakageRow("market", "share", 5.0, 5.0)],
        risk=[float("inf")],
        confidence_pct=150.0,
        uncertainty_rule="strict",
        gwp_set="AR4",
    )
    found = codes(result)
    for code in ("non_numeric_value", "negative_uncertainty", "unknown_gas", "negative_emission", "unknown_leakage_method", "invalid_setting"):
        assert code in found
    assert found.count("invalid_setting") == 3
    assert result.totals["project_emissions_tco2e"] == 0.0
    assert result.emissions_detail[0]["gwp"] is None
    assert result.totals["issuable_credits"] == 0


def test_end_before_start_gives_no_vintage() -> None:
    result = chain(1000.0, period=(date(2024, 12, 31), date(2024, 1, 1)))
    assert result.vintages == []
    assert result.totals["issuable_credits"] == 0
    assert "invalid_period" in codes(result)
