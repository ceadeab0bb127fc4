from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from verify import sampling


def _units(records: list[tuple[str, str, str, float]]) -> pd.DataFrame:
    return pd.DataFrame(records, columns=["unit_id", "stratum_id", "event", "value_per_ha"])


# Worked example: stratum S1 (100 ha) has four permanent plots, stratum S2
# (50 ha) was sampled with different plots at each event.
S1_START = np.array([50.0, 60.0, 55.0, 65.0])
S1_END = np.array([70.0, 75.0, 72.0, 90.0])
S2_START = np.array([30.0, 40.0, 35.0])
S2_END = np.array([45.0, 50.0, 38.0, 52.0])
AREAS = {"S1": 100.0, "S2": 50.0}


def _worked_example() -> pd.DataFrame:
    records = []
    for i, (y0, y1) in enumerate(zip(S1_START, S1_END)):
        records += [(f"P{i}", "S1", "start", y0), (f"P{i}", "S1", "end", y1)]
    records += [(f"Q{i}", "S2", "start", y) for i, y in enumerate(S2_START)]
    records += [(f"R{i}", "S2", "end", y) for i, y in enumerate(S2_END)]
    return _units(records)


def test_stratified_worked_example() -> None:
    result = sampling.stratified_change(_worked_example(), AREAS, "start", "end", 90.0)

    # Reference: Cochran, Sampling Techniques 3rd ed. (1977), Eqs. 5.1-5.2 for
    # totals (T = sum A_h ybar_h, Var = sum A_h^2 s2_h / n_h), computed here
    # independently with numpy (ddof=1 sample variances).
    d = S1_END - S1_START
    change_s1 = 100.0 * d.mean()
    var_s1 = 100.0**2 * d.var(ddof=1) / d.size
    change_s2 = 50.0 * (S2_END.mean() - S2_START.mean())
    var_s2_end = 50.0**2 * S2_END.var(ddof=1) / S2_END.size
    var_s2_start = 50.0**2 * S2_START.var(ddof=1) / S2_START.size
    variance = var_s1 + var_s2_end + var_s2_start
    # Satterthwaite, Cochran (1977) Eq. 5.16, written out over the three components
    components = np.array([var_s1, var_s2_end, var_s2_start])
    dfs = np.array([3.0, 3.0, 2.0])
    df = components.sum() ** 2 / np.sum(components**2 / dfs)
    # t quantile from scipy.stats.t.ppf, two-sided 90 %
    t_value = stats.t.ppf(0.95, df)

    assert result.total_change == pytest.approx(change_s1 + change_s2, rel=1e-12)
    assert result.variance == pytest.approx(variance, rel=1e-12)
    assert result.standard_error == pytest.approx(math.sqrt(variance), rel=1e-12)
    assert result.df == pytest.approx(df, rel=1e-12)
    assert result.t_value == pytest.approx(t_value, rel=1e-12)
    assert result.half_width == pytest.approx(t_value * math.sqrt(variance), rel=1e-12)
    assert result.uncertainty_pct == pytest.approx(
        t_value * math.sqrt(variance) / (change_s1 + change_s2) * 100.0, rel=1e-12
    )
    assert result.stock_first_total == pytest.approx(
        100.0 * S1_START.mean() + 50.0 * S2_START.mean(), rel=1e-12
    )
    assert result.findings == []

    s1, s2 = result.strata
    assert (s1.stratum_id, s1.estimator) == ("S1", "paired")
    assert (s1.n_first, s1.n_last, s1.n_paired) == (4, 4, 4)
    assert (s2.stratum_id, s2.estimator) == ("S2", "independent")
    assert (s2.n_first, s2.n_last, s2.n_paired) == (3, 4, 0)
    assert s1.change_total == pytest.approx(change_s1, rel=1e-12)
    assert s1.variance == pytest.approx(var_s1, rel=1e-12)
    # One paired stratum: Satterthwaite reduces to n - 1
    assert s1.df == pytest.approx(3.0, rel=1e-12)
    assert s1.half_width == pytest.approx(stats.t.ppf(0.95, 3) * math.sqrt(var_s1), rel=1e-12)
    assert s2.change_total == pytest.approx(change_s2, rel=1e-12)
    assert s2.variance == pytest.approx(var_s2_end + var_s2_start, rel=1e-12)
    assert s2.mean_last_per_ha == pytest.approx(S2_END.mean(), rel=1e-12)
    assert s2.stock_last_total == pytest.approx(50.0 * S2_END.mean(), rel=1e-12)
    assert s2.stock_last_variance == pytest.approx(var_s2_end, rel=1e-12)


def test_t_quantile_against_scipy() -> None:
    # Reference: scipy.stats.t.ppf and scipy.stats.norm.ppf
    assert sampling.t_quantile(10.0, 90.0) == pytest.approx(stats.t.ppf(0.95, 10.0), rel=1e-12)
    assert sampling.t_quantile(4.5, 95.0) == pytest.approx(stats.t.ppf(0.975, 4.5), rel=1e-12)
    assert sampling.t_quantile(None, 90.0) == pytest.approx(stats.norm.ppf(0.95), rel=1e-12)
    assert sampling.t_quantile(math.inf, 95.0) == pytest.approx(1.959963985, rel=1e-9)


def test_satterthwaite_direct_formula() -> None:
    areas = np.array([120.0, 80.0, 35.0])
    n = np.array([6.0, 4.0, 3.0])
    s2 = np.array([40.0, 90.0, 15.0])
    g = areas**2 / n
    # Cochran (1977) Sec. 5.4, Eq. 5.16 written out
    expected = np.sum(g * s2) ** 2 / np.sum((g * s2) ** 2 / (n - 1))
    assert sampling.satterthwaite_df(g, s2, n) == pytest.approx(expected, rel=1e-12)


def test_satterthwaite_one_stratum_is_n_minus_one() -> None:
    # Special case of Eq. 5.16 with a single stratum: df = n - 1
    assert sampling.satterthwaite_df([100.0**2 / 7], [12.3], [7]) == pytest.approx(6.0, rel=1e-12)


def test_satterthwaite_zero_and_undefined_variance() -> None:
    assert sampling.satterthwaite_df([1.0, 2.0], [0.0, 0.0], [3, 4]) is None
    assert math.isnan(sampling.satterthwaite_df([1.0, 2.0], [np.nan, 1.0], [1, 4]))


def test_partly_remeasured_stratum_is_independent() -> None:
    units = _units(
        [
            ("A", "S", "start", 10.0), ("B", "S", "start", 12.0), ("C", "S", "start", 14.0),
            ("A", "S", "end", 15.0), ("B", "S", "end", 18.0),
        ]
    )
    result = sampling.stratified_change(units, {"S": 10.0}, "start", "end", 90.0)
    (stratum,) = result.strata
    assert (stratum.estimator, stratum.n_first, stratum.n_last, stratum.n_paired) == (
        "independent", 3, 2, 2
    )
    start, end = np.array([10.0, 12.0, 14.0]), np.array([15.0, 18.0])
    # Reference: numpy, Var = A^2 s2_end / n_end + A^2 s2_start / n_start
    assert stratum.variance == pytest.approx(
        100.0 * end.var(ddof=1) / 2 + 100.0 * start.var(ddof=1) / 3, rel=1e-12
    )
    assert stratum.change_total == pytest.approx(10.0 * (end.mean() - start.mean()), rel=1e-12)


def test_intermediate_events_are_ignored() -> None:
    units = _units(
        [
            ("A", "S", "start", 10.0), ("B", "S", "start", 12.0),
            ("A", "S", "mid", 99.0),
            ("A", "S", "end", 15.0), ("B", "S", "end", 18.0),
        ]
    )
    (stratum,) = sampling.stratified_change(units, {"S": 1.0}, "start", "end", 90.0).strata
    assert stratum.estimator == "paired"
    assert stratum.change_total == pytest.approx(5.5, rel=1e-12)  # mean of (5, 6)


def test_too_few_units_findings_and_nan_variance() -> None:
    units = _units(
        [
            ("A", "S1", "start", 10.0), ("B", "S1", "start", 12.0),
            ("C", "S1", "end", 20.0),
            ("D", "S2", "start", 5.0), ("D", "S2", "end", 9.0),
        ]
    )
    result = sampling.stratified_change(
        units, {"S1": 10.0, "S2": 5.0}, "start", "end", 90.0, sheet="SoilSamples"
    )
    s1, s2 = result.strata
    assert s1.estimator == "independent" and math.isnan(s1.variance)
    assert s1.change_total == pytest.approx(10.0 * (20.0 - 11.0), rel=1e-12)
    assert s2.estimator == "paired" and math.isnan(s2.variance)
    assert math.isnan(result.variance) and math.isnan(result.half_width)
    assert [(f.severity, f.code, f.location) for f in result.findings] == [
        ("error", "too_few_units", "SoilSamples"),
        ("error", "too_few_units", "SoilSamples"),
    ]
    assert "'end'" in result.findings[0].message
    assert "S2" in result.findings[1].message


def test_stratum_without_units() -> None:
    units = _units([("A", "S1", "start", 1.0), ("B", "S1", "start", 2.0),
                    ("A", "S1", "end", 2.0), ("B", "S1", "end", 4.0)])
    result = sampling.stratified_change(units, {"S1": 1.0, "EMPTY": 7.5}, "start", "end", 90.0)
    empty = result.strata[1]
    assert (empty.n_first, empty.n_last) == (0, 0)
    assert math.isnan(empty.change_total) and math.isnan(empty.variance)
    assert [(f.severity, f.code, f.location) for f in result.findings] == [
        ("error", "stratum_without_units", "Plots")
    ]


def test_bad_rows_are_left_out_with_findings() -> None:
    units = _units(
        [
            ("A", "S", "start", 1.0), ("B", "S", "start", 2.0),
            ("A", "S", "end", 2.0), ("B", "S", "end", 4.0),
            ("B", "S", "end", 40.0),  # duplicate
            ("C", "S", "end", np.nan),  # missing value
            ("X", "NOWHERE", "end", 3.0),  # unknown stratum
        ]
    )
    result = sampling.stratified_change(units, {"S": 1.0}, "start", "end", 90.0)
    assert sorted(f.code for f in result.findings) == [
        "duplicate_unit", "unit_stratum_unknown", "unit_value_missing"
    ]
    (stratum,) = result.strata
    assert stratum.estimator == "paired"
    assert stratum.change_total == pytest.approx(1.5, rel=1e-12)  # mean of (1, 2)


def test_zero_change_has_no_uncertainty_pct() -> None:
    units = _units([("A", "S", "start", 1.0), ("B", "S", "start", 3.0),
                    ("A", "S", "end", 3.0), ("B", "S", "end", 1.0)])
    result = sampling.stratified_change(units, {"S": 1.0}, "start", "end", 90.0)
    assert result.total_change == 0.0
    assert result.uncertainty_pct is None


def test_paired_t_test_against_scipy() -> None:
    a = np.array([101.2, 88.4, 120.9, 95.0, 110.3, 99.7])
    b = np.array([99.8, 90.1, 117.5, 93.2, 111.0, 96.4])
    result = sampling.paired_t_test(a, b, 90.0)
    # Reference: scipy.stats.ttest_rel (Student's paired t-test, two-sided)
    ref = stats.ttest_rel(a, b)
    interval = ref.confidence_interval(confidence_level=0.90)
    assert result.n == 6
    assert result.df == pytest.approx(ref.df, rel=1e-12)
    assert result.t_statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert result.p_value == pytest.approx(ref.pvalue, rel=1e-10)
    assert result.mean_difference == pytest.approx(np.mean(a - b), rel=1e-12)
    assert result.sd_difference == pytest.approx(np.std(a - b, ddof=1), rel=1e-12)
    assert result.ci_low == pytest.approx(interval.low, rel=1e-10)
    assert result.ci_high == pytest.approx(interval.high, rel=1e-10)


def test_paired_t_test_too_few_pairs_is_nan() -> None:
    result = sampling.paired_t_test([1.0, np.nan], [2.0, 3.0], 90.0)
    assert result.n == 1
    assert math.isnan(result.t_statistic) and math.isnan(result.p_value)
