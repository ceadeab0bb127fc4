"""Import a project workbook: read, validate against the schemas, return typed tables.

``load_workbook`` is the one entry point.  It never raises on bad content:
every problem becomes a :class:`~verify.findings.Finding` with its cell.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from . import consistency
from .findings import Finding, cell_ref, has_errors
from .reader import BackgroundRead, RawBook, RawSheet, UnreadableWorkbook, cyclic_gc_paused
from .schema import PATHWAYS, SheetSpec, all_sheets, sheets_for
from .validation import TypedSheet, read_key_values, reference_findings, type_table, unique_key_findings


@dataclass
class LoadedWorkbook:
    """Everything the engine needs from one workbook, with the findings of its validation."""

    path: Path
    sha256: str
    project: dict[str, Any] = field(default_factory=dict)
    sheets: dict[str, TypedSheet] = field(default_factory=dict)
    findings: list[Finding] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not has_errors(self.findings)

    @property
    def pathway(self) -> str | None:
        return self.project.get("pathway")

    def table(self, name: str) -> pd.DataFrame:
        """Typed table of a sheet; an absent optional sheet gives an empty table."""
        return self.sheets[name].frame

    def cell(self, sheet: str, column: str, row: int) -> str:
        typed = self.sheets.get(sheet)
        return typed.cell(column, row) if typed else sheet


def _find_sheet(raw: dict[str, RawSheet], name: str) -> RawSheet | None:
    """Sheet by name; a difference of case or surrounding spaces is tolerated."""
    if name in raw:
        return raw[name]
    wanted = name.casefold()
    return next((s for title, s in raw.items() if title.strip().casefold() == wanted), None)


def _read_project(raw: dict[str, RawSheet]) -> tuple[dict[str, Any], dict[str, int], list[Finding]]:
    spec = all_sheets()["Project"]
    sheet = _find_sheet(raw, "Project")
    if sheet is None:
        return {}, {}, [Finding("error", "missing_sheet", "Project",
                                "the Project sheet is missing; it names the pathway and the period")]
    project, rows, findings = read_key_values(spec, sheet)
    start, end = project.get("period_start"), project.get("period_end")
    if isinstance(start, dt.date) and isinstance(end, dt.date) and end < start:
        findings.append(Finding("error", "period_order", cell_ref("Project", "B", rows["period_end"]),
                                f"period_end {end} is before period_start {start}"))
    return project, rows, findings


def _missing_sheet(spec: SheetSpec, pathway: str) -> Finding:
    if spec.is_required(pathway):
        return Finding("error", "missing_sheet", spec.name,
                       f"the {spec.name} sheet is required for the {pathway} pathway "
                       f"(columns: {', '.join(spec.headers)})")
    return Finding("note", "sheet_absent", spec.name, f"no {spec.name} sheet; treated as having no rows")


def _type_sheets(raw: dict[str, RawSheet], pathway: str) -> tuple[dict[str, TypedSheet], list[Finding]]:
    findings: list[Finding] = []
    typed: dict[str, TypedSheet] = {}
    for spec in sheets_for(pathway):
        if spec.layout != "table":
            continue
        sheet = _find_sheet(raw, spec.name)
        if sheet is None:
            findings.append(_missing_sheet(spec, pathway))
            sheet = RawSheet(spec.name, spec.headers)
        elif not sheet.numbers and spec.is_required(pathway):
            findings.append(Finding("error", "empty_sheet", spec.name,
                                    f"the {spec.name} sheet has no data rows"))
        typed[spec.name], problems = type_table(spec, sheet)
        findings.extend(problems)
    for sheet in typed.values():
        findings.extend(unique_key_findings(sheet))
        findings.extend(reference_findings(sheet, typed))
    return typed, findings


def load_workbook(path: str | Path, read: BackgroundRead | None = None) -> LoadedWorkbook:
    """Read and validate ``path``; the returned object lists every problem found.

    ``read``, when given, is the same file already being read on a worker
    thread (see :class:`~verify.reader.BackgroundRead`).
    """
    path = Path(path)
    if not path.is_file():
        return LoadedWorkbook(path, "", findings=[Finding("error", "not_a_workbook", path.name,
                                                          f"no file at {path}")])
    with cyclic_gc_paused():  # see there: millions of short-lived containers, no cycles
        read = read or BackgroundRead(path)
        all_sheets()  # loads the schemas while the worker parses
        try:
            raw = read.result()
        except UnreadableWorkbook as exc:
            return LoadedWorkbook(path, read.sha256, findings=[
                Finding("error", "not_a_workbook", path.name, str(exc))])
        return _validate(LoadedWorkbook(path, read.sha256), raw)


def _validate(loaded: LoadedWorkbook, raw: RawBook) -> LoadedWorkbook:
    loaded.findings.extend(raw.findings)
    loaded.project, _, findings = _read_project(raw)
    loaded.findings.extend(findings)
    pathway = loaded.project.get("pathway")
    if pathway not in PATHWAYS:
        return loaded
    loaded.sheets, findings = _type_sheets(raw, pathway)
    loaded.findings.extend(findings)
    loaded.findings.extend(consistency.check(loaded))
    return loaded


def findings_summary(book: LoadedWorkbook, findings: list[Finding] | None = None) -> dict[str, Any]:
    """The result of ``verify check`` as plain data (the ``--json`` view).

    ``findings`` defaults to the validation findings; the engine passes its
    longer list, which adds the data-quality findings of the calculation.
    """
    findings = book.findings if findings is None else findings
    counts = {s: sum(f.severity == s for f in findings) for s in ("error", "warning", "note")}
    return {
        "input": {"path": str(book.path), "file_name": book.path.name, "sha256": book.sha256},
        "pathway": book.pathway,
        "ok": not has_errors(findings),
        "counts": counts,
        "findings": [f.to_dict() for f in findings],
    }
