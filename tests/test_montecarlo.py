"""Tests of the Monte Carlo propagation (IPCC 2006 Guidelines Vol. 1 Ch. 3 Sec. 3.2.3.2, Approach 2).
References: scipy.stats distributions and the analytic Eq. 3.2 result."""

from __future__ import annotations

import math
from datetime import date

import numpy as np
import pytest
from scipy import stats

from verify.accounting import BaselineRow, ChainSettings, EmissionRow, GrossRemovals, LeakageRow, run_chain
from verify.montecarlo import (
    CHUNK_DRAWS,
    UncertainInputs,
    draw_net_removals,
    draw_truncated_normal,
    lognormal_parameters,
    simulate_net_removals,
    z_for_confidence,
)

MIXED = UncertainInputs(
    gross_tco2e=10_000.0,
    gross_standard_error_tco2e=500.0,
    gross_df=12.0,
    baseline_tco2e=[500.0, -100.0],
    baseline_half_width_tco2e=[50.0, 20.0],
    emission_tco2e=[20.0, 5.0],
    emission_half_width_tco2e=[2.0, 4.0],
    leakage_percent=[5.0],
    leakage_percent_half_width=[1.0],
    leakage_tonnes_tco2e=[50.0],
    leakage_tonnes_half_width_tco2e=[10.0],
)


@pytest.mark.parametrize("confidence_pct", [90.0, 95.0, 68.0])
def test_z_matches_scipy(confidence_pct: float) -> None:
    # scipy.stats.norm as reference for the two-sided quantile.
    assert z_for_confidence(confidence_pct) == pytest.approx(stats.norm.ppf(0.5 + confidence_pct / 200))


def test_same_seed_gives_identical_numbers() -> None:
    a = draw_net_removals(MIXED, 90.0, 50_000, seed=7)
    b = draw_net_removals(MIXED, 90.0, 50_000, seed=7)
    assert np.array_equal(a, b)
    assert simulate_net_removals(MIXED, 90.0, 50_000, 7) == simulate_net_removals(MIXED, 90.0, 50_000, 7)
    assert not np.array_equal(a, draw_net_removals(MIXED, 90.0, 50_000, seed=8))


def test_draw_count_across_chunks() -> None:
    draws = 2 * CHUNK_DRAWS + 3
    out = draw_net_removals(MIXED, 90.0, draws, seed=1)
    assert out.shape == (draws,)
    assert np.all(np.isfinite(out))


@pytest.mark.parametrize("confidence_pct", [90.0, 95.0])
def test_all_normal_interval_matches_analytic_half_width(confidence_pct: float) -> None:
    # With normal inputs and no leakage N is normal, so the percentile interval must equal the
    # Eq. 3.2 half-width sqrt(sum hw^2) (IPCC 2006 Vol. 1 Ch. 3), z from scipy.stats.norm.
    z = stats.norm.ppf(0.5 + confidence_pct / 200)
    se, hw_b = 300.0, [80.0, 60.0]
    inputs = UncertainInputs(5_000.0, se, None, baseline_tco2e=[400.0, 250.0], baseline_half_width_tco2e=hw_b)
    draws = 400_000
    summary = simulate_net_removals(inputs, confidence_pct, draws, seed=20261201)
    analytic_hw = math.sqrt((z * se) ** 2 + sum(h * h for h in hw_b))
    sd = analytic_hw / z
    # Standard error of a sample quantile: sqrt(p(1-p)/n)/pdf(q); allow 5 of them.
    p = 0.5 - confidence_pct / 200
    quantile_se = sd * math.sqrt(p * (1 - p) / draws) / stats.norm.pdf(z)
    assert summary.half_width_tco2e == pytest.approx(analytic_hw, abs=5 * quantile_se)
    assert summary.mean_tco2e == pytest.approx(5_000.0 - 650.0, abs=5 * sd / math.sqrt(draws))
    assert summary.lower_tco2e == pytest.approx(4_350.0 - analytic_hw, abs=5 * quantile_se)


def test_student_t_gross_matches_scipy_t_quantile() -> None:
    # Gross = value + SE x t(df): the 90 % interval is value +- t.ppf(0.95, df) x SE (scipy.stats.t).
    inputs = UncertainInputs(1_000.0, 100.0, 6.0)
    summary = simulate_net_removals(inputs, 90.0, 400_000, seed=3)
    assert summary.half_width_tco2e == pytest.approx(stats.t.ppf(0.95, 6.0) * 100.0, rel=0.01)


def test_lognormal_parameters_reproduce_mean_and_sd() -> None:
    # Reference: scipy.stats.lognorm(s=sigma, scale=exp(mu)).
    mu, sigma = lognormal_parameters(np.array([10.0, 2.0]), np.array([3.0, 4.0]))
    for m, s, mean, sd in zip(mu, sigma, [10.0, 2.0], [3.0, 4.0]):
        dist = stats.lognorm(s=s, scale=math.exp(m))
        assert dist.mean() == pytest.approx(mean)
        assert dist.std() == pytest.approx(sd)


def test_emission_draws_are_lognormal_with_matched_moments() -> None:
    z = stats.norm.ppf(0.95)
    inputs = UncertainInputs(0.0, 0.0, None, emission_tco2e=[10.0], emission_half_width_tco2e=[5.0])
    emissions = -draw_net_removals(inputs, 90.0, 400_000, seed=11)
    assert emissions.min() > 0.0
    # Reference distribution: scipy.stats.lognorm with the moment-matched parameters.
    mu, sigma = lognormal_parameters(np.array([10.0]), np.array([5.0 / z]))
    ref = stats.lognorm(s=sigma[0], scale=math.exp(mu[0]))
    assert emissions.mean() == pytest.approx(10.0, rel=0.01)
    assert np.percentile(emissions, 95) == pytest.approx(ref.ppf(0.95), rel=0.01)


def test_truncated_normal_matches_scipy_truncnorm() -> None:
    rng = np.random.default_rng(5)
    x = draw_truncated_normal(rng, 1.0, 3.0, 400_000)
    assert x.min() >= 0.0
    ref = stats.truncnorm(a=(0 - 1.0) / 3.0, b=np.inf, loc=1.0, scale=3.0)  # scipy reference
    assert x.mean() == pytest.approx(ref.mean(), rel=0.01)
    assert np.percentile(x, 90) == pytest.approx(ref.ppf(0.90), rel=0.01)
    with pytest.raises(ValueError):
        draw_truncated_normal(rng, -1.0, 1.0, 10)


def test_percent_leakage_is_never_negative() -> None:
    # Percent 1 +- 3 points: an untruncated normal would go below 0 in about a third of draws.
    inputs = UncertainInputs(1_000.0, 0.0, None, baseline_tco2e=[200.0], leakage_percent=[1.0], leakage_percent_half_width=[3.0])
    net = draw_net_removals(inputs, 90.0, 200_000, seed=2)
    assert net.max() <= 800.0  # leakage >= 0 in every draw
    z = stats.norm.ppf(0.95)
    ref = stats.truncnorm(a=-1.0 / (3.0 / z), b=np.inf, loc=1.0, scale=3.0 / z)  # scipy reference
    assert (800.0 - net).mean() == pytest.approx(ref.mean() / 100 * 800.0, rel=0.01)
    # Baseline above gross: the base max(0, gross - B) is 0, so no leakage at all.
    no_base = UncertainInputs(100.0, 0.0, None, baseline_tco2e=[200.0], leakage_percent=[5.0], leakage_percent_half_width=[1.0])
    assert np.all(draw_net_removals(no_base, 90.0, 10_000, seed=2) == -100.0)


def test_chain_in_monte_carlo_mode() -> None:
    settings = ChainSettings(uncertainty_method="monte_carlo", monte_carlo_draws=100_000, random_seed=42)
    args = (
        date(2024, 1, 1),
        date(2024, 12, 31),
        GrossRemovals(10_000.0, 400.0, None, stats.norm.ppf(0.95) * 400.0),
        [BaselineRow("A", 100.0, 2.0, 10.0)],
        [EmissionRow("diesel", 10_000.0, 2.676, "CO2", 5.0)],
        [LeakageRow("market", "tonnes", 300.0, 20.0)],
        [],
        [],
    )
    result = run_chain(*args, settings)
    analytic = run_chain(*args, ChainSettings())
    mc = result.monte_carlo
    assert mc is not None and mc["draws"] == 100_000 and mc["seed"] == 42 and "lognormal" in mc["distributions"]
    n = analytic.totals["net_removals_tco2e"]
    assert result.totals["net_removals_tco2e"] == n  # point estimate stays analytic
    assert result.half_widths_tco2e["net"] == pytest.approx((mc["upper_tco2e"] - mc["lower_tco2e"]) / 2)
    assert result.totals["uncertainty_deduction_tco2e"] == pytest.approx(n - mc["lower_tco2e"])
    # Close to the analytic Eq. 3.2 half-width when inputs are near-normal (within 3 %). Percent
    # leakage is left out here: per draw it scales with gross - B, a correlation Eq. 3.2 ignores.
    assert result.half_widths_tco2e["net"] == pytest.approx(analytic.half_widths_tco2e["net"], rel=0.03)
    assert run_chain(*args, settings) == result
    assert any("Approach 2" in m["source"] for m in result.methods)
