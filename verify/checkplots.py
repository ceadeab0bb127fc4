"""Check plots: the verifier's re-measurement against the proponent's record.

Per tree, DBH and height differences and the share within tolerance (the
tolerances are Project settings; their defaults are common practice, no
source).  Per plot, the stock density of the re-measured trees from each
data set, computed with the same models, and a paired t-test of the
difference across plots (Student's paired t-test, as ``scipy.stats.ttest_rel``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from . import forest
from .findings import Finding, cell_ref
from .sampling import paired_t_test

KEYS = ["plot_id", "event", "tree_id"]


@dataclass(frozen=True)
class Tolerances:
    dbh_cm: float
    dbh_pct: float
    height_m: float
    height_pct: float

    def dbh_text(self) -> str:
        return f"{self.dbh_cm:g} cm or {self.dbh_pct:g} %, whichever is larger"

    def height_text(self) -> str:
        return f"{self.height_m:g} m or {self.height_pct:g} %, whichever is larger"


def within_tolerance(reference: np.ndarray, check: np.ndarray, absolute: float, relative_pct: float) -> np.ndarray:
    """|check - reference| <= max(absolute, relative_pct % of reference); NaN where either is blank."""
    reference, check = np.asarray(reference, float), np.asarray(check, float)
    allowed = np.maximum(absolute, np.abs(reference) * relative_pct / 100.0)
    inside = np.abs(check - reference) <= allowed
    return np.where(np.isnan(reference) | np.isnan(check), np.nan, inside)


def _pairs(check: pd.DataFrame, trees: pd.DataFrame) -> pd.DataFrame:
    """Each re-measured tree beside the proponent's record of it."""
    return check.merge(trees, on=KEYS, how="inner", suffixes=("_check", ""))


TREE_COLUMNS = ["plot_id", "event", "tree_id", "species", "dbh_cm", "height_m", "status", "row"]


def _verifier_trees(pairs: pd.DataFrame) -> pd.DataFrame:
    """The proponent's records with the verifier's DBH and, where measured, height."""
    verifier = pairs.copy()
    verifier["dbh_cm"] = pairs["dbh_cm_check"]
    verifier["height_m"] = pairs["height_m_check"].fillna(pairs["height_m"])
    return verifier[TREE_COLUMNS]


def _densities(book: Any, pairs: pd.DataFrame) -> pd.DataFrame:
    """Stock density (tCO2e/ha) of the re-measured trees per plot, from each data set.

    Both use the expansion factor of the proponent's DBH: which nested
    subplot a tree was sampled in is a fact of the plot design, so a
    re-measured DBH must not move a tree between subplots.
    """
    species, models = book.table("Species"), book.table("Allometry")
    proponent = forest.tree_biomass(pairs[TREE_COLUMNS], species, models)
    verifier = forest.tree_biomass(_verifier_trees(pairs), species, models)
    geometry = pairs.merge(book.table("Plots"), on=["plot_id", "event"], how="left")
    expansion = forest.expansion_per_ha(
        geometry["dbh_cm"].to_numpy(float), geometry["plot_area_m2"].to_numpy(float),
        geometry["subplot_area_m2"].to_numpy(float), geometry["subplot_max_dbh_cm"].to_numpy(float))
    per_tree = pd.DataFrame({
        "plot_id": pairs["plot_id"].to_numpy(), "event": pairs["event"].to_numpy(),
        "proponent": proponent["co2e_kg"].to_numpy() / forest.KG_PER_T * expansion,
        "verifier": verifier["co2e_kg"].to_numpy() / forest.KG_PER_T * expansion,
    })
    return per_tree.groupby(["plot_id", "event"], sort=True).agg(
        n_trees=("proponent", "size"), proponent=("proponent", "sum"), verifier=("verifier", "sum"))


def _tree_findings(pairs: pd.DataFrame, dbh_ok: np.ndarray, height_ok: np.ndarray,
                   letters: dict[str, str], tolerances: Tolerances) -> list[Finding]:
    findings = []
    for record, dbh_inside, height_inside in zip(pairs.itertuples(index=False), dbh_ok, height_ok):
        label = f"tree {record.tree_id} in plot {record.plot_id} ({record.event})"
        if dbh_inside == 0:
            findings.append(Finding(
                "warning", "check_dbh_outside_tolerance", cell_ref("CheckPlots", letters["dbh_cm"], record.row_check),
                f"{label}: verifier DBH {record.dbh_cm_check:g} cm, proponent {record.dbh_cm:g} cm "
                f"(tolerance {tolerances.dbh_text()}; proponent's record at Trees row {record.row})"))
        if height_inside == 0:
            findings.append(Finding(
                "warning", "check_height_outside_tolerance",
                cell_ref("CheckPlots", letters.get("height_m", "E"), record.row_check),
                f"{label}: verifier height {record.height_m_check:g} m, proponent {record.height_m:g} m "
                f"(tolerance {tolerances.height_text()})"))
    return findings


def _share_pct(flags: np.ndarray) -> float | None:
    known = flags[~np.isnan(flags)]
    return float(known.mean() * 100.0) if known.size else None


def bias_verdict(bias_pct: float, low_pct: float, high_pct: float, confidence_pct: float, n_plots: int) -> str:
    """A plain-words reading of the interval of the relative bias (verifier minus proponent)."""
    if n_plots < 2 or math.isnan(low_pct):
        return f"Too few check plots ({n_plots}) for a test of bias; at least 2 are needed."
    if low_pct <= 0.0 <= high_pct:
        return (f"No significant bias: the check plots agree with the proponent's data within sampling "
                f"error (difference {bias_pct:+.1f} %, {confidence_pct:g} % interval {low_pct:+.1f} % to {high_pct:+.1f} %).")
    if high_pct < 0.0:
        return (f"The proponent's data overstate the stock: the check plots hold {-bias_pct:.1f} % less "
                f"({confidence_pct:g} % interval {-high_pct:.1f} % to {-low_pct:.1f} % less). "
                "A conservative adjustment or a wider re-measurement may be needed.")
    return (f"The proponent's data understate the stock: the check plots hold {bias_pct:.1f} % more "
            f"({confidence_pct:g} % interval {low_pct:.1f} % to {high_pct:.1f} % more).")


def compare(book: Any, confidence_pct: float, tolerances: Tolerances) -> tuple[dict[str, Any] | None, list[Finding]]:
    """The check-plot section of the results and its findings; (None, []) without CheckPlots."""
    check = book.table("CheckPlots")
    if check.empty:
        return None, []
    pairs = _pairs(check, book.table("Trees"))
    dbh_ok = within_tolerance(pairs["dbh_cm"], pairs["dbh_cm_check"], tolerances.dbh_cm, tolerances.dbh_pct)
    height_ok = within_tolerance(pairs["height_m"], pairs["height_m_check"], tolerances.height_m, tolerances.height_pct)
    findings = _tree_findings(pairs, dbh_ok, height_ok, book.sheets["CheckPlots"].letters, tolerances)

    densities = _densities(book, pairs)
    plots = [
        {"plot_id": plot_id, "event": event, "n_trees": int(row.n_trees),
         "proponent_tco2e_per_ha": row.proponent, "verifier_tco2e_per_ha": row.verifier,
         "difference_tco2e_per_ha": row.verifier - row.proponent}
        for (plot_id, event), row in densities.iterrows()
    ]
    test = paired_t_test(densities["verifier"].to_numpy(), densities["proponent"].to_numpy(), confidence_pct)
    mean_proponent = float(densities["proponent"].mean())
    scale = 100.0 / mean_proponent if mean_proponent else float("nan")
    bias, low, high = (test.mean_difference * scale, test.ci_low * scale, test.ci_high * scale)
    verdict = bias_verdict(bias, low, high, confidence_pct, test.n)
    if high < 0.0:
        findings.append(Finding("warning", "check_plots_show_overstatement", "CheckPlots", verdict))
    return {
        "n_trees": int(len(pairs)),
        "n_plots": int(test.n),
        "dbh_within_tolerance_pct": _share_pct(dbh_ok),
        "height_within_tolerance_pct": _share_pct(height_ok),
        "dbh_tolerance": tolerances.dbh_text(),
        "height_tolerance": tolerances.height_text(),
        "plots": plots,
        "mean_difference_tco2e_per_ha": test.mean_difference,
        "mean_bias_pct": bias,
        "bias_interval_pct": [low, high],
        "confidence_pct": confidence_pct,
        "t_statistic": test.t_statistic,
        "df": test.df,
        "p_value": test.p_value,
        "verdict": verdict,
    }, findings
