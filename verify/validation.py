"""Schema-driven validation: typed tables out, every problem as a cell-addressed finding.

Each column is checked against its JSON Schema property (type, format,
enum, bounds, required), then each sheet's unique keys and its references
to other sheets.  All problems are collected in one pass; nothing raises.

How cells that a person or another program may have written differently
are read (each decision has a test in tests/test_hostile.py):

| cell as found                                   | decision                       | finding                          |
|-------------------------------------------------|--------------------------------|----------------------------------|
| header with stray spaces, other case, inner     | read                           | note ``header_normalised``       |
| spaces (" DBH  cm ")                            |                                |                                  |
| column not in the contract                      | ignored                        | note ``column_ignored`` (with a  |
|                                                 |                                | "did you mean" for a near miss)  |
| blank rows between data                         | ignored, row numbers kept      | none                             |
| text with leading/trailing spaces               | trimmed                        | none                             |
| number stored as text, point decimal ("12.5",   | read as the number             | note ``number_as_text``, one per |
| "1e3", "+4")                                    |                                | column: first cell and count     |
| number with a comma ("12,5", "1,234", "1.234,5")| refused: decimal comma or      | error ``decimal_comma`` at the   |
|                                                 | thousands separator is a guess | cell                             |
| other text in a number column ("NaN", "12 %",   | refused                        | error ``wrong_type``             |
| "twelve"), TRUE/FALSE, a date                   |                                |                                  |
| whole-number column: decimals, or beyond 2^53   | refused                        | error ``wrong_type``             |
| date as ISO text "2024-01-31"                   | read (workbook contract)       | none                             |
| date as any other text ("31/01/2024",           | refused, message names         | error ``wrong_type``             |
| "2024-1-31", "2024-01-31T00:00")                | YYYY-MM-DD (day/month order    |                                  |
|                                                 | differs between countries)     |                                  |
| number in a date column (a date serial shown    | refused, message says to       | error ``wrong_type``             |
| as a number)                                    | format the cell as a date      |                                  |
| choice differing only in case ("Live")          | read as the allowed value      | note ``choice_normalised``, one  |
|                                                 | when exactly one value matches | per column: first cell and count |
| spreadsheet error value (#N/A, #DIV/0!, ...)    | refused in every column kind   | error ``error_value``            |
| formula with a stored result                    | the stored result is read      | note ``formula_value_used``, one |
|                                                 |                                | per sheet                        |
| the same, in a file that asks to be recalculated| read, but flagged: the results | warning ``formula_values_stale``,|
| on opening (fullCalcOnLoad)                     | may be a library's placeholders| one per sheet                    |
| formula without a stored result                 | refused (it would read blank)  | error ``formula_without_value``  |
|                                                 |                                | at each cell                     |
| merged range touching a contract column         | refused (only its first cell   | error ``merged_cells`` at the    |
|                                                 | keeps a value)                 | range's top-left cell            |
| contract sheet hidden                           | read                           | note ``hidden_sheet``            |

Formula and merge findings concern contract columns only: a helper
column of the user's own never blocks a run.
"""

from __future__ import annotations

import datetime as dt
import difflib
import math
import re
from dataclasses import dataclass
from typing import Any, Callable, Sequence

import numpy as np
import pandas as pd
from openpyxl.utils import get_column_letter
from openpyxl.utils.cell import range_boundaries

from .findings import Finding, cell_ref
from .reader import RawSheet
from .schema import ColumnSpec, SheetSpec

ROW = "row"  # column of every typed table holding the worksheet row number


class _Invalid:
    """Marker for a cell whose value failed its type check."""


INVALID = _Invalid()


@dataclass
class TypedSheet:
    """A validated table: typed values, the worksheet row of each record, the letter of each column."""

    spec: SheetSpec
    frame: pd.DataFrame
    letters: dict[str, str]
    filled: frozenset[str] = frozenset()  # columns known to hold a value in every row

    def complete(self, columns: tuple[str, ...]) -> np.ndarray:
        """Whether each row has a value in every one of ``columns``."""
        if self.filled.issuperset(columns):
            return np.ones(len(self.frame), bool)
        return self.frame[list(columns)].notna().all(axis=1).to_numpy()

    def cell(self, column: str, row: int) -> str:
        letter = self.letters.get(column)
        return cell_ref(self.spec.name, letter, row) if letter else self.spec.name


# ---------------------------------------------------------------- cell types

# Error values a formula cell can hold (ECMA-376 Part 1, cell type "e": the
# seven classic ones; the others are written by newer spreadsheet programs;
# list from memory, check against the source).  A stored error is never data.
ERROR_VALUES = frozenset({
    "#NULL!", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#N/A",
    "#GETTING_DATA", "#SPILL!", "#CALC!", "#FIELD!", "#BLOCKED!", "#UNKNOWN!", "#CONNECT!", "#BUSY!",
})

# A number written as text with a point as decimal mark; ASCII digits only
# (float() would also take "nan", "inf", "1_000" and other scripts' digits).
_NUMBER_TEXT = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")
# Digits with a comma and perhaps points or spaces: "12,5", "1,234", "1.234,5", "1 234,5".
_COMMA_NUMBER = re.compile(r"[+-]?[0-9][0-9., '\u00a0\u202f]*")
_ISO_DATE = re.compile(r"[0-9]{4}-[0-9]{2}-[0-9]{2}")
# Whole numbers beyond this are not exact as floats (IEEE 754 binary64, 53-bit significand).
_LARGEST_EXACT_INTEGER = 2 ** 53


def _as_text(value: Any) -> str:
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    if isinstance(value, dt.datetime):
        return value.date().isoformat()
    if isinstance(value, dt.date):
        return value.isoformat()
    return str(value).strip()


def _as_string(value: Any) -> str | _Invalid:
    text = _as_text(value)
    return INVALID if text in ERROR_VALUES else text


def _as_number(value: Any) -> float | _Invalid:
    if isinstance(value, bool):
        return INVALID
    if isinstance(value, (int, float)):
        try:
            number = float(value)
        except OverflowError:  # an int too large for a float
            return INVALID
    elif isinstance(value, str) and _NUMBER_TEXT.fullmatch(value.strip()):
        number = float(value)
    else:
        return INVALID
    return number if math.isfinite(number) else INVALID


def _as_integer(value: Any) -> int | _Invalid:
    number = _as_number(value)
    if isinstance(number, _Invalid) or not number.is_integer() or abs(number) > _LARGEST_EXACT_INTEGER:
        return INVALID
    return int(number)


def _as_date(value: Any) -> dt.date | _Invalid:
    if isinstance(value, dt.datetime):
        return value.date()
    if isinstance(value, dt.date):
        return value
    if isinstance(value, str) and _ISO_DATE.fullmatch(value.strip()):
        try:
            return dt.date.fromisoformat(value.strip())
        except ValueError:
            return INVALID
    return INVALID


def _as_choice(column: ColumnSpec) -> Callable[[Any], str | _Invalid]:
    exact = frozenset(column.enum)
    by_case: dict[str, list[str]] = {}
    for choice in column.enum:
        by_case.setdefault(choice.casefold(), []).append(choice)
    # Only a case-insensitive match to exactly one allowed value is taken.
    unique = {folded: choices[0] for folded, choices in by_case.items() if len(choices) == 1}

    def convert(value: Any) -> str | _Invalid:
        text = _as_text(value)
        if text in exact:
            return text
        return unique.get(text.casefold(), INVALID)
    return convert


def converter(column: ColumnSpec) -> Callable[[Any], Any]:
    if column.kind == "enum":
        return _as_choice(column)
    return {"string": _as_string, "number": _as_number, "integer": _as_integer, "date": _as_date}[column.kind]


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
    text = value.strip() if isinstance(value, str) else None
    if text in ERROR_VALUES:
        return "error_value", (
            f"{column.name} holds the spreadsheet error {text}; correct the formula that "
            "produced it, or enter the value"
        )
    if column.kind == "enum":
        return "unknown_choice", (
            f"{column.name} is {_describe(value)}; it must be one of: {', '.join(column.enum)}"
        )
    numeric = column.kind in ("number", "integer")
    if numeric and text is not None and "," in text and _COMMA_NUMBER.fullmatch(text):
        return "decimal_comma", (
            f"{column.name} is {_describe(value)}: a comma may be a decimal comma or a thousands "
            "separator, so it is not guessed; enter the number with a point as decimal mark and "
            "no thousands separator (e.g. 1234.5)"
        )
    message = f"{column.name} must be {_KIND_WORDS[column.kind]}, found {_describe(value)}"
    if numeric and text is not None and text.endswith("%"):
        message += "; enter percent columns as plain numbers (12.5 means 12.5 %)"
    elif column.kind == "integer" and not isinstance(_as_number(value), _Invalid):
        message += f" (with no decimals, at most {_LARGEST_EXACT_INTEGER:,} in size)"
    elif column.kind == "date" and text is not None:
        message += ("; write dates as date cells or as text YYYY-MM-DD (e.g. 2024-01-31): "
                    "other layouts are not guessed, as day and month order differ between countries")
    elif column.kind == "date" and not isinstance(_as_number(value), _Invalid):
        message += "; it is a number: format the cell as a date"
    return "wrong_type", message


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


def _is_bounded(column: ColumnSpec) -> bool:
    if column.kind == "string":
        return column.max_length is not None
    return column.kind in ("number", "integer") and any(
        bound is not None for bound in (column.minimum, column.exclusive_minimum,
                                        column.maximum, column.exclusive_maximum))


def _is_blank(raw: Any) -> bool:
    return raw is None or (isinstance(raw, str) and not raw.strip())


def _missing(column: ColumnSpec, where: str) -> Finding:
    return Finding("error", "missing_value", where, f"{column.name} is required")


def check_value(column: ColumnSpec, raw: Any, where: str) -> tuple[Any, list[Finding]]:
    """Typed value of one cell and the findings it raises (blank gives None)."""
    if _is_blank(raw):
        return None, [_missing(column, where)] if column.required else []
    value = converter(column)(raw)
    if isinstance(value, _Invalid):
        code, message = type_message(column, raw)
        return None, [Finding("error", code, where, message)]
    problem = range_problem(column, value)
    if problem:
        return None, [Finding("error", "out_of_range", where, problem)]
    if isinstance(raw, str) and column.kind in ("number", "integer"):
        return value, [_text_number_note(column, where, 1)]
    if isinstance(raw, str) and column.kind == "enum" and raw.strip() != value:
        return value, [_choice_note(column, where, raw, value, 1)]
    return value, []


def _text_number_note(column: ColumnSpec, first: str, count: int) -> Finding:
    cells = "1 cell holds" if count == 1 else f"{count:,} cells hold"
    return Finding("note", "number_as_text", first,
                   f"{column.name}: {cells} a number stored as text (first at {first}), read as "
                   "the number; give the cells a number format to clear this note")


def _choice_note(column: ColumnSpec, first: str, raw: str, value: str, count: int) -> Finding:
    cells = "1 cell matches" if count == 1 else f"{count:,} cells match"
    return Finding("note", "choice_normalised", first,
                   f"{column.name}: {cells} an allowed value only when case is ignored "
                   f"(first {raw.strip()!r} at {first}, read as {value!r}); allowed: {', '.join(column.enum)}")


# ---------------------------------------------------------------- headers

def normalise_header(text: Any) -> str:
    """Header text as a contract name: trimmed, lower case, runs of spaces as one underscore."""
    return "" if text is None else "_".join(str(text).split()).lower()


def locate_columns(spec: SheetSpec, raw: RawSheet) -> tuple[dict[str, int], list[Finding]]:
    """Position of each schema column in the header row, and header problems."""
    findings: list[Finding] = []
    positions: dict[str, int] = {}
    known = {c.name: c for c in spec.columns}
    for index, text in enumerate(raw.header):
        key = normalise_header(text)
        if not key:
            continue
        where = cell_ref(spec.name, get_column_letter(index + 1), 1)
        if key not in known:
            findings.append(_ignored_column(spec, text, key, where))
            continue
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


def _ignored_column(spec: SheetSpec, text: Any, key: str, where: str) -> Finding:
    near = difflib.get_close_matches(key, spec.headers, n=1, cutoff=0.8)
    hint = f"; did you mean {near[0]}?" if near else ""
    return Finding("note", "column_ignored", where,
                   f"column {str(text).strip()!r} is not part of the {spec.name} sheet and is ignored{hint}")


# ---------------------------------------------------------------- how the sheet was stored

def sheet_read_findings(sheet: str, raw: RawSheet, columns: dict[int, str]) -> list[Finding]:
    """Findings about how ``raw`` was stored: hidden, formulas, merged ranges.

    ``columns`` maps the index of each contract column found to its name;
    formulas and merged ranges elsewhere are the user's own business.
    """
    findings: list[Finding] = []
    if raw.hidden:
        findings.append(Finding("note", "hidden_sheet", sheet,
                                f"the {sheet} sheet is hidden; it was read like any other sheet"))
    findings.extend(_formula_findings(sheet, raw, columns))
    findings.extend(_merged_findings(sheet, raw, columns))
    return findings


def _formula_findings(sheet: str, raw: RawSheet, columns: dict[int, str]) -> list[Finding]:
    findings = []
    used = [(first, index, count) for index, (first, count) in raw.formula_values.items() if index in columns]
    if used:
        first, index, _ = min(used)
        total = sum(count for _, _, count in used)
        where = cell_ref(sheet, get_column_letter(index + 1), first)
        if raw.formula_results_stale:
            findings.append(Finding(
                "warning", "formula_values_stale", where,
                f"{total:,} cell(s) of {sheet} hold formulas (first at {where}) and the file asks to be "
                "recalculated when opened, so their stored results may be placeholders written by a program "
                "that does not calculate. Open and save the file in a spreadsheet program that calculates, "
                "or replace the formulas by their values (paste values)"))
        else:
            findings.append(Finding(
                "note", "formula_value_used", where,
                f"{total:,} cell(s) of {sheet} hold formulas (first at {where}); the results stored by the "
                "program that last calculated them were read, not recalculated"))
    for row, index in sorted(raw.formula_blanks):
        if index not in columns:
            continue
        findings.append(Finding(
            "error", "formula_without_value", cell_ref(sheet, get_column_letter(index + 1), row),
            f"{columns[index]} is a formula with no stored result: the file was saved by a program that "
            "does not calculate formulas. Open it in a spreadsheet program that calculates and save it, "
            "or replace the formulas by their values (paste values)",
        ))
    return findings


def _merged_findings(sheet: str, raw: RawSheet, columns: dict[int, str]) -> list[Finding]:
    findings = []
    for ref in raw.merged:
        min_col, min_row, max_col, _ = range_boundaries(ref)
        names = [name for index, name in sorted(columns.items()) if min_col <= index + 1 <= max_col]
        if not names:
            continue
        where = cell_ref(sheet, get_column_letter(min_col), min_row)
        findings.append(Finding(
            "error", "merged_cells", where,
            f"cells {ref} are merged (columns {', '.join(names)}): only {where} keeps a value, the other "
            "cells read as blank. Unmerge them and fill in every cell",
        ))
    return findings


# ---------------------------------------------------------------- tables

_DTYPES = {"number": "float64", "integer": "Int64"}


def _empty_frame(spec: SheetSpec) -> pd.DataFrame:
    frame = pd.DataFrame({c.name: pd.Series(dtype=_DTYPES.get(c.kind, "object")) for c in spec.columns})
    frame[ROW] = pd.Series(dtype="int64")
    return frame


def _type_column(sheet: str, column: ColumnSpec, index: int, raw: RawSheet, cells: Sequence[Any]
                 ) -> tuple[Any, list[Finding]]:
    """Typed values of one column, its cell findings, and one note per kind of tolerated spelling.

    A vectorised pass types the plain cells (numbers in number columns, text
    in text and choice columns, dates in date columns) and marks the rest;
    only those, and blanks of required columns, take the cell-by-cell path,
    in row order, so every finding is the one that path gives.
    """
    values, plain = _QUICK[column.kind](column, cells)
    findings: list[Finding] = []
    if plain is True:  # every cell holds a valid value
        return values, findings
    as_text: list[int] = []  # rows of numbers stored as text
    recased: list[tuple[int, str, str]] = []  # (row, raw, value) of choices read despite their case
    # A blank optional cell is simply no value; every other cell not typed above is looked at.
    pending = [i for i, ok in enumerate(plain) if not ok and (column.required or cells[i] is not None)]
    if pending:
        letter = get_column_letter(index + 1)
        convert = converter(column)
        for i in pending:
            number = raw.numbers[i]
            typed, finding = _type_cell(column, convert, cells[i], (number, index) in raw.formula_blanks,
                                        lambda: cell_ref(sheet, letter, number))
            values[i] = typed
            if finding is not None:
                findings.append(finding)
            elif isinstance(cells[i], str) and typed is not None:
                if column.kind in ("number", "integer"):
                    as_text.append(number)
                elif column.kind == "enum" and cells[i].strip() != typed:
                    recased.append((number, cells[i], typed))
        if as_text:
            findings.append(_text_number_note(column, cell_ref(sheet, letter, as_text[0]), len(as_text)))
        if recased:
            row, first_raw, first_value = recased[0]
            findings.append(_choice_note(column, cell_ref(sheet, letter, row), first_raw, first_value,
                                         len(recased)))
    return values, findings


def _type_cell(column: ColumnSpec, convert: Callable[[Any], Any], value: Any, formula_blank: bool,
               where: Callable[[], str]) -> tuple[Any, Finding | None]:
    """Typed value of one cell of a table and its finding, if any (blank or refused gives None)."""
    if value is None or (isinstance(value, str) and not value.strip()):
        if column.required and not formula_blank:
            return None, _missing(column, where())
        return None, None
    typed = convert(value)
    if typed is INVALID:
        code, message = type_message(column, value)
        return None, Finding("error", code, where(), message)
    if _is_bounded(column):
        problem = range_problem(column, typed)
        if problem:
            return None, Finding("error", "out_of_range", where(), problem)
    return typed, None


def _quick_numbers(column: ColumnSpec, cells: Sequence[Any]) -> tuple[Any, Any]:
    """Float values and a mask of the cells typed here (True: all of them): finite numbers within
    the column's bounds."""
    try:
        if set(map(type, cells)) <= {float, int}:  # bool is a type of its own here, so it is not taken
            numbers, plain = np.array(cells, dtype=float), np.ones(len(cells), bool)
        else:
            plain = np.fromiter((type(v) is float or type(v) is int for v in cells), bool, len(cells))
            numbers = np.array([v if ok else math.nan for v, ok in zip(cells, plain)], dtype=float)
    except OverflowError:  # an int too large for a float: leave the column to the cell-by-cell path
        return [None] * len(cells), np.zeros(len(cells), bool)
    with np.errstate(invalid="ignore"):
        plain &= np.isfinite(numbers)
        if column.minimum is not None:
            plain &= numbers >= column.minimum
        if column.exclusive_minimum is not None:
            plain &= numbers > column.exclusive_minimum
        if column.maximum is not None:
            plain &= numbers <= column.maximum
        if column.exclusive_maximum is not None:
            plain &= numbers < column.exclusive_maximum
        if column.kind == "integer":
            plain &= (numbers == np.floor(numbers)) & (np.abs(numbers) <= _LARGEST_EXACT_INTEGER)
    numbers[~plain] = math.nan
    values = _IntegerValues(numbers) if column.kind == "integer" else numbers
    return values, True if plain.all() else plain


class _IntegerValues:
    """Whole numbers held as floats (NaN for none) until the column is built; ``values[i] = x`` sets one."""

    def __init__(self, numbers: Any) -> None:
        self.numbers = numbers

    def __setitem__(self, i: int, value: int | None) -> None:
        self.numbers[i] = math.nan if value is None else value

    def series(self) -> pd.Series:
        return pd.Series(pd.array(self.numbers, dtype="Int64"))


def _trimmed(cells: Sequence[Any]) -> tuple[list[Any], bool]:
    """Each text cell trimmed (others None), and whether every cell was text."""
    try:
        return list(map(str.strip, cells)), True  # one C-level pass when the column is all text
    except TypeError:  # a blank, a number, a date...
        return [v.strip() if type(v) is str else None for v in cells], False


def _shared(texts: list[str], distinct: set[str]) -> list[str]:
    """``texts`` with each value one shared object, when values repeat (ids of plots, species...).

    Equal texts that are one object match by identity in the joins, group-bys and comparisons
    that follow instead of comparing characters: measured on a 500,000-row Trees sheet, this
    halves the consistency checks and the calculation.  A column of mostly distinct values (tree
    ids) is left as it is: there the look-ups cost more than they save (also measured).
    """
    if len(distinct) * 4 > len(texts):  # a tuning constant, chosen by measurement, not from a source
        return texts
    canonical = dict(zip(distinct, distinct))
    return list(map(canonical.__getitem__, texts))


def _quick_texts(column: ColumnSpec, cells: Sequence[Any]) -> tuple[list[Any], Any]:
    """Trimmed text of the cells that hold non-blank text within the length limit, and a mask of
    those cells (True: all of them)."""
    texts, all_text = _trimmed(cells)
    limit = column.max_length
    if all_text:
        distinct = set(texts)
        if "" not in distinct and distinct.isdisjoint(ERROR_VALUES) and (
                limit is None or max(map(len, distinct), default=0) <= limit):
            return _shared(texts, distinct), True
    return texts, [bool(t) and t not in ERROR_VALUES and (limit is None or len(t) <= limit) for t in texts]


def _quick_choices(column: ColumnSpec, cells: Sequence[Any]) -> tuple[list[Any], Any]:
    """Text of the cells that hold exactly an allowed value (once trimmed), and a mask of those
    cells (True: all of them).  Each value becomes the schema's own string object, so that equal
    choices are one object (see :func:`_shared`)."""
    allowed = {choice: choice for choice in column.enum}
    try:
        return list(map(allowed.__getitem__, map(str.strip, cells))), True  # C-level passes
    except (KeyError, TypeError):  # a blank, another value, a number...
        texts, _ = _trimmed(cells)
        return texts, [t in allowed for t in texts]


def _quick_dates(column: ColumnSpec, cells: Sequence[Any]) -> tuple[list[Any], Any]:
    """Dates of the cells that hold a date or a date-time; the rest are marked."""
    values = [v.date() if type(v) is dt.datetime else v if type(v) is dt.date else None for v in cells]
    return values, [v is not None for v in values]


_QUICK: dict[str, Callable[[ColumnSpec, Sequence[Any]], tuple[Any, Any]]] = {
    "number": _quick_numbers, "integer": _quick_numbers, "string": _quick_texts,
    "enum": _quick_choices, "date": _quick_dates,
}


def type_table(spec: SheetSpec, raw: RawSheet) -> tuple[TypedSheet, list[Finding]]:
    """Typed DataFrame of a table sheet (contract columns + ``row``) and its cell findings."""
    positions, findings = locate_columns(spec, raw)
    findings.extend(sheet_read_findings(spec.name, raw, {index: name for name, index in positions.items()}))
    letters = {name: get_column_letter(index + 1) for name, index in positions.items()}
    data: dict[str, Any] = {}
    filled = set()
    for column in spec.columns:
        index = positions.get(column.name)
        if index is None:
            data[column.name] = [None] * len(raw.numbers)
            continue
        data[column.name], problems = _type_column(spec.name, column, index, raw, raw.column(index))
        findings.extend(problems)
        if not problems and _has_no_blank(data[column.name]):
            filled.add(column.name)
    if not raw.numbers:
        return TypedSheet(spec, _empty_frame(spec), letters), findings
    frame = pd.DataFrame({c.name: _series(c, data[c.name]) for c in spec.columns})
    frame[ROW] = np.asarray(raw.numbers, dtype=np.int64)
    return TypedSheet(spec, frame, letters, frozenset(filled)), findings


def _has_no_blank(values: Any) -> bool:
    if isinstance(values, np.ndarray):
        return not np.isnan(values).any()
    if isinstance(values, _IntegerValues):
        return not np.isnan(values.numbers).any()
    return None not in values


def _series(column: ColumnSpec, values: Any) -> pd.Series:
    if isinstance(values, _IntegerValues):
        return values.series()
    return pd.Series(values, dtype=_DTYPES.get(column.kind, "object"))


def unique_key_findings(sheet: TypedSheet) -> list[Finding]:
    """A duplicate of a unique key is an error at the later row, naming the first."""
    findings = []
    frame = sheet.frame
    for key in sheet.spec.unique:
        keys = frame[list(key)]
        # A key with a blank part is left to the required-value check.
        complete = sheet.complete(key)
        duplicated = keys.duplicated(keep="first").to_numpy() & complete
        if not duplicated.any():
            continue
        complete_rows = frame[complete]
        first_rows = complete_rows.drop_duplicates(subset=list(key)).set_index(list(key))[ROW]
        for _, record in frame[duplicated].iterrows():
            values = tuple(record[k] for k in key)
            first = first_rows.loc[values if len(key) > 1 else values[0]]
            label = ", ".join(f"{k}={v}" for k, v in zip(key, values))
            findings.append(Finding(
                "error", "duplicate_id", sheet.cell(key[-1], record[ROW]),
                f"{label} appears again; first at row {first}",
            ))
    return findings


def reference_findings(sheet: TypedSheet, sheets: dict[str, TypedSheet]) -> list[Finding]:
    """Each reference to another sheet must name an existing record there (a blank reference is
    left to the required-value check)."""
    findings = []
    frame = sheet.frame
    for ref in sheet.spec.references:
        target = sheets.get(ref.sheet)
        if target is None:
            continue
        source_keys, target_keys = frame[list(ref.columns)], target.frame[list(ref.target)]
        source_codes, target_codes = key_codes(source_keys, target_keys)
        complete = sheet.complete(ref.columns)
        known = target_codes[target.complete(ref.target)]
        rows = frame[ROW].to_numpy()
        for i in np.flatnonzero(complete & ~np.isin(source_codes, known)):
            label = ", ".join(f"{c}={source_keys[c].iat[i]}" for c in ref.columns)
            findings.append(Finding(
                "error", "unknown_reference", sheet.cell(ref.columns[-1], int(rows[i])),
                f"{label} is not on the {ref.sheet} sheet",
            ))
    return findings


def key_codes(*tables: pd.DataFrame) -> list[np.ndarray]:
    """One integer per row of each key table (all with their key columns in the same order):
    equal keys give equal integers, whichever table they are in (values compare as in Python,
    1 equals 1.0; blanks are a value of their own).  Joins and look-ups on these integers
    avoid hashing text keys again."""
    sizes = np.cumsum([0] + [len(table) for table in tables])
    combined = np.zeros(sizes[-1], np.int64)
    for position in range(len(tables[0].columns)):
        values = np.concatenate([table.iloc[:, position].to_numpy(object) for table in tables])
        codes, uniques = pd.factorize(values)  # a blank is -1, made 0 below
        if position > 1:  # made compact again, so that the product below stays under 2**63
            combined, _ = pd.factorize(combined)
        # Below len(rows) * (len(uniques) + 1): under 2**63 for any sheet this tool reads.
        combined = combined * (len(uniques) + 1) + (codes + 1)
    return [combined[start:end] for start, end in zip(sizes[:-1], sizes[1:])]


# ---------------------------------------------------------------- key/value sheet

def read_key_values(spec: SheetSpec, raw: RawSheet, pathway_hint: str | None = None
                    ) -> tuple[dict[str, Any], dict[str, int], list[Finding]]:
    """Typed fields of a key/value sheet with defaults applied, the row of each field, findings."""
    findings = sheet_read_findings(spec.name, raw, {0: spec.key_header, 1: spec.value_header})
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
            if (number, 0) not in raw.formula_blanks:
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
        if _is_blank(raw_value) and (number, 1) in raw.formula_blanks:
            continue  # reported as formula_without_value
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
