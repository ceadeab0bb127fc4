"""Forest pathway: tree biomass and carbon, plot stock densities (tCO2e/ha).

Inputs are the validated ``Trees``, ``Species``, ``Allometry`` and ``Plots``
tables as pandas DataFrames whose columns are the workbook contract headers
plus an int ``row`` (the worksheet row the record came from). Numbers are float
with NaN for blanks. The chain (design note "accounting", section 1):
AGB from the species' allometric model; BGB = AGB * root_shoot_ratio;
carbon = (AGB + BGB) * carbon_fraction; CO2e = carbon * 44/12. Dead trees
count zero. Plot density = sum of trees' CO2e times their expansion factor.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import pandas as pd
from openpyxl.utils import get_column_letter

from verify import allometry
from verify.factors import C_TO_CO2
from verify.findings import Finding, cell_ref
from verify.pathway import SAMPLING_METHODS, PathwayEstimate, gross_from_change, strata_rows
from verify.sampling import stratified_change

M2_PER_HA = 10_000.0
KG_PER_T = 1_000.0

TREES_HEADERS: tuple[str, ...] = (
    "plot_id",
    "event",
    "tree_id",
    "species",
    "dbh_cm",
    "height_m",
    "status",
)
TREES_COLUMNS: dict[str, str] = {
    header: get_column_letter(i) for i, header in enumerate(TREES_HEADERS, start=1)
}

TREE_TABLE_COLUMNS: tuple[str, ...] = (
    "plot_id",
    "event",
    "tree_id",
    "species",
    "status",
    "dbh_cm",
    "height_m",
    "agb_kg",
    "bgb_kg",
    "carbon_kg",
    "co2e_kg",
    "model_id",
    "form",
    "min_dbh_cm",
    "max_dbh_cm",
    "extrapolated",
    "problem",
    "problem_column",
    "row",
)

PLOT_TABLE_COLUMNS: tuple[str, ...] = (
    "plot_id",
    "stratum_id",
    "event",
    "measured_on",
    "n_live_trees",
    "tco2e_per_ha",
    "row",
)


def bgb_kg(agb_kg: np.ndarray, root_shoot_ratio: np.ndarray) -> np.ndarray:
    """Below-ground biomass (kg) = AGB * root-to-shoot ratio.

    IPCC 2006 Guidelines Vol. 4, Ch. 4 (default root-to-shoot ratios in
    Table 4.4; table number from memory, check against the source).
    """
    return np.asarray(agb_kg, dtype=float) * np.asarray(root_shoot_ratio, dtype=float)


def carbon_kg(
    agb_kg: np.ndarray, bgb_kg: np.ndarray, carbon_fraction: np.ndarray
) -> np.ndarray:
    """Carbon (kg C) = (AGB + BGB) * carbon fraction of dry matter.

    IPCC 2006 Guidelines Vol. 4, Ch. 4 (default carbon fractions in Table
    4.3; table number from memory, check against the source).
    """
    total = np.asarray(agb_kg, dtype=float) + np.asarray(bgb_kg, dtype=float)
    return total * np.asarray(carbon_fraction, dtype=float)


def co2e_from_carbon(carbon: np.ndarray) -> np.ndarray:
    """CO2 mass from carbon mass (same unit): * 44/12, the ratio of molecular
    weights used in IPCC 2006 Guidelines Vol. 4 (``verify.factors.C_TO_CO2``)."""
    return np.asarray(carbon, dtype=float) * C_TO_CO2.value


def _select_columns(
    table: pd.DataFrame, columns: tuple[str, ...], keys: tuple[str, ...]
) -> pd.DataFrame:
    """The ``columns`` of ``table``, missing ones added blank (NaN).

    Join ``keys`` become object dtype so that an all-blank or numeric id
    column still joins (without a match) instead of raising on mixed dtypes.
    """
    out = table.reindex(columns=list(columns))
    for key in keys:
        out[key] = out[key].astype(object)
    return out


def _join_models(
    trees: pd.DataFrame, species: pd.DataFrame, allometry_table: pd.DataFrame
) -> pd.DataFrame:
    """Trees with their species' parameters and model coefficients (first row wins)."""
    species_cols = (
        "species", "model_id", "wood_density_g_cm3", "root_shoot_ratio", "carbon_fraction"
    )
    model_cols = ("model_id", "form", "a", "b", "c", "min_dbh_cm", "max_dbh_cm")
    sp = _select_columns(species, species_cols, ("species", "model_id"))
    sp = sp.drop_duplicates("species").assign(_species_known=True)
    models = _select_columns(allometry_table, model_cols, ("model_id",))
    models = models.drop_duplicates("model_id").assign(_model_known=True)
    tree_cols = (*TREES_HEADERS, "row")
    joined = _select_columns(trees, tree_cols, ("species",))
    joined = joined.merge(sp, on="species", how="left").merge(models, on="model_id", how="left")
    joined["_species_known"] = joined["_species_known"].eq(True)
    joined["_model_known"] = joined["_model_known"].eq(True)
    return joined


def _forms_where(predicate: Callable[[str], bool]) -> list[str]:
    return [form for form in allometry.FORMS if predicate(form)]


def _tree_problems(joined: pd.DataFrame) -> tuple[pd.Series, pd.Series]:
    """Why each tree's biomass cannot be computed: (message, Trees header); "" when it can.

    Only live trees need a model; the first failing check names the problem.
    """
    problem = pd.Series("", index=joined.index, dtype=object)
    column = pd.Series("", index=joined.index, dtype=object)
    form = joined["form"]
    checks: list[tuple[pd.Series, str, Callable[[Any], str]]] = [
        (
            ~joined["_species_known"],
            "species",
            lambda t: f"species {t.species!r} is not on the Species sheet",
        ),
        (
            ~joined["_model_known"],
            "species",
            lambda t: f"model {t.model_id!r} of species {t.species!r} is not on the "
            "Allometry sheet",
        ),
        (
            ~form.isin(allometry.FORMS),
            "species",
            lambda t: f"model {t.model_id!r} has unknown form {t.form!r}",
        ),
        (
            joined["a"].isna() | joined["b"].isna(),
            "species",
            lambda t: f"model {t.model_id!r} lacks coefficient a or b",
        ),
        (joined["dbh_cm"].isna(), "dbh_cm", lambda t: "dbh_cm is blank"),
        (
            form.isin(_forms_where(allometry.needs_height)) & joined["height_m"].isna(),
            "height_m",
            lambda t: f"model {t.model_id!r} needs height_m, which is blank",
        ),
        (
            form.isin(_forms_where(allometry.needs_density)) & joined["wood_density_g_cm3"].isna(),
            "species",
            lambda t: f"model {t.model_id!r} needs the wood_density_g_cm3 of species "
            f"{t.species!r}, which is blank",
        ),
        (
            joined["root_shoot_ratio"].isna(),
            "species",
            lambda t: f"species {t.species!r} has no root_shoot_ratio",
        ),
        (
            joined["carbon_fraction"].isna(),
            "species",
            lambda t: f"species {t.species!r} has no carbon_fraction",
        ),
    ]
    status = joined["status"]
    unresolved = ~status.isin(["live", "dead"])
    _record(problem, column, joined, unresolved, "status", _status_message)
    unresolved = status.eq("live")
    for mask, header, message in checks:
        hit = unresolved & mask
        _record(problem, column, joined, hit, header, message)
        unresolved &= ~hit
    return problem, column


def _status_message(tree: Any) -> str:
    if pd.isna(tree.status):
        return "status is blank"
    return f"status {tree.status!r} is neither 'live' nor 'dead'"


def _record(
    problem: pd.Series,
    column: pd.Series,
    joined: pd.DataFrame,
    hit: pd.Series,
    header: str,
    message: Callable[[Any], str],
) -> None:
    """Write ``message`` (built from each hit row) and the Trees header it concerns."""
    if hit.any():
        problem[hit] = [message(t) for t in joined[hit].itertuples(index=False)]
        column[hit] = header


def _live_agb_kg(joined: pd.DataFrame, computable: np.ndarray) -> np.ndarray:
    """AGB (kg) for computable live trees, grouped by model form; NaN elsewhere."""
    agb = np.full(len(joined), np.nan)
    for form in allometry.FORMS:
        mask = computable & (joined["form"] == form).to_numpy()
        if not mask.any():
            continue
        part = joined[mask]
        agb[mask] = allometry.agb_kg(
            form,
            part["a"].to_numpy(dtype=float),
            part["b"].to_numpy(dtype=float),
            part["c"].to_numpy(dtype=float),
            part["dbh_cm"].to_numpy(dtype=float),
            height_m=part["height_m"].to_numpy(dtype=float),
            wood_density_g_cm3=part["wood_density_g_cm3"].to_numpy(dtype=float),
        )
    return agb


def tree_biomass(
    trees: pd.DataFrame, species: pd.DataFrame, allometry_table: pd.DataFrame
) -> pd.DataFrame:
    """Per-tree biomass, carbon and CO2e (kg), one row per row of ``trees``.

    Columns: TREE_TABLE_COLUMNS. AGB from the species' model
    (:func:`verify.allometry.agb_kg`), BGB = AGB * root_shoot_ratio, carbon =
    (AGB + BGB) * carbon_fraction, CO2e = carbon * 44/12 (IPCC 2006 Vol. 4,
    Ch. 4). Dead trees are zero (they leave the live-tree pool).
    ``extrapolated`` marks live trees whose DBH is outside the model's range.
    A tree whose biomass cannot be computed (live with unknown species or
    model or a blank input; status neither live nor dead) gets NaN and a
    plain-words ``problem`` with the Trees header it concerns in
    ``problem_column`` ("" when there is none).
    """
    joined = _join_models(trees, species, allometry_table)
    status = joined["status"]
    live = status.eq("live").to_numpy()
    dead = status.eq("dead").to_numpy()
    problem, problem_column = _tree_problems(joined)

    computable = live & problem.eq("").to_numpy()
    agb = _live_agb_kg(joined, computable)
    agb[dead] = 0.0
    uncomputed = computable & ~np.isfinite(agb)
    problem[uncomputed] = "the model gives no finite biomass for these inputs"
    problem_column[uncomputed] = "dbh_cm"

    bgb = np.where(dead, 0.0, bgb_kg(agb, joined["root_shoot_ratio"].to_numpy(dtype=float)))
    carbon_fraction = joined["carbon_fraction"].to_numpy(dtype=float)
    carbon = np.where(dead, 0.0, carbon_kg(agb, bgb, carbon_fraction))
    extrapolated = live & allometry.outside_valid_range(
        joined["dbh_cm"].to_numpy(dtype=float),
        joined["min_dbh_cm"].to_numpy(dtype=float),
        joined["max_dbh_cm"].to_numpy(dtype=float),
    )
    out = joined.assign(
        agb_kg=agb,
        bgb_kg=bgb,
        carbon_kg=carbon,
        co2e_kg=co2e_from_carbon(carbon),
        extrapolated=extrapolated,
        problem=problem,
        problem_column=problem_column,
    )
    return out[list(TREE_TABLE_COLUMNS)].reset_index(drop=True)


def expansion_per_ha(
    dbh_cm: np.ndarray,
    plot_area_m2: np.ndarray,
    subplot_area_m2: np.ndarray,
    subplot_max_dbh_cm: np.ndarray,
) -> np.ndarray:
    """Trees per hectare one tree represents (nested plots).

    A tree with DBH below ``subplot_max_dbh_cm`` was measured only in the
    subplot and stands for 10000 / subplot_area_m2 trees per ha; every other
    tree for 10000 / plot_area_m2. Nesting applies only where both subplot
    columns are filled. A non-positive area gives NaN.
    """
    dbh = np.asarray(dbh_cm, dtype=float)
    plot_area = np.asarray(plot_area_m2, dtype=float)
    sub_area = np.asarray(subplot_area_m2, dtype=float)
    sub_max = np.asarray(subplot_max_dbh_cm, dtype=float)
    in_subplot = ~np.isnan(sub_area) & ~np.isnan(sub_max) & (dbh < sub_max)
    area_m2 = np.where(in_subplot, sub_area, plot_area)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(area_m2 > 0, M2_PER_HA / area_m2, np.nan)


def plot_densities(plots: pd.DataFrame, tree_table: pd.DataFrame) -> pd.DataFrame:
    """Stock density per plot and event (tCO2e/ha), one row per Plots row.

    y = sum over live trees of co2e_kg / 1000 * expansion (trees/ha), the
    expansion from :func:`expansion_per_ha` (nested subplots). A plot with no
    live trees is a valid zero; a live tree with NaN CO2e makes its plot NaN.
    Columns: PLOT_TABLE_COLUMNS (``row`` is the Plots row). Duplicate
    plot_id/event rows keep the first; trees of unknown plots are ignored
    (both are reported by validation).
    """
    keys = ("plot_id", "event")
    plot_cols = (
        "plot_id", "stratum_id", "event", "measured_on",
        "plot_area_m2", "subplot_area_m2", "subplot_max_dbh_cm", "row",
    )
    plot_rows = _select_columns(plots, plot_cols, keys).drop_duplicates(list(keys))
    live = tree_table.loc[tree_table["status"].eq("live"), [*keys, "dbh_cm", "co2e_kg"]]
    live = _select_columns(live, (*keys, "dbh_cm", "co2e_kg"), keys)
    trees = live.merge(plot_rows, on=list(keys), how="inner")
    tree_tco2e_per_ha = trees["co2e_kg"].to_numpy(dtype=float) / KG_PER_T * expansion_per_ha(
        trees["dbh_cm"].to_numpy(dtype=float),
        trees["plot_area_m2"].to_numpy(dtype=float),
        trees["subplot_area_m2"].to_numpy(dtype=float),
        trees["subplot_max_dbh_cm"].to_numpy(dtype=float),
    )
    trees = trees.assign(
        tco2e_per_ha=tree_tco2e_per_ha, unknown=np.isnan(tree_tco2e_per_ha)
    )
    per_plot = trees.groupby(list(keys), sort=False).agg(
        n_live_trees=("tco2e_per_ha", "size"),
        tco2e_per_ha=("tco2e_per_ha", "sum"),
        n_unknown=("unknown", "sum"),
    )
    per_plot.loc[per_plot["n_unknown"] > 0, "tco2e_per_ha"] = np.nan
    out = plot_rows.merge(per_plot.reset_index(), on=list(keys), how="left")
    out["n_live_trees"] = out["n_live_trees"].fillna(0).astype(int)
    out["tco2e_per_ha"] = out["tco2e_per_ha"].astype(float).where(out["n_live_trees"] > 0, 0.0)
    return out[list(PLOT_TABLE_COLUMNS)].reset_index(drop=True)


def _range_text(min_dbh_cm: float, max_dbh_cm: float) -> str:
    low = "no lower limit" if np.isnan(min_dbh_cm) else f"{min_dbh_cm:g}"
    high = "no upper limit" if np.isnan(max_dbh_cm) else f"{max_dbh_cm:g}"
    return f"{low} to {high} cm"


def _location(sheet: str, columns: Mapping[str, str], header: str, row: int) -> str:
    """The cell of ``header`` in ``row``; the sheet alone if the header has no column."""
    letter = columns.get(header)
    return cell_ref(sheet, letter, row) if letter else sheet


def forest_findings(
    tree_table: pd.DataFrame,
    columns: Mapping[str, str] = TREES_COLUMNS,
    sheet: str = "Trees",
) -> list[Finding]:
    """Findings from the per-tree table of :func:`tree_biomass`.

    - warning ``dbh_outside_model_range`` at the tree's dbh_cm cell when the
      DBH lies outside the model's fitted range (the biomass is an
      extrapolation);
    - error ``tree_biomass_not_computed`` at the cell concerned when a live
      tree's biomass could not be computed.

    ``columns`` maps Trees headers to column letters (default: the contract
    order).
    """
    findings: list[Finding] = []
    for tree in tree_table[tree_table["extrapolated"]].itertuples(index=False):
        findings.append(
            Finding(
                "warning",
                "dbh_outside_model_range",
                _location(sheet, columns, "dbh_cm", int(tree.row)),
                f"Tree {tree.tree_id!r} (plot {tree.plot_id!r}, event {tree.event!r}) has "
                f"dbh_cm {tree.dbh_cm:g}, outside the range of model {tree.model_id!r} "
                f"({_range_text(tree.min_dbh_cm, tree.max_dbh_cm)}); its biomass is an "
                "extrapolation. Check the measurement or use a model fitted for this size.",
            )
        )
    for tree in tree_table[tree_table["problem"].ne("")].itertuples(index=False):
        findings.append(
            Finding(
                "error",
                "tree_biomass_not_computed",
                _location(sheet, columns, tree.problem_column, int(tree.row)),
                f"Tree {tree.tree_id!r} (plot {tree.plot_id!r}, event {tree.event!r}): "
                f"{tree.problem}, so its biomass cannot be computed. Fill in or correct "
                "the value.",
            )
        )
    return findings


def _model_methods(allometry_table: pd.DataFrame, species: pd.DataFrame) -> list[dict[str, Any]]:
    """One entry per allometric model and per species parameter set actually used."""
    methods = []
    for model in allometry_table.itertuples(index=False):
        c = "" if pd.isna(model.c) else f", c={model.c:g}"
        methods.append({
            "name": f"Allometric model {model.model_id} ({model.form})",
            "value": f"a={model.a:g}, b={model.b:g}{c}",
            "unit": "kg above-ground dry biomass",
            "source": f"{model.source} (Allometry row {model.row})",
        })
    for sp in species.itertuples(index=False):
        density = "" if pd.isna(sp.wood_density_g_cm3) else f"wood density {sp.wood_density_g_cm3:g} g/cm3, "
        methods.append({
            "name": f"Species parameters: {sp.species}",
            "value": f"{density}root:shoot {sp.root_shoot_ratio:g}, carbon fraction {sp.carbon_fraction:g}",
            "unit": "",
            "source": f"workbook Species row {sp.row}",
        })
    return methods


def quantify(book: Any, first_event: str, last_event: str, confidence_pct: float) -> PathwayEstimate:
    """Gross removals of a validated forest workbook (accounting design, section 1).

    Trees -> plot stock densities (tCO2e/ha) -> stratified change between the
    first and last event (:func:`verify.sampling.stratified_change`).
    """
    trees = tree_biomass(book.table("Trees"), book.table("Species"), book.table("Allometry"))
    plots = plot_densities(book.table("Plots"), trees)
    units = plots.rename(columns={"plot_id": "unit_id", "tco2e_per_ha": "value_per_ha"})
    areas = dict(zip(book.table("Strata")["stratum_id"], book.table("Strata")["area_ha"]))
    change = stratified_change(units, areas, first_event, last_event, confidence_pct, sheet="Plots")
    methods = _model_methods(book.table("Allometry"), book.table("Species")) + [
        {"name": "Below-ground biomass", "value": "AGB x root_shoot_ratio", "unit": "kg",
         "source": "IPCC 2006 Guidelines Vol. 4 Ch. 4, Eq. 4.7 form (ratio from the Species sheet)"},
        {"name": "Tree carbon", "value": "(AGB + BGB) x carbon_fraction", "unit": "kg C",
         "source": "IPCC 2006 Guidelines Vol. 4 Ch. 4 (carbon fraction from the Species sheet)"},
        {"name": "Nested subplots", "value": "10000 / subplot_area_m2 below subplot_max_dbh_cm, else 10000 / plot_area_m2",
         "unit": "trees/ha per tree", "source": "plot expansion factors (accounting design, section 1)"},
    ] + SAMPLING_METHODS
    findings = forest_findings(trees, columns=book.sheets["Trees"].letters) + change.findings
    return PathwayEstimate(gross_from_change(change), strata_rows(change), methods, findings, units=plots)
