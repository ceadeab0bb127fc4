"""The fast value reader (python-calamine) against openpyxl as the reference reader.

Reference: openpyxl reading the same file with ``data_only=True`` (stored
values, the way the reader read every sheet before calamine).  Cell
addresses follow ECMA-376 Part 1 (SpreadsheetML: row 1 and column A first).
Two known differences of representation are normalised, each named where it
is: a date cell reads as ``datetime.date`` from calamine and as
``datetime.datetime`` at midnight from openpyxl, and a whole number reads as
a float from calamine and as an int from openpyxl (equal under ==).
"""

from __future__ import annotations

import datetime as dt
import io
import zipfile
from pathlib import Path
from typing import Any

import openpyxl
import pytest
from openpyxl import Workbook

from verify import reader
from verify.reader import read_sheets
from verify.safety import scan_part
from verify.workbook import load_workbook

MAIN_NS = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"  # ECMA-376 Part 1, SpreadsheetML


def replace_part(path: Path, part: str, old: bytes, new: bytes) -> Path:
    """Rewrite one part of the archive with ``old`` replaced once by ``new``."""
    with zipfile.ZipFile(path) as source:
        parts = {info.filename: source.read(info) for info in source.infolist()}
    assert parts[part].count(old) == 1, old
    parts[part] = parts[part].replace(old, new)
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as out:
        for name, data in parts.items():
            out.writestr(name, data)
    return path


def mixed_workbook(path: Path) -> Path:
    """Numbers, text, dates, blanks, booleans and a formula with a stored result, laid out with
    a blank first column, a blank row 2 and a gap of rows, as people leave sheets."""
    book = Workbook()
    ws = book.active
    ws.title = "Data"
    ws.append([None, "id", "amount", "when", "note"])
    ws.append([])
    ws.append([None, "A", 20, dt.date(2024, 1, 31), "  spaced  "])
    ws.append([None, "B", 20.5, dt.datetime(2024, 2, 1, 12, 30), None])
    ws.append([None, "C", -0.25, None, True])
    ws.append([None, "D", "=1+1", dt.date(2023, 12, 31), "x"])
    ws.cell(10, 2, "E")
    ws.cell(10, 3, 1e-3)
    book.create_sheet("Empty")
    book.save(path)
    # openpyxl cannot calculate, so it writes no stored result; put one in as a spreadsheet program would.
    return replace_part(path, "xl/worksheets/sheet1.xml", b"<f>1+1</f><v />", b"<f>1+1</f><v>2</v>")


def reference_rows(path: Path, title: str) -> tuple[tuple[Any, ...], list[tuple[int, tuple[Any, ...]]]]:
    """Header and non-blank rows as openpyxl (data_only=True) reads them, dates at midnight as dates."""
    book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    try:
        grid = [tuple(_as_calamine(v) for v in row) for row in book[title].iter_rows(values_only=True)]
    finally:
        book.close()
    header = grid[0] if grid else ()
    while header and header[-1] is None:
        header = header[:-1]
    width = max(len(header), reader.MIN_COLUMNS)
    cut = [(n, (row + (None,) * width)[:width]) for n, row in enumerate(grid[1:], start=2)]
    rows = [(n, row) for n, row in cut if any(v is not None for v in row)]
    return header, rows


def _as_calamine(value: Any) -> Any:
    if isinstance(value, dt.datetime) and value.time() == dt.time(0, 0):
        return value.date()  # the one representation that differs: a date cell
    return value


def test_calamine_values_equal_the_openpyxl_reference(tmp_path, monkeypatch):
    path = mixed_workbook(tmp_path / "mixed.xlsx")

    def no_openpyxl_values(*args: Any, **kwargs: Any) -> None:
        raise AssertionError("a plain sheet must be read by calamine")
    monkeypatch.setattr(openpyxl, "load_workbook", no_openpyxl_values)
    raw = read_sheets(path)
    monkeypatch.undo()
    header, rows = reference_rows(path, "Data")
    assert raw["Data"].header == header == (None, "id", "amount", "when", "note")
    assert raw["Data"].rows == rows
    assert [n for n, _ in rows] == [3, 4, 5, 6, 10]
    assert rows[0][1] == (None, "A", 20, dt.date(2024, 1, 31), "  spaced  ")
    assert rows[3][1][2] == 2  # the formula's stored result
    assert raw["Data"].formula_values == {2: (6, 1)}
    assert raw["Empty"].header == () and raw["Empty"].rows == []


@pytest.mark.parametrize("first_row", [1, 3])
def test_rows_keep_their_worksheet_numbers_after_leading_blanks(tmp_path, first_row):
    # Row numbers are the worksheet's (ECMA-376: <row r="...">), whatever is blank above or left.
    book = Workbook()
    ws = book.active
    ws.cell(first_row, 3, "h")
    ws.cell(first_row + 4, 3, 7.5)
    ws.cell(first_row + 4, 4, "right of the header")
    book.save(tmp_path / "w.xlsx")
    raw = read_sheets(tmp_path / "w.xlsx")[ws.title]
    header, rows = reference_rows(tmp_path / "w.xlsx", ws.title)
    assert (raw.header, raw.rows) == (header, rows)
    if first_row == 1:
        assert raw.rows == [(5, (None, None, 7.5))]  # read as wide as the header: column D is not read
    else:
        assert raw.header == () and raw.rows == []  # no header: only columns A and B are read, both blank


def test_error_cells_are_read_as_their_error_text(tmp_path):
    # calamine reads a cell of type "e" as blank; such a sheet is read by openpyxl, which keeps "#N/A".
    book = Workbook()
    ws = book.active
    ws.append(["id", "amount"])
    ws.append(["A", "#N/A"])
    ws.append(["B", "#DIV/0!"])
    book.save(tmp_path / "w.xlsx")
    with zipfile.ZipFile(tmp_path / "w.xlsx") as archive:
        assert b't="e"' in archive.read("xl/worksheets/sheet1.xml")
    assert read_sheets(tmp_path / "w.xlsx")[ws.title].rows == [(2, ("A", "#N/A")), (3, ("B", "#DIV/0!"))]


def test_error_cell_is_an_error_value_finding_in_a_large_sheet_too(tmp_path):
    from conftest import minimal_forest, write_workbook

    sheets = minimal_forest()
    sheets["Trees"][3][4] = "#DIV/0!"
    findings = load_workbook(write_workbook(tmp_path / "w.xlsx", sheets)).findings
    assert ("error_value", "Trees!E4") in {(f.code, f.location) for f in findings}


def sheet_xml(cells: str) -> bytes:
    return f'<worksheet xmlns="{MAIN_NS}"><cols><col min="1" max="2"/></cols><sheetData>{cells}</sheetData></worksheet>'.encode()


PLAIN = ('<row r="1"><c r="A1" t="inlineStr"><is><t>a, c</t></is></c><c r="Z2"><v>1</v></c></row>'
         '<row r="999999"><c r="B999999" s="1"><v>2</v></c></row>')


@pytest.mark.parametrize("chunk_bytes", [5, 16, 1 << 20])
def test_plain_cell_addresses_are_recognised_across_chunk_boundaries(chunk_bytes):
    assert scan_part(io.BytesIO(sheet_xml(PLAIN)), chunk_bytes=chunk_bytes).plain_cells is True


@pytest.mark.parametrize("cells", [
    '<row r="1"><c r="AA1"><v>1</v></c></row>',              # a column beyond Z
    '<row r="1"><c r="A1000000"><v>1</v></c></row>',         # a seventh row digit
    '<row r="1"><c><v>1</v></c></row>',                      # no address: placed by counting
    '<row r="1"><c s="1" r="A1"><v>1</v></c></row>',         # another attribute first
    '<row r="1"><x:c xmlns:x="urn:x" r="A1"><v>1</v></x:c></row>',  # a namespace prefix
])
@pytest.mark.parametrize("chunk_bytes", [7, 1 << 20])
def test_other_cell_shapes_send_the_sheet_to_openpyxl(cells, chunk_bytes):
    assert scan_part(io.BytesIO(sheet_xml(cells)), chunk_bytes=chunk_bytes).plain_cells is False


def test_stored_error_type_is_seen_by_the_scan():
    scan = scan_part(io.BytesIO(sheet_xml('<row r="1"><c r="A1" t="e"><v>#N/A</v></c></row>')))
    assert scan.has_error_cells is True
    assert scan_part(io.BytesIO(sheet_xml(PLAIN))).has_error_cells is False


def test_rows_of_blanks_and_spaces_are_dropped_by_both_readers(tmp_path):
    # A row whose every cell is empty or only spaces is no record; a row with one value is kept.
    # Reference: the openpyxl read-only reader, which decides row by row.
    book = Workbook()
    ws = book.active
    for row in (["id", "amount", "note"], ["  ", None, "\t"], ["x", 1, None], [None, " ", None],
                [None, None, "kept"]):
        ws.append(row)
    book.save(tmp_path / "w.xlsx")
    raw = read_sheets(tmp_path / "w.xlsx")[ws.title]
    expected = [(3, ("x", 1, None)), (5, (None, None, "kept"))]
    assert raw.rows == expected
    assert raw.numbers == (3, 5) and raw.columns[2] == (None, "kept")
    reference = openpyxl.load_workbook(tmp_path / "w.xlsx", read_only=True, data_only=True)
    try:
        header, numbers, columns = reader._openpyxl_values(reference[ws.title])
    finally:
        reference.close()
    assert (header, list(zip(numbers, zip(*columns)))) == (raw.header, expected)


def test_background_read_gives_what_read_sheets_gives(tmp_path):
    import hashlib

    path = mixed_workbook(tmp_path / "mixed.xlsx")
    read = reader.BackgroundRead(path)
    raw = read.result()
    assert read.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()  # reference: hashlib on the bytes
    direct = read_sheets(path)
    assert list(raw) == list(direct) == ["Data", "Empty"]
    assert all(raw[name] == direct[name] for name in raw)


def test_background_read_hands_the_refusal_to_the_caller(tmp_path):
    path = tmp_path / "notes.xlsx"
    path.write_text("id,amount\nA,1\n")
    read = reader.BackgroundRead(path)
    with pytest.raises(reader.UnreadableWorkbook, match="text file"):
        read.result()
    assert len(read.sha256) == 64
    findings = load_workbook(path).findings
    assert [f.code for f in findings] == ["not_a_workbook"]


def test_collector_pauses_overlapping_across_threads_restore_it_once():
    # A read on a worker thread and the caller's own pause overlap; the collector must stay off
    # until the last one ends (else the caller's validation runs with it on), then be restored.
    import gc
    import threading

    inside, release = threading.Event(), threading.Event()

    def worker() -> None:
        with reader.cyclic_gc_paused():
            inside.set()
            release.wait(10)

    assert gc.isenabled()
    thread = threading.Thread(target=worker)
    thread.start()
    inside.wait(10)
    with reader.cyclic_gc_paused():
        release.set()
        thread.join()
        assert not gc.isenabled()  # the worker's pause ended first
    assert gc.isenabled()
    gc.disable()
    try:
        with reader.cyclic_gc_paused():
            pass
        assert not gc.isenabled()  # a collector the caller turned off stays off
    finally:
        gc.enable()
