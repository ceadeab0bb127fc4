"""Biochar pathway: persistent carbon of the batches applied within the period.

Inputs are the validated ``Batches`` table (workbook contract headers plus an
int ``row``, the worksheet row) and the Project's period. Per batch (accounting
design, section 1, ``biochar``):

    persistent carbon (t C) = dry_mass_t x organic_carbon_pct/100 x F_perm
    CO2e (t) = persistent carbon x 44/12

F_perm, the fraction of the biochar's organic carbon remaining after 100
years, comes from the production temperature class of the IPCC 2019
Refinement (Vol. 4, Ch. 2, Appendix 4) or, when ``h_corg_molar`` is given,
from the H/Corg classes of Camps-Arbestain et al. (2015). Only batches with
``applied_on`` between period_start and period_end (both included) count.

Uncertainty (IPCC 2006 Guidelines Vol. 1 Ch. 3): per permanence class, the
organic carbon of its batches (mass x C content: Eq. 3.1 per batch, Eq. 3.2
over batches) is multiplied by the class's F_perm (Eq. 3.1), and the classes
are summed (Eq. 3.2). F_perm is one value shared by every batch of a class,
so its error is applied once to the class total rather than independently
per batch (which would shrink it with the number of batches). Measurement
errors of different batches are taken as independent.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from verify.accounting import GrossRemovals, combine_in_quadrature
from verify.factors import C_TO_CO2
from verify.findings import Finding
from verify.pathway import PathwayEstimate
from verify.sampling import t_quantile

SHEET = "Batches"

_IPCC_APPENDIX_4 = (
    "IPCC 2019 Refinement to the 2006 Guidelines, Vol. 4, Ch. 2, Appendix 4, Table 4A.2 "
    "(F_perm by production temperature; table number and values from memory, check against the source)"
)
_CAMPS_ARBESTAIN_2015 = (
    "Camps-Arbestain, M., Amonette, J.E., Singh, B., Wang, T. & Schmidt, H.-P. (2015) A biochar "
    "classification system and associated test methods. In Lehmann, J. & Joseph, S. (eds) Biochar "
    "for Environmental Management, 2nd ed., Routledge, Ch. 8 (values from memory, check against the source)"
)
_EQ_3_1 = "IPCC 2006 Guidelines Vol. 1 Ch. 3 Eq. 3.1"
_EQ_3_2 = "IPCC 2006 Guidelines Vol. 1 Ch. 3 Eq. 3.2"

# Uncertainties used when the optional columns are blank: half-widths in % of
# the value. Common practice, no source.
DEFAULT_DRY_MASS_UNCERTAINTY_PCT = 5.0
DEFAULT_ORGANIC_CARBON_UNCERTAINTY_PCT = 10.0


@dataclass(frozen=True)
class PermanenceClass:
    """One row of a permanence table: F_perm and its uncertainty (half-width, % of F_perm)."""

    route: str
    name: str
    f_perm: float
    uncertainty_pct: float
    source: str


# IPCC 2019 Refinement, Vol. 4, Ch. 2, Appendix 4, Table 4A.2 (table number
# from memory): F_perm over 100 years by highest treatment temperature, with
# uncertainties of about +-13, +-11 and +-15 %. Values from memory; check
# against the source. Below 350 C the material is not treated as biochar.
HIGH = PermanenceClass("temperature", "high temperature (> 600 C)", 0.89, 13.0, _IPCC_APPENDIX_4)
MEDIUM = PermanenceClass("temperature", "medium temperature (450-600 C)", 0.80, 11.0, _IPCC_APPENDIX_4)
LOW = PermanenceClass("temperature", "low temperature (350-450 C)", 0.65, 15.0, _IPCC_APPENDIX_4)
MIN_TEMPERATURE_C = 350.0
TEMPERATURE_CLASSES = (HIGH, MEDIUM, LOW)

# Camps-Arbestain et al. (2015): carbon expected to remain for 100 years is
# 70 % of the organic carbon when H/Corg < 0.4, 50 % when 0.4 <= H/Corg < 0.7;
# H/Corg >= 0.7 is not biochar. Values from memory; check against the source.
# The source gives no uncertainty: the largest IPCC class uncertainty (15 %)
# is used (common practice, no source).
H_CORG_STABLE = PermanenceClass("h_corg", "H/Corg < 0.4", 0.70, 15.0, _CAMPS_ARBESTAIN_2015)
H_CORG_MODERATE = PermanenceClass("h_corg", "0.4 <= H/Corg < 0.7", 0.50, 15.0, _CAMPS_ARBESTAIN_2015)
MAX_H_CORG = 0.7
H_CORG_CLASSES = (H_CORG_STABLE, H_CORG_MODERATE)

BATCH_COLUMNS: tuple[str, ...] = (
    "batch_id",
    "feedstock",
    "produced_on",
    "applied_on",
    "counted",
    "permanence_route",
    "permanence_class",
    "f_perm",
    "f_perm_uncertainty_pct",
    "dry_mass_t",
    "organic_carbon_pct",
    "dry_mass_uncertainty_pct",
    "organic_carbon_uncertainty_pct",
    "persistent_t_c",
    "tco2e",
    "uncertainty_pct",
    "half_width_tco2e",
    "row",
)


# ---------------------------------------------------------------- equations


def temperature_class(pyrolysis_temp_c: float) -> PermanenceClass | None:
    """IPCC 2019 Refinement Vol. 4 Ch. 2 Appendix 4 temperature class, None below 350 C.

    A temperature on a class boundary takes the lower, more conservative
    class (450 C is low, 600 C is medium; common practice, no source).
    NaN gives None.
    """
    if not pyrolysis_temp_c >= MIN_TEMPERATURE_C:
        return None
    if pyrolysis_temp_c > 600.0:
        return HIGH
    if pyrolysis_temp_c > 450.0:
        return MEDIUM
    return LOW


def h_corg_class(h_corg_molar: float) -> PermanenceClass | None:
    """Camps-Arbestain et al. (2015) H/Corg class; None at H/Corg >= 0.7 (not biochar) or NaN."""
    if not h_corg_molar < MAX_H_CORG:
        return None
    return H_CORG_STABLE if h_corg_molar < 0.4 else H_CORG_MODERATE


def persistent_carbon_t(dry_mass_t: Any, organic_carbon_pct: Any, f_perm: Any) -> np.ndarray:
    """Carbon remaining after 100 years (t C) = dry mass x organic C/100 x F_perm.

    IPCC 2019 Refinement Vol. 4 Ch. 2 Appendix 4 (biochar amendments to
    mineral soils; equation number not cited, from memory).
    """
    return (
        np.asarray(dry_mass_t, dtype=float)
        * np.asarray(organic_carbon_pct, dtype=float) / 100.0
        * np.asarray(f_perm, dtype=float)
    )


def product_uncertainty_pct(*uncertainties_pct: Any) -> np.ndarray:
    """Relative uncertainty of a product: sqrt(sum U_i^2), in % (IPCC 2006 Vol. 1 Ch. 3 Eq. 3.1)."""
    return np.sqrt(sum(np.asarray(u, dtype=float) ** 2 for u in uncertainties_pct))


def sum_uncertainty_pct(values: Any, uncertainties_pct: Any) -> float:
    """Relative uncertainty of a sum: sqrt(sum (U_i x_i)^2) / |sum x_i|, in %.

    IPCC 2006 Guidelines Vol. 1 Ch. 3 Eq. 3.2. NaN when the sum is 0.
    """
    x = np.asarray(values, dtype=float)
    hw = combine_in_quadrature((x * np.asarray(uncertainties_pct, dtype=float) / 100.0).tolist())
    total = float(np.sum(x))
    return hw / abs(total) * 100.0 if total != 0.0 else float("nan")


# ---------------------------------------------------------------- batches


def _uncertainty_column(batches: pd.DataFrame, column: str, default_pct: float) -> np.ndarray:
    values = batches[column] if column in batches else pd.Series(np.nan, index=batches.index)
    return values.astype(float).fillna(default_pct).to_numpy()


def _in_period(applied_on: Any, period_start: dt.date, period_end: dt.date) -> bool:
    return isinstance(applied_on, dt.date) and period_start <= applied_on <= period_end


def batch_table(batches: pd.DataFrame, period_start: dt.date, period_end: dt.date) -> pd.DataFrame:
    """Per-batch permanence class and persistent carbon (BATCH_COLUMNS).

    ``counted`` is True for a batch applied within the period whose F_perm is
    known (eligible, with every number present); other batches keep their
    class but have zero CO2e. ``uncertainty_pct`` is the batch's own
    combination of mass, carbon content and F_perm (Eq. 3.1), for display;
    the project total is combined by :func:`combine_classes`.
    """
    frame = batches.reset_index(drop=True)
    h_corg = frame["h_corg_molar"] if "h_corg_molar" in frame else pd.Series(np.nan, index=frame.index)
    classes = [
        h_corg_class(float(h)) if pd.notna(h) else temperature_class(float(t) if pd.notna(t) else math.nan)
        for h, t in zip(h_corg, frame["pyrolysis_temp_c"])
    ]
    f_perm = np.array([c.f_perm if c else np.nan for c in classes])
    f_perm_u = np.array([c.uncertainty_pct if c else np.nan for c in classes])
    mass_u = _uncertainty_column(frame, "dry_mass_uncertainty_pct", DEFAULT_DRY_MASS_UNCERTAINTY_PCT)
    carbon_u = _uncertainty_column(frame, "organic_carbon_uncertainty_pct", DEFAULT_ORGANIC_CARBON_UNCERTAINTY_PCT)
    in_period = np.array([_in_period(a, period_start, period_end) for a in frame["applied_on"]], dtype=bool)
    persistent = persistent_carbon_t(frame["dry_mass_t"], frame["organic_carbon_pct"], f_perm)
    counted = in_period & np.isfinite(persistent)
    persistent = np.where(counted, persistent, 0.0)
    tco2e = persistent * C_TO_CO2.value
    u = product_uncertainty_pct(mass_u, carbon_u, f_perm_u)
    out = pd.DataFrame({
        "batch_id": frame["batch_id"],
        "feedstock": frame["feedstock"],
        "produced_on": frame["produced_on"],
        "applied_on": frame["applied_on"],
        "counted": counted,
        "permanence_route": [c.route if c else None for c in classes],
        "permanence_class": [c.name if c else None for c in classes],
        "f_perm": f_perm,
        "f_perm_uncertainty_pct": f_perm_u,
        "dry_mass_t": frame["dry_mass_t"].astype(float),
        "organic_carbon_pct": frame["organic_carbon_pct"].astype(float),
        "dry_mass_uncertainty_pct": mass_u,
        "organic_carbon_uncertainty_pct": carbon_u,
        "persistent_t_c": persistent,
        "tco2e": tco2e,
        "uncertainty_pct": np.where(counted, u, np.nan),
        "half_width_tco2e": np.where(counted, tco2e * u / 100.0, 0.0),
        "row": frame["row"].astype(int),
    })
    return out[list(BATCH_COLUMNS)]


@dataclass(frozen=True)
class ClassTotal:
    """Counted batches of one permanence class: organic C, CO2e and their uncertainties."""

    permanence_class: str
    n_batches: int
    organic_carbon_t: float
    organic_carbon_uncertainty_pct: float
    f_perm: float
    f_perm_uncertainty_pct: float
    tco2e: float
    uncertainty_pct: float
    half_width_tco2e: float


def combine_classes(table: pd.DataFrame) -> list[ClassTotal]:
    """Per permanence class: organic C of its counted batches, then x F_perm x 44/12.

    Organic C per batch = dry mass x C/100 with uncertainty sqrt(u_mass^2 +
    u_C^2) (Eq. 3.1); summed over the class's batches (Eq. 3.2); times the
    class's F_perm, whose uncertainty is added once (Eq. 3.1). IPCC 2006
    Guidelines Vol. 1 Ch. 3.
    """
    counted = table[table["counted"]]
    totals = []
    for name, batches in counted.groupby("permanence_class", sort=True):
        carbon = (batches["dry_mass_t"] * batches["organic_carbon_pct"] / 100.0).to_numpy()
        carbon_u = product_uncertainty_pct(batches["dry_mass_uncertainty_pct"], batches["organic_carbon_uncertainty_pct"])
        carbon_total = float(np.sum(carbon))
        carbon_total_u = sum_uncertainty_pct(carbon, carbon_u)
        f_perm = float(batches["f_perm"].iloc[0])
        f_perm_u = float(batches["f_perm_uncertainty_pct"].iloc[0])
        tco2e = carbon_total * f_perm * C_TO_CO2.value
        u = float(product_uncertainty_pct(carbon_total_u, f_perm_u))
        totals.append(ClassTotal(str(name), len(batches), carbon_total, carbon_total_u, f_perm, f_perm_u,
                                 tco2e, u, tco2e * u / 100.0))
    return totals


# ---------------------------------------------------------------- findings


def _batch_findings(
    table: pd.DataFrame, batches: pd.DataFrame, period_start: dt.date, period_end: dt.date, cell: Any
) -> list[Finding]:
    findings: list[Finding] = []
    h_corg = batches["h_corg_molar"].reset_index(drop=True) if "h_corg_molar" in batches else None
    period = f"{period_start.isoformat()} to {period_end.isoformat()}"
    for i, batch in enumerate(table.itertuples(index=False)):
        label = f"Batch {batch.batch_id!r}"
        if not isinstance(batch.applied_on, dt.date):
            findings.append(Finding(
                "note", "batch_not_applied", cell("applied_on", batch.row),
                f"{label} has no applied_on date, so it is not yet applied and does not count in this "
                "period. Enter the date when it is applied.",
            ))
            continue
        if not _in_period(batch.applied_on, period_start, period_end):
            findings.append(Finding(
                "note", "batch_applied_outside_period", cell("applied_on", batch.row),
                f"{label} was applied on {batch.applied_on.isoformat()}, outside the monitoring "
                f"period ({period}); it does not count in this period.",
            ))
            continue
        if pd.isna(batch.permanence_class):
            by_h_corg = h_corg is not None and pd.notna(h_corg.iloc[i])
            findings.append(_ineligible(batch, label, by_h_corg, cell))
        elif not batch.counted:
            blank = "dry_mass_t" if pd.isna(batch.dry_mass_t) else "organic_carbon_pct"
            findings.append(Finding(
                "error", "batch_value_missing", cell(blank, batch.row),
                f"{label}: {blank} is blank, so its persistent carbon cannot be computed; it was "
                "counted as 0. Fill in the value.",
            ))
    if not table["counted"].any():
        findings.append(Finding(
            "warning", "no_batch_in_period", SHEET,
            f"No batch was applied within the monitoring period ({period}); gross removals are 0.",
        ))
    return findings


def _ineligible(batch: Any, label: str, by_h_corg: bool, cell: Any) -> Finding:
    if by_h_corg:
        return Finding(
            "warning", "biochar_not_eligible", cell("h_corg_molar", batch.row),
            f"{label} has H/Corg of {MAX_H_CORG:g} or more (or no valid value): it is not biochar by "
            "the H/Corg classes of Camps-Arbestain et al. (2015) and was counted as 0. Check the "
            "analysis.",
        )
    return Finding(
        "warning", "biochar_not_eligible", cell("pyrolysis_temp_c", batch.row),
        f"{label} was produced below {MIN_TEMPERATURE_C:g} C (or has no temperature): no F_perm applies "
        "(IPCC 2019 Refinement Vol. 4 Ch. 2 Appendix 4), so it was counted as 0. Check the "
        "temperature or give its h_corg_molar.",
    )


# ---------------------------------------------------------------- the pathway


def _methods(table: pd.DataFrame) -> list[dict[str, Any]]:
    methods: list[dict[str, Any]] = [
        {"name": "Persistent carbon per batch", "value": "dry_mass_t x organic_carbon_pct/100 x F_perm",
         "unit": "t C", "source": "IPCC 2019 Refinement to the 2006 Guidelines, Vol. 4, Ch. 2, Appendix 4"},
        {"name": "Batches counted", "value": "applied_on within period_start..period_end (inclusive)",
         "unit": "", "source": "Accounting chain design, section 1 (biochar)"},
        C_TO_CO2.to_method(),
    ]
    for c in TEMPERATURE_CLASSES:
        methods.append({"name": f"F_perm, {c.name}", "value": c.f_perm,
                        "unit": f"fraction of organic C after 100 years (+-{c.uncertainty_pct:g} %)",
                        "source": c.source})
    methods.append({"name": "Minimum production temperature", "value": MIN_TEMPERATURE_C, "unit": "degC",
                    "source": f"{_IPCC_APPENDIX_4}; boundary temperatures take the lower class "
                              "(common practice, no source)"})
    if (table["permanence_route"] == "h_corg").any():
        for c in H_CORG_CLASSES:
            methods.append({"name": f"F_perm, {c.name}", "value": c.f_perm,
                            "unit": f"fraction of organic C after 100 years (+-{c.uncertainty_pct:g} %, "
                                    "common practice, no source)",
                            "source": c.source})
        methods.append({"name": "Permanence route", "value": "H/Corg class when h_corg_molar is given, "
                        "else temperature class", "unit": "", "source": _CAMPS_ARBESTAIN_2015})
    methods += [
        {"name": "Default uncertainty of dry mass", "value": DEFAULT_DRY_MASS_UNCERTAINTY_PCT, "unit": "%",
         "source": "Used when dry_mass_uncertainty_pct is blank; common practice, no source"},
        {"name": "Default uncertainty of organic carbon content", "value": DEFAULT_ORGANIC_CARBON_UNCERTAINTY_PCT,
         "unit": "%", "source": "Used when organic_carbon_uncertainty_pct is blank; common practice, no source"},
        {"name": "Uncertainty of products (mass x C x F_perm)", "value": "U = sqrt(sum U_i^2)", "unit": "%",
         "source": _EQ_3_1},
        {"name": "Uncertainty of sums (batches, classes)", "value": "U = sqrt(sum (U_i x_i)^2) / |sum x_i|",
         "unit": "%", "source": f"{_EQ_3_2}; F_perm error applied once per class (shared factor)"},
        {"name": "Standard error of gross removals", "value": "half-width / z (normal, no df)", "unit": "tCO2e",
         "source": "z = standard normal quantile at (1 + confidence)/2 (scipy.stats.norm)"},
    ]
    return methods


def quantify(book: Any, confidence_pct: float) -> PathwayEstimate:
    """Gross removals of a validated biochar workbook (accounting design, section 1).

    Persistent carbon x 44/12 of the batches applied within the period;
    half-width by IPCC 2006 Vol. 1 Ch. 3 Eqs. 3.1-3.2 (:func:`combine_classes`),
    standard error = half-width / z with no degrees of freedom. Biochar has no
    sampling strata: ``strata`` is empty and the per-batch table is ``units``.
    """
    period_start, period_end = book.project["period_start"], book.project["period_end"]
    batches = book.table(SHEET)

    def cell(column: str, row: int) -> str:
        return book.cell(SHEET, column, row)

    table = batch_table(batches, period_start, period_end)
    classes = combine_classes(table)
    value = float(sum(c.tco2e for c in classes))
    half_width = combine_in_quadrature([c.half_width_tco2e for c in classes])
    z = t_quantile(None, confidence_pct)
    gross = GrossRemovals(value_tco2e=value, standard_error_tco2e=half_width / z, df=None,
                          half_width_tco2e=half_width)
    findings = _batch_findings(table, batches, period_start, period_end, cell)
    return PathwayEstimate(gross, [], _methods(table), findings, units=table)
