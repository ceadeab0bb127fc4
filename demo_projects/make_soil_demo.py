"""Write the demo input workbook of a FICTIONAL grazing-land soil carbon project (soil pathway).

Every measurement is invented by a seeded simulation: the project, its
place, its company and its soil cores do not exist. Published equations
(layer stocks, equivalent soil mass) and emission factors keep their names
and sources; everything else is demo data.

The workbook starts from ``verify.template.build_template("soil")`` and is
filled one sheet at a time (``SHEET_RECORDS``), with the sheet writers of the
forest demo. The project compares stocks by equivalent soil mass: the
baseline campaign cored 0-30 cm, the remeasurement added a 30-40 cm layer so
the heavier, remeasured profiles can be read at the baseline's reference mass.

Regenerate from the repository root:

    .venv/bin/python demo_projects/make_soil_demo.py

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

from verify.demo_projects.make_forest_demo import (
    filled_workbook,
    save_demo,
)
from verify.factors import DIESEL_CO2_EF, DIESEL_DENSITY, DIESEL_NCV, fuel_co2_kg_per_litre

Record = dict[str, Any]

OUTPUT_PATH = Path(__file__).with_name("soil_demo.xlsx")
SEED = 20220314

PERIOD_START = dt.date(2022, 4, 1)
PERIOD_END = dt.date(2025, 3, 31)
BASELINE_EVENT, REMEASURE_EVENT = "baseline", "remeasure"
# Field campaigns (fictional): both straddle the ends of the period.
CAMPAIGNS = {
    BASELINE_EVENT: (dt.date(2022, 3, 14), dt.date(2022, 4, 8)),
    REMEASURE_EVENT: (dt.date(2025, 3, 3), dt.date(2025, 3, 28)),
}
LAYERS_CM = {
    BASELINE_EVENT: ((0.0, 10.0), (10.0, 20.0), (20.0, 30.0)),
    REMEASURE_EVENT: ((0.0, 10.0), (10.0, 20.0), (20.0, 30.0), (30.0, 40.0)),
}

COMPANY = "Fieldmark Soil Monitoring S.A. (fictional)"

# Invented spread of the simulation (not measured anywhere):
POINT_EFFECT_SD_LOG = 0.15     # persistent point-to-point differences in SOC
CORE_SD_LOG = 0.04             # a new core a metre away, plus laboratory error
BD_SD_G_CM3 = 0.03             # core-to-core bulk density
CF_RANGE_PCT = (1.0, 8.0)      # coarse fragments by volume


@dataclass(frozen=True)
class StratumPlan:
    """How the simulation populates one stratum (all values invented).

    Per layer from the surface: baseline SOC %, bulk density (g/cm3), the
    change in SOC % and in bulk density over the three years.
    """

    stratum_id: str
    area_ha: float
    description: str
    point_prefix: str
    n_points: int
    soc_pct: tuple[float, ...]
    bulk_density_g_cm3: tuple[float, ...]
    soc_change_pct: tuple[float, ...]
    bd_change_g_cm3: tuple[float, ...]
    baseline_tco2e_per_ha_yr: float
    baseline_uncertainty_pct: float
    baseline_basis: str


STRATA: tuple[StratumPlan, ...] = (
    StratumPlan(
        stratum_id="S1",
        area_ha=640.0,
        description="Native pasture moved from continuous to planned rotational grazing in 2022",
        point_prefix="R",
        n_points=16,
        soc_pct=(2.6, 1.7, 1.15, 0.85),
        bulk_density_g_cm3=(1.12, 1.28, 1.36, 1.42),
        soc_change_pct=(0.16, 0.07, 0.03, 0.01),
        bd_change_g_cm3=(-0.03, -0.01, 0.0, 0.0),
        baseline_tco2e_per_ha_yr=0.0,
        baseline_uncertainty_pct=0.0,
        baseline_basis="Demo value: continuous grazing held SOC near steady state on the "
                       "fictional district's long-term plots (conservative zero)",
    ),
    StratumPlan(
        stratum_id="S2",
        area_ha=380.0,
        description="Annual cropland sown to perennial pasture in 2022",
        point_prefix="C",
        n_points=12,
        soc_pct=(1.55, 1.35, 1.05, 0.80),
        bulk_density_g_cm3=(1.30, 1.38, 1.41, 1.44),
        soc_change_pct=(0.22, 0.09, 0.04, 0.01),
        bd_change_g_cm3=(-0.06, -0.02, 0.0, 0.0),
        baseline_tco2e_per_ha_yr=0.15,
        baseline_uncertainty_pct=60.0,
        baseline_basis="Demo value: slow recovery expected had cropping simply stopped",
    ),
)


@dataclass(frozen=True)
class Core:
    """One layer of one point at one event, as the laboratory reports it."""

    point_id: str
    stratum_id: str
    event: str
    measured_on: dt.date
    depth_top_cm: float
    depth_bottom_cm: float
    soc_pct: float
    bulk_density_g_cm3: float
    coarse_fragments_pct: float


def campaign_dates(rng: np.random.Generator, event: str, n: int) -> list[dt.date]:
    """Sorted sampling days within the event's campaign window."""
    first, last = CAMPAIGNS[event]
    offsets = np.sort(rng.integers(0, (last - first).days + 1, size=n))
    return [first + dt.timedelta(days=int(d)) for d in offsets]


def simulate_cores(rng: np.random.Generator) -> list[Core]:
    """Layers of every point at both events; points keep their id (paired design)."""
    points = [(plan, f"{plan.point_prefix}{k:02d}") for plan in STRATA for k in range(1, plan.n_points + 1)]
    days = {event: iter(campaign_dates(rng, event, len(points))) for event in CAMPAIGNS}
    cores: list[Core] = []
    for plan, point_id in points:
        point_effect = float(np.exp(rng.normal(0.0, POINT_EFFECT_SD_LOG)))
        coarse = float(rng.uniform(*CF_RANGE_PCT))
        visits = {event: next(days[event]) for event in CAMPAIGNS}
        for event, layers in LAYERS_CM.items():
            after = event == REMEASURE_EVENT
            for i, (top, bottom) in enumerate(layers):
                soc = (plan.soc_pct[i] + (plan.soc_change_pct[i] if after else 0.0)) * point_effect
                soc *= float(np.exp(rng.normal(0.0, CORE_SD_LOG)))
                bd = plan.bulk_density_g_cm3[i] + (plan.bd_change_g_cm3[i] if after else 0.0)
                bd += float(rng.normal(0.0, BD_SD_G_CM3))
                cf = float(np.clip(coarse + rng.normal(0.0, 1.0), 0.0, 20.0))
                cores.append(Core(point_id, plan.stratum_id, event, visits[event], top, bottom,
                                  round(soc, 2), round(bd, 2), round(cf, 1)))
    return cores


# --- sheet records ------------------------------------------------------------

def project_values(_: list[Core]) -> Record:
    return {
        "project_name": "Cuchilla Verdosa Grazing Soil Carbon (fictional demo project)",
        "project_id": "CVG-SOIL-001",
        "pathway": "soil",
        "country": "Uruguay",
        "region": "Cuchilla Verdosa, Arroyo Tordillo district (fictional)",
        "period_start": PERIOD_START,
        "period_end": PERIOD_END,
        "gwp_set": "AR6",
        "confidence_pct": 90,
        "uncertainty_rule": "lower_bound",
        "uncertainty_method": "analytic",
        "buffer_minimum_pct": 10,
        "materiality_pct": 5,
        "soil_method": "equivalent_soil_mass",
        "prepared_by": COMPANY,
    }


def strata_records(_: list[Core]) -> list[Record]:
    return [{"stratum_id": p.stratum_id, "area_ha": p.area_ha, "description": p.description} for p in STRATA]


def baseline_records(_: list[Core]) -> list[Record]:
    return [{"stratum_id": p.stratum_id, "baseline_tco2e_per_ha_yr": p.baseline_tco2e_per_ha_yr,
             "uncertainty_pct": p.baseline_uncertainty_pct, "basis": p.baseline_basis} for p in STRATA]


def emissions_records(_: list[Core]) -> list[Record]:
    """Project emissions in the period; activity amounts are invented."""
    diesel_kg_co2_per_l = round(fuel_co2_kg_per_litre(DIESEL_CO2_EF.value, DIESEL_NCV.value, DIESEL_DENSITY.value), 3)
    reference = ("IPCC 2006 Guidelines Vol. 2 Ch. 2 Table 2.2 (74,100 kg CO2/TJ) x Vol. 2 Ch. 1 "
                 "Table 1.2 NCV (43.0 TJ/Gg) x 0.84 kg/L; values from memory")
    return [
        {"source": "Diesel, fencing and water-point installation for rotational grazing",
         "activity_amount": 3400.0, "activity_unit": "L", "gas": "CO2", "ef_kg_per_unit": diesel_kg_co2_per_l,
         "uncertainty_pct": 5.0, "reference": reference},
        {"source": "Diesel, pasture sowing on former cropland (S2)", "activity_amount": 2100.0,
         "activity_unit": "L", "gas": "CO2", "ef_kg_per_unit": diesel_kg_co2_per_l, "uncertainty_pct": 5.0,
         "reference": reference},
        {"source": "Diesel, soil sampling campaigns (vehicles, hydraulic corer)", "activity_amount": 650.0,
         "activity_unit": "L", "gas": "CO2", "ef_kg_per_unit": diesel_kg_co2_per_l, "uncertainty_pct": 10.0,
         "reference": reference},
    ]


def leakage_records(_: list[Core]) -> list[Record]:
    return [{
        "leakage_type": "activity_shifting", "method": "percent", "value": 3.0, "uncertainty_pct": 50.0,
        "justification": "Cropping on S2 stopped; part of the grain is now grown by the owner on rented "
                         "land elsewhere. 3 % of net removals is a demo value (common practice, no source).",
    }]


def risk_records(_: list[Core]) -> list[Record]:
    return [
        {"risk_factor": "Reversal of management", "score_pct": 6.0,
         "justification": "Grazing plans renewed yearly; a return to continuous grazing would lose gains"},
        {"risk_factor": "Drought", "score_pct": 4.0,
         "justification": "Multi-year droughts reduce plant inputs to the soil"},
        {"risk_factor": "Land tenure", "score_pct": 2.0,
         "justification": "Owner-operated farms with 20-year agreements"},
    ]


def soil_sample_records(cores: list[Core]) -> list[Record]:
    ordered = sorted(cores, key=lambda c: (c.event != BASELINE_EVENT, c.point_id, c.depth_top_cm))
    return [{
        "point_id": c.point_id, "stratum_id": c.stratum_id, "event": c.event, "measured_on": c.measured_on,
        "depth_top_cm": c.depth_top_cm, "depth_bottom_cm": c.depth_bottom_cm, "soc_pct": c.soc_pct,
        "bulk_density_g_cm3": c.bulk_density_g_cm3, "coarse_fragments_pct": c.coarse_fragments_pct,
    } for c in ordered]


# Table sheets in template order; each function returns that sheet's records.
SHEET_RECORDS: dict[str, Callable[[list[Core]], list[Record]]] = {
    "Strata": strata_records,
    "Baseline": baseline_records,
    "Emissions": emissions_records,
    "Leakage": leakage_records,
    "Risk": risk_records,
    "SoilSamples": soil_sample_records,
}


# --- workbook -------------------------------------------------------------------

def build_demo_workbook(seed: int = SEED) -> Workbook:
    """The filled demo workbook, built on the soil template."""
    cores = simulate_cores(np.random.default_rng(seed))
    return filled_workbook("soil", project_values(cores),
                           {sheet: records(cores) for sheet, records in SHEET_RECORDS.items()},
                           COMPANY, "Cuchilla Verdosa Grazing Soil Carbon - fictional demo input workbook")


def write_demo(target: Path = OUTPUT_PATH, seed: int = SEED) -> Path:
    """Build the demo workbook and write it to ``target`` atomically."""
    return save_demo(build_demo_workbook(seed), target)


if __name__ == "__main__":
    print(f"wrote {write_demo()}")
