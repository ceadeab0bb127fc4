"""Sampling statistics: stratified estimates of stock change and a paired t-test.

Generic over the sample unit: a "unit" is a forest plot or a soil sampling
point; ``value_per_ha`` is whatever density the caller measured on it (e.g.
tCO2e/ha or t C/ha), and every total is that unit times hectares.

Stratified random sampling (Cochran, W.G., Sampling Techniques, 3rd ed., 1977,
Ch. 5, Eqs. 5.1-5.2 written for totals over area): stratum h with area A_h
(ha) and n_h units of mean ybar_h and sample variance s2_h gives
T = sum A_h * ybar_h and Var(T) = sum A_h^2 * s2_h / n_h. Units cover a
negligible share of the area, so no finite population correction is applied.
Effective degrees of freedom by Satterthwaite's approximation (Cochran 1977,
Sec. 5.4, Eq. 5.16).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike
from scipy import special

from verify.findings import Finding

Estimator = Literal["paired", "independent"]


def t_quantile(df: float | None, confidence_pct: float) -> float:
    """Two-sided Student t quantile t_{(1+conf)/2, df}.

    ``df`` None or infinite gives the standard normal quantile (the limit of
    t). ``scipy.special.stdtrit`` / ``scipy.special.ndtri`` do the work: the
    functions ``scipy.stats.t.ppf`` / ``scipy.stats.norm.ppf`` call, without
    the import time of scipy.stats. A NaN df gives NaN.
    """
    p = (1.0 + confidence_pct / 100.0) / 2.0
    if df is None or math.isinf(df):
        return float(special.ndtri(p))
    return float(special.stdtrit(df, p))


def satterthwaite_df(g: ArrayLike, s2: ArrayLike, n: ArrayLike) -> float | None:
    """Satterthwaite's effective degrees of freedom of a sum of variance components.

    Cochran, Sampling Techniques, 3rd ed. (1977), Sec. 5.4, Eq. 5.16:
    df = (sum g_h s2_h)^2 / sum((g_h s2_h)^2 / (n_h - 1)); for a stratified
    total without finite population correction g_h = A_h^2 / n_h.

    Returns None when the total variance is 0 (no spread: the caller uses the
    normal quantile, and the half-width is 0 anyway), NaN when any component
    is undefined (NaN). Components with zero variance add nothing.
    """
    g_arr = np.asarray(g, dtype=float)
    s2_arr = np.asarray(s2, dtype=float)
    n_arr = np.asarray(n, dtype=float)
    components = g_arr * s2_arr
    total = float(np.sum(components))
    if math.isnan(total):
        return float("nan")
    if total == 0.0:
        return None
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(components == 0.0, 0.0, components**2 / (n_arr - 1.0))
    return float(total**2 / np.sum(terms))


@dataclass(frozen=True)
class StratumChange:
    """Change estimate for one stratum; totals are value_per_ha units times ha.

    ``estimator`` is "paired" when every unit measured at either event was
    measured at both (per-unit differences), else "independent". ``n_paired``
    counts units measured at both events under either estimator. Stock
    variances are those of ``stock_first_total`` / ``stock_last_total``.
    ``variance``, ``standard_error``, ``half_width`` refer to ``change_total``.
    """

    stratum_id: str
    area_ha: float
    estimator: Estimator
    n_first: int
    n_last: int
    n_paired: int
    mean_first_per_ha: float
    mean_last_per_ha: float
    stock_first_total: float
    stock_last_total: float
    stock_first_variance: float
    stock_last_variance: float
    change_total: float
    variance: float
    standard_error: float
    df: float | None
    t_value: float
    half_width: float
    uncertainty_pct: float | None


@dataclass(frozen=True)
class ChangeEstimate:
    """Project-level change = sum over strata, with Satterthwaite df.

    ``uncertainty_pct`` = half_width / |total_change| * 100, None when the
    change is exactly 0. NaN anywhere means a stratum could not be estimated;
    ``findings`` says which and why.
    """

    first_event: str
    last_event: str
    confidence_pct: float
    stock_first_total: float
    stock_last_total: float
    total_change: float
    variance: float
    standard_error: float
    df: float | None
    t_value: float
    half_width: float
    uncertainty_pct: float | None
    strata: list[StratumChange] = field(default_factory=list)
    findings: list[Finding] = field(default_factory=list)


@dataclass(frozen=True)
class _Component:
    """One variance component g * s2 with n units (for Satterthwaite)."""

    g: float
    s2: float
    n: int


def _mean(values: np.ndarray) -> float:
    return float(np.mean(values)) if values.size else float("nan")


def _sample_variance(values: np.ndarray) -> float:
    """Unbiased sample variance (ddof=1); NaN with fewer than 2 values."""
    return float(np.var(values, ddof=1)) if values.size >= 2 else float("nan")


def _uncertainty_pct(half_width: float, change: float) -> float | None:
    return None if change == 0.0 else half_width / abs(change) * 100.0


def _component_df(components: Sequence[_Component]) -> float | None:
    return satterthwaite_df(
        [c.g for c in components], [c.s2 for c in components], [c.n for c in components]
    )


def _component_variance(area_ha: float, values: np.ndarray) -> _Component:
    n = values.size
    g = area_ha**2 / n if n else float("nan")
    return _Component(g=g, s2=_sample_variance(values), n=n)


def _stratum_estimate(
    stratum_id: str,
    area_ha: float,
    first: pd.Series,
    last: pd.Series,
    confidence_pct: float,
) -> tuple[StratumChange, list[_Component]]:
    """Estimate one stratum; ``first``/``last`` are value_per_ha indexed by unit_id."""
    paired_ids = first.index.intersection(last.index)
    is_paired = len(paired_ids) > 0 and len(paired_ids) == len(first) == len(last)
    if is_paired:
        first_v = first.loc[paired_ids].to_numpy(dtype=float)
        last_v = last.loc[paired_ids].to_numpy(dtype=float)
        change_component = _component_variance(area_ha, last_v - first_v)
        components = [change_component]
    else:
        first_v = first.to_numpy(dtype=float)
        last_v = last.to_numpy(dtype=float)
        components = [_component_variance(area_ha, last_v), _component_variance(area_ha, first_v)]
    first_component = _component_variance(area_ha, first_v)
    last_component = _component_variance(area_ha, last_v)
    mean_first, mean_last = _mean(first_v), _mean(last_v)
    change = area_ha * (mean_last - mean_first)
    variance = float(sum(c.g * c.s2 for c in components))
    df = _component_df(components)
    t_value = t_quantile(df, confidence_pct)
    se = math.sqrt(variance) if not math.isnan(variance) else float("nan")
    half_width = t_value * se
    estimate = StratumChange(
        stratum_id=stratum_id,
        area_ha=area_ha,
        estimator="paired" if is_paired else "independent",
        n_first=len(first),
        n_last=len(last),
        n_paired=len(paired_ids),
        mean_first_per_ha=mean_first,
        mean_last_per_ha=mean_last,
        stock_first_total=area_ha * mean_first,
        stock_last_total=area_ha * mean_last,
        stock_first_variance=first_component.g * first_component.s2,
        stock_last_variance=last_component.g * last_component.s2,
        change_total=change,
        variance=variance,
        standard_error=se,
        df=df,
        t_value=t_value,
        half_width=half_width,
        uncertainty_pct=_uncertainty_pct(half_width, change),
    )
    return estimate, components


def _stratum_findings(
    estimate: StratumChange, first_event: str, last_event: str, sheet: str
) -> list[Finding]:
    """Why a stratum's variance cannot be computed, if it cannot."""
    sid = estimate.stratum_id
    if estimate.n_first == 0 and estimate.n_last == 0:
        return [
            Finding(
                "error",
                "stratum_without_units",
                sheet,
                f"Stratum {sid!r} has an area of {estimate.area_ha:g} ha but no units on "
                f"{sheet} at event {first_event!r} or {last_event!r}. Add its units, or "
                "remove the stratum if it is not part of the project area.",
            )
        ]
    if estimate.estimator == "paired":
        if estimate.n_paired >= 2:
            return []
        return [
            Finding(
                "error",
                "too_few_units",
                sheet,
                f"Stratum {sid!r} has {estimate.n_paired} unit measured at both "
                f"{first_event!r} and {last_event!r}; a variance needs at least 2. "
                "Add units or merge the stratum with a similar one.",
            )
        ]
    findings = []
    for event, n in ((first_event, estimate.n_first), (last_event, estimate.n_last)):
        if n < 2:
            findings.append(
                Finding(
                    "error",
                    "too_few_units",
                    sheet,
                    f"Stratum {sid!r} has {n} unit(s) at event {event!r}; a variance "
                    "needs at least 2. Add units or merge the stratum with a similar one.",
                )
            )
    return findings


def _clean_units(
    units: pd.DataFrame,
    strata_area_ha: Mapping[str, float],
    first_event: str,
    last_event: str,
    sheet: str,
) -> tuple[pd.DataFrame, list[Finding]]:
    """Keep usable rows of the two events; report the ones left out."""
    rows = units[units["event"].isin([first_event, last_event])]
    findings: list[Finding] = []
    unknown = rows[~rows["stratum_id"].isin(list(strata_area_ha))]
    for stratum_id in pd.unique(unknown["stratum_id"]):
        findings.append(
            Finding(
                "error",
                "unit_stratum_unknown",
                sheet,
                f"Units on {sheet} name stratum {stratum_id!r}, which has no area on "
                "Strata; they are left out. Add the stratum or correct the stratum_id.",
            )
        )
    rows = rows[rows["stratum_id"].isin(list(strata_area_ha))]
    missing = rows[rows["value_per_ha"].isna()]
    for _, unit in missing.iterrows():
        findings.append(
            Finding(
                "error",
                "unit_value_missing",
                sheet,
                f"Unit {unit['unit_id']!r} at event {unit['event']!r} has no value, so it is "
                "left out of the estimate. Fix the data that feed it.",
            )
        )
    rows = rows[rows["value_per_ha"].notna()]
    duplicated = rows.duplicated(subset=["unit_id", "event"], keep="first")
    for _, unit in rows[duplicated].iterrows():
        findings.append(
            Finding(
                "error",
                "duplicate_unit",
                sheet,
                f"Unit {unit['unit_id']!r} appears more than once at event "
                f"{unit['event']!r}; only the first is used. Remove the duplicate.",
            )
        )
    return rows[~duplicated], findings


def stratified_change(
    units: pd.DataFrame,
    strata_area_ha: Mapping[str, float],
    first_event: str,
    last_event: str,
    confidence_pct: float,
    sheet: str = "Plots",
) -> ChangeEstimate:
    """Stratified estimate of the change in total stock between two events.

    ``units`` has columns unit_id, stratum_id, event, value_per_ha. Per
    stratum: if every unit measured at either event was measured at both, the
    change is estimated from per-unit differences d = y_last - y_first
    ("paired"); otherwise each event is estimated from all its units and
    Var(change) = Var_last + Var_first ("independent"; conservative, since it
    ignores the positive covariance of remeasured units). Estimator per event
    or per difference: Cochran (1977) Ch. 5, Eqs. 5.1-5.2 for totals,
    T = sum A_h * ybar_h, Var(T) = sum A_h^2 * s2_h / n_h.

    The project change and variance are sums over strata; the effective df is
    Satterthwaite's (Cochran 1977, Eq. 5.16) over every variance component
    (one per paired stratum, one per stratum and event otherwise). Never
    raises on bad data: a stratum that cannot be estimated gets NaN and a
    finding located on ``sheet``.
    """
    rows, findings = _clean_units(units, strata_area_ha, first_event, last_event, sheet)
    strata: list[StratumChange] = []
    components: list[_Component] = []
    for stratum_id, area_ha in strata_area_ha.items():
        in_stratum = rows[rows["stratum_id"] == stratum_id]
        first = _values_by_unit(in_stratum, first_event)
        last = _values_by_unit(in_stratum, last_event)
        estimate, stratum_components = _stratum_estimate(
            stratum_id, float(area_ha), first, last, confidence_pct
        )
        strata.append(estimate)
        components.extend(stratum_components)
        findings.extend(_stratum_findings(estimate, first_event, last_event, sheet))
    return _project_estimate(strata, components, first_event, last_event, confidence_pct, findings)


def _values_by_unit(rows: pd.DataFrame, event: str) -> pd.Series:
    at_event = rows[rows["event"] == event]
    return pd.Series(at_event["value_per_ha"].to_numpy(dtype=float), index=at_event["unit_id"])


def _project_estimate(
    strata: list[StratumChange],
    components: list[_Component],
    first_event: str,
    last_event: str,
    confidence_pct: float,
    findings: list[Finding],
) -> ChangeEstimate:
    change = float(sum(s.change_total for s in strata))
    variance = float(sum(s.variance for s in strata))
    df = _component_df(components)
    t_value = t_quantile(df, confidence_pct)
    se = math.sqrt(variance) if not math.isnan(variance) else float("nan")
    half_width = t_value * se
    return ChangeEstimate(
        first_event=first_event,
        last_event=last_event,
        confidence_pct=confidence_pct,
        stock_first_total=float(sum(s.stock_first_total for s in strata)),
        stock_last_total=float(sum(s.stock_last_total for s in strata)),
        total_change=change,
        variance=variance,
        standard_error=se,
        df=df,
        t_value=t_value,
        half_width=half_width,
        uncertainty_pct=_uncertainty_pct(half_width, change),
        strata=strata,
        findings=findings,
    )


@dataclass(frozen=True)
class PairedTest:
    """Paired t-test of a - b; interval of the mean difference at ``confidence_pct``."""

    n: int
    mean_difference: float
    sd_difference: float
    standard_error: float
    t_statistic: float
    df: float
    p_value: float
    confidence_pct: float
    t_value: float
    ci_low: float
    ci_high: float


def paired_t_test(a: ArrayLike, b: ArrayLike, confidence_pct: float) -> PairedTest:
    """Two-sided paired t-test of the mean of d = a - b against 0.

    Student's paired t-test (as in ``scipy.stats.ttest_rel``): t = dbar /
    (s_d / sqrt(n)), df = n - 1, p = 2 * P(T > |t|). Pairs with a missing
    value are dropped; ``n`` counts complete pairs. Fewer than 2 pairs give
    NaN statistics rather than an exception.
    """
    d = np.asarray(a, dtype=float) - np.asarray(b, dtype=float)
    d = d[~np.isnan(d)]
    n = int(d.size)
    mean = _mean(d)
    sd = math.sqrt(_sample_variance(d)) if n >= 2 else float("nan")
    se = sd / math.sqrt(n) if n >= 2 else float("nan")
    df = float(n - 1) if n >= 2 else float("nan")
    with np.errstate(divide="ignore", invalid="ignore"):
        t_stat = float(np.divide(mean, se))
    p_value = float(2.0 * special.stdtr(df, -abs(t_stat)))  # the t survival function, as scipy.stats.t.sf
    t_value = t_quantile(df, confidence_pct)
    return PairedTest(
        n=n,
        mean_difference=mean,
        sd_difference=sd,
        standard_error=se,
        t_statistic=t_stat,
        df=df,
        p_value=p_value,
        confidence_pct=confidence_pct,
        t_value=t_value,
        ci_low=mean - t_value * se,
        ci_high=mean + t_value * se,
    )
