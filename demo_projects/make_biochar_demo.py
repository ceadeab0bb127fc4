"""Write the demo input workbook of a FICTIONAL biochar producer (biochar pathway).

Every batch record is invented by a seeded simulation: the project, its
place, its company and its kilns do not exist. Published factors (F_perm
classes, emission factors) keep their names and sources in the tool;
everything else is demo data.

The workbook starts from ``verify.template.build_template("biochar")`` and is
filled one sheet at a time (``SHEET_RECORDS``), with the sheet writers of the
forest demo. The story the batches tell: weekly production from three
feedstocks in 2024, a trial run below 350 C (not eligible), H/Corg measured
on some batches, two December batches spread in January 2025 (outside the
period) and one still in the yard. Strata and Baseline stay empty: the
baseline of biochar is zero.

Regenerate from the repository root:

    .venv/bin/python demo_projects/make_biochar_demo.py

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

OUTPUT_PATH = Path(__file__).with_name("biochar_demo.xlsx")
SEED = 20240108

PERIOD_START = dt.date(2024, 1, 1)
PERIOD_END = dt.date(2024, 12, 31)
FIRST_PRODUCTION = dt.date(2024, 1, 8)
N_BATCHES = 40
COMPANY = "Emberly Ridge Biochar Cooperative (fictional)"


@dataclass(frozen=True)
class Feedstock:
    """A feedstock of the demo kilns (all values invented).

    ``temp_c``: range of highest treatment temperature; ``carbon_pct``: range
    of organic carbon of the dry biochar; ``h_corg``: range of the molar
    H/Corg ratio, measured on every ``h_corg_every``-th batch (0: never).
    """

    name: str
    share: float
    mass_t: tuple[float, float]
    temp_c: tuple[float, float]
    carbon_pct: tuple[float, float]
    h_corg: tuple[float, float]
    h_corg_every: int


FEEDSTOCKS: tuple[Feedstock, ...] = (
    Feedstock("Softwood sawmill residues", 0.5, (14.0, 24.0), (610.0, 690.0), (80.0, 88.0), (0.15, 0.30), 4),
    Feedstock("Orchard prunings", 0.3, (8.0, 15.0), (480.0, 590.0), (68.0, 78.0), (0.30, 0.48), 2),
    Feedstock("Hazelnut shells", 0.2, (6.0, 11.0), (520.0, 600.0), (74.0, 82.0), (0.22, 0.38), 0),
)

# Batch numbers with a special story (1-based).
TRIAL_BATCH = 5          # a low-temperature trial run: not eligible
SPREAD_IN_JANUARY = (38, 39)
STILL_IN_YARD = 40
# Days from production to spreading: stored under cover, then spread on the
# members' fields.
STORAGE_DAYS = (7, 35)


def simulate_batches(rng: np.random.Generator) -> list[Record]:
    """One record per batch, produced about weekly through 2024."""
    shares = np.array([f.share for f in FEEDSTOCKS])
    counts = {f.name: 0 for f in FEEDSTOCKS}
    records = []
    for k in range(1, N_BATCHES + 1):
        produced = FIRST_PRODUCTION + dt.timedelta(days=int(round((k - 1) * 8.5)))
        stock = FEEDSTOCKS[int(rng.choice(len(FEEDSTOCKS), p=shares / shares.sum()))]
        counts[stock.name] += 1
        temp = float(rng.uniform(*stock.temp_c))
        carbon = float(rng.uniform(*stock.carbon_pct))
        h_corg = float(rng.uniform(*stock.h_corg))
        if k == TRIAL_BATCH:
            temp, carbon = 330.0, 58.0
        measured_h = stock.h_corg_every > 0 and counts[stock.name] % stock.h_corg_every == 0 and k != TRIAL_BATCH
        applied: dt.date | None = produced + dt.timedelta(days=int(rng.integers(*STORAGE_DAYS)))
        if k in SPREAD_IN_JANUARY:
            applied = dt.date(2025, 1, 14 + 3 * (k - SPREAD_IN_JANUARY[0]))
        if k == STILL_IN_YARD:
            applied = None
        records.append({
            "batch_id": f"ER-24-{k:03d}",
            "produced_on": produced,
            "feedstock": stock.name,
            "dry_mass_t": round(float(rng.uniform(*stock.mass_t)), 2),
            "organic_carbon_pct": round(carbon, 1),
            "h_corg_molar": round(h_corg, 2) if measured_h else None,
            "pyrolysis_temp_c": round(temp, -1),
            "end_use": "Soil amendment on members' orchards and pastures",
            "applied_on": applied,
            # Weighbridge tickets with a moisture correction; the laboratory's
            # own repeatability is left blank (the tool's default applies).
            "dry_mass_uncertainty_pct": 3.0,
            "organic_carbon_uncertainty_pct": 6.0 if stock.h_corg_every else None,
        })
    return records


# --- sheet records ------------------------------------------------------------

def project_values(_: list[Record]) -> Record:
    return {
        "project_name": "Emberly Ridge Biochar (fictional demo project)",
        "project_id": "ERB-BIOCHAR-001",
        "pathway": "biochar",
        "country": "Canada",
        "region": "Whitlock Valley, Emberly Ridge county (fictional)",
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


def emissions_records(_: list[Record]) -> list[Record]:
    """Lifecycle emissions in the period; activity amounts and two factors are invented."""
    diesel_kg_co2_per_l = round(fuel_co2_kg_per_litre(DIESEL_CO2_EF.value, DIESEL_NCV.value, DIESEL_DENSITY.value), 3)
    reference = ("IPCC 2006 Guidelines Vol. 2 Ch. 2 Table 2.2 (74,100 kg CO2/TJ) x Vol. 2 Ch. 1 "
                 "Table 1.2 NCV (43.0 TJ/Gg) x 0.84 kg/L; values from memory")
    return [
        {"source": "Diesel, feedstock haulage to the kiln site", "activity_amount": 9800.0,
         "activity_unit": "L", "gas": "CO2", "ef_kg_per_unit": diesel_kg_co2_per_l, "uncertainty_pct": 5.0,
         "reference": reference},
        {"source": "Diesel, spreading biochar on members' fields", "activity_amount": 2600.0,
         "activity_unit": "L", "gas": "CO2", "ef_kg_per_unit": diesel_kg_co2_per_l, "uncertainty_pct": 5.0,
         "reference": reference},
        {"source": "Electricity, shredder, dryer fans and kiln controls", "activity_amount": 61000.0,
         "activity_unit": "kWh", "gas": "CO2", "ef_kg_per_unit": 0.03, "uncertainty_pct": 10.0,
         "reference": "Grid emission factor of the fictional county utility, 2024 (demo value)"},
        {"source": "Methane slip from the kilns (stack test)", "activity_amount": 560.0,
         "activity_unit": "t biochar", "gas": "CH4_non_fossil", "ef_kg_per_unit": 0.9,
         "uncertainty_pct": 60.0, "reference": "Stack test of the fictional kilns, March 2024 (demo value)"},
    ]


def risk_records(_: list[Record]) -> list[Record]:
    return [
        {"risk_factor": "Loss in storage and transport (fire, wind, erosion)", "score_pct": 2.0,
         "justification": "Covered storage; biochar moistened before spreading"},
        {"risk_factor": "Application not as declared", "score_pct": 3.0,
         "justification": "Spreading logs signed by members; spot checks by the cooperative"},
    ]


def batch_records(batches: list[Record]) -> list[Record]:
    return batches


# Table sheets in template order; each function returns that sheet's records.
SHEET_RECORDS: dict[str, Callable[[list[Record]], list[Record]]] = {
    "Emissions": emissions_records,
    "Risk": risk_records,
    "Batches": batch_records,
}


# --- workbook -------------------------------------------------------------------

def build_demo_workbook(seed: int = SEED) -> Workbook:
    """The filled demo workbook, built on the biochar template."""
    batches = simulate_batches(np.random.default_rng(seed))
    return filled_workbook("biochar", project_values(batches),
                           {sheet: records(batches) for sheet, records in SHEET_RECORDS.items()},
                           COMPANY, "Emberly Ridge Biochar - fictional demo input workbook")


def write_demo(target: Path = OUTPUT_PATH, seed: int = SEED) -> Path:
    """Build the demo workbook and write it to ``target`` atomically."""
    return save_demo(build_demo_workbook(seed), target)


if __name__ == "__main__":
    print(f"wrote {write_demo()}")
