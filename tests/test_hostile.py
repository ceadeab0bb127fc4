"""Hostile and broken workbooks: each gives a clear refusal or cell-addressed findings, never a traceback.

Every bad file is built here, in tmp_path, from the valid minimal forest
workbook: by openpyxl where it can write the defect, otherwise by editing
the parts of the zip archive directly.

Trees headers in contract order: A plot_id, B event, C tree_id, D species,
E dbh_cm, F height_m, G status; row 2 is the first tree.  openpyxl writes
the sheets in order as xl/worksheets/sheet<N>.xml.
"""

from __future__ import annotations

import io
import os
import random
import re
import struct
import zipfile
from pathlib import Path
from typing import Callable

import openpyxl
import pytest

from conftest import Sheets, minimal_forest, project_rows, write_workbook
from verify import reader, safety
from verify.atomic import OutputRefused, atomic_path, write_text_atomic
from verify.reader import MAX_ROWS, parse_formula_cells, read_sheets, scan_formula_cells
from verify.safety import inspect_archive
from verify.workbook import load_workbook

MAIN_NS = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"  # ECMA-376 Part 1, SpreadsheetML


# ---------------------------------------------------------------- helpers



def sheet_part(sheets: Sheets, title: str) -> str:
    return f"xl/worksheets/sheet{list(sheets).index(title) + 1}.xml"


def rewrite_parts(path: Path, changes: dict[str, Callable[[bytes], bytes] | bytes], target: Path | None = None) -> Path:
    """Copy the archive with some parts replaced (bytes) or transformed (function); new names are added."""
    target = target or path
    with zipfile.ZipFile(path) as source:
        parts = {info.filename: source.read(info) for info in source.infolist()}
    for name, change in changes.items():
        parts[name] = change(parts[name]) if callable(change) else change
    with zipfile.ZipFile(target, "w", zipfile.ZIP_DEFLATED) as out:
        for name, data in parts.items():
            out.writestr(name, data)
    return target


def replace_once(old: bytes, new: bytes) -> Callable[[bytes], bytes]:
    """A part edit that fails loudly if the writer's spelling of ``old`` ever changes."""
    def edit(xml: bytes) -> bytes:
        assert xml.count(old) == 1, old
        return xml.replace(old, new)
    return edit


def forest_file(tmp_path: Path, sheets: Sheets | None = None, name: str = "w.xlsx") -> Path:
    return write_workbook(tmp_path / name, sheets or minimal_forest())


def codes_at(findings) -> set[tuple[str, str]]:
    return {(f.code, f.location) for f in findings}


def refusal(path: Path) -> str:
    """The message of the single not_a_workbook finding ``path`` must give."""
    findings = load_workbook(path).findings
    assert [(f.severity, f.code, f.location) for f in findings] == [("error", "not_a_workbook", path.name)]
    return findings[0].message


# ---------------------------------------------------------------- not an .xlsx at all

def test_csv_renamed_is_refused_as_text(tmp_path):
    path = tmp_path / "w.xlsx"
    path.write_text("plot_id,event\nP1,start\n")
    assert "text file, perhaps CSV" in refusal(path)


def test_random_bytes_are_refused(tmp_path):
    path = tmp_path / "w.xlsx"
    path.write_bytes(b"\x00\x9f" + random.Random(7).randbytes(4096))
    assert "not a zip archive" in refusal(path)


def test_empty_file_is_refused(tmp_path):
    path = tmp_path / "w.xlsx"
    path.write_bytes(b"")
    assert "empty" in refusal(path)


def test_truncated_zip_is_refused(tmp_path):
    path = forest_file(tmp_path)
    path.write_bytes(path.read_bytes()[: path.stat().st_size // 2])
    assert "damaged or incomplete" in refusal(path)


def test_compound_file_is_refused_as_encrypted_or_legacy(tmp_path):
    # Compound File Binary header signature D0 CF 11 E0 A1 B1 1A E1 ([MS-CFB] §2.2): the container
    # of password-protected OOXML files and of legacy .xls workbooks.
    path = tmp_path / "w.xlsx"
    path.write_bytes(bytes.fromhex("D0CF11E0A1B11AE1") + bytes(504))
    message = refusal(path)
    assert "encrypted (password-protected)" in message and "legacy .xls" in message


def test_zip_that_is_no_workbook_is_refused(tmp_path):
    path = tmp_path / "w.xlsx"
    with zipfile.ZipFile(path, "w") as archive:
        archive.writestr("word/document.xml", "<document/>")
    assert "cannot open w.xlsx as an .xlsx workbook" in refusal(path)


# ---------------------------------------------------------------- zip bombs

def test_high_ratio_part_is_refused_before_any_parsing(tmp_path, monkeypatch):
    # 20 MiB of one repeated byte deflates about 1000:1 (zlib's limit for runs, from memory;
    # check against the source), far beyond real sheet XML at 10-20:1.
    path = tmp_path / "w.xlsx"
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as archive:
        archive.writestr("[Content_Types].xml", "<Types/>")
        archive.writestr("xl/worksheets/sheet1.xml", b" " * (20 << 20))
    opened = []
    monkeypatch.setattr(openpyxl, "load_workbook", lambda *a, **k: opened.append(a))
    message = refusal(path)
    assert "looks like a zip bomb" in message and f"{safety.MAX_MEMBER_RATIO}:1" in message
    assert opened == []


def test_total_unpacked_size_limit(tmp_path, monkeypatch):
    path = forest_file(tmp_path)
    monkeypatch.setattr(safety, "MAX_TOTAL_UNCOMPRESSED_BYTES", 10_000)
    assert "would unpack to" in refusal(path)


def test_part_count_limit(tmp_path, monkeypatch):
    path = forest_file(tmp_path)
    monkeypatch.setattr(safety, "MAX_MEMBERS", 5)
    assert "parts, more than the limit of 5" in refusal(path)


def test_part_lying_about_its_size_is_refused(tmp_path):
    # A part that declares 1000 bytes but inflates to 2 MiB: the zip reader stops at the declared
    # size and the CRC check fails.  Offsets of the uncompressed size: 22 in the local file header,
    # 24 in the central directory header (PKWARE APPNOTE.TXT 4.3.7 and 4.3.12).
    path = tmp_path / "w.xlsx"
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as archive:
        archive.writestr("xl/worksheets/sheet1.xml", bytes(2 << 20))
    data = bytearray(path.read_bytes())
    assert data[:4] == b"PK\x03\x04"
    struct.pack_into("<I", data, 22, 1000)
    central = data.index(b"PK\x01\x02")
    struct.pack_into("<I", data, central + 24, 1000)
    path.write_bytes(bytes(data))
    assert "damaged or incomplete" in refusal(path)


def test_compression_method_never_written_by_spreadsheets_is_refused(tmp_path):
    path = tmp_path / "w.xlsx"
    with zipfile.ZipFile(path, "w", zipfile.ZIP_BZIP2) as archive:
        archive.writestr("xl/worksheets/sheet1.xml", b"<worksheet/>")
    assert "compression method 12" in refusal(path)  # APPNOTE 4.4.5: 12 = bzip2


def trees_sheet_xml(n_rows: int, seed: int = 1) -> bytes:
    """A Trees sheet part of ``n_rows`` random trees, spelt as openpyxl writes it (inline strings)."""
    rng = random.Random(seed)

    def text(ref: str, value: str) -> str:
        return f'<c r="{ref}" t="inlineStr"><is><t>{value}</t></is></c>'

    rows = [f'<row r="{r}">{text(f"A{r}", f"P{r // 50}")}{text(f"B{r}", "start")}{text(f"C{r}", str(r))}'
            f'{text(f"D{r}", "Alpha")}<c r="E{r}"><v>{rng.uniform(5, 100):.1f}</v></c>'
            f'<c r="F{r}"><v>{rng.uniform(3, 40):.1f}</v></c>{text(f"G{r}", "live")}</row>'
            for r in range(2, n_rows + 2)]
    return f'<worksheet xmlns="{MAIN_NS}"><sheetData>{"".join(rows)}</sheetData></worksheet>'.encode()


def test_limits_accept_a_500k_row_workbook(tmp_path):
    # The limits were chosen against this measurement (about 180 MB of sheet XML, near 11:1); it
    # must keep passing.  Written part by part: openpyxl itself takes a minute for 500k rows.
    sheets = minimal_forest()
    part = sheet_part(sheets, "Trees")
    path = rewrite_parts(forest_file(tmp_path, sheets), {part: trees_sheet_xml(500_000)})
    scan = inspect_archive(path)
    with zipfile.ZipFile(path) as archive:
        sheet = archive.getinfo(part)
    assert sheet.file_size > safety.RATIO_CHECKED_ABOVE_BYTES
    assert sheet.file_size / sheet.compress_size < safety.MAX_MEMBER_RATIO / 5
    assert sheet.file_size < safety.MAX_TOTAL_UNCOMPRESSED_BYTES / 4
    assert scan.parts[part].has_formulas is False


def test_generated_trees_part_is_a_readable_sheet(tmp_path):
    sheets = minimal_forest()
    path = rewrite_parts(forest_file(tmp_path, sheets), {sheet_part(sheets, "Trees"): trees_sheet_xml(30)})
    assert len(read_sheets(path)["Trees"].rows) == 30


# ---------------------------------------------------------------- XML attacks

BILLION_LAUGHS = (
    '<?xml version="1.0"?>\n<!DOCTYPE worksheet [\n <!ENTITY lol "lol">\n'
    + "".join(f' <!ENTITY lol{i} "{("&lol" + (str(i - 1) if i > 1 else "") + ";") * 10}">\n' for i in range(1, 10))
    + "]>\n"
)


def laughing_sheet(xml: bytes) -> bytes:
    """The sheet with the classic entity-expansion DOCTYPE and a cell expanding &lol9; (10^9 "lol")."""
    body = xml.split(b"?>", 1)[-1] if xml.startswith(b"<?xml") else xml
    assert b"<is><t>Alpha</t></is>" in body
    body = body.replace(b"<is><t>Alpha</t></is>", b"<is><t>&lol9;</t></is>", 1)
    return BILLION_LAUGHS.encode() + body


def test_billion_laughs_is_refused_as_a_finding(tmp_path):
    sheets = minimal_forest()
    path = rewrite_parts(forest_file(tmp_path, sheets), {sheet_part(sheets, "Trees"): laughing_sheet})
    assert "DOCTYPE" in refusal(path)


def test_openpyxl_itself_refuses_entities_through_defusedxml(tmp_path):
    # The second line of defence: openpyxl parses with defusedxml when it is installed, which
    # refuses entity declarations (defusedxml documentation: EntitiesForbidden).
    from defusedxml import EntitiesForbidden

    sheets = minimal_forest()
    path = rewrite_parts(forest_file(tmp_path, sheets), {sheet_part(sheets, "Trees"): laughing_sheet})
    assert openpyxl.DEFUSEDXML is True
    with pytest.raises(ValueError) as refused:  # openpyxl re-raises as "Unable to read workbook"
        openpyxl.load_workbook(path, read_only=True, data_only=True)
    assert isinstance(refused.value.__cause__, EntitiesForbidden)


def test_reader_turns_a_defusedxml_refusal_into_a_finding(tmp_path, monkeypatch):
    # Were the byte scan to miss a DOCTYPE, openpyxl's defusedxml parse must still refuse it.
    sheets = minimal_forest()
    path = rewrite_parts(forest_file(tmp_path, sheets), {sheet_part(sheets, "Trees"): laughing_sheet})
    monkeypatch.setattr(reader, "inspect_archive", lambda _: safety.ArchiveScan({}, ()))
    assert "declares entities" in refusal(path)


def test_doctype_in_any_part_is_refused(tmp_path):
    path = rewrite_parts(forest_file(tmp_path), {
        "xl/workbook.xml": lambda xml: b'<?xml version="1.0"?><!DOCTYPE workbook SYSTEM "file:///etc/passwd">'
        + xml.split(b"?>", 1)[-1],
    })
    assert "xl/workbook.xml contains a DOCTYPE" in refusal(path)


def test_utf16_part_is_refused(tmp_path):
    # XML 1.0 Appendix F: FF FE 3C 00 is UTF-16 little-endian with a byte-order mark.
    sheets = minimal_forest()
    part = sheet_part(sheets, "Trees")
    path = rewrite_parts(forest_file(tmp_path, sheets), {
        part: lambda xml: b"\xff\xfe" + xml.split(b"?>", 1)[-1].decode("utf-8").encode("utf-16-le"),
    })
    assert f"part {part} is XML in UTF-16" in refusal(path)


def test_declared_foreign_encoding_is_refused(tmp_path):
    sheets = minimal_forest()
    path = rewrite_parts(forest_file(tmp_path, sheets), {
        sheet_part(sheets, "Trees"): lambda xml: b'<?xml version="1.0" encoding="cp500"?>' + xml.split(b"?>", 1)[-1],
    })
    assert "encoding cp500" in refusal(path)


def test_row_number_far_beyond_the_sheet_limit_is_not_read(tmp_path):
    # One <row r="999999999"> would otherwise make the reader produce a billion empty rows.
    sheets = minimal_forest()
    far = '<row r="999999999"><c r="A999999999" t="inlineStr"><is><t>P1</t></is></c></row>'.encode()
    path = rewrite_parts(forest_file(tmp_path, sheets), {
        sheet_part(sheets, "Trees"): replace_once(b"</sheetData>", far + b"</sheetData>"),
    })
    raw = read_sheets(path)
    assert [n for n, _ in raw["Trees"].rows] == list(range(2, 10))
    assert MAX_ROWS == 1_048_576


def test_cell_far_to_the_right_does_not_widen_rows(tmp_path):
    sheets = minimal_forest()
    last_cell = b'<c r="G2" t="inlineStr"><is><t>live</t></is></c>'
    path = rewrite_parts(forest_file(tmp_path, sheets), {
        sheet_part(sheets, "Trees"): replace_once(last_cell, last_cell + b'<c r="XFD2"><v>1</v></c>'),
    })
    raw = read_sheets(path)["Trees"]
    assert {len(cells) for _, cells in raw.rows} == {7}
    assert load_workbook(path).ok


# ---------------------------------------------------------------- macros

def test_macros_are_never_run_and_reported(tmp_path):
    path = rewrite_parts(forest_file(tmp_path), {"xl/vbaProject.bin": bytes.fromhex("D0CF11E0A1B11AE1") + bytes(504)},
                         target=tmp_path / "w.xlsm")
    raw = read_sheets(path)
    assert [(f.severity, f.code, f.location) for f in raw.findings] == [("warning", "macros_ignored", "w.xlsm")]
    assert "xl/vbaProject.bin" in raw.findings[0].message
    book = load_workbook(path)
    assert book.ok
    assert book.table("Trees")["dbh_cm"].tolist()[:2] == [20.0, 20.0]


def test_macros_warning_reaches_the_loaded_workbook(tmp_path):
    path = rewrite_parts(forest_file(tmp_path), {"xl/vbaProject.bin": bytes(512)}, target=tmp_path / "w.xlsm")
    assert ("macros_ignored", "w.xlsm") in codes_at(load_workbook(path).findings)


# ---------------------------------------------------------------- formulas

def test_formula_without_stored_result_is_an_error_at_its_cell(tmp_path):
    # openpyxl cannot calculate: it writes <f>20+2</f><v/> (ECMA-376 Part 1: <v> holds the
    # cell's stored value), exactly what a non-calculating program leaves behind.
    sheets = minimal_forest()
    sheets["Trees"][2][4] = "=20+2"
    book = load_workbook(forest_file(tmp_path, sheets))
    at_e3 = [(f.severity, f.code) for f in book.findings if f.location == "Trees!E3"]
    assert at_e3 == [("error", "formula_without_value")]
    assert "paste values" in next(f.message for f in book.findings if f.location == "Trees!E3")
    assert book.table("Trees")["dbh_cm"].isna().tolist()[:3] == [False, True, False]


def test_formula_row_with_nothing_else_is_still_reported(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"].append(["=A2", "=B2", "=C2", "=D2", "=E2", "=F2", "=G2"])  # row 10
    found = codes_at(load_workbook(forest_file(tmp_path, sheets)).findings)
    assert {("formula_without_value", f"Trees!{letter}10") for letter in "ABCDEFG"} <= found


def test_formula_in_a_column_of_ones_own_is_not_an_error(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"] = [row + (["check"] if i == 0 else ["=E2*2"]) for i, row in enumerate(sheets["Trees"])]
    book = load_workbook(forest_file(tmp_path, sheets))
    assert book.ok
    assert ("column_ignored", "Trees!H1") in codes_at(book.findings)


def stored_result(xml: bytes) -> bytes:
    assert b"<f>20+2</f><v />" in xml
    return xml.replace(b"<f>20+2</f><v />", b"<f>20+2</f><v>22</v>")


def calculated(xml: bytes) -> bytes:
    return re.sub(rb'\sfullCalcOnLoad="1"', b"", xml)


def test_formula_with_stored_result_is_read_with_one_note(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][2][4] = "=20+2"
    sheets["Trees"][3][4] = "=20+2"
    path = rewrite_parts(forest_file(tmp_path, sheets),
                         {sheet_part(sheets, "Trees"): stored_result, "xl/workbook.xml": calculated})
    book = load_workbook(path)
    assert book.ok, book.findings
    assert book.table("Trees")["dbh_cm"].tolist()[:3] == [20.0, 22.0, 22.0]
    notes = [(f.severity, f.location) for f in book.findings if f.code == "formula_value_used"]
    assert notes == [("note", "Trees!E3")]
    assert "2 cell(s)" in next(f.message for f in book.findings if f.code == "formula_value_used")


def test_stored_results_of_a_file_asking_for_recalculation_are_flagged(tmp_path):
    # <calcPr fullCalcOnLoad="1"/> (ECMA-376 Part 1, calcPr): the writer asks for a full
    # recalculation on opening, so the stored results may be placeholders.
    sheets = minimal_forest()
    sheets["Trees"][2][4] = "=20+2"
    path = rewrite_parts(forest_file(tmp_path, sheets), {sheet_part(sheets, "Trees"): stored_result})
    book = load_workbook(path)
    assert [(f.severity, f.code, f.location) for f in book.findings if "formula" in f.code] == [
        ("warning", "formula_values_stale", "Trees!E3")]


FORMULA_SHEET = f"""<?xml version="1.0" encoding="UTF-8"?>
<x:worksheet xmlns:x="{MAIN_NS}"><x:sheetData>
<x:row r="1"><x:c r="A1"><x:f>1+1</x:f><x:v>2</x:v></x:c><x:c r="B1" t="str"><x:f>""</x:f><x:v></x:v></x:c>
<x:c r="C1"><x:f t="shared" ref="C1:C3" si="0">A1</x:f></x:c></x:row>
<x:row r="3"><x:c r="C3">
  <x:f t="shared" si="0"/>
  <x:v/>
</x:c><x:c r="D3" s="1"><x:v>5</x:v></x:c><x:c r="E3" t="inlineStr"><x:f>"a"</x:f><x:is><x:t>a</x:t></x:is></x:c></x:row>
</x:sheetData><x:extLst><x:ext uri="u"><xm:f xmlns:xm="urn:m">Other!A1</xm:f></x:ext></x:extLst></x:worksheet>
""".encode()


@pytest.mark.parametrize("chunk_bytes", [7, 64, 1 << 20])
def test_formula_byte_scan_agrees_with_the_xml_parser(chunk_bytes):
    # Reference: a full parse of the same bytes by the XML parser.
    expected = parse_formula_cells(io.BytesIO(FORMULA_SHEET))
    assert expected == (frozenset({(1, 2), (3, 2)}), {0: (1, 1), 1: (1, 1), 4: (3, 1)})
    assert scan_formula_cells(io.BytesIO(FORMULA_SHEET), chunk_bytes=chunk_bytes) == expected


@pytest.mark.parametrize("edit", [
    lambda xml: xml.replace(b' r="C3"', b""),                               # a formula cell without address
    lambda xml: xml.replace(b"<x:f>1+1</x:f>", b"<x:f><![CDATA[1+1]]></x:f>"),  # CDATA
])
def test_formula_byte_scan_hands_odd_shapes_to_the_parser(edit, tmp_path):
    assert scan_formula_cells(io.BytesIO(edit(FORMULA_SHEET))) is None
    path = tmp_path / "w.xlsx"
    sheets = minimal_forest()
    part = sheet_part(sheets, "Trees")
    forest_file(tmp_path, sheets)
    rewrite_parts(path, {part: edit(FORMULA_SHEET)})
    assert reader._formula_cells(path, part) == parse_formula_cells(io.BytesIO(edit(FORMULA_SHEET)))


# ---------------------------------------------------------------- how the sheet is laid out

def test_merged_cells_in_a_contract_column_are_an_error_at_the_top_left(tmp_path):
    path = write_workbook(tmp_path / "w.xlsx", minimal_forest(), lambda book: book["Trees"].merge_cells("E2:F3"))
    findings = load_workbook(path).findings
    merged = [f for f in findings if f.code == "merged_cells"]
    assert [(f.severity, f.location) for f in merged] == [("error", "Trees!E2")]
    assert "dbh_cm, height_m" in merged[0].message


def test_merged_cells_outside_contract_columns_are_left_alone(tmp_path):
    def edit(book):
        book["Trees"]["J2"] = "remark"
        book["Trees"].merge_cells("J2:K5")
        notes = book.create_sheet("Notes")
        notes["A1"] = "=SUM(B1:B3)"
        notes.merge_cells("A1:C1")
    book = load_workbook(write_workbook(tmp_path / "w.xlsx", minimal_forest(), edit))
    assert book.ok
    assert not {f.code for f in book.findings} & {"merged_cells", "formula_without_value"}


def test_hidden_contract_sheet_is_read_with_a_note(tmp_path):
    def edit(book):
        book["Species"].sheet_state = "hidden"
    book = load_workbook(write_workbook(tmp_path / "w.xlsx", minimal_forest(), edit))
    assert book.ok
    assert [(f.severity, f.location) for f in book.findings if f.code == "hidden_sheet"] == [("note", "Species")]
    assert book.table("Species")["species"].tolist() == ["Alpha"]


def test_header_with_inner_spaces_and_case_is_read_with_a_note(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][0][4] = "  DBH   cm "
    book = load_workbook(forest_file(tmp_path, sheets))
    assert book.ok
    assert ("header_normalised", "Trees!E1") in codes_at(book.findings)


def test_misspelt_optional_column_is_ignored_with_a_hint(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][0][5] = "heigth_m"
    findings = load_workbook(forest_file(tmp_path, sheets)).findings
    ignored = next(f for f in findings if f.code == "column_ignored")
    assert (ignored.severity, ignored.location) == ("note", "Trees!F1")
    assert "did you mean height_m?" in ignored.message


def test_blank_rows_between_data_are_skipped_and_rows_keep_their_numbers(tmp_path):
    sheets = minimal_forest()
    trees = sheets["Trees"]
    sheets["Trees"] = trees[:3] + [[None] * 7, ["  ", None, "", None, None, None, None]] + trees[3:]
    book = load_workbook(forest_file(tmp_path, sheets))
    assert book.ok
    assert book.table("Trees")["row"].tolist() == [2, 3, 6, 7, 8, 9, 10, 11]


# ---------------------------------------------------------------- how cells are spelt

def test_numbers_stored_as_text_are_read_with_one_note_per_column(tmp_path):
    # Reference for the parsed values: Python's float() on the same text.
    sheets = minimal_forest()
    texts = {2: "20.5", 3: " 1.25e1 ", 4: "+21"}
    for row, text in texts.items():
        sheets["Trees"][row - 1][4] = text
    book = load_workbook(forest_file(tmp_path, sheets))
    assert book.ok
    assert book.table("Trees")["dbh_cm"].tolist()[:3] == [float(t) for t in texts.values()]
    notes = [f for f in book.findings if f.code == "number_as_text"]
    assert [(f.severity, f.location) for f in notes] == [("note", "Trees!E2")]
    assert "3 cells" in notes[0].message


def test_whole_number_stored_as_text_in_a_project_field(tmp_path):
    sheets = minimal_forest()
    sheets["Project"] = project_rows(monte_carlo_draws="5000")
    book = load_workbook(forest_file(tmp_path, sheets))
    assert book.ok
    assert book.project["monte_carlo_draws"] == 5000
    assert ("number_as_text", "Project!B8") in codes_at(book.findings)


@pytest.mark.parametrize("text", ["12,5", "1,234", "1.234,5", "1,234.5", "-0,5", "1 234,5"])
def test_comma_in_a_number_is_refused_at_the_cell(tmp_path, text):
    sheets = minimal_forest()
    sheets["Trees"][1][4] = text
    findings = load_workbook(forest_file(tmp_path, sheets)).findings
    assert ("decimal_comma", "Trees!E2") in codes_at(findings)
    assert "point as decimal mark" in next(f.message for f in findings if f.code == "decimal_comma")


@pytest.mark.parametrize("text", ["NaN", "inf", "1_000", "\u0661\u0662", "twelve", "1 234", "0x10"])
def test_text_python_might_take_as_a_number_is_refused(tmp_path, text):
    # Python's float() accepts "NaN", "inf", "1_000" and Arabic-Indic digits (reference
    # behaviour, deliberately narrowed here to what a person means by a number).
    sheets = minimal_forest()
    sheets["Trees"][1][4] = text
    assert ("wrong_type", "Trees!E2") in codes_at(load_workbook(forest_file(tmp_path, sheets)).findings)


def test_percent_sign_gets_a_hint(tmp_path):
    sheets = minimal_forest()
    sheets["Risk"][1][1] = "12%"
    findings = load_workbook(forest_file(tmp_path, sheets)).findings
    message = next(f.message for f in findings if f.location == "Risk!B2")
    assert "12.5 means 12.5 %" in message


@pytest.mark.parametrize("text", ["10/01/2024", "2024-1-10", "2024-01-10T00:00", "20240110", "2024-02-30"])
def test_dates_as_text_other_than_iso_are_refused_naming_the_format(tmp_path, text):
    # date.fromisoformat (Python 3.11) accepts "20240110" and times; only YYYY-MM-DD is taken here.
    sheets = minimal_forest()
    sheets["Plots"][1][3] = text
    findings = load_workbook(forest_file(tmp_path, sheets)).findings
    assert ("wrong_type", "Plots!D2") in codes_at(findings)
    assert "YYYY-MM-DD" in next(f.message for f in findings if f.location == "Plots!D2")


def test_date_serial_number_is_refused_with_a_hint(tmp_path):
    sheets = minimal_forest()
    sheets["Plots"][1][3] = 45301
    findings = load_workbook(forest_file(tmp_path, sheets)).findings
    assert "format the cell as a date" in next(f.message for f in findings if f.location == "Plots!D2")


def test_choice_in_another_case_is_read_with_one_note(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][1][6] = "Live"
    sheets["Trees"][2][6] = " LIVE "
    book = load_workbook(forest_file(tmp_path, sheets))
    assert book.ok
    assert book.table("Trees")["status"].tolist()[:2] == ["live", "live"]
    notes = [f for f in book.findings if f.code == "choice_normalised"]
    assert [(f.severity, f.location) for f in notes] == [("note", "Trees!G2")]
    assert "2 cells" in notes[0].message


def test_text_is_trimmed_before_references_are_checked(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][1][0] = " P1 "
    sheets["Trees"][1][3] = "Alpha\u00a0"
    book = load_workbook(forest_file(tmp_path, sheets))
    assert book.ok
    assert book.table("Trees")["plot_id"].iloc[0] == "P1"


@pytest.mark.parametrize("sheet,row,col,cell", [
    ("Trees", 1, 3, "Trees!D2"),   # text column
    ("Trees", 1, 4, "Trees!E2"),   # number column
    ("Trees", 1, 6, "Trees!G2"),   # choice column
    ("Plots", 1, 3, "Plots!D2"),   # date column
])
def test_spreadsheet_error_values_are_refused(tmp_path, sheet, row, col, cell):
    # openpyxl stores "#N/A" as an error cell (t="e"), as a spreadsheet program would.
    sheets = minimal_forest()
    sheets[sheet][row][col] = "#N/A"
    findings = load_workbook(forest_file(tmp_path, sheets)).findings
    assert ("error_value", cell) in codes_at(findings)


def test_whole_number_too_large_for_a_float_is_refused(tmp_path):
    # 2**53 + 1 is the first integer IEEE 754 binary64 cannot represent.
    sheets = minimal_forest()
    sheets["Project"] = project_rows(random_seed=10 ** 30)
    assert ("wrong_type", "Project!B8") in codes_at(load_workbook(forest_file(tmp_path, sheets)).findings)


def test_integer_literal_too_large_for_any_float_is_refused_at_its_cell(tmp_path):
    # A 400-digit number is valid XML and a valid xsd:double lexically, but overflows
    # IEEE 754 binary64 (largest finite value about 1.8e308).
    sheets = minimal_forest()
    path = rewrite_parts(forest_file(tmp_path, sheets), {
        sheet_part(sheets, "Trees"): replace_once(b'<c r="E2" t="n"><v>20</v>', b'<c r="E2" t="n"><v>1' + b"0" * 400 + b"</v>"),
    })
    assert ("wrong_type", "Trees!E2") in codes_at(load_workbook(path).findings)


def test_project_formula_without_stored_result(tmp_path):
    sheets = minimal_forest()
    sheets["Project"][6][1] = "=DATE(2024,12,31)"  # period_end in B7
    findings = load_workbook(forest_file(tmp_path, sheets)).findings
    assert [(f.code, f.severity) for f in findings if f.location == "Project!B7"] == [("formula_without_value", "error")]


def test_every_hostile_cell_is_reported_in_one_pass(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][1][4] = "12,5"
    sheets["Trees"][2][4] = "=1+1"
    sheets["Trees"][3][6] = "#DIV/0!"
    sheets["Plots"][1][3] = "10/01/2024"

    def edit(book):
        book["Species"].sheet_state = "hidden"
        book["Strata"].merge_cells("A2:B2")
    found = codes_at(load_workbook(write_workbook(tmp_path / "w.xlsx", sheets, edit)).findings)
    assert {("decimal_comma", "Trees!E2"), ("formula_without_value", "Trees!E3"),
            ("error_value", "Trees!G4"), ("wrong_type", "Plots!D2"),
            ("hidden_sheet", "Species"), ("merged_cells", "Strata!A2")} <= found


# ---------------------------------------------------------------- outputs

def test_failing_writer_leaves_the_previous_output_and_no_temporary_file(tmp_path):
    target = tmp_path / "results.json"
    target.write_text("previous")
    with pytest.raises(RuntimeError):
        with atomic_path(target) as temporary:
            temporary.write_text("half")
            raise RuntimeError("writer failed")
    assert target.read_text() == "previous"
    assert os.listdir(tmp_path) == ["results.json"]


def test_successful_writer_replaces_the_output(tmp_path):
    target = tmp_path / "out" / "results.json"
    write_text_atomic(target, "new")
    write_text_atomic(target, "newer")
    assert target.read_text() == "newer"
    assert os.listdir(target.parent) == ["results.json"]


def _same_file_spellings(workbook: Path) -> list[Path]:
    hard = workbook.with_name("hard.xlsx")
    os.link(workbook, hard)
    soft = workbook.with_name("soft.xlsx")
    soft.symlink_to(workbook)
    return [workbook, workbook.parent / "." / workbook.name, hard, soft]


def test_output_over_the_input_is_refused(tmp_path):
    workbook = forest_file(tmp_path)
    before = workbook.read_bytes()
    for target in _same_file_spellings(workbook):
        with pytest.raises(OutputRefused):
            write_text_atomic(target, "overwritten", protected=(workbook,))
    assert workbook.read_bytes() == before
    assert sorted(os.listdir(tmp_path)) == ["hard.xlsx", "soft.xlsx", "w.xlsx"]


def test_hostile_reading_leaves_the_input_untouched(tmp_path):
    sheets = minimal_forest()
    path = rewrite_parts(forest_file(tmp_path, sheets), {sheet_part(sheets, "Trees"): laughing_sheet})
    before = path.read_bytes(), path.stat().st_mtime_ns
    load_workbook(path)
    assert (path.read_bytes(), path.stat().st_mtime_ns) == before
