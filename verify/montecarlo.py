"""Monte Carlo propagation of uncertainty for net removals.

IPCC 2006 Guidelines, Vol. 1, Ch. 3, Sec. 3.2.3.2 (Approach 2): draw every
uncertain input from a probability distribution, compute net removals per
draw, report the mean and the two-sided percentile interval at the
confidence level.

Distribution choices (also returned as text in ``distributions``):

- Gross removals: value + SE x Student-t(df) when degrees of freedom are
  known (the sampling estimator's own distribution), value + SE x standard
  normal when df is None.
- Baseline, per stratum: normal with mean = value and sd = hw / z, z the
  standard normal quantile at (1 + confidence)/2. A baseline rate may be
  negative, so a normal (not lognormal) is used. The strata are independent,
  so their sum is drawn as one normal with sd = sqrt(sum sd_h^2), which is
  exactly the same distribution.
- Project emissions, per row: lognormal with mean = value and sd = hw / z.
  Emission factors and activity data are positive and often right-skewed;
  IPCC 2006 Vol. 1 Ch. 3 names the lognormal for such quantities. Rows with
  a value <= 0 or no uncertainty are constants.
- Leakage, ``percent`` rows: the percent is normal (mean = value,
  sd = hw / z) truncated at 0 (draws below 0 are redrawn), applied per draw to max(0, gross_draw - baseline_draw),
  so leakage never adds credits.
- Leakage, ``tonnes`` rows: lognormal as for emissions.
- All inputs are independent (no correlation is modelled).

Draws are generated in fixed-size chunks from ``numpy.random.default_rng(seed)``
so memory stays bounded and a rerun with the same seed and inputs gives the
same numbers.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Sequence

import numpy as np
from scipy.special import ndtri

CHUNK_DRAWS = 1 << 15

DISTRIBUTIONS = (
    "IPCC 2006 Vol.1 Ch.3 Sec. 3.2.3.2 (Approach 2), independent inputs. "
    "Gross removals: value + SE x Student-t(df) (standard normal when df is unknown). "
    "Baseline per stratum: normal, sd = half-width / z. "
    "Project emissions per row: lognormal with mean = value, sd = half-width / z. "
    "Leakage percent rows: normal percent truncated at 0, applied to max(0, gross - baseline) per draw. "
    "Leakage tonnes rows: lognormal with mean = value, sd = half-width / z. "
    "z = standard normal quantile at (1 + confidence)/2. Interval: two-sided percentiles."
)


@dataclass(frozen=True)
class UncertainInputs:
    """Point values and half-widths (at the confidence level) of every uncertain input.

    ``leakage_percent`` and ``leakage_percent_half_width`` are in percent and
    percentage points; everything else in tCO2e.
    """

    gross_tco2e: float
    gross_standard_error_tco2e: float
    gross_df: float | None
    baseline_tco2e: Sequence[float] = ()
    baseline_half_width_tco2e: Sequence[float] = ()
    emission_tco2e: Sequence[float] = ()
    emission_half_width_tco2e: Sequence[float] = ()
    leakage_percent: Sequence[float] = ()
    leakage_percent_half_width: Sequence[float] = ()
    leakage_tonnes_tco2e: Sequence[float] = ()
    leakage_tonnes_half_width_tco2e: Sequence[float] = ()


@dataclass(frozen=True)
class MonteCarloSummary:
    draws: int
    seed: int
    mean_tco2e: float
    lower_tco2e: float
    upper_tco2e: float
    confidence_pct: float
    distributions: str

    @property
    def half_width_tco2e(self) -> float:
        return (self.upper_tco2e - self.lower_tco2e) / 2.0

    def to_dict(self) -> dict[str, object]:
        return asdict(self)


def z_for_confidence(confidence_pct: float) -> float:
    """Two-sided standard normal quantile, e.g. 1.6449 for 90 %."""
    if not 0.0 < confidence_pct < 100.0:
        raise ValueError(f"confidence_pct must be between 0 and 100, got {confidence_pct}")
    return float(ndtri(0.5 + confidence_pct / 200.0))


def lognormal_parameters(mean: np.ndarray, sd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(mu, sigma) of the log of a lognormal variable with the given mean and sd (mean > 0).

    sigma^2 = ln(1 + (sd/mean)^2), mu = ln(mean) - sigma^2/2 (moments of the
    lognormal distribution).
    """
    mean = np.asarray(mean, dtype=float)
    sd = np.asarray(sd, dtype=float)
    sigma2 = np.log1p((sd / mean) ** 2)
    return np.log(mean) - sigma2 / 2.0, np.sqrt(sigma2)


def draw_truncated_normal(rng: np.random.Generator, mean: float, sd: float, size: int) -> np.ndarray:
    """``size`` draws from a normal(mean, sd) truncated below at 0; requires mean >= 0.

    Rejection sampling: draws below 0 are redrawn until none remain. With
    mean >= 0 at least half of the draws are accepted each round, which is
    why a negative mean is refused. sd <= 0 returns the mean.
    """
    if not mean >= 0.0:
        raise ValueError(f"mean must be >= 0 for this sampler, got {mean}")
    if sd <= 0.0:
        return np.full(size, mean)
    x = mean + sd * rng.standard_normal(size)
    rejected = np.flatnonzero(x < 0.0)
    while rejected.size:
        x[rejected] = mean + sd * rng.standard_normal(rejected.size)
        rejected = rejected[x[rejected] < 0.0]
    return x


def _subtract_lognormals(
    rng: np.random.Generator, net: np.ndarray, mean: np.ndarray, hw: np.ndarray, z: float, buffer: np.ndarray
) -> None:
    """net -= one lognormal draw per row (constants where value <= 0 or hw == 0), in place."""
    uncertain = (mean > 0.0) & (hw > 0.0)
    net -= float(mean[~uncertain].sum())
    if not uncertain.any():
        return
    mu, sigma = lognormal_parameters(mean[uncertain], hw[uncertain] / z)
    for m, s in zip(mu, sigma):
        rng.standard_normal(net.size, out=buffer)
        buffer *= s
        buffer += m
        np.exp(buffer, out=buffer)
        net -= buffer


def _as_array(values: Sequence[float]) -> np.ndarray:
    return np.asarray(list(values), dtype=float).reshape(-1)


def draw_net_removals(inputs: UncertainInputs, confidence_pct: float, draws: int, seed: int) -> np.ndarray:
    """Net removals per draw (tCO2e), array of length ``draws``; see the module docstring."""
    if draws < 1:
        raise ValueError("draws must be at least 1")
    z = z_for_confidence(confidence_pct)
    rng = np.random.default_rng(seed)

    baseline_total = float(_as_array(inputs.baseline_tco2e).sum())
    baseline_sd = float(np.sqrt(np.sum((_as_array(inputs.baseline_half_width_tco2e) / z) ** 2)))
    emission = _as_array(inputs.emission_tco2e)
    emission_hw = np.abs(_as_array(inputs.emission_half_width_tco2e))
    pct = np.maximum(_as_array(inputs.leakage_percent), 0.0)
    pct_sd = np.abs(_as_array(inputs.leakage_percent_half_width)) / z
    tonnes = np.maximum(_as_array(inputs.leakage_tonnes_tco2e), 0.0)
    tonnes_hw = np.abs(_as_array(inputs.leakage_tonnes_half_width_tco2e))
    se = abs(float(inputs.gross_standard_error_tco2e))
    df = inputs.gross_df

    out = np.empty(draws)
    buffer = np.empty(min(CHUNK_DRAWS, draws))
    for start in range(0, draws, CHUNK_DRAWS):
        size = min(CHUNK_DRAWS, draws - start)
        net = out[start : start + size]
        work = buffer[:size]
        net[:] = rng.standard_normal(size) if df is None else rng.standard_t(df, size)
        net *= se
        net += inputs.gross_tco2e
        rng.standard_normal(size, out=work)
        work *= baseline_sd
        work += baseline_total
        net -= work  # net is now gross - baseline for this draw
        if pct.size:
            leakage_share = np.zeros(size)
            for m, s in zip(pct, pct_sd):
                leakage_share += draw_truncated_normal(rng, float(m), float(s), size)
            leakage_share *= np.maximum(net, 0.0) / 100.0
            net -= leakage_share
        _subtract_lognormals(rng, net, emission, emission_hw, z, work)
        _subtract_lognormals(rng, net, tonnes, tonnes_hw, z, work)
    return out


def summarise_draws(net_draws_tco2e: np.ndarray, confidence_pct: float, seed: int) -> MonteCarloSummary:
    """Mean and two-sided percentile interval at ``confidence_pct`` of the draws."""
    tail = (100.0 - confidence_pct) / 2.0
    lower, upper = np.percentile(net_draws_tco2e, [tail, 100.0 - tail])
    return MonteCarloSummary(
        draws=int(net_draws_tco2e.size),
        seed=int(seed),
        mean_tco2e=float(np.mean(net_draws_tco2e)),
        lower_tco2e=float(lower),
        upper_tco2e=float(upper),
        confidence_pct=float(confidence_pct),
        distributions=DISTRIBUTIONS,
    )


def simulate_net_removals(inputs: UncertainInputs, confidence_pct: float, draws: int, seed: int) -> MonteCarloSummary:
    """Approach 2 (IPCC 2006 Vol. 1 Ch. 3 Sec. 3.2.3.2) summary of net removals."""
    return summarise_draws(draw_net_removals(inputs, confidence_pct, draws, seed), confidence_pct, seed)
