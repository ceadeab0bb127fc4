"""Write the blank input workbook for a pathway, generated from the sheet schemas."""

from __future__ import annotations

from pathlib import Path

from openpyxl import Workbook
from openpyxl.comments import Comment
from openpyxl.styles import Alignment, Font, PatternFill
from openpyxl.utils import get_column_letter
from openpyxl.worksheet.datavalidation import DataValidation
from openpyxl.worksheet.worksheet import Worksheet

from . import __version__
from .atomic import atomic_path
from .schema import ColumnSpec, SheetSpec, project_fields, sheets_for

# Validation is attached to this many data rows; enough for large inventories
# without bloating the file (a range is stored once, not per cell).
VALIDATED_ROWS = 200_000

HEADER_FONT = Font(bold=True, color="FFFFFF")
HEADER_FILL = PatternFill("solid", fgColor="2F5D50")
REQUIRED_FILL = PatternFill("solid", fgColor="1E3F36")
KEY_FILL = PatternFill("solid", fgColor="E8F0EC")


def _validation(column: ColumnSpec, sqref: str) -> DataValidation | None:
    """A spreadsheet data validation mirroring the column's schema, or None for free text."""
    if column.kind == "enum":
        rule = DataValidation(type="list", formula1='"' + ",".join(column.enum) + '"', allow_blank=True)
    elif column.kind == "date":
        rule = DataValidation(type="date", operator="greaterThan", formula1="1", allow_blank=True)
    elif column.kind in ("number", "integer"):
        low = column.minimum if column.minimum is not None else column.exclusive_minimum
        high = column.maximum if column.maximum is not None else column.exclusive_maximum
        kind = "whole" if column.kind == "integer" else "decimal"
        if low is not None and high is not None:
            rule = DataValidation(type=kind, operator="between", formula1=str(low), formula2=str(high))
        elif low is not None:
            rule = DataValidation(type=kind, operator="greaterThanOrEqual", formula1=str(low))
        elif high is not None:
            rule = DataValidation(type=kind, operator="lessThanOrEqual", formula1=str(high))
        else:
            rule = DataValidation(type=kind, operator="between", formula1="-1E+300", formula2="1E+300")
        rule.allow_blank = True
    else:
        return None
    rule.error = column.header_note()
    rule.errorTitle = column.name
    rule.showErrorMessage = True
    rule.add(sqref)
    return rule


def _header_cell(ws: Worksheet, row: int, col: int, column: ColumnSpec) -> None:
    cell = ws.cell(row=row, column=col, value=column.name)
    cell.font = HEADER_FONT
    cell.fill = REQUIRED_FILL if column.required else HEADER_FILL
    cell.comment = Comment(column.header_note(), "template", width=320, height=160)


def _write_table(ws: Worksheet, spec: SheetSpec) -> None:
    for index, column in enumerate(spec.columns, start=1):
        _header_cell(ws, 1, index, column)
        letter = get_column_letter(index)
        ws.column_dimensions[letter].width = max(14, len(column.name) + 4)
        if column.kind == "date":
            for row in range(2, 52):
                ws.cell(row=row, column=index).number_format = "yyyy-mm-dd"
        rule = _validation(column, f"{letter}2:{letter}{VALIDATED_ROWS}")
        if rule:
            ws.add_data_validation(rule)
    ws.freeze_panes = "A2"


def _write_project(ws: Worksheet, spec: SheetSpec, pathway: str) -> None:
    for col, title in ((1, spec.key_header), (2, spec.value_header), (3, "about")):
        cell = ws.cell(row=1, column=col, value=title)
        cell.font, cell.fill = HEADER_FONT, HEADER_FILL
    for row, column in enumerate(project_fields(pathway), start=2):
        key = ws.cell(row=row, column=1, value=column.name)
        key.fill = KEY_FILL
        key.font = Font(bold=column.required)
        value = ws.cell(row=row, column=2, value=pathway if column.name == "pathway" else column.default)
        if column.kind == "date":
            value.number_format = "yyyy-mm-dd"
        ws.cell(row=row, column=3, value=column.header_note().replace("\n", "; "))
        rule = _validation(column, f"B{row}")
        if rule:
            ws.add_data_validation(rule)
    ws.column_dimensions["A"].width = 28
    ws.column_dimensions["B"].width = 30
    ws.column_dimensions["C"].width = 100
    ws.freeze_panes = "A2"


def _instructions(pathway: str, specs: list[SheetSpec]) -> list[str]:
    lines = [
        f"Input workbook for the {pathway} pathway (template version {__version__}).",
        "",
        "How to fill it:",
        "- Project: one field per row; column A names the field, column B holds its value.",
        "- Every other sheet: headers in row 1, one record per row from row 2. Paste values, not formulas.",
        "- Headers carry their unit in their name; hover a header for its meaning, unit and allowed values.",
        "- Dark headers are required columns. Dates are real dates or text YYYY-MM-DD.",
        "- Percent columns hold percent numbers (12.5 means 12.5 %), never fractions.",
        "- Extra columns are allowed and ignored. Blank rows are ignored.",
        "- Run `verify check FILE.xlsx` to list every problem by cell before `verify run`.",
        "",
        "Sheets:",
    ]
    for spec in specs:
        status = "required" if spec.is_required(pathway) else "optional"
        lines.append(f"- {spec.name} ({status}): {spec.description}")
    lines += [
        "",
        "Caution: results computed from this workbook are a recalculation aid, not an assurance opinion.",
        "Program rules, the methodology in force, ISO 14064-2/-3 and the accredited verifier govern.",
    ]
    return lines


def build_template(pathway: str) -> Workbook:
    """The blank workbook for ``pathway``, every sheet and rule taken from the schemas."""
    specs = sheets_for(pathway)
    book = Workbook()
    info = book.active
    info.title = "Instructions"
    for row, line in enumerate(_instructions(pathway, specs), start=1):
        info.cell(row=row, column=1, value=line).alignment = Alignment(wrap_text=False)
    info["A1"].font = Font(bold=True, size=14)
    info.column_dimensions["A"].width = 120
    for spec in specs:
        ws = book.create_sheet(spec.name)
        if spec.layout == "key_value":
            _write_project(ws, spec, pathway)
        else:
            _write_table(ws, spec)
    return book


def write_template(pathway: str, target: Path) -> Path:
    """Write the template for ``pathway`` to ``target`` atomically and return the path."""
    book = build_template(pathway)
    with atomic_path(Path(target)) as temporary:
        book.save(temporary)
    return Path(target)
