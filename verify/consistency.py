"""Checks across rows and sheets that a per-cell schema cannot express.

Each check returns findings addressed to the cell a user must change.
Only values that passed their own cell checks are considered, so one bad
cell is reported once.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import pandas as pd

from .findings import Finding
from .validation import ROW, key_codes

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


# Data-quality thresholds: rules of thumb to prompt a second look, not limits
# of nature (common practice, no source). Each gives a warning, not an error.
MAX_DBH_GROWTH_CM_PER_YR = 5.0
SHRINKAGE_TOLERANCE_CM = 1.0         # measurement error allowed before a shrink is flagged
SHRINKAGE_TOLERANCE_PCT = 5.0
SLENDERNESS_RANGE = (10.0, 250.0)    # height over diameter, both in metres
EVENT_GRACE_DAYS = 90                # a campaign may straddle the period boundary by this much
MIN_UNITS_PER_STRATUM = 2            # below this no sample variance exists


def _too_few_plots(book: LoadedWorkbook, sheet: str, unit: str, events: list[str]) -> list[Finding]:
    """A stratum needs at least two units at the first and the last event for a variance."""
    table = book.table(sheet)
    findings = []
    for stratum, row in zip(book.table("Strata")["stratum_id"], book.table("Strata")[ROW]):
        for event in {events[0], events[-1]} if events else ():
            at_event = table[(table["stratum_id"] == stratum) & (table["event"] == event)]
            count = at_event[unit].nunique()
            if count < MIN_UNITS_PER_STRATUM:
                findings.append(Finding(
                    "error", "too_few_plots", book.cell("Strata", "stratum_id", row),
                    f"stratum {stratum} has {count} {unit.removesuffix('_id')}(s) at event {event}; at least "
                    f"{MIN_UNITS_PER_STRATUM} are needed to estimate its sampling variance"))
    return findings


def _plots_without_trees(book: LoadedWorkbook) -> list[Finding]:
    plots = book.table("Plots")
    with_trees = book.table("Trees")[["plot_id", "event"]].drop_duplicates()
    merged = plots.merge(with_trees, on=["plot_id", "event"], how="left", indicator=True)
    empty = merged[merged["_merge"] == "left_only"]
    return [
        Finding("warning", "plot_without_trees", book.cell("Plots", "plot_id", row),
                f"plot {plot} has no trees at event {event}; it counts as zero stock. Confirm it was empty")
        for plot, event, row in zip(empty["plot_id"], empty["event"], empty[ROW])
    ]


def _events_outside_period(book: LoadedWorkbook, sheet: str) -> list[Finding]:
    start, end = book.project.get("period_start"), book.project.get("period_end")
    if start is None or end is None:
        return []
    grace = pd.Timedelta(days=EVENT_GRACE_DAYS)
    table = book.table(sheet).dropna(subset=["measured_on"])
    dates = pd.to_datetime(table["measured_on"])
    outside = table[(dates < pd.Timestamp(start) - grace) | (dates > pd.Timestamp(end) + grace)]
    return [
        Finding("warning", "event_outside_period", book.cell(sheet, "measured_on", row),
                f"measured on {day}, more than {EVENT_GRACE_DAYS} days outside the monitoring period "
                f"{start} to {end}; the stock it gives is attributed to the period boundary")
        for day, row in zip(outside["measured_on"], outside[ROW])
    ]


def _consecutive_measurements(book: LoadedWorkbook) -> pd.DataFrame:
    """Each tree's record beside its record at the previous event, with the years between."""
    events = event_order(book.table("Plots"))
    rank = {event: index for index, event in enumerate(events)}
    visits = book.table("Plots")[["plot_id", "event", "measured_on"]].drop_duplicates(["plot_id", "event"])
    visits["measured_on"] = pd.to_datetime(visits["measured_on"])  # once per visit, not per tree
    trees = book.table("Trees")
    # Only the columns the checks read are carried through the joins.
    trees = trees.loc[trees["dbh_cm"].notna(), ["plot_id", "event", "tree_id", "dbh_cm", "status", ROW]]
    trees = trees.assign(rank=trees["event"].map(rank)).dropna(subset=["rank"])
    trees = trees.merge(visits, on=["plot_id", "event"], how="left")
    trees["tree"] = key_codes(trees[["plot_id", "tree_id"]])[0]  # an integer join key, text hashed once
    previous = trees.drop(columns=["plot_id", "tree_id"]).assign(rank=trees["rank"] + 1)
    pairs = trees.merge(previous, on=["tree", "rank"], suffixes=("", "_before"))
    pairs["years"] = (pairs["measured_on"] - pairs["measured_on_before"]).dt.days / 365.25
    return pairs


def _growth(book: LoadedWorkbook) -> list[Finding]:
    pairs = _consecutive_measurements(book)
    findings = []
    both_live = pairs[(pairs["status"] == "live") & (pairs["status_before"] == "live")]
    growth = (both_live["dbh_cm"] - both_live["dbh_cm_before"]) / both_live["years"].where(both_live["years"] > 0)
    too_fast = both_live[growth > MAX_DBH_GROWTH_CM_PER_YR]
    for record, rate in zip(too_fast.itertuples(index=False), growth[growth > MAX_DBH_GROWTH_CM_PER_YR]):
        findings.append(Finding(
            "warning", "implausible_growth", book.cell("Trees", "dbh_cm", record.row),
            f"tree {record.tree_id} in plot {record.plot_id} grew from {record.dbh_cm_before:g} to "
            f"{record.dbh_cm:g} cm ({rate:.1f} cm/yr, above {MAX_DBH_GROWTH_CM_PER_YR:g}); check both records"))
    allowed = (both_live["dbh_cm_before"] * SHRINKAGE_TOLERANCE_PCT / 100).clip(lower=SHRINKAGE_TOLERANCE_CM)
    shrunk = both_live[both_live["dbh_cm"] < both_live["dbh_cm_before"] - allowed]
    for record in shrunk.itertuples(index=False):
        findings.append(Finding(
            "warning", "implausible_shrinkage", book.cell("Trees", "dbh_cm", record.row),
            f"tree {record.tree_id} in plot {record.plot_id} shrank from {record.dbh_cm_before:g} to "
            f"{record.dbh_cm:g} cm; check both records"))
    revived = pairs[(pairs["status"] == "live") & (pairs["status_before"] == "dead")]
    for record in revived.itertuples(index=False):
        findings.append(Finding(
            "warning", "dead_tree_alive_again", book.cell("Trees", "status", record.row),
            f"tree {record.tree_id} in plot {record.plot_id} was dead at event {record.event_before} "
            f"and is live at {record.event}; check the tree id or the status"))
    return findings


def _slenderness(book: LoadedWorkbook) -> list[Finding]:
    trees = book.table("Trees").dropna(subset=["dbh_cm", "height_m"])
    ratio = trees["height_m"] / (trees["dbh_cm"] / 100.0)
    low, high = SLENDERNESS_RANGE
    odd = trees[(ratio < low) | (ratio > high)]
    return [
        Finding("warning", "implausible_height_ratio", book.cell("Trees", "height_m", row),
                f"height {height:g} m with DBH {dbh:g} cm gives a height/diameter ratio of "
                f"{height / (dbh / 100):.0f}, outside {low:g}-{high:g}; check both values")
        for height, dbh, row in zip(odd["height_m"], odd["dbh_cm"], odd[ROW])
    ]


def forest(book: LoadedWorkbook) -> list[Finding]:
    events = event_order(book.table("Plots"))
    return (
        _events(book, "Plots") + _heights_needed(book) + _densities_needed(book)
        + _subplots(book) + _model_ranges(book) + _too_few_plots(book, "Plots", "plot_id", events)
        + _plots_without_trees(book) + _events_outside_period(book, "Plots") + _growth(book)
        + _slenderness(book)
    )


def _soil_layers(book: LoadedWorkbook) -> list[Finding]:
    """Inverted, overlapping or gapped layers, and points named in two strata (verify.soil)."""
    from .soil import layer_problems, stratum_problems

    samples = book.table("SoilSamples")
    return [
        Finding("error", p.code, book.cell("SoilSamples", p.column, p.row), p.message)
        for p in layer_problems(samples) + stratum_problems(samples)
    ]


def soil(book: LoadedWorkbook) -> list[Finding]:
    events = event_order(book.table("SoilSamples"))
    return (
        _events(book, "SoilSamples") + _soil_layers(book)
        + _too_few_plots(book, "SoilSamples", "point_id", events)
        + _events_outside_period(book, "SoilSamples")
    )


def _batch_dates(book: LoadedWorkbook) -> list[Finding]:
    batches = book.table("Batches").dropna(subset=["produced_on", "applied_on"])
    early = batches[batches["applied_on"] < batches["produced_on"]]
    return [
        Finding("error", "batch_applied_before_production", book.cell("Batches", "applied_on", row),
                f"batch {batch_id} is applied on {applied} but produced on {produced}; "
                "correct one of the dates")
        for row, batch_id, applied, produced in zip(
            early[ROW], early["batch_id"], early["applied_on"], early["produced_on"])
    ]


def biochar(book: LoadedWorkbook) -> list[Finding]:
    return _batch_dates(book)


PATHWAY_CHECKS = {"forest": forest, "soil": soil, "biochar": biochar}


def check(book: LoadedWorkbook) -> list[Finding]:
    """All cross-row checks of the workbook's pathway."""
    pathway_check = PATHWAY_CHECKS.get(book.pathway)
    return pathway_check(book) if pathway_check else []
