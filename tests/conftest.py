"""Shared test helpers: build small workbooks in plain sheets, as a user pasting data would."""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any, Callable

import pytest
from openpyxl import Workbook

from verify.schema import all_sheets

Sheets = dict[str, list[list[Any]]]


def chave_2014_eq4_kg(rho_g_cm3: float, dbh_cm: float, height_m: float) -> float:
    """Chave et al. (2014) Glob. Change Biol. 20:3177, Eq. 4: AGB = 0.0673 (rho D^2 H)^0.976."""
    return 0.0673 * (rho_g_cm3 * dbh_cm**2 * height_m) ** 0.976


def minimal_tree_tco2e(dbh_cm: float, height_m: float = 15.0) -> float:
    """tCO2e of one tree of the minimal workbook's species: rho 0.6, R 0.24, CF 0.47, 44/12."""
    return chave_2014_eq4_kg(0.6, dbh_cm, height_m) * (1 + 0.24) * 0.47 * 44 / 12 / 1000


def write_workbook(path: Path, sheets: Sheets, edit: Callable[[Workbook], None] | None = None) -> Path:
    """Write ``sheets`` (name -> rows, header first) as plain sheets, no template features.

    ``edit`` may change the book before it is saved (merges, hidden sheets...).
    """
    book = Workbook()
    book.remove(book.active)
    for name, rows in sheets.items():
        ws = book.create_sheet(name)
        for row in rows:
            ws.append(row)
    if edit:
        edit(book)
    book.save(path)
    return path


def table(name: str, *records: dict[str, Any]) -> list[list[Any]]:
    """Header row of the contract sheet ``name`` followed by ``records`` in header order."""
    headers = list(all_sheets()[name].headers)
    unknown = {k for r in records for k in r} - set(headers)
    assert not unknown, f"not contract columns of {name}: {unknown}"
    return [headers] + [[r.get(h) for h in headers] for r in records]


def project_rows(**fields: Any) -> list[list[Any]]:
    values = {
        "project_name": "Test project", "project_id": "T-1", "pathway": "forest",
        "country": "Nowhere", "period_start": dt.date(2024, 1, 1), "period_end": dt.date(2024, 12, 31),
    }
    values.update(fields)
    return [["field", "value"]] + [[k, v] for k, v in values.items() if v is not None]


def minimal_forest() -> Sheets:
    """The smallest valid forest workbook: one stratum, two permanent plots, two events.

    Values are placeholders for validation tests, not a measurement of anything.
    The Chave et al. (2014) Eq. 4 coefficients are used for the model.
    """
    plots, trees = [], []
    for plot in ("P1", "P2"):
        for event, day, dbh in (("start", dt.date(2024, 1, 10), 20.0), ("end", dt.date(2024, 12, 20), 22.0)):
            plots.append({"plot_id": plot, "stratum_id": "S1", "event": event, "measured_on": day,
                          "plot_area_m2": 500.0})
            for tree in ("1", "2"):
                trees.append({"plot_id": plot, "event": event, "tree_id": tree, "species": "Alpha",
                              "dbh_cm": dbh, "height_m": 15.0, "status": "live"})
    return {
        "Project": project_rows(),
        "Strata": table("Strata", {"stratum_id": "S1", "area_ha": 100.0, "description": "only stratum"}),
        "Baseline": table("Baseline", {"stratum_id": "S1", "baseline_tco2e_per_ha_yr": 0.5,
                                       "uncertainty_pct": 20.0}),
        "Emissions": table("Emissions", {"source": "vehicles", "activity_amount": 100.0,
                                         "activity_unit": "L", "gas": "CO2", "ef_kg_per_unit": 2.676,
                                         "uncertainty_pct": 5.0}),
        "Leakage": table("Leakage"),
        "Risk": table("Risk", {"risk_factor": "fire", "score_pct": 12.0}),
        "Plots": table("Plots", *plots),
        "Trees": table("Trees", *trees),
        "Species": table("Species", {"species": "Alpha", "model_id": "M1", "wood_density_g_cm3": 0.6,
                                     "root_shoot_ratio": 0.24, "carbon_fraction": 0.47}),
        "Allometry": table("Allometry", {"model_id": "M1", "form": "density_height", "a": 0.0673,
                                         "b": 0.976, "min_dbh_cm": 5.0, "max_dbh_cm": 156.0,
                                         "source": "Chave et al. 2014, Eq. 4"}),
    }


@pytest.fixture
def forest_sheets() -> Sheets:
    return minimal_forest()
