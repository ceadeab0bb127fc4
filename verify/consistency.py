"""Checks across rows and sheets that a per-cell schema cannot express.

Each check returns findings addressed to the cell a user must change.
Only values that passed their own cell checks are considered, so one bad
cell is reported once.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import pandas as pd

from .findings import Finding
from .validation import ROW

if TYPE_CHECKING:
    from .workbook import LoadedWorkbook

# Forms whose equation uses height or wood density (workbook contract, Allometry).
FORMS_NEEDING_HEIGHT = {"power_height", "density_height"}
FORMS_NEEDING_DENSITY = {"density_height"}


def event_order(plots: pd.DataFrame, date_column: str = "measured_on") -> list[str]:
    """Events sorted by their earliest measurement date: the first is the start stock."""
    dated = plots.dropna(subset=["event", date_column])
    if dated.empty:
        return []
    first_dates = dated.groupby("event")[date_column].min()
    return list(first_dates.sort_values(kind="stable").index)


def _events(book: LoadedWorkbook, sheet: str) -> list[Finding]:
    events = event_order(book.table(sheet))
    if len(events) >= 2 or book.table(sheet).empty:
        return []
    return [Finding("error", "too_few_events", sheet,
                    f"{sheet} holds {len(events)} measurement event(s); two are needed: "
                    "the first gives the stock at period_start, the last the stock at period_end")]


def _model_forms(book: LoadedWorkbook) -> pd.Series:
    """Allometric form of each species, through its model."""
    species = book.table("Species").dropna(subset=["species", "model_id"])
    forms = book.table("Allometry").dropna(subset=["model_id", "form"]).set_index("model_id")["form"]
    return species.set_index("species")["model_id"].map(forms)


def _heights_needed(book: LoadedWorkbook) -> list[Finding]:
    trees = book.table("Trees")
    form = trees["species"].map(_model_forms(book))
    missing = trees[form.isin(FORMS_NEEDING_HEIGHT) & trees["height_m"].isna()
                    & (trees["status"] == "live")]
    return [
        Finding("error", "model_needs_height", book.cell("Trees", "height_m", row),
                f"height_m is required: the model of species {species} uses height")
        for row, species in zip(missing[ROW], missing["species"])
    ]


def _densities_needed(book: LoadedWorkbook) -> list[Finding]:
    species = book.table("Species")
    form = species["species"].map(_model_forms(book))
    missing = species[form.isin(FORMS_NEEDING_DENSITY) & species["wood_density_g_cm3"].isna()]
    return [
        Finding("error", "model_needs_density", book.cell("Species", "wood_density_g_cm3", row),
                f"wood_density_g_cm3 is required: the model of species {name} uses wood density")
        for row, name in zip(missing[ROW], missing["species"])
    ]


def _subplots(book: LoadedWorkbook) -> list[Finding]:
    plots = book.table("Plots")
    findings = []
    half_given = plots["subplot_area_m2"].isna() != plots["subplot_max_dbh_cm"].isna()
    for row, area in zip(plots.loc[half_given, ROW], plots.loc[half_given, "subplot_area_m2"]):
        blank = "subplot_max_dbh_cm" if pd.notna(area) else "subplot_area_m2"
        findings.append(Finding("error", "incomplete_subplot", book.cell("Plots", blank, row),
                                "a nested subplot needs both subplot_area_m2 and subplot_max_dbh_cm"))
    too_big = plots["subplot_area_m2"] >= plots["plot_area_m2"]
    for row in plots.loc[too_big, ROW]:
        findings.append(Finding("error", "out_of_range", book.cell("Plots", "subplot_area_m2", row),
                                "subplot_area_m2 must be smaller than plot_area_m2"))
    return findings


def _model_ranges(book: LoadedWorkbook) -> list[Finding]:
    models = book.table("Allometry")
    inverted = models["max_dbh_cm"] < models["min_dbh_cm"]
    return [
        Finding("error", "out_of_range", book.cell("Allometry", "max_dbh_cm", row),
                "max_dbh_cm is below min_dbh_cm")
        for row in models.loc[inverted, ROW]
    ]


def forest(book: LoadedWorkbook) -> list[Finding]:
    return (
        _events(book, "Plots") + _heights_needed(book) + _densities_needed(book)
        + _subplots(book) + _model_ranges(book)
    )


PATHWAY_CHECKS = {"forest": forest}


def check(book: LoadedWorkbook) -> list[Finding]:
    """All cross-row checks of the workbook's pathway."""
    pathway_check = PATHWAY_CHECKS.get(book.pathway)
    return pathway_check(book) if pathway_check else []
