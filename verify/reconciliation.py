"""Reconciliation of the proponent's claimed figures against the recomputed ones.

Materiality follows the ISO 14064-3 concept: a misstatement is material when
it could change the decision of an intended user; the quantitative threshold
(``materiality_pct``, 5 % by default) is common practice, no source, and the
verifier's professional judgement governs.  Differences are expressed as a
share of the *claimed* figure, since the claim is what is being verified.
"""

from __future__ import annotations

import math
from typing import Any

import pandas as pd

from .findings import Finding

CLAIM_ITEMS = (
    "gross_removals_tco2e",
    "baseline_tco2e",
    "project_emissions_tco2e",
    "leakage_tco2e",
    "uncertainty_deduction_tco2e",
    "buffer_tco2e",
    "issuable_credits",
)


def difference_pct(claimed: float, recomputed: float) -> float | None:
    """(claimed - recomputed) as % of |claimed|; None when nothing was claimed."""
    if claimed == 0:
        return None
    return (claimed - recomputed) / abs(claimed) * 100.0


def is_material(misstatement_pct: float | None, materiality_pct: float) -> bool:
    """Material when the misstatement exceeds the threshold in either direction."""
    return misstatement_pct is not None and abs(misstatement_pct) > materiality_pct


def _rows(claims: pd.DataFrame, recomputed: dict[int, dict[str, Any]]) -> list[dict[str, Any]]:
    rows = []
    for claim in claims.to_dict("records"):
        vintage = int(claim["vintage"])
        mine = recomputed.get(vintage, {})
        for item in CLAIM_ITEMS:
            claimed = claim.get(item)
            if claimed is None or (isinstance(claimed, float) and math.isnan(claimed)):
                continue
            value = float(mine.get(item) or 0.0)
            rows.append({
                "vintage": vintage,
                "item": item,
                "claimed": float(claimed),
                "recomputed": value,
                "difference_tco2e": float(claimed) - value,
                "difference_pct": difference_pct(float(claimed), value),
                "row": int(claim["row"]),
            })
    return rows


def _row_findings(rows: list[dict[str, Any]], materiality_pct: float, letters: dict[str, str]) -> list[Finding]:
    findings = []
    for row in rows:
        if not is_material(row["difference_pct"], materiality_pct):
            continue
        location = f"Claims!{letters.get(row['item'], 'A')}{row['row']}"
        findings.append(Finding(
            "warning", "claim_differs", location,
            f"claimed {row['item']} for {row['vintage']} is {row['claimed']:,.1f}; recomputed "
            f"{row['recomputed']:,.1f} ({row['difference_pct']:+.1f} % of the claim, threshold "
            f"{materiality_pct:g} %)",
        ))
    return findings


def _vintage_findings(claims: pd.DataFrame, recomputed: dict[int, dict[str, Any]], letter: str) -> list[Finding]:
    return [
        Finding("warning", "claim_vintage_outside_period", f"Claims!{letter}{int(row)}",
                f"vintage {int(vintage)} is claimed but no day of the monitoring period falls in it")
        for vintage, row in zip(claims["vintage"], claims["row"])
        if int(vintage) not in recomputed
    ]


def reconcile(
    claims: pd.DataFrame,
    vintages: list[dict[str, Any]],
    materiality_pct: float,
    letters: dict[str, str],
) -> tuple[dict[str, Any] | None, list[Finding]]:
    """Each claimed figure against the recomputed vintage, the total misstatement and its verdict.

    ``claims`` is the typed Claims table (with ``row``), ``vintages`` the
    recomputed vintages, ``letters`` the Claims column letters for cell
    addresses.  Returns (None, []) when nothing is claimed.
    """
    if claims.empty:
        return None, []
    recomputed = {int(v["vintage"]): v for v in vintages}
    rows = _rows(claims, recomputed)
    claimed_total = float(claims["issuable_credits"].sum())
    recomputed_total = float(sum(int(recomputed.get(int(v), {}).get("issuable_credits") or 0)
                                 for v in claims["vintage"]))
    misstatement = claimed_total - recomputed_total
    misstatement_pct = difference_pct(claimed_total, recomputed_total)
    material = is_material(misstatement_pct, materiality_pct)
    findings = _row_findings(rows, materiality_pct, letters)
    findings += _vintage_findings(claims, recomputed, letters.get("vintage", "A"))
    if material:
        direction = "overstated" if misstatement > 0 else "understated"
        findings.append(Finding(
            "warning", "material_misstatement", "Claims",
            f"issuable credits are {direction} by {abs(misstatement):,.0f} tCO2e "
            f"({abs(misstatement_pct):.1f} % of the {claimed_total:,.0f} claimed; materiality "
            f"threshold {materiality_pct:g} %)",
        ))
    return {
        "materiality_pct": materiality_pct,
        "claimed_issuable": claimed_total,
        "recomputed_issuable": recomputed_total,
        "misstatement_tco2e": misstatement,
        "misstatement_pct": misstatement_pct,
        "material": material,
        "verdict": _verdict(material, misstatement, misstatement_pct, materiality_pct),
        "rows": [{k: v for k, v in r.items() if k != "row"} for r in rows],
    }, findings


def _verdict(material: bool, misstatement: float, pct: float | None, materiality_pct: float) -> str:
    if pct is None:
        return "No issuable credits were claimed; nothing to reconcile."
    direction = "overstate" if misstatement > 0 else "understate"
    if material:
        return (f"Material misstatement: the claimed issuable credits {direction} the recomputed "
                f"figure by {abs(pct):.1f} %, above the {materiality_pct:g} % threshold.")
    return (f"Not material: the claimed issuable credits differ from the recomputed figure by "
            f"{abs(pct):.1f} %, within the {materiality_pct:g} % threshold.")
