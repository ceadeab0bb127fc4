"""The accounting chain for one monitoring period, on plain values.

From gross removals (computed by a pathway module) to issuable credits by
vintage, in the order of the design (accounting chain, sections 2-9):

2. baseline removals, 3. project emissions, 4. leakage, 5. net removals and
their uncertainty (IPCC 2006 Guidelines Vol. 1 Ch. 3 Eq. 3.2, or Approach 2
Monte Carlo), 6. uncertainty deduction, 7. permanence buffer, 8. issuable
credits by vintage, 9. reversals.

Bad values that validation could have missed never raise: they become
findings and a documented fallback (usually zero or the default setting).
"""

from __future__ import annotations

import math
import numbers
from dataclasses import asdict, dataclass, field, replace
from datetime import date
from typing import Sequence

from verify import factors, montecarlo
from verify.findings import Finding

# Julian year (365.25 days, the IAU definition): converts days to years
# without favouring leap or common years.
DAYS_PER_JULIAN_YEAR = 365.25
# Tolerance for rounding down to whole tonnes: a result such as 99.99999999999
# is float noise around 100, not 99.
FLOOR_ABS_TOLERANCE = 1e-9
FLOOR_REL_TOLERANCE = 1e-12
# Upper bound on Monte Carlo draws, to keep memory bounded (8 bytes per draw).
MAX_MONTE_CARLO_DRAWS = 10_000_000

UNCERTAINTY_RULES = ("lower_bound", "excess_over_threshold")
UNCERTAINTY_METHODS = ("analytic", "monte_carlo")
LEAKAGE_METHODS = ("percent", "tonnes")
TOTAL_KEYS = (
    "gross_removals_tco2e",
    "baseline_tco2e",
    "project_emissions_tco2e",
    "leakage_tco2e",
    "net_removals_tco2e",
    "uncertainty_pct",
    "uncertainty_deduction_tco2e",
    "buffer_pct",
    "buffer_tco2e",
    "issuable_credits",
)
_ACCOUNTING = "Accounting chain design"
_EQ_3_2 = "IPCC 2006 Guidelines Vol. 1 Ch. 3 Eq. 3.2"
_APPROACH_2 = "IPCC 2006 Guidelines Vol. 1 Ch. 3 Sec. 3.2.3.2 (Approach 2)"


@dataclass(frozen=True)
class GrossRemovals:
    """Gross removals from the pathway module; ``df`` None means a normal quantile was used."""

    value_tco2e: float
    standard_error_tco2e: float
    df: float | None
    half_width_tco2e: float


@dataclass(frozen=True)
class BaselineRow:
    stratum_id: str
    area_ha: float
    rate_tco2e_per_ha_yr: float
    uncertainty_pct: float


@dataclass(frozen=True)
class EmissionRow:
    source: str
    activity_amount: float
    ef_kg_per_unit: float
    gas: str
    uncertainty_pct: float


@dataclass(frozen=True)
class LeakageRow:
    leakage_type: str
    method: str
    value: float
    uncertainty_pct: float


@dataclass(frozen=True)
class ReversalRow:
    stratum_id: str
    occurred_on: date
    tco2e_lost: float
    avoidable: bool


@dataclass(frozen=True)
class ChainSettings:
    gwp_set: str = "AR6"
    confidence_pct: float = 90.0
    uncertainty_rule: str = "lower_bound"
    uncertainty_threshold_pct: float = 10.0
    uncertainty_method: str = "analytic"
    monte_carlo_draws: int = 100000
    random_seed: int = 20261201
    buffer_minimum_pct: float = 10.0


@dataclass(frozen=True)
class ChainResult:
    """Everything the chain computed; see :func:`run_chain` for the meaning of each part."""

    totals: dict[str, float | int | None]
    half_widths_tco2e: dict[str, float]
    vintages: list[dict[str, float | int | None]]
    reversal: dict[str, float]
    monte_carlo: dict[str, object] | None
    emissions_detail: list[dict[str, object]]
    methods: list[dict[str, object]]
    findings: list[Finding] = field(default_factory=list)

    def to_dict(self) -> dict[str, object]:
        """Plain JSON-ready dict (findings as dicts)."""
        out = {k: v for k, v in asdict(self).items() if k != "findings"}
        out["findings"] = [f.to_dict() for f in self.findings]
        return out


# ---------------------------------------------------------------- small calculations


def period_days(period_start: date, period_end: date) -> int:
    """Days in the period, both ends included (0 when the end is before the start)."""
    return max(0, (period_end - period_start).days + 1)


def period_years(period_start: date, period_end: date) -> float:
    """Length of the period in Julian years: inclusive days / 365.25."""
    return period_days(period_start, period_end) / DAYS_PER_JULIAN_YEAR


def vintage_days(period_start: date, period_end: date) -> list[tuple[int, int]]:
    """(calendar year, days of the period in that year), both ends of the period included."""
    out = []
    for year in range(period_start.year, period_end.year + 1):
        days = period_days(max(period_start, date(year, 1, 1)), min(period_end, date(year, 12, 31)))
        if days:
            out.append((year, days))
    return out


def combine_in_quadrature(half_widths_tco2e: Sequence[float]) -> float:
    """Half-width of a sum or difference of independent quantities: sqrt(sum hw_i^2).

    IPCC 2006 Guidelines Vol. 1 Ch. 3 Eq. 3.2, applied to absolute half-widths
    (Eq. 3.2 multiplies each percentage uncertainty by its quantity first).
    """
    return math.sqrt(math.fsum(hw * hw for hw in half_widths_tco2e))


def emission_tco2e(activity_amount: float, ef_kg_per_unit: float, gwp: float) -> float:
    """Activity x emission factor (kg gas per unit) / 1000 x GWP100 (accounting chain section 3)."""
    return activity_amount * ef_kg_per_unit / 1000.0 * gwp


def uncertainty_deduction_tco2e(
    net_tco2e: float, downside_tco2e: float, uncertainty_pct: float | None, rule: str, threshold_pct: float
) -> float:
    """Conservativeness deduction (accounting chain section 6).

    ``downside_tco2e`` is the distance from N down to its lower confidence bound
    (hw_N analytically, N - lower percentile with Monte Carlo).
    ``lower_bound``: deduction = downside, so the claim is the lower bound.
    ``excess_over_threshold``: deduction = N x max(0, U - threshold) / 100.
    Never negative; zero when N <= 0.
    """
    if net_tco2e <= 0.0:
        return 0.0
    if rule == "lower_bound":
        return max(0.0, downside_tco2e)
    excess_pct = max(0.0, (uncertainty_pct or 0.0) - threshold_pct)
    return net_tco2e * excess_pct / 100.0


def buffer_share_pct(risk_scores_pct: Sequence[float], buffer_minimum_pct: float) -> float:
    """Buffer share = max(minimum, sum of risk scores) (accounting chain section 7)."""
    return max(buffer_minimum_pct, math.fsum(risk_scores_pct))


def buffer_tco2e(share_pct: float, net_after_deduction_tco2e: float) -> float:
    """Buffer contribution = share/100 x (N - deduction) when positive, else 0."""
    return share_pct / 100.0 * net_after_deduction_tco2e if net_after_deduction_tco2e > 0.0 else 0.0


def floor_whole_tonnes(value_tco2e: float) -> int:
    """Whole credits, rounded down, never below zero (common practice, no source).

    A tolerance (1e-9 t, or 1e-12 relative for large values) keeps float noise
    such as 99.99999999999 from losing a whole credit. Non-finite values give 0.
    """
    if not math.isfinite(value_tco2e):
        return 0
    tolerance = max(FLOOR_ABS_TOLERANCE, FLOOR_REL_TOLERANCE * abs(value_tco2e))
    return max(0, math.floor(value_tco2e + tolerance))


# ---------------------------------------------------------------- input checks


def _method(name: str, value: object, unit: str, source: str) -> dict[str, object]:
    return {"name": name, "value": value, "unit": unit, "source": source}


def _number(value: object, what: str, location: str, findings: list[Finding]) -> float:
    """A finite float, or 0.0 and an error finding."""
    try:
        number = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        number = math.nan
    if math.isfinite(number):
        return number
    findings.append(
        Finding("error", "non_numeric_value", location, f"{what} is not a finite number ({value!r}); 0 was used. Enter a number.")
    )
    return 0.0


def _uncertainty(value: object, what: str, location: str, findings: list[Finding]) -> float:
    pct = _number(value, what, location, findings)
    if pct < 0.0:
        findings.append(
            Finding("warning", "negative_uncertainty", location, f"{what} is negative ({pct}); its absolute value was used. Enter a half-width as a positive percent.")
        )
    return abs(pct)


def _checked_settings(settings: ChainSettings, findings: list[Finding]) -> ChainSettings:
    """Settings with every invalid value replaced by its default (error finding for each)."""
    defaults = ChainSettings()
    fixes: dict[str, object] = {}

    def reject(name: str, why: str) -> None:
        default = getattr(defaults, name)
        fixes[name] = default
        findings.append(
            Finding("error", "invalid_setting", "Project", f"{name} = {getattr(settings, name)!r} {why}; the default {default!r} was used. Correct it on the Project sheet.")
        )

    gwp_set = str(settings.gwp_set).strip().upper()
    if gwp_set in factors.GWP_SETS:
        fixes["gwp_set"] = gwp_set
    else:
        reject("gwp_set", f"is not one of {', '.join(factors.GWP_SETS)}")
    if not _finite_between(settings.confidence_pct, 0.0, 100.0, inclusive=False):
        reject("confidence_pct", "must be a number strictly between 0 and 100")
    if settings.uncertainty_rule not in UNCERTAINTY_RULES:
        reject("uncertainty_rule", f"is not one of {', '.join(UNCERTAINTY_RULES)}")
    if not _finite_between(settings.uncertainty_threshold_pct, 0.0, math.inf):
        reject("uncertainty_threshold_pct", "must be a number >= 0")
    if settings.uncertainty_method not in UNCERTAINTY_METHODS:
        reject("uncertainty_method", f"is not one of {', '.join(UNCERTAINTY_METHODS)}")
    if not _whole_between(settings.monte_carlo_draws, 2, MAX_MONTE_CARLO_DRAWS):
        reject("monte_carlo_draws", f"must be a whole number from 2 to {MAX_MONTE_CARLO_DRAWS:,}")
    if not _whole_between(settings.random_seed, 0, 2**63 - 1):
        reject("random_seed", "must be a whole number >= 0")
    if not _finite_between(settings.buffer_minimum_pct, 0.0, 100.0):
        reject("buffer_minimum_pct", "must be a number from 0 to 100")
    return replace(settings, **fixes)  # type: ignore[arg-type]


def _finite_between(value: object, low: float, high: float, inclusive: bool = True) -> bool:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        return False
    return low <= value <= high if inclusive else low < value < high


def _whole_between(value: object, low: int, high: int) -> bool:
    return _finite_between(value, low, high) and float(value) == int(value)  # type: ignore[arg-type]


def _checked_gross(gross: GrossRemovals, findings: list[Finding]) -> GrossRemovals:
    value = _number(gross.value_tco2e, "Gross removals", "Gross removals", findings)
    se = abs(_number(gross.standard_error_tco2e, "Standard error of gross removals", "Gross removals", findings))
    hw = abs(_number(gross.half_width_tco2e, "Half-width of gross removals", "Gross removals", findings))
    df = gross.df
    if df is not None and not _finite_between(df, 0.0, math.inf, inclusive=False):
        findings.append(
            Finding("warning", "invalid_degrees_of_freedom", "Gross removals", f"Degrees of freedom {df!r} are not a positive number; a normal distribution was used instead of Student's t.")
        )
        df = None
    return GrossRemovals(value, se, None if df is None else float(df), hw)


# ---------------------------------------------------------------- chain steps


@dataclass(frozen=True)
class _Parts:
    """Per-row values and half-widths (tCO2e) of one term of the chain."""

    values: list[float]
    half_widths: list[float]

    @property
    def total(self) -> float:
        return math.fsum(self.values)

    @property
    def half_width(self) -> float:
        return combine_in_quadrature(self.half_widths)


def _baseline(rows: Sequence[BaselineRow], years: float, findings: list[Finding]) -> _Parts:
    """B_h = rate x area x years; hw_B_h = |B_h| x u/100 (accounting chain section 2)."""
    values, half_widths = [], []
    for row in rows:
        where = f"stratum {row.stratum_id!r}"
        b = _number(row.rate_tco2e_per_ha_yr, f"Baseline rate of {where}", "Baseline", findings) * _number(
            row.area_ha, f"Area of {where}", "Baseline", findings
        ) * years
        values.append(b)
        half_widths.append(abs(b) * _uncertainty(row.uncertainty_pct, f"Baseline uncertainty of {where}", "Baseline", findings) / 100.0)
    return _Parts(values, half_widths)


def _emissions(
    rows: Sequence[EmissionRow], gwp_set: str, findings: list[Finding]
) -> tuple[_Parts, list[dict[str, object]], dict[str, factors.Factor]]:
    """E_i = amount x EF / 1000 x GWP; hw_i = E_i x u/100 (accounting chain section 3).

    A row with an unknown gas counts 0 with an error finding; a negative row is
    set to 0 (project emissions cannot add credits) with a warning.
    Returns the parts, one detail dict per input row (same order) and the GWPs used.
    """
    values, half_widths, detail, used = [], [], [], {}
    for row in rows:
        where = f"source {row.source!r}"
        amount = _number(row.activity_amount, f"Activity amount of {where}", "Emissions", findings)
        ef = _number(row.ef_kg_per_unit, f"Emission factor of {where}", "Emissions", findings)
        u = _uncertainty(row.uncertainty_pct, f"Uncertainty of {where}", "Emissions", findings)
        try:
            gwp = factors.gwp100(row.gas, gwp_set)
        except ValueError:
            gwp = None
            findings.append(
                Finding("error", "unknown_gas", "Emissions", f"Gas {row.gas!r} of {where} is not one of {', '.join(factors.GAS_CODES)}; the row was counted as 0. Correct the gas.")
            )
        e = emission_tco2e(amount, ef, gwp.value) if gwp else 0.0
        if e < 0.0:
            findings.append(
                Finding("warning", "negative_emission", "Emissions", f"Emissions of {where} are negative ({e:.6g} tCO2e); they were set to 0 because project emissions cannot add credits. Check the amount and factor.")
            )
            e = 0.0
        hw = e * u / 100.0
        values.append(e)
        half_widths.append(hw)
        if gwp:
            used[gwp.name] = gwp
        detail.append(
            {
                "source": row.source,
                "gas": row.gas,
                "activity_amount": amount,
                "ef_kg_per_unit": ef,
                "gwp_set": gwp_set,
                "gwp": gwp.value if gwp else None,
                "gwp_source": gwp.source if gwp else None,
                "tco2e": e,
                "uncertainty_pct": u,
                "half_width_tco2e": hw,
            }
        )
    return _Parts(values, half_widths), detail, used


@dataclass(frozen=True)
class _Leakage:
    parts: _Parts
    percents: list[float]
    percent_half_widths: list[float]
    tonnes: list[float]
    tonnes_half_widths: list[float]


def _leakage(rows: Sequence[LeakageRow], gross_tco2e: float, baseline_tco2e: float, findings: list[Finding]) -> _Leakage:
    """Leakage (accounting chain section 4); never adds credits.

    percent: L = value/100 x max(0, gross - B); tonnes: L = value;
    hw_L = L x u/100. Negative values are clipped to 0 (warning); an unknown
    method counts 0 (error).
    """
    base = max(0.0, gross_tco2e - baseline_tco2e)
    values, half_widths, pcts, pct_hws, tonnes, tonnes_hws = [], [], [], [], [], []
    for row in rows:
        where = f"leakage row {row.leakage_type!r} ({row.method!r})"
        value = _number(row.value, f"Value of {where}", "Leakage", findings)
        u = _uncertainty(row.uncertainty_pct, f"Uncertainty of {where}", "Leakage", findings)
        if value < 0.0:
            findings.append(
                Finding("warning", "negative_leakage", "Leakage", f"Value of {where} is negative ({value}); 0 was used because leakage cannot add credits.")
            )
            value = 0.0
        method = str(row.method).strip().lower()
        if method == "percent":
            amount = value / 100.0 * base
            pcts.append(value)
            pct_hws.append(value * u / 100.0)
        elif method == "tonnes":
            amount = value
            tonnes.append(value)
            tonnes_hws.append(value * u / 100.0)
        else:
            findings.append(
                Finding("error", "unknown_leakage_method", "Leakage", f"Method {row.method!r} of {where} is not one of {', '.join(LEAKAGE_METHODS)}; the row was counted as 0. Correct the method.")
            )
            amount = 0.0
        values.append(amount)
        half_widths.append(amount * u / 100.0)
    return _Leakage(_Parts(values, half_widths), pcts, pct_hws, tonnes, tonnes_hws)


def reversal_accounting(
    net_tco2e: float, rows: Sequence[ReversalRow], period_start: date, period_end: date, findings: list[Finding]
) -> dict[str, float]:
    """Reversal to cancel from the buffer and the part the proponent compensates (section 9).

    Deviation from the accounting chain text, on purpose: it says rows on
    ``Reversals`` "add to" |N|. But a loss that happened inside the period is
    already in N, because gross removals come from remeasured stocks; adding
    the rows again would count the loss twice. So:

    - measured reversal = max(0, -N) (the loss the remeasurement shows);
    - reported losses = sum of the rows that occurred within the period;
    - avoidable = min(measured reversal, sum of avoidable rows);
    - unavoidable = measured reversal - avoidable (includes any loss whose
      cause was not reported);
    - to cancel from the buffer = measured reversal; to compensate = avoidable.

    When N >= 0 and rows exist, a note says the losses are already reflected in
    net removals. Rows dated outside the period are ignored (warning); rows
    without a valid date are counted (warning).
    """
    reported = avoidable_reported = 0.0
    for row in rows:
        where = f"reversal in stratum {row.stratum_id!r}"
        lost = _number(row.tco2e_lost, f"Loss of {where}", "Reversals", findings)
        if lost < 0.0:
            findings.append(
                Finding("warning", "negative_reversal", "Reversals", f"Loss of {where} is negative ({lost}); its absolute value was used. Enter tonnes lost as a positive number.")
            )
            lost = -lost
        if not isinstance(row.occurred_on, date):
            findings.append(
                Finding("warning", "reversal_without_date", "Reversals", f"The {where} has no valid date ({row.occurred_on!r}); it was counted in this period. Enter the date.")
            )
        elif not period_start <= row.occurred_on <= period_end:
            findings.append(
                Finding("warning", "reversal_outside_period", "Reversals", f"The {where} on {row.occurred_on.isoformat()} is outside the monitoring period; it was ignored.")
            )
            continue
        reported += lost
        if row.avoidable:
            avoidable_reported += lost

    measured = max(0.0, -net_tco2e)
    avoidable = min(measured, avoidable_reported)
    if net_tco2e >= 0.0 and reported > 0.0:
        findings.append(
            Finding("note", "reversal_reflected_in_net", "Reversals", f"Reported losses of {reported:.6g} tCO2e in the period are already reflected in the remeasured net removals; nothing is cancelled from the buffer.")
        )
    if measured > reported:
        findings.append(
            Finding("note", "reversal_cause_unreported", "Reversals", f"Net removals show a loss of {measured:.6g} tCO2e but only {reported:.6g} tCO2e are reported on Reversals; the unexplained part is treated as unavoidable. Establish its cause.")
        )
    return {
        "measured_reversal_tco2e": measured,
        "reported_losses_tco2e": reported,
        "avoidable_tco2e": avoidable,
        "unavoidable_tco2e": measured - avoidable,
        "to_cancel_from_buffer_tco2e": measured,
        "to_compensate_tco2e": avoidable,
    }


def _vintages(period_start: date, period_end: date, totals: dict[str, float | int | None]) -> list[dict[str, float | int | None]]:
    """Pro-rata split by days in each calendar year; issuable = floor(N - D - buffer) per vintage (section 8)."""
    days_total = period_days(period_start, period_end)
    out = []
    for year, days in vintage_days(period_start, period_end):
        share = days / days_total
        row: dict[str, float | int | None] = {"vintage": year, "days": days, "share": share}
        for key in TOTAL_KEYS:
            value = totals[key]
            row[key] = value if key in ("uncertainty_pct", "buffer_pct") else float(value) * share  # type: ignore[arg-type]
        row["issuable_credits"] = floor_whole_tonnes(
            row["net_removals_tco2e"] - row["uncertainty_deduction_tco2e"] - row["buffer_tco2e"]  # type: ignore[operator]
        )
        out.append(row)
    return out


# ---------------------------------------------------------------- the chain


def run_chain(
    period_start: date,
    period_end: date,
    gross: GrossRemovals,
    baseline: Sequence[BaselineRow],
    emissions: Sequence[EmissionRow],
    leakage: Sequence[LeakageRow],
    risk_scores_pct: Sequence[float],
    reversals: Sequence[ReversalRow],
    settings: ChainSettings,
) -> ChainResult:
    """Run the accounting chain (sections 2-9) for one monitoring period.

    - Years in period = inclusive days / 365.25 (Julian year).
    - Baseline B = sum rate x area x years; hw by quadrature.
    - Emissions E = sum amount x EF / 1000 x GWP100 (``settings.gwp_set``); hw by quadrature
      (IPCC 2006 Vol. 1 Ch. 3 Eq. 3.2 on absolute half-widths).
    - Leakage L: percent of max(0, gross - B), or tonnes; never adds credits.
    - Net N = gross - B - E - L; hw_N = sqrt(sum hw^2) (Eq. 3.2); U = hw_N / N x 100, None when N <= 0.
      With ``monte_carlo`` (IPCC 2006 Vol. 1 Ch. 3 Sec. 3.2.3.2, Approach 2; see
      :mod:`verify.montecarlo`) N stays the analytic point value, hw_N = (upper - lower)/2
      and the lower-bound deduction is max(0, N - lower).
    - Deduction, buffer, vintages and reversals as in :func:`uncertainty_deduction_tco2e`,
      :func:`buffer_tco2e`, :func:`floor_whole_tonnes` and :func:`reversal_accounting`.
    """
    findings: list[Finding] = []
    settings = _checked_settings(settings, findings)
    days = period_days(period_start, period_end)
    if days == 0:
        findings.append(
            Finding("error", "invalid_period", "Project", f"period_end {period_end.isoformat()} is before period_start {period_start.isoformat()}; no vintage can be issued. Correct the dates.")
        )
    years = days / DAYS_PER_JULIAN_YEAR
    gross = _checked_gross(gross, findings)

    base = _baseline(baseline, years, findings)
    emis, emissions_detail, gwps_used = _emissions(emissions, settings.gwp_set, findings)
    leak = _leakage(leakage, gross.value_tco2e, base.total, findings)
    net = gross.value_tco2e - base.total - emis.total - leak.parts.total
    hw_net = combine_in_quadrature([gross.half_width_tco2e, base.half_width, emis.half_width, leak.parts.half_width])
    downside = hw_net

    monte_carlo = None
    if settings.uncertainty_method == "monte_carlo":
        summary = montecarlo.simulate_net_removals(
            montecarlo.UncertainInputs(
                gross_tco2e=gross.value_tco2e,
                gross_standard_error_tco2e=gross.standard_error_tco2e,
                gross_df=gross.df,
                baseline_tco2e=base.values,
                baseline_half_width_tco2e=base.half_widths,
                emission_tco2e=emis.values,
                emission_half_width_tco2e=emis.half_widths,
                leakage_percent=leak.percents,
                leakage_percent_half_width=leak.percent_half_widths,
                leakage_tonnes_tco2e=leak.tonnes,
                leakage_tonnes_half_width_tco2e=leak.tonnes_half_widths,
            ),
            confidence_pct=settings.confidence_pct,
            draws=int(settings.monte_carlo_draws),
            seed=int(settings.random_seed),
        )
        monte_carlo = summary.to_dict()
        hw_net = summary.half_width_tco2e
        downside = net - summary.lower_tco2e

    uncertainty_pct = hw_net / net * 100.0 if net > 0.0 else None
    deduction = uncertainty_deduction_tco2e(
        net, downside, uncertainty_pct, settings.uncertainty_rule, settings.uncertainty_threshold_pct
    )
    scores = [_number(s, "Risk score", "Risk", findings) for s in risk_scores_pct]
    share = buffer_share_pct(scores, settings.buffer_minimum_pct)
    buffer = buffer_tco2e(share, net - deduction)

    totals: dict[str, float | int | None] = {
        "gross_removals_tco2e": gross.value_tco2e,
        "baseline_tco2e": base.total,
        "project_emissions_tco2e": emis.total,
        "leakage_tco2e": leak.parts.total,
        "net_removals_tco2e": net,
        "uncertainty_pct": uncertainty_pct,
        "uncertainty_deduction_tco2e": deduction,
        "buffer_pct": share,
        "buffer_tco2e": buffer,
        "issuable_credits": 0,
    }
    vintages = _vintages(period_start, period_end, totals)
    totals["issuable_credits"] = sum(int(v["issuable_credits"]) for v in vintages)  # type: ignore[arg-type]

    return ChainResult(
        totals=totals,
        half_widths_tco2e={
            "gross": gross.half_width_tco2e,
            "baseline": base.half_width,
            "project_emissions": emis.half_width,
            "leakage": leak.parts.half_width,
            "net": hw_net,
        },
        vintages=vintages,
        reversal=reversal_accounting(net, reversals, period_start, period_end, findings),
        monte_carlo=monte_carlo,
        emissions_detail=emissions_detail,
        methods=_methods(settings, share, gwps_used),
        findings=findings,
    )


def _methods(settings: ChainSettings, share_pct: float, gwps_used: dict[str, factors.Factor]) -> list[dict[str, object]]:
    """Every factor and equation the chain used, with its source."""
    methods = [
        _method("Year length (Julian year)", DAYS_PER_JULIAN_YEAR, "days", "IAU Julian year; years in period = inclusive days / 365.25"),
        _method("Baseline removals", "B = sum(rate x area x years); hw_B = |B_h| x u/100", "tCO2e", f"{_ACCOUNTING}, section 2"),
        _method("Project emissions", "E = sum(amount x EF / 1000 x GWP100)", "tCO2e", f"{_ACCOUNTING}, section 3"),
        *(gwp.to_method() for gwp in gwps_used.values()),
        _method("Leakage", "percent: value/100 x max(0, gross - B); tonnes: value; never negative", "tCO2e", f"{_ACCOUNTING}, section 4"),
        _method("Net removals", "N = gross - B - E - L", "tCO2e", f"{_ACCOUNTING}, section 5"),
        _method("Combination of uncertainties (sums)", "hw = sqrt(sum hw_i^2)", "tCO2e", _EQ_3_2),
        _method("Confidence level (two-sided)", settings.confidence_pct, "%", "Project setting"),
    ]
    if settings.uncertainty_method == "monte_carlo":
        methods.append(
            _method("Monte Carlo simulation", f"{settings.monte_carlo_draws} draws, seed {settings.random_seed}", "", _APPROACH_2)
        )
    if settings.uncertainty_rule == "lower_bound":
        methods.append(_method("Uncertainty deduction (lower bound)", "N - lower confidence bound of N", "tCO2e", f"{_ACCOUNTING}, section 6"))
    else:
        methods.append(
            _method(
                "Uncertainty deduction (excess over threshold)",
                f"N x max(0, U - {settings.uncertainty_threshold_pct:g})/100",
                "tCO2e",
                f"{_ACCOUNTING}, section 6",
            )
        )
    methods += [
        _method("Buffer share", share_pct, "%", f"{_ACCOUNTING}, section 7: max(minimum {settings.buffer_minimum_pct:g} %, sum of risk scores)"),
        _method("Vintage allocation", "pro rata by days of the period in each calendar year", "", f"{_ACCOUNTING}, section 8"),
        _method("Issuable credits", "floor(N - deduction - buffer) per vintage, never below 0", "credits (tCO2e)", "Common practice, no source"),
        _method(
            "Reversal",
            "measured = max(0, -N); to compensate = min(measured, avoidable losses reported)",
            "tCO2e",
            f"{_ACCOUNTING}, section 9 (reported losses not added to the remeasured loss)",
        ),
    ]
    return methods
