"""Schema-driven validation: typed tables out, every problem as a cell-addressed finding.

Each column is checked against its JSON Schema property (type, format,
enum, bounds, required), then each sheet's unique keys and its references
to other sheets.  All problems are collected in one pass; nothing raises.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass
from typing import Any, Callable

import pandas as pd
from openpyxl.utils import get_column_letter

from .findings import Finding, cell_ref
from .reader import RawSheet
from .schema import ColumnSpec, SheetSpec

ROW = "row"  # column of every typed table holding the Excel row number


class _Invalid:
    """Marker for a cell whose value failed its type check."""


INVALID = _Invalid()


@dataclass
class TypedSheet:
    """A validated table: typed values, the Excel row of each record, the letter of each column."""

    spec: SheetSpec
    frame: pd.DataFrame
    letters: dict[str, str]

    def cell(self, column: str, row: int) -> str:
        letter = self.letters.get(column)
        return cell_ref(self.spec.name, letter, row) if letter else self.spec.name


# ---------------------------------------------------------------- cell types

def _as_text(value: Any) -> str:
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    if isinstance(value, dt.datetime):
        return value.date().isoformat()
    if isinstance(value, dt.date):
        return value.isoformat()
    return str(value).strip()


def _as_number(value: Any) -> float | _Invalid:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return INVALID
    number = float(value)
    return number if math.isfinite(number) else INVALID


def _as_integer(value: Any) -> int | _Invalid:
    number = _as_number(value)
    if isinstance(number, _Invalid) or not number.is_integer():
        return INVALID
    return int(number)


def _as_date(value: Any) -> dt.date | _Invalid:
    if isinstance(value, dt.datetime):
        return value.date()
    if isinstance(value, dt.date):
        return value
    if isinstance(value, str):
        try:
            return dt.date.fromisoformat(value.strip())
        except ValueError:
            return INVALID
    return INVALID


def _as_choice(column: ColumnSpec) -> Callable[[Any], str | _Invalid]:
    def convert(value: Any) -> str | _Invalid:
        text = _as_text(value)
        return text if text in column.enum else INVALID
    return convert


def converter(column: ColumnSpec) -> Callable[[Any], Any]:
    if column.kind == "enum":
        return _as_choice(column)
    return {"string": _as_text, "number": _as_number, "integer": _as_integer, "date": _as_date}[column.kind]


_KIND_WORDS = {
    "string": "text",
    "number": "a number",
    "integer": "a whole number",
    "date": "a date (or text YYYY-MM-DD)",
}


def _describe(value: Any) -> str:
    text = repr(value) if isinstance(value, str) else _as_text(value)
    return text if len(text) <= 60 else text[:57] + "..."


def type_message(column: ColumnSpec, value: Any) -> tuple[str, str]:
    """(code, message) for a value that failed its column's type or choice check."""
    if column.kind == "enum":
        return "unknown_choice", (
            f"{column.name} is {_describe(value)}; it must be one of: {', '.join(column.enum)}"
        )
    return "wrong_type", f"{column.name} must be {_KIND_WORDS[column.kind]}, found {_describe(value)}"


def range_problem(column: ColumnSpec, value: Any) -> str | None:
    """Message when ``value`` breaks a bound or length limit of its column, else None."""
    if column.kind == "string":
        if column.max_length is not None and len(value) > column.max_length:
            return f"{column.name} is longer than {column.max_length} characters"
        return None
    if column.kind not in ("number", "integer"):
        return None
    if (
        (column.minimum is not None and value < column.minimum)
        or (column.exclusive_minimum is not None and value <= column.exclusive_minimum)
        or (column.maximum is not None and value > column.maximum)
        or (column.exclusive_maximum is not None and value >= column.exclusive_maximum)
    ):
        unit = f" {column.unit}" if column.unit else ""
        return f"{column.name} is {value:g}{unit}; allowed: {column.range_text()}"
    return None


def check_value(column: ColumnSpec, raw: Any, where: str) -> tuple[Any, list[Finding]]:
    """Typed value of one cell and the findings it raises (blank gives None)."""
    if raw is None or (isinstance(raw, str) and not raw.strip()):
        if column.required:
            return None, [Finding("error", "missing_value", where, f"{column.name} is required")]
        return None, []
    value = converter(column)(raw)
    if isinstance(value, _Invalid):
        code, message = type_message(column, raw)
        return None, [Finding("error", code, where, message)]
    problem = range_problem(column, value)
    if problem:
        return None, [Finding("error", "out_of_range", where, problem)]
    return value, []


# ---------------------------------------------------------------- headers

def normalise_header(text: Any) -> str:
    return "" if text is None else str(text).strip().lower().replace(" ", "_")


def locate_columns(spec: SheetSpec, raw: RawSheet) -> tuple[dict[str, int], list[Finding]]:
    """Position of each schema column in the header row, and header problems."""
    findings: list[Finding] = []
    positions: dict[str, int] = {}
    known = {c.name: c for c in spec.columns}
    for index, text in enumerate(raw.header):
        key = normalise_header(text)
        if key not in known:
            continue
        where = cell_ref(spec.name, get_column_letter(index + 1), 1)
        if key in positions:
            findings.append(Finding("error", "duplicate_column", where,
                                    f"column {key} appears twice in the header row; keep one"))
            continue
        positions[key] = index
        if text != key:
            findings.append(Finding("note", "header_normalised", where,
                                    f"header {text!r} read as {key}"))
    next_free = len([h for h in raw.header if h is not None]) + 1
    for column in spec.columns:
        if column.name not in positions and column.required:
            where = cell_ref(spec.name, get_column_letter(next_free), 1)
            next_free += 1
            findings.append(Finding("error", "missing_column", where,
                                    f"required column {column.name} is missing from the header row"))
    return positions, findings


# ---------------------------------------------------------------- tables

_DTYPES = {"number": "float64", "integer": "Int64"}


def _empty_frame(spec: SheetSpec) -> pd.DataFrame:
    frame = pd.DataFrame({c.name: pd.Series(dtype=_DTYPES.get(c.kind, "object")) for c in spec.columns})
    frame[ROW] = pd.Series(dtype="int64")
    return frame


def type_table(spec: SheetSpec, raw: RawSheet) -> tuple[TypedSheet, list[Finding]]:
    """Typed DataFrame of a table sheet (contract columns + ``row``) and its cell findings."""
    positions, findings = locate_columns(spec, raw)
    letters = {name: get_column_letter(index + 1) for name, index in positions.items()}
    data: dict[str, list[Any]] = {c.name: [] for c in spec.columns}
    row_numbers = [number for number, _ in raw.rows]
    for column in spec.columns:
        index = positions.get(column.name)
        letter = letters.get(column.name)
        values = data[column.name]
        for number, cells in raw.rows:
            if index is None:
                values.append(None)
                continue
            raw_value = cells[index] if index < len(cells) else None
            value, problems = check_value(column, raw_value, cell_ref(spec.name, letter, number))
            values.append(value)
            findings.extend(problems)
    if not raw.rows:
        return TypedSheet(spec, _empty_frame(spec), letters), findings
    frame = pd.DataFrame({
        c.name: pd.Series(data[c.name], dtype=_DTYPES.get(c.kind, "object")) for c in spec.columns
    })
    frame[ROW] = row_numbers
    return TypedSheet(spec, frame, letters), findings


def unique_key_findings(sheet: TypedSheet) -> list[Finding]:
    """A duplicate of a unique key is an error at the later row, naming the first."""
    findings = []
    frame = sheet.frame
    for key in sheet.spec.unique:
        complete = frame.dropna(subset=list(key))
        duplicated = complete.duplicated(subset=list(key), keep="first")
        if not duplicated.any():
            continue
        first_rows = complete.drop_duplicates(subset=list(key)).set_index(list(key))[ROW]
        for _, record in complete[duplicated].iterrows():
            values = tuple(record[k] for k in key)
            first = first_rows.loc[values if len(key) > 1 else values[0]]
            label = ", ".join(f"{k}={v}" for k, v in zip(key, values))
            findings.append(Finding(
                "error", "duplicate_id", sheet.cell(key[-1], record[ROW]),
                f"{label} appears again; first at row {first}",
            ))
    return findings


def reference_findings(sheet: TypedSheet, sheets: dict[str, TypedSheet]) -> list[Finding]:
    """Each reference to another sheet must name an existing record there."""
    findings = []
    for ref in sheet.spec.references:
        target = sheets.get(ref.sheet)
        if target is None:
            continue
        known = set(target.frame[list(ref.target)].dropna().itertuples(index=False, name=None))
        frame = sheet.frame.dropna(subset=list(ref.columns))
        values = frame[list(ref.columns)].itertuples(index=False, name=None)
        for row, value in zip(frame[ROW], values):
            if value in known:
                continue
            label = ", ".join(f"{c}={v}" for c, v in zip(ref.columns, value))
            findings.append(Finding(
                "error", "unknown_reference", sheet.cell(ref.columns[-1], row),
                f"{label} is not on the {ref.sheet} sheet",
            ))
    return findings


# ---------------------------------------------------------------- key/value sheet

def read_key_values(spec: SheetSpec, raw: RawSheet, pathway_hint: str | None = None
                    ) -> tuple[dict[str, Any], dict[str, int], list[Finding]]:
    """Typed fields of a key/value sheet with defaults applied, the row of each field, findings."""
    findings: list[Finding] = []
    known = {c.name: c for c in spec.columns}
    values: dict[str, Any] = {}
    rows: dict[str, int] = {}
    rows_seen = [(number, cells) for number, cells in raw.rows]
    if raw.header and normalise_header(raw.header[0]) != spec.key_header:
        # No header row: the first row already holds a field.
        rows_seen.insert(0, (1, raw.header))
    for number, cells in rows_seen:
        key = normalise_header(cells[0] if cells else None)
        raw_value = cells[1] if len(cells) > 1 else None
        if not key:
            findings.append(Finding("error", "missing_value", cell_ref(spec.name, "A", number),
                                    "a value is given without a field name in column A"))
            continue
        if key not in known:
            findings.append(Finding("warning", "unknown_field", cell_ref(spec.name, "A", number),
                                    f"field {cells[0]!r} is not part of the contract and is ignored"))
            continue
        if key in rows:
            findings.append(Finding("error", "duplicate_id", cell_ref(spec.name, "A", number),
                                    f"field {key} appears again; first at row {rows[key]}"))
            continue
        rows[key] = number
        value, problems = check_value(known[key], raw_value, cell_ref(spec.name, "B", number))
        findings.extend(problems)
        if value is not None:
            values[key] = value
    last_row = max([n for n, _ in rows_seen], default=1)
    for column in spec.columns:
        if column.name in rows:
            continue
        if column.required:
            last_row += 1
            findings.append(Finding("error", "missing_value", cell_ref(spec.name, "A", last_row),
                                    f"field {column.name} is required; add it in column A with its value in column B"))
        elif column.default is not None:
            values[column.name] = column.default
    return values, rows, findings
