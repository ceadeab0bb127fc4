"""Write the demo input workbook of a FICTIONAL reforestation project (forest pathway).

Every measurement in the workbook is invented by a seeded simulation: the
project, its place, its company and its trees do not exist. Published factors
and models (allometry, root-to-shoot ratio, carbon fraction, emission
factors) keep their names and sources; everything else is demo data.

The workbook starts from ``verify.template.build_template("forest")`` (notes,
dropdowns, Instructions sheet) and is filled one sheet at a time: each sheet
has one function returning its records, listed in ``SHEET_RECORDS``. To add
an optional sheet later (Claims, CheckPlots), write its function and add it
to that mapping.

Regenerate from the repository root:

    .venv/bin/python demo_projects/make_forest_demo.py

The output is byte-for-byte reproducible: fixed seed, fixed document
properties and fixed timestamps inside the xlsx (zip) archive.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from openpyxl import Workbook
from openpyxl.worksheet.worksheet import Worksheet

from verify.atomic import write_bytes_atomic
from verify.factors import (
    DIESEL_CO2_EF,
    DIESEL_DENSITY,
    DIESEL_NCV,
    N2ON_TO_N2O,
    fuel_co2_kg_per_litre,
)
from verify.results_xlsx import reproducible_xlsx_bytes as xlsx_bytes_with_fixed_dates
from verify.template import build_template

Record = dict[str, Any]

OUTPUT_PATH = Path(__file__).with_name("forest_demo.xlsx")
SEED = 20230701

# Stamped into the document properties and on every member of the xlsx
# archive, so two runs give identical bytes.
FIXED_TIMESTAMP = dt.datetime(2025, 7, 15, 9, 0, 0)

PERIOD_START = dt.date(2023, 7, 1)
PERIOD_END = dt.date(2025, 6, 30)
START_EVENT, END_EVENT = "start", "end"

# Field campaigns (fictional): the start inventory straddles period_start,
# the end inventory falls in June 2025.
START_CAMPAIGN = (dt.date(2023, 6, 19), dt.date(2023, 7, 21))
END_CAMPAIGN = (dt.date(2025, 6, 2), dt.date(2025, 6, 27))

COMPANY = "Tapirvale Restoration Ltd. (fictional)"

# Inventory protocol of the fictional project: every stem of at least this
# DBH is tagged. Stems of 3-5 cm lie below the 5 cm lower limit of the Chave
# models, so a few trees are reported as extrapolations (as in real data).
MIN_DBH_CM = 3.0
PLOT_AREA_M2 = 500.0
SUBPLOT_AREA_M2 = 100.0
SUBPLOT_MAX_DBH_CM = 10.0

# Invented height-diameter curve for the simulation only:
# H = 1.3 + HD_A * D^HD_B * species height factor * exp(tree effect).
# Its shape resembles published pantropical H-D models; it is not one of them.
HD_A, HD_B = 1.45, 0.78
HEIGHT_TREE_SD_LOG = 0.10       # persistent tree-to-tree spread of height
HEIGHT_MEASUREMENT_SD_M = 0.4   # clinometer reading error per measurement

# Spread of DBH growth between trees (log scale) and its bounds: young
# tropical plantings grow about 0.5-2.5 cm/yr in DBH.
GROWTH_TREE_SD_LOG = 0.35
GROWTH_MIN_CM_YR, GROWTH_MAX_CM_YR = 0.3, 3.0
PLOT_EFFECT_SD_LOG = 0.15       # site quality from plot to plot

# Mortality over the two-year interval: higher for small, suppressed stems.
MORTALITY_BASE = 0.02
MORTALITY_SMALL_EXTRA = 0.08
MORTALITY_SMALL_SCALE_CM = 3.0

# Stems just below MIN_DBH_CM at the start: the source of ingrowth.
RECRUIT_DBH_RANGE_CM = (1.5, 2.9)

# Published model coefficients.
# Chave, J. et al. (2014) Global Change Biology 20:3177-3190, Eq. 4:
# AGB = 0.0673 (rho D^2 H)^0.976. DBH range of the calibration data 5-212 cm
# (range from memory; check against the source).
CHAVE2014 = "CHAVE14_EQ4"
# Chave, J. et al. (2005) Oecologia 145:87-99, moist forest stands, model with
# height: AGB = 0.0509 rho D^2 H. DBH range of the data 5-156 cm (value and
# range from memory; check against the source).
CHAVE2005 = "CHAVE05_MOIST_H"

# Root-to-shoot ratio: IPCC 2019 Refinement Vol. 4, Ch. 4, Table 4.4, tropical
# moist deciduous forest with above-ground biomass < 125 t/ha (young
# plantings): 0.20. Value from memory; check against the source.
ROOT_SHOOT_RATIO = 0.20
# Carbon fraction of dry matter: IPCC 2006 Guidelines Vol. 4, Ch. 4, Table
# 4.3, tropical and subtropical, 0.47. Value from memory; check against the
# source.
CARBON_FRACTION = 0.47


@dataclass(frozen=True)
class SpeciesInfo:
    """A species of the demo.

    ``wood_density_g_cm3``: given from memory of the Global Wood Density
    Database (Zanne et al. 2009, Dryad, doi:10.5061/dryad.234); demo values,
    check against the source before any real use. ``growth_cm_yr`` (mean DBH
    increment) and ``height_factor`` drive the invented simulation only.
    """

    name: str
    wood_density_g_cm3: float
    model_id: str
    growth_cm_yr: float
    height_factor: float


SPECIES: tuple[SpeciesInfo, ...] = (
    SpeciesInfo("Vochysia guatemalensis", 0.37, CHAVE2014, 1.9, 1.10),
    SpeciesInfo("Terminalia amazonia", 0.66, CHAVE2014, 1.4, 1.05),
    SpeciesInfo("Hieronyma alchorneoides", 0.62, CHAVE2014, 1.3, 1.00),
    SpeciesInfo("Cedrela odorata", 0.41, CHAVE2014, 1.3, 0.95),
    SpeciesInfo("Tabebuia rosea", 0.52, CHAVE2014, 1.1, 0.90),
    SpeciesInfo("Dipteryx oleifera", 0.87, CHAVE2014, 0.8, 0.90),
    # Residual and naturally regenerating trees of the secondary forest; the
    # demo gives them the Chave 2005 model to show a second model in use.
    SpeciesInfo("Inga edulis", 0.55, CHAVE2005, 1.5, 0.85),
    SpeciesInfo("Cecropia peltata", 0.36, CHAVE2005, 1.7, 1.05),
)
SPECIES_BY_NAME = {s.name: s for s in SPECIES}


@dataclass(frozen=True)
class StratumPlan:
    """How the simulation populates one stratum (all values invented).

    ``stems_per_ha`` and the log-normal DBH (``dbh_median_cm``,
    ``dbh_sd_log``) describe stems of at least MIN_DBH_CM at the start;
    ``mix`` gives species shares. ``small_*`` describe an extra cohort of
    small stems (underplanted saplings) where the stratum has one.
    ``nested`` strata measure stems below SUBPLOT_MAX_DBH_CM only in a
    SUBPLOT_AREA_M2 subplot. ``temporary_start`` / ``temporary_end`` are
    plots measured at that event only.
    """

    stratum_id: str
    area_ha: float
    description: str
    plot_prefix: str
    n_permanent: int
    stems_per_ha: float
    dbh_median_cm: float
    dbh_sd_log: float
    mix: dict[str, float]
    site_growth: float
    recruits_per_plot: float
    nested: bool = False
    small_stems_per_ha: float = 0.0
    small_dbh_median_cm: float = 0.0
    small_mix: dict[str, float] | None = None
    temporary_start: int = 0
    temporary_end: int = 0
    baseline_tco2e_per_ha_yr: float = 0.0
    baseline_uncertainty_pct: float = 0.0
    baseline_basis: str = ""


STRATA: tuple[StratumPlan, ...] = (
    StratumPlan(
        stratum_id="S1",
        area_ha=410.0,
        description="Mixed native species planted 2018-2019 at 3 x 3 m on former cattle pasture",
        plot_prefix="A",
        n_permanent=12,
        stems_per_ha=700.0,
        dbh_median_cm=9.5,
        dbh_sd_log=0.33,
        mix={"Vochysia guatemalensis": 0.25, "Terminalia amazonia": 0.20,
             "Hieronyma alchorneoides": 0.20, "Cedrela odorata": 0.10,
             "Tabebuia rosea": 0.15, "Dipteryx oleifera": 0.10},
        site_growth=0.6,
        recruits_per_plot=0.6,
        baseline_tco2e_per_ha_yr=0.8,
        baseline_uncertainty_pct=35.0,
        baseline_basis="Demo value: slow natural regeneration on grazed pasture abandoned nearby "
                        "(fictional district survey, 2022)",
    ),
    StratumPlan(
        stratum_id="S2",
        area_ha=275.0,
        description="Enrichment planting (2018) of native timber species in degraded secondary forest",
        plot_prefix="B",
        n_permanent=10,
        stems_per_ha=260.0,
        dbh_median_cm=14.0,
        dbh_sd_log=0.30,
        mix={"Cecropia peltata": 0.45, "Inga edulis": 0.35, "Vochysia guatemalensis": 0.20},
        site_growth=0.55,
        recruits_per_plot=1.5,
        nested=True,
        small_stems_per_ha=1400.0,
        small_dbh_median_cm=6.8,
        small_mix={"Terminalia amazonia": 0.30, "Hieronyma alchorneoides": 0.25,
                   "Dipteryx oleifera": 0.20, "Cedrela odorata": 0.10, "Inga edulis": 0.15},
        baseline_tco2e_per_ha_yr=1.4,
        baseline_uncertainty_pct=30.0,
        baseline_basis="Demo value: regrowth of unmanaged secondary forest of similar age "
                        "(fictional chronosequence, 2021)",
    ),
    StratumPlan(
        stratum_id="S3",
        area_ha=165.0,
        description="Riparian restoration planted 2019 along the Saranja river and its tributaries",
        plot_prefix="C",
        n_permanent=8,
        stems_per_ha=900.0,
        dbh_median_cm=9.0,
        dbh_sd_log=0.30,
        mix={"Inga edulis": 0.35, "Vochysia guatemalensis": 0.20, "Tabebuia rosea": 0.20,
             "Cedrela odorata": 0.15, "Terminalia amazonia": 0.10},
        site_growth=0.65,
        recruits_per_plot=0.8,
        # Two plots were lost (markers washed away by the 2024 floods) and one
        # was added in 2025: the stratum has three temporary plots, so its
        # change is estimated from two independent samples.
        temporary_start=2,
        temporary_end=1,
        baseline_tco2e_per_ha_yr=0.5,
        baseline_uncertainty_pct=40.0,
        baseline_basis="Demo value: natural regeneration on unfenced river banks, limited by "
                        "grazing and floods (fictional field survey, 2022)",
    ),
)


@dataclass(frozen=True)
class PlotVisit:
    """One measurement of one plot."""

    plot_id: str
    stratum_id: str
    event: str
    measured_on: dt.date
    nested: bool


@dataclass
class Inventory:
    """The simulated inventory: plot visits and tree records, both in sheet order."""

    visits: list[PlotVisit]
    trees: list[Record]


# --- simulation -------------------------------------------------------------

def campaign_dates(rng: np.random.Generator, window: tuple[dt.date, dt.date], n: int) -> list[dt.date]:
    """``n`` sorted field days spread over a campaign window."""
    span_days = (window[1] - window[0]).days
    offsets = np.sort(rng.integers(0, span_days + 1, size=n))
    return [window[0] + dt.timedelta(days=int(o)) for o in offsets]


def draw_species(rng: np.random.Generator, mix: dict[str, float], n: int) -> np.ndarray:
    names = list(mix)
    shares = np.array([mix[s] for s in names])
    return rng.choice(np.array(names, dtype=object), size=n, p=shares / shares.sum())


def truncated_lognormal(rng: np.random.Generator, median: float, sd_log: float,
                        low: float, high: float, n: int) -> np.ndarray:
    """``n`` log-normal draws kept within [low, high) by redrawing the rest."""
    values = np.empty(0)
    while values.size < n:
        draws = median * np.exp(rng.normal(0.0, sd_log, size=2 * n))
        values = np.concatenate([values, draws[(draws >= low) & (draws < high)]])
    return values[:n]


def height_m(dbh_cm: np.ndarray, height_factor: np.ndarray, tree_effect: np.ndarray,
             rng: np.random.Generator) -> np.ndarray:
    """Simulated total height (m) from the invented H-D curve with tree and reading noise."""
    expected = 1.3 + HD_A * dbh_cm**HD_B * height_factor * np.exp(tree_effect)
    measured = expected + rng.normal(0.0, HEIGHT_MEASUREMENT_SD_M, size=dbh_cm.size)
    return np.maximum(measured, 1.5)


def stand_population(rng: np.random.Generator, plan: StratumPlan) -> dict[str, np.ndarray]:
    """All stems standing on one 500 m2 plot at the start, measured or not.

    Includes sub-threshold recruits and, in nested strata, the small stems
    outside the subplot: they are simulated so that ingrowth arises from
    growth, not by decree.
    """
    plot_ha = PLOT_AREA_M2 / 10_000.0
    n_main = rng.poisson(plan.stems_per_ha * plot_ha)
    dbh_main = truncated_lognormal(rng, plan.dbh_median_cm, plan.dbh_sd_log, MIN_DBH_CM, 40.0, n_main)
    species = [draw_species(rng, plan.mix, n_main)]
    dbh = [dbh_main]
    if plan.small_mix:
        n_small = rng.poisson(plan.small_stems_per_ha * plot_ha)
        dbh.append(truncated_lognormal(rng, plan.small_dbh_median_cm, 0.25, MIN_DBH_CM,
                                       SUBPLOT_MAX_DBH_CM, n_small))
        species.append(draw_species(rng, plan.small_mix, n_small))
    n_recruits = rng.poisson(plan.recruits_per_plot)
    dbh.append(rng.uniform(*RECRUIT_DBH_RANGE_CM, size=n_recruits))
    species.append(draw_species(rng, plan.small_mix or plan.mix, n_recruits))
    all_dbh = np.concatenate(dbh)
    n = all_dbh.size
    return {
        "dbh_start": all_dbh,
        "species": np.concatenate(species),
        # The subplot is a fifth of the plot; a stem's position decides
        # whether a small stem is in it.
        "in_subplot": rng.uniform(size=n) < SUBPLOT_AREA_M2 / PLOT_AREA_M2,
        "tag_order": rng.permutation(n),
    }


def grow(rng: np.random.Generator, plan: StratumPlan, stems: dict[str, np.ndarray],
         years: float, plot_effect: float) -> None:
    """Add end DBH, survival and heights at both events to ``stems`` (in place)."""
    dbh = stems["dbh_start"]
    info = [SPECIES_BY_NAME[s] for s in stems["species"]]
    mean_growth = np.array([s.growth_cm_yr for s in info])
    # Larger stems of a young stand dominate the canopy and grow faster.
    size_effect = np.clip(dbh / 10.0, 0.4, 1.6) ** 0.3
    annual = mean_growth * plan.site_growth * plot_effect * size_effect * np.exp(
        rng.normal(0.0, GROWTH_TREE_SD_LOG, size=dbh.size))
    annual = np.clip(annual, GROWTH_MIN_CM_YR, GROWTH_MAX_CM_YR)
    stems["dbh_end"] = dbh + annual * years
    death_p = MORTALITY_BASE + MORTALITY_SMALL_EXTRA * np.exp(-(dbh - MIN_DBH_CM) / MORTALITY_SMALL_SCALE_CM)
    stems["alive_end"] = rng.uniform(size=dbh.size) >= np.clip(death_p, 0.0, 1.0)
    height_factor = np.array([s.height_factor for s in info])
    tree_effect = rng.normal(0.0, HEIGHT_TREE_SD_LOG, size=dbh.size)
    h_start = height_m(dbh, height_factor, tree_effect, rng)
    h_end = height_m(stems["dbh_end"], height_factor, tree_effect, rng)
    stems["height_start"] = h_start
    # A remeasured live tree does not shrink: a reading below the earlier
    # one is taken again in the field.
    stems["height_end"] = np.maximum(h_end, h_start + 0.1)


def is_measured(dbh_cm: np.ndarray, in_subplot: np.ndarray, nested: bool) -> np.ndarray:
    """Which stems the inventory protocol tags at a visit."""
    measured = dbh_cm >= MIN_DBH_CM
    if nested:
        measured &= (dbh_cm >= SUBPLOT_MAX_DBH_CM) | in_subplot
    return measured


def tree_records(stems: dict[str, np.ndarray], plot_id: str, nested: bool,
                 events: tuple[str, ...]) -> list[Record]:
    """Tree rows of one plot for the ``events`` it was visited at.

    Tags are numbered in the order the crew meets the stems; a stem first
    measured at the end (ingrowth) gets the next free number. A stem alive
    at the start and dead at the end is recorded dead with its last DBH.
    """
    n = stems["dbh_start"].size
    none = np.zeros(n, dtype=bool)
    alive = stems["alive_end"]
    seen = {START_EVENT: is_measured(stems["dbh_start"], stems["in_subplot"], nested)
            if START_EVENT in events else none}
    seen[END_EVENT] = (alive & is_measured(stems["dbh_end"], stems["in_subplot"], nested)
                       | ~alive & seen[START_EVENT]) if END_EVENT in events else none
    first_seen = np.where(seen[START_EVENT], 0, np.where(seen[END_EVENT], 1, 2))
    ranking = np.lexsort((stems["tag_order"], first_seen))
    tags = np.empty(n, dtype=object)
    tags[ranking] = [f"{i:03d}" for i in range(1, n + 1)]

    rows: list[Record] = []
    for event in events:
        chosen = np.flatnonzero(seen[event])
        for i in sorted(chosen, key=lambda k: tags[k]):
            live = event == START_EVENT or bool(stems["alive_end"][i])
            dbh = stems["dbh_start"][i] if event == START_EVENT or not live else stems["dbh_end"][i]
            height = stems["height_start"][i] if event == START_EVENT else stems["height_end"][i]
            rows.append({
                "plot_id": plot_id,
                "event": event,
                "tree_id": tags[i],
                "species": stems["species"][i],
                "dbh_cm": round(float(dbh), 1),
                "height_m": round(float(height), 1) if live else None,
                "status": "live" if live else "dead",
            })
    return rows


def simulate_inventory(rng: np.random.Generator) -> Inventory:
    """Plot visits and tree records of every stratum."""
    plans = [(plan, f"{plan.plot_prefix}{k:02d}", (START_EVENT, END_EVENT))
             for plan in STRATA for k in range(1, plan.n_permanent + 1)]
    for plan in STRATA:
        plans += [(plan, f"{plan.plot_prefix}T{k}", (START_EVENT,))
                  for k in range(1, plan.temporary_start + 1)]
        plans += [(plan, f"{plan.plot_prefix}T{plan.temporary_start + k}", (END_EVENT,))
                  for k in range(1, plan.temporary_end + 1)]
    # Crews visit plots in the listed order at both campaigns.
    start_days = iter(campaign_dates(rng, START_CAMPAIGN, len(plans)))
    end_days = iter(campaign_dates(rng, END_CAMPAIGN, len(plans)))
    visits: list[PlotVisit] = []
    trees: dict[str, list[Record]] = {START_EVENT: [], END_EVENT: []}
    for plan, plot_id, events in plans:
        day = {START_EVENT: next(start_days), END_EVENT: next(end_days)}
        stems = stand_population(rng, plan)
        plot_effect = float(np.exp(rng.normal(0.0, PLOT_EFFECT_SD_LOG)))
        years = (day[END_EVENT] - day[START_EVENT]).days / 365.25
        grow(rng, plan, stems, years, plot_effect)
        for event in events:
            visits.append(PlotVisit(plot_id, plan.stratum_id, event, day[event], plan.nested))
        for row in tree_records(stems, plot_id, plan.nested, events):
            trees[row["event"]].append(row)
    visits.sort(key=lambda v: (v.event != START_EVENT, v.plot_id))
    return Inventory(visits, trees[START_EVENT] + trees[END_EVENT])


# --- sheet records ------------------------------------------------------------

def project_values(_: Inventory) -> Record:
    return {
        "project_name": "Saranja Valley Reforestation (fictional demo project)",
        "project_id": "SVR-FOREST-001",
        "pathway": "forest",
        "country": "Costa Rica",
        "region": "Saranja Valley, Alto Veraniego district (fictional)",
        "period_start": PERIOD_START,
        "period_end": PERIOD_END,
        "gwp_set": "AR6",
        "confidence_pct": 90,
        "uncertainty_rule": "lower_bound",
        "uncertainty_method": "analytic",
        "buffer_minimum_pct": 10,
        "materiality_pct": 5,
        "prepared_by": COMPANY,
    }


def strata_records(_: Inventory) -> list[Record]:
    return [{"stratum_id": p.stratum_id, "area_ha": p.area_ha, "description": p.description}
            for p in STRATA]


def baseline_records(_: Inventory) -> list[Record]:
    return [{"stratum_id": p.stratum_id, "baseline_tco2e_per_ha_yr": p.baseline_tco2e_per_ha_yr,
             "uncertainty_pct": p.baseline_uncertainty_pct, "basis": p.baseline_basis}
            for p in STRATA]


def emissions_records(_: Inventory) -> list[Record]:
    """Project emissions in the period; activity amounts are invented."""
    diesel_kg_co2_per_l = round(fuel_co2_kg_per_litre(
        DIESEL_CO2_EF.value, DIESEL_NCV.value, DIESEL_DENSITY.value), 3)
    diesel_reference = ("IPCC 2006 Guidelines Vol. 2 Ch. 2 Table 2.2 (74,100 kg CO2/TJ) x "
                        "Vol. 2 Ch. 1 Table 1.2 NCV (43.0 TJ/Gg) x 0.84 kg/L; values from memory")
    # Direct N2O from N applied: IPCC 2019 Refinement Vol. 4, Ch. 11, Table
    # 11.1, EF1 = 0.01 kg N2O-N per kg N (value from memory; check against
    # the source), times 44/28 to express it as N2O.
    n2o_kg_per_kg_n = round(0.01 * N2ON_TO_N2O.value, 4)
    return [
        {"source": "Diesel, site preparation and weeding machinery", "activity_amount": 5200.0,
         "activity_unit": "L", "gas": "CO2", "ef_kg_per_unit": diesel_kg_co2_per_l,
         "uncertainty_pct": 5.0, "reference": diesel_reference},
        {"source": "Diesel, project vehicles (planting logistics, monitoring)", "activity_amount": 8900.0,
         "activity_unit": "L", "gas": "CO2", "ef_kg_per_unit": diesel_kg_co2_per_l,
         "uncertainty_pct": 5.0, "reference": diesel_reference},
        {"source": "Nitrogen fertiliser at planting of replacement and enrichment seedlings",
         "activity_amount": 1850.0, "activity_unit": "kg N", "gas": "N2O",
         "ef_kg_per_unit": n2o_kg_per_kg_n, "uncertainty_pct": 90.0,
         "reference": "IPCC 2019 Refinement Vol. 4 Ch. 11 Table 11.1, EF1 0.01 kg N2O-N/kg N "
                      "(value from memory) x 44/28"},
        {"source": "Nursery electricity (irrigation pumps, shade-house fans)", "activity_amount": 24000.0,
         "activity_unit": "kWh", "gas": "CO2", "ef_kg_per_unit": 0.12, "uncertainty_pct": 10.0,
         "reference": "Grid emission factor of the fictional district utility, 2023 (demo value)"},
    ]


def leakage_records(_: Inventory) -> list[Record]:
    return [{
        "leakage_type": "activity_shifting", "method": "percent", "value": 4.0, "uncertainty_pct": 50.0,
        "justification": "About 180 head of cattle grazed stratum S1 before planting; owners moved "
                         "them to improved pasture on their own holdings. 4 % of net removals is a "
                         "demo value (common practice, no source).",
    }]


def risk_records(_: Inventory) -> list[Record]:
    return [
        {"risk_factor": "Fire", "score_pct": 5.0,
         "justification": "Pasture fires in the dry season on neighbouring farms; firebreaks kept"},
        {"risk_factor": "Drought", "score_pct": 3.0,
         "justification": "Strong El Nino years reduce growth and raise seedling mortality"},
        {"risk_factor": "Land tenure", "score_pct": 2.0,
         "justification": "Registered titles; 30-year conservation agreements with all owners"},
        {"risk_factor": "Financial", "score_pct": 3.0,
         "justification": "Operations funded to 2028; later years depend on credit sales"},
        {"risk_factor": "Pests and disease", "score_pct": 2.0,
         "justification": "Shoot borer on Cedrela odorata; mixed planting limits spread"},
    ]


def reversal_records(_: Inventory) -> list[Record]:
    return [{
        "stratum_id": "S1", "occurred_on": dt.date(2024, 3, 22), "tco2e_lost": 40.0,
        "cause": "Surface fire from a neighbouring pasture burned about 0.6 ha of plantation edge; "
                 "loss estimated from the stratum's mean stock (no permanent plot affected)",
        "avoidable": "no",
    }]


def plots_records(inventory: Inventory) -> list[Record]:
    return [{
        "plot_id": v.plot_id, "stratum_id": v.stratum_id, "event": v.event, "measured_on": v.measured_on,
        "plot_area_m2": PLOT_AREA_M2,
        "subplot_area_m2": SUBPLOT_AREA_M2 if v.nested else None,
        "subplot_max_dbh_cm": SUBPLOT_MAX_DBH_CM if v.nested else None,
    } for v in inventory.visits]


def trees_records(inventory: Inventory) -> list[Record]:
    return inventory.trees


def species_records(_: Inventory) -> list[Record]:
    return [{"species": s.name, "model_id": s.model_id, "wood_density_g_cm3": s.wood_density_g_cm3,
             "root_shoot_ratio": ROOT_SHOOT_RATIO, "carbon_fraction": CARBON_FRACTION}
            for s in SPECIES]


def allometry_records(_: Inventory) -> list[Record]:
    return [
        {"model_id": CHAVE2014, "form": "density_height", "a": 0.0673, "b": 0.976,
         "min_dbh_cm": 5.0, "max_dbh_cm": 212.0,
         "source": "Chave et al. 2014, Glob. Change Biol. 20:3177, Eq. 4 (pantropical, with height)"},
        {"model_id": CHAVE2005, "form": "density_height", "a": 0.0509, "b": 1.0,
         "min_dbh_cm": 5.0, "max_dbh_cm": 156.0,
         "source": "Chave et al. 2005, Oecologia 145:87, moist forest stands, model with height"},
    ]


# --- verifier's sheets ------------------------------------------------------------

# The proponent's own figures per vintage (fictional). The deliberate
# misstatement the demo shows: the proponent's spreadsheet left leakage out
# and applied the 10 % minimum buffer instead of the 15 % its own risk
# assessment gives, so the claimed issuable credits are too high.
CLAIMED_VINTAGES = {
    # vintage: (gross, baseline, project emissions, uncertainty deduction), tCO2e
    2023: (6154.4, 400.7, 12.2, 764.1),
    2024: (12241.8, 797.1, 24.3, 1519.9),
    2025: (6054.0, 394.2, 12.0, 751.7),
}
CLAIMED_BUFFER_PCT = 10.0


def claims_records(_: Inventory) -> list[Record]:
    records = []
    for vintage, (gross, baseline, emissions, deduction) in CLAIMED_VINTAGES.items():
        after_deduction = gross - baseline - emissions - deduction
        buffer = round(after_deduction * CLAIMED_BUFFER_PCT / 100, 1)
        records.append({
            "vintage": vintage, "gross_removals_tco2e": gross, "baseline_tco2e": baseline,
            "project_emissions_tco2e": emissions, "leakage_tco2e": 0.0,
            "uncertainty_deduction_tco2e": deduction, "buffer_tco2e": buffer,
            "issuable_credits": int(after_deduction - buffer),
        })
    return records


# The verifier re-measures every live tree of a few permanent plots at the end
# event. Simulated as the proponent's record plus reading error, with the
# proponent's tape reading DBH slightly high (a fictional 1.5 % bias), and two
# trees mis-recorded, so the demo shows trees outside tolerance and a verdict.
CHECK_PLOTS = ("A02", "A06", "B03", "B08", "C02", "C05")
CHECK_SEED = SEED + 1
CHECK_DBH_PROPONENT_BIAS = 0.015
CHECK_DBH_READING_SD_CM = 0.25
CHECK_HEIGHT_READING_SD_M = 0.5
CHECK_MISRECORDED = 2


def check_plot_records(inventory: Inventory) -> list[Record]:
    rng = np.random.default_rng(CHECK_SEED)
    checked = [t for t in inventory.trees
               if t["plot_id"] in CHECK_PLOTS and t["event"] == END_EVENT and t["status"] == "live"]
    dbh = np.array([t["dbh_cm"] for t in checked]) / (1 + CHECK_DBH_PROPONENT_BIAS)
    dbh += rng.normal(0.0, CHECK_DBH_READING_SD_CM, size=dbh.size)
    height = np.array([t["height_m"] for t in checked]) + rng.normal(0.0, CHECK_HEIGHT_READING_SD_M, size=dbh.size)
    for index in rng.choice(dbh.size, size=CHECK_MISRECORDED, replace=False):
        dbh[index] *= 0.8
    return [
        {"plot_id": t["plot_id"], "event": END_EVENT, "tree_id": t["tree_id"],
         "dbh_cm": round(float(d), 1), "height_m": round(float(h), 1)}
        for t, d, h in zip(checked, dbh, height)
    ]


# Table sheets in template order; each function returns that sheet's records.
SHEET_RECORDS: dict[str, Callable[[Inventory], list[Record]]] = {
    "Strata": strata_records,
    "Baseline": baseline_records,
    "Emissions": emissions_records,
    "Leakage": leakage_records,
    "Risk": risk_records,
    "Reversals": reversal_records,
    "Plots": plots_records,
    "Trees": trees_records,
    "Species": species_records,
    "Allometry": allometry_records,
    "Claims": claims_records,
    "CheckPlots": check_plot_records,
}


# --- workbook -------------------------------------------------------------------

def fill_project(ws: Worksheet, values: Record) -> None:
    """Write ``values`` into column B beside the template's field names in column A."""
    rows = {ws.cell(row=r, column=1).value: r for r in range(2, ws.max_row + 1)}
    unknown = set(values) - set(rows)
    if unknown:
        raise KeyError(f"not Project fields of the template: {sorted(unknown)}")
    for name, value in values.items():
        cell = ws.cell(row=rows[name], column=2, value=value)
        if isinstance(value, dt.date):
            cell.number_format = "yyyy-mm-dd"


def fill_table(ws: Worksheet, records: list[Record]) -> None:
    """Write ``records`` under the template's header row, matching keys to headers."""
    headers = [c.value for c in ws[1] if c.value is not None]
    unknown = {k for r in records for k in r} - set(headers)
    if unknown:
        raise KeyError(f"not columns of {ws.title}: {sorted(unknown)}")
    for row, record in enumerate(records, start=2):
        for col, header in enumerate(headers, start=1):
            value = record.get(header)
            if value is None:
                continue
            cell = ws.cell(row=row, column=col, value=value)
            if isinstance(value, dt.date):
                cell.number_format = "yyyy-mm-dd"


def filled_workbook(pathway: str, project: Record, tables: dict[str, list[Record]],
                    company: str, title: str) -> Workbook:
    """The ``pathway`` template with ``project`` fields and ``tables`` records filled in."""
    book = build_template(pathway)
    fill_project(book["Project"], project)
    for sheet, records in tables.items():
        fill_table(book[sheet], records)
    book.properties.creator = company
    book.properties.lastModifiedBy = company
    book.properties.title = title
    book.properties.created = FIXED_TIMESTAMP
    book.properties.modified = FIXED_TIMESTAMP
    return book


def reproducible_xlsx_bytes(book: Workbook) -> bytes:
    """The xlsx bytes with FIXED_TIMESTAMP as every date, so two runs give identical files."""
    return xlsx_bytes_with_fixed_dates(book, FIXED_TIMESTAMP)


def save_demo(book: Workbook, target: Path) -> Path:
    """Write ``book`` to ``target`` atomically, with reproducible bytes."""
    write_bytes_atomic(Path(target), reproducible_xlsx_bytes(book))
    return Path(target)


def build_demo_workbook(seed: int = SEED) -> Workbook:
    """The filled demo workbook, built on the forest template."""
    inventory = simulate_inventory(np.random.default_rng(seed))
    return filled_workbook("forest", project_values(inventory),
                           {sheet: records(inventory) for sheet, records in SHEET_RECORDS.items()},
                           COMPANY, "Saranja Valley Reforestation - fictional demo input workbook")


def write_demo(target: Path = OUTPUT_PATH, seed: int = SEED) -> Path:
    """Build the demo workbook and write it to ``target`` atomically."""
    return save_demo(build_demo_workbook(seed), target)


if __name__ == "__main__":
    print(f"wrote {write_demo()}")
