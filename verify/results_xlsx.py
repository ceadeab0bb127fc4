"""results.xlsx: the result document as tables for people who work in spreadsheets.

Built fresh from the result document, never by editing the input.  Text
that a spreadsheet would take for a formula (leading ``=``, ``+``, ``-``,
``@``) is stored as text.
"""

from __future__ import annotations

import datetime as dt
import io
import re
import zipfile
from pathlib import Path
from typing import Any, Iterable

from openpyxl import Workbook
from openpyxl.cell import Cell
from openpyxl.styles import Font, PatternFill
from openpyxl.utils import get_column_letter
from openpyxl.worksheet.worksheet import Worksheet

from .atomic import atomic_path

HEADER_FONT = Font(bold=True, color="FFFFFF")
HEADER_FILL = PatternFill("solid", fgColor="2F5D50")
FORMULA_PREFIXES = ("=", "+", "-", "@")
# Fixed dates, so the same document gives the same bytes: openpyxl stamps the
# clock on every zip entry and on dcterms:modified whatever the properties say.
DOCUMENT_TIME = dt.datetime(2000, 1, 1)
CORE_PROPERTIES = "docProps/core.xml"
MODIFIED_PROPERTY = re.compile(rb"(<dcterms:modified[^>]*>)[^<]*(</dcterms:modified>)")

TOTAL_LABELS = {
    "gross_removals_tco2e": "Gross removals (tCO2e)",
    "baseline_tco2e": "Baseline removals (tCO2e)",
    "project_emissions_tco2e": "Project emissions (tCO2e)",
    "leakage_tco2e": "Leakage (tCO2e)",
    "net_removals_tco2e": "Net removals (tCO2e)",
    "uncertainty_pct": "Uncertainty of net removals (%)",
    "uncertainty_deduction_tco2e": "Uncertainty deduction (tCO2e)",
    "buffer_pct": "Buffer share (%)",
    "buffer_tco2e": "Buffer contribution (tCO2e)",
    "issuable_credits": "Issuable credits (tCO2e, whole tonnes)",
}


def set_value(cell: Cell, value: Any) -> None:
    """Write ``value``; text is never turned into a formula."""
    if isinstance(value, (list, dict)):
        value = str(value)
    cell.value = value
    if isinstance(value, str) and value.startswith(FORMULA_PREFIXES):
        cell.data_type = "s"


def _append(ws: Worksheet, values: Iterable[Any], row: int) -> None:
    for col, value in enumerate(values, start=1):
        set_value(ws.cell(row=row, column=col), value)


def write_table(ws: Worksheet, rows: list[dict[str, Any]], columns: list[str] | None = None) -> None:
    """A header row and one row per record, with a frozen header."""
    columns = columns or (list(rows[0]) if rows else [])
    _append(ws, columns, 1)
    for cell in ws[1]:
        cell.font, cell.fill = HEADER_FONT, HEADER_FILL
    for index, record in enumerate(rows, start=2):
        _append(ws, [record.get(c) for c in columns], index)
    for index, name in enumerate(columns, start=1):
        ws.column_dimensions[get_column_letter(index)].width = max(12, min(60, len(name) + 4))
    ws.freeze_panes = "A2"


def _key_values(ws: Worksheet, pairs: list[tuple[str, Any]]) -> None:
    for row, (key, value) in enumerate(pairs, start=1):
        _append(ws, [key, value], row)
        ws.cell(row=row, column=1).font = Font(bold=True)
    ws.column_dimensions["A"].width = 42
    ws.column_dimensions["B"].width = 70


def _summary_pairs(document: dict[str, Any]) -> list[tuple[str, Any]]:
    project, tool, source = document["project"], document["tool"], document["input"]
    pairs: list[tuple[str, Any]] = [("Verification summary (recalculation)", "")]
    pairs += [(key, value) for key, value in project.items()]
    pairs += [("input file", source["file_name"]), ("input sha256", source["sha256"]),
              ("tool", f"{tool['name']} {tool['version']}"), ("run date", tool["run_date"]), ("", "")]
    totals = document["totals"] or {}
    pairs += [(label, totals.get(key)) for key, label in TOTAL_LABELS.items()]
    pairs += [("", "")] + [(f"setting: {k}", v) for k, v in document["settings"].items()]
    pairs += [("", "")] + [("caution", text) for text in document["cautions"]]
    return pairs


def _optional_tables(document: dict[str, Any]) -> list[tuple[str, list[dict[str, Any]]]]:
    tables = []
    reconciliation = document.get("reconciliation")
    if reconciliation:
        tables.append(("Reconciliation", reconciliation["rows"]))
    checks = document.get("check_plots")
    if checks:
        tables.append(("CheckPlotResults", checks["plots"]))
    return tables


def build_results_workbook(document: dict[str, Any]) -> Workbook:
    book = Workbook()
    summary = book.active
    summary.title = "Summary"
    _key_values(summary, _summary_pairs(document))
    tables = [
        ("Vintages", document["vintages"]),
        ("Strata", document["strata"]),
        ("Emissions", document.get("emissions", [])),
        ("Findings", document["findings"]),
        ("Methods", document["methods"]),
    ] + _optional_tables(document)
    for title, rows in tables:
        write_table(book.create_sheet(title), rows)
    reversal = document.get("reversal")
    if reversal:
        _key_values(book.create_sheet("Reversal"), list(reversal.items()))
    book.properties.creator = document["tool"]["name"]
    book.properties.created = book.properties.modified = DOCUMENT_TIME
    return book


def reproducible_xlsx_bytes(book: Workbook, stamp: dt.datetime = DOCUMENT_TIME) -> bytes:
    """The .xlsx bytes of ``book`` with ``stamp`` as every date, so equal content gives equal bytes."""
    saved = io.BytesIO()
    book.save(saved)
    fixed = io.BytesIO()
    modified = stamp.strftime("%Y-%m-%dT%H:%M:%SZ").encode()
    with zipfile.ZipFile(saved) as source, zipfile.ZipFile(fixed, "w", zipfile.ZIP_DEFLATED) as target:
        for entry in source.infolist():
            data = source.read(entry)
            if entry.filename == CORE_PROPERTIES:
                data = MODIFIED_PROPERTY.sub(rb"\g<1>" + modified + rb"\g<2>", data)
            target.writestr(zipfile.ZipInfo(entry.filename, date_time=stamp.timetuple()[:6]), data,
                            compress_type=zipfile.ZIP_DEFLATED)
    return fixed.getvalue()


def write_results_xlsx(document: dict[str, Any], target: Path, protected: tuple[Path, ...] = ()) -> Path:
    data = reproducible_xlsx_bytes(build_results_workbook(document))
    with atomic_path(target, protected) as temporary:
        temporary.write_bytes(data)
    return target
