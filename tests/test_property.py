"""Property-based tests: random edits to a valid workbook never raise, and never lose a value silently.

Each example writes the minimal forest workbook (conftest.minimal_forest)
with random edits applied, then loads it.  Bounded to stay fast: 60
examples per property, no deadline (writing a workbook takes tens of ms).
"""

from __future__ import annotations

import datetime as dt
import math
import re
import tempfile
from pathlib import Path
from typing import Any

from hypothesis import given, settings
from hypothesis import strategies as st

from conftest import Sheets, minimal_forest, write_workbook
from verify.schema import all_sheets
from verify.workbook import load_workbook

SETTINGS = settings(max_examples=60, deadline=None, database=None)

SHEET_NAMES = list(minimal_forest())
CONTRACT_SHEETS = set(all_sheets())
CELL = re.compile(r"^(?P<sheet>[A-Za-z]+)!(?P<column>[A-Z]{1,3})(?P<row>[1-9][0-9]*)$")
SNAKE_CASE = re.compile(r"^[a-z][a-z0-9_]*$")

# Text a person or a program might type; no control characters, surrogates or
# unassigned code points, which an .xlsx cannot hold at all.
texts = st.text(st.characters(blacklist_categories=("Cs", "Cc", "Cn")), max_size=12)
awkward = st.sampled_from([
    "=1+1", "=A1*2", "#N/A", "#DIV/0!", "12,5", "1,234.5", " 20.5 ", "1e3", "NaN", "inf", "Live",
    "LIVE", "2024-01-10", "10/01/2024", "", "   ", 1e308, -1e308, 10 ** 20, 2 ** 53 + 1, 0, -0.0, True,
])
cell_values = st.one_of(
    st.none(), texts, awkward,
    st.floats(allow_nan=False, allow_infinity=False),
    st.integers(min_value=-(10 ** 30), max_value=10 ** 30),
    st.dates(min_value=dt.date(1900, 3, 1), max_value=dt.date(2200, 12, 31)),
)
edits = st.one_of(
    st.tuples(st.just("cell"), st.sampled_from(SHEET_NAMES), st.integers(0, 40), st.integers(0, 12), cell_values),
    st.tuples(st.just("delete_row"), st.sampled_from(SHEET_NAMES), st.integers(0, 40)),
    st.tuples(st.just("rename_header"), st.sampled_from(SHEET_NAMES), st.integers(0, 12), texts),
)


def apply_edit(sheets: Sheets, edit: tuple[Any, ...]) -> None:
    kind, name, *rest = edit
    rows = sheets[name]
    if kind == "delete_row":
        if rows:
            del rows[rest[0] % len(rows)]
        return
    width = max((len(r) for r in rows), default=0)
    if kind == "rename_header":
        if rows and width:
            put(rows[0], rest[0] % width, rest[1])
        return
    row_index, column_index, value = rest
    row_index %= len(rows) + 1  # one past the end appends a row
    if row_index == len(rows):
        rows.append([None] * width)
    put(rows[row_index], column_index % (width + 1), value)  # one past the end adds a column


def put(row: list[Any], index: int, value: Any) -> None:
    row.extend([None] * (index + 1 - len(row)))
    row[index] = value


def load(sheets: Sheets):
    with tempfile.TemporaryDirectory() as folder:
        return load_workbook(write_workbook(Path(folder) / "w.xlsx", sheets))


@SETTINGS
@given(st.lists(edits, min_size=1, max_size=4))
def test_random_edits_give_a_clean_load_or_addressed_findings(edit_list):
    sheets = minimal_forest()
    for edit in edit_list:
        apply_edit(sheets, edit)
    book = load(sheets)  # must not raise
    for finding in book.findings:
        assert finding.severity in ("error", "warning", "note")
        assert SNAKE_CASE.match(finding.code), finding
        assert finding.message, finding
        assert finding.code != "not_a_workbook", finding  # openpyxl wrote it: it must be readable
        cell = CELL.match(finding.location)
        sheet = cell.group("sheet") if cell else finding.location
        assert sheet in CONTRACT_SHEETS, finding
    assert book.ok == (not any(f.severity == "error" for f in book.findings))


DBH = all_sheets()["Trees"].column("dbh_cm")


def within_contract_bounds(number: float) -> bool:
    """The dbh_cm bounds as the Trees schema states them (exclusiveMinimum 0, maximum 1500)."""
    return number > DBH.exclusive_minimum and number <= DBH.maximum


def valid_number(value: Any) -> float | None:
    """The float a number cell must be read as, when it is a number the contract accepts."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    try:
        number = float(value)
    except OverflowError:
        return None
    return number if math.isfinite(number) and within_contract_bounds(number) else None


@SETTINGS
@given(st.integers(1, 8), cell_values)
def test_a_replaced_number_is_read_faithfully_or_refused_at_its_cell(row_offset, value):
    """Nothing is lost silently: the table holds the value (Python's float() of it is the
    reference), or an error names exactly the replaced cell."""
    sheets = minimal_forest()
    sheets["Trees"][row_offset][4] = value
    book = load(sheets)
    cell = f"Trees!E{row_offset + 1}"
    read = book.table("Trees").set_index("row")["dbh_cm"].get(row_offset + 1)
    errors_here = [f for f in book.findings if f.location == cell and f.severity == "error"]
    expected = valid_number(value)
    if expected is not None:
        assert same_number(read, expected), (value, book.findings)
    if read is None or (isinstance(read, float) and math.isnan(read)):
        assert errors_here, (value, book.findings)
        return
    assert not isinstance(value, (bool, dt.date)), value
    assert same_number(read, float(value))
    assert within_contract_bounds(read)


def same_number(read: float, written: float) -> bool:
    # openpyxl stores floats with 16 significant digits ("%.16g"), so the 17th may differ.
    return math.isclose(read, written, rel_tol=1e-15, abs_tol=0.0)
