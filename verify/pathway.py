"""What every pathway module hands to the accounting chain."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from .accounting import GrossRemovals
from .findings import Finding
from .sampling import ChangeEstimate

SAMPLING_METHODS = [
    {"name": "Stratified estimator of a total", "value": "T = sum A_h * mean_h; Var(T) = sum A_h^2 * s_h^2 / n_h",
     "unit": "", "source": "Cochran, Sampling Techniques, 3rd ed. (1977), Ch. 5, Eqs. 5.1-5.2 (no finite population correction)"},
    {"name": "Effective degrees of freedom", "value": "Satterthwaite approximation",
     "unit": "", "source": "Cochran, Sampling Techniques, 3rd ed. (1977), Sec. 5.4, Eq. 5.16"},
    {"name": "Confidence half-width", "value": "t(df, (1 + confidence)/2) * standard error",
     "unit": "", "source": "Student's t distribution (scipy.stats.t)"},
]


@dataclass(frozen=True)
class PathwayEstimate:
    """Gross removals of a pathway with the detail the outputs show."""

    gross: GrossRemovals
    strata: list[dict[str, Any]]
    methods: list[dict[str, Any]]
    findings: list[Finding] = field(default_factory=list)
    units: pd.DataFrame | None = None  # per sampling unit and event, for the results workbook


def gross_from_change(change: ChangeEstimate) -> GrossRemovals:
    return GrossRemovals(
        value_tco2e=change.total_change,
        standard_error_tco2e=change.standard_error,
        df=change.df,
        half_width_tco2e=change.half_width,
    )


def strata_rows(change: ChangeEstimate) -> list[dict[str, Any]]:
    """Per-stratum table of a stock change estimated in tCO2e."""
    return [
        {
            "stratum_id": s.stratum_id,
            "area_ha": s.area_ha,
            "estimator": s.estimator,
            "n_first": s.n_first,
            "n_last": s.n_last,
            "n_paired": s.n_paired,
            "stock_first_tco2e": s.stock_first_total,
            "stock_last_tco2e": s.stock_last_total,
            "change_tco2e": s.change_total,
            "standard_error_tco2e": s.standard_error,
            "df": s.df,
            "half_width_tco2e": s.half_width,
            "uncertainty_pct": s.uncertainty_pct,
        }
        for s in change.strata
    ]
