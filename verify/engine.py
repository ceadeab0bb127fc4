"""The engine: one workbook in, one :class:`RunResult` out.

``run`` validates first; a workbook with errors never reaches the
calculation.  The JSON file, the results workbook and the PDF are all views
of ``RunResult.to_dict()``.
"""

from __future__ import annotations

import datetime as dt
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd

from . import TOOL_NAME, __version__, biochar, checkplots, forest, soil
from .accounting import (
    BaselineRow,
    ChainResult,
    ChainSettings,
    EmissionRow,
    LeakageRow,
    ReversalRow,
    run_chain,
)
from .consistency import event_order
from .findings import Finding, has_errors
from .pathway import PathwayEstimate
from .reader import BackgroundRead, cyclic_gc_paused
from .reconciliation import reconcile
from .workbook import LoadedWorkbook, load_workbook

CAUTIONS = [
    "This is a recalculation aid, not an assurance opinion or a verification statement.",
    "Program rules, the methodology in force, ISO 14064-2/-3 and the accredited verification "
    "body's judgement govern.",
    "Defaults shown are published defaults or common practice and must be replaced by "
    "program-approved values where required.",
]

SETTING_FIELDS = (
    "gwp_set", "confidence_pct", "uncertainty_rule", "uncertainty_threshold_pct",
    "uncertainty_method", "monte_carlo_draws", "random_seed", "buffer_minimum_pct",
    "materiality_pct",
)
PROJECT_FIELDS = (
    "project_name", "project_id", "pathway", "country", "region", "period_start",
    "period_end", "prepared_by",
)

Quantifier = Callable[[LoadedWorkbook, str, str, float], PathwayEstimate]


def _forest(book: LoadedWorkbook, confidence_pct: float) -> PathwayEstimate:
    events = event_order(book.table("Plots"))
    return forest.quantify(book, events[0], events[-1], confidence_pct)


def _soil(book: LoadedWorkbook, confidence_pct: float) -> PathwayEstimate:
    events = event_order(book.table("SoilSamples"))
    return soil.quantify(book, events[0], events[-1], confidence_pct)


def _biochar(book: LoadedWorkbook, confidence_pct: float) -> PathwayEstimate:
    return biochar.quantify(book, confidence_pct)


QUANTIFIERS: dict[str, Callable[[LoadedWorkbook, float], PathwayEstimate]] = {
    "forest": _forest, "soil": _soil, "biochar": _biochar,
}


@dataclass
class RunResult:
    """Everything one run computed; ``to_dict`` is the results.json document."""

    book: LoadedWorkbook
    run_date: dt.date
    estimate: PathwayEstimate | None = None
    chain: ChainResult | None = None
    reconciliation: dict[str, Any] | None = None
    check_plots: dict[str, Any] | None = None
    findings: list[Finding] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.chain is not None and not has_errors(self.findings)

    def to_dict(self) -> dict[str, Any]:
        project = self.book.project
        document: dict[str, Any] = {
            "tool": {"name": TOOL_NAME, "version": __version__, "run_date": self.run_date.isoformat()},
            "input": {"path": str(self.book.path), "file_name": self.book.path.name, "sha256": self.book.sha256},
            "project": {k: project.get(k) for k in PROJECT_FIELDS},
            "settings": {k: project.get(k) for k in SETTING_FIELDS},
            "totals": None,
            "half_widths_tco2e": None,
            "monte_carlo": None,
            "vintages": [],
            "strata": [],
            "reversal": None,
            "emissions": [],
            "findings": [f.to_dict() for f in self.findings],
            "methods": [],
            "reconciliation": None,
            "check_plots": None,
            "cautions": CAUTIONS,
        }
        if self.chain is not None and self.estimate is not None:
            document.update(
                totals=self.chain.totals,
                half_widths_tco2e=self.chain.half_widths_tco2e,
                monte_carlo=self.chain.monte_carlo,
                vintages=self.chain.vintages,
                strata=self.estimate.strata,
                reversal=self.chain.reversal,
                emissions=self.chain.emissions_detail,
                methods=self.estimate.methods + self.chain.methods,
                reconciliation=self.reconciliation,
                check_plots=self.check_plots,
            )
        return json_ready(document)


def json_ready(value: Any) -> Any:
    """Plain JSON types: NaN and infinities become null, dates ISO text, numpy scalars Python."""
    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    if isinstance(value, (dt.date, dt.datetime)):
        return value.isoformat()
    if value is pd.NA or value is pd.NaT:
        return None
    return value


def chain_settings(project: dict[str, Any]) -> ChainSettings:
    return ChainSettings(
        gwp_set=project["gwp_set"],
        confidence_pct=float(project["confidence_pct"]),
        uncertainty_rule=project["uncertainty_rule"],
        uncertainty_threshold_pct=float(project["uncertainty_threshold_pct"]),
        uncertainty_method=project["uncertainty_method"],
        monte_carlo_draws=int(project["monte_carlo_draws"]),
        random_seed=int(project["random_seed"]),
        buffer_minimum_pct=float(project["buffer_minimum_pct"]),
    )


def _baseline_rows(book: LoadedWorkbook) -> list[BaselineRow]:
    areas = dict(zip(book.table("Strata")["stratum_id"], book.table("Strata")["area_ha"]))
    return [
        BaselineRow(r.stratum_id, float(areas[r.stratum_id]), r.baseline_tco2e_per_ha_yr, r.uncertainty_pct)
        for r in book.table("Baseline").itertuples(index=False)
    ]


def _emission_rows(book: LoadedWorkbook) -> list[EmissionRow]:
    return [
        EmissionRow(r.source, r.activity_amount, r.ef_kg_per_unit, r.gas, r.uncertainty_pct)
        for r in book.table("Emissions").itertuples(index=False)
    ]


def _leakage_rows(book: LoadedWorkbook) -> list[LeakageRow]:
    return [
        LeakageRow(r.leakage_type, r.method, r.value, r.uncertainty_pct)
        for r in book.table("Leakage").itertuples(index=False)
    ]


def _reversal_rows(book: LoadedWorkbook) -> list[ReversalRow]:
    return [
        ReversalRow(r.stratum_id, r.occurred_on, r.tco2e_lost, r.avoidable == "yes")
        for r in book.table("Reversals").itertuples(index=False)
    ]


def today() -> dt.date:
    """The run date; SOURCE_DATE_EPOCH (reproducible-builds convention) fixes it."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch and epoch.isdigit():
        return dt.datetime.fromtimestamp(int(epoch), dt.timezone.utc).date()
    return dt.date.today()


def compute(book: LoadedWorkbook, run_date: dt.date | None = None) -> RunResult:
    """Run the accounting chain on a workbook that passed validation."""
    result = RunResult(book, run_date or today(), findings=list(book.findings))
    if not book.ok:
        return result
    project = book.project
    settings = chain_settings(project)
    result.estimate = QUANTIFIERS[book.pathway](book, settings.confidence_pct)
    result.chain = run_chain(
        project["period_start"], project["period_end"], result.estimate.gross,
        _baseline_rows(book), _emission_rows(book), _leakage_rows(book),
        book.table("Risk")["score_pct"].tolist(), _reversal_rows(book), settings,
    )
    result.findings += result.estimate.findings + result.chain.findings
    result.reconciliation, findings = reconcile(
        book.table("Claims"), result.chain.vintages, float(project["materiality_pct"]),
        book.sheets["Claims"].letters,
    )
    result.findings += findings
    if book.pathway == "forest":
        result.check_plots, findings = checkplots.compare(book, settings.confidence_pct, _tolerances(project))
        result.findings += findings
    return result


def _tolerances(project: dict[str, Any]) -> checkplots.Tolerances:
    return checkplots.Tolerances(
        dbh_cm=float(project["check_dbh_tolerance_cm"]),
        dbh_pct=float(project["check_dbh_tolerance_pct"]),
        height_m=float(project["check_height_tolerance_m"]),
        height_pct=float(project["check_height_tolerance_pct"]),
    )


def run(path: str | Path, run_date: dt.date | None = None, read: BackgroundRead | None = None) -> RunResult:
    """Validate and compute the workbook at ``path``; never modifies it.

    ``read``: the same file already being read on a worker thread, started
    before this module's imports so that they overlap the parse (the CLI does
    this; see :class:`~verify.reader.BackgroundRead`).
    """
    with cyclic_gc_paused():  # the tables built are large and hold no reference cycles
        return compute(load_workbook(path, read), run_date)
