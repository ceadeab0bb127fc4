"""Raw reading of a workbook: stored cell values and their addresses, nothing more.

The file is first checked as untrusted (:mod:`verify.safety`: zip bombs,
encrypted or legacy files, DOCTYPEs...), then read with stored values
only: a formula is never evaluated, a macro never run, the input never
written.

Two readers give the same values.  Sheets whose cells the safety scan saw
in the plain shape (every cell addressed, within columns A-Z and rows below
1,000,000) and without stored error values are read by python-calamine, a
compiled reader (about 30x faster than openpyxl on a 100,000-row sheet);
it allocates the rectangle from A1 to the last non-empty cell, which that
shape bounds (at most 26 x 999,999 cells).  Any
other sheet (a crafted far address, cells without addresses, helper columns
beyond Z, error cells, which calamine reads as blanks) is read by openpyxl in
read-only mode, which parses XML through defusedxml (it refuses entity
declarations; reading refuses to start without it).  The sheet list, order
and visibility come from openpyxl's parse of the workbook part either way.
calamine's parse runs on a worker thread (:class:`BackgroundRead`), so that
the caller's imports overlap it; everything else runs in the caller's thread.
calamine reads a date cell as ``datetime.date`` where openpyxl gives a
``datetime.datetime`` at midnight, and whole numbers as floats; validation
reads both alike.

Besides values, each sheet carries what the validation needs to report
silent losses: whether it is hidden, its merged ranges, and its formula
cells, split into those with a stored result (used) and those without one
(a program that does not calculate saved the file; reading them would give
blanks).  Formula cells are looked for only in sheets whose bytes contain
a formula element, by a byte scan that visits formulas, not cells; a
formula of unusual shape hands the sheet to a full XML parse instead.

Bounds that keep a hostile sheet from exhausting time or memory:
rows past :data:`MAX_ROWS` and columns right of the header (at most
:data:`MAX_COLUMNS`) are not read.
"""

from __future__ import annotations

import gc
import hashlib
import importlib.util
import itertools
import operator
import re
import threading
import warnings
import zipfile
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO, Any, Callable, Iterator, Sequence, TypeVar

from .findings import Finding
from .safety import FORMULA_TAG, ArchiveScan, PartScan, UnreadableWorkbook, inspect_archive

__all__ = ["MAX_COLUMNS", "MAX_ROWS", "BackgroundRead", "RawBook", "RawSheet", "UnreadableWorkbook",
           "cyclic_gc_paused", "parse_formula_cells", "read_sheets", "scan_formula_cells", "sha256_of"]

# The largest sheet spreadsheet programs write has 1,048,576 rows (common
# practice, no source).  A row number beyond it can only come from a crafted
# file, where a single <row r="999999999"> would otherwise make the reader
# produce a billion empty rows.
MAX_ROWS = 1_048_576

# Contract sheets have at most a dozen columns.  Rows are read only as wide
# as the header (capped here), so a crafted cell at column 16384 in every
# row cannot blow each row up to 16384 values; a header beyond column 256
# is not a contract header.
MAX_COLUMNS = 256

# A key/value sheet whose first row already holds a field has no header to
# take the width from; its field and value columns are always read.
MIN_COLUMNS = 2

_MAIN_NS = "{http://schemas.openxmlformats.org/spreadsheetml/2006/main}"
_SHEET_DATA, _ROW, _CELL = f"{_MAIN_NS}sheetData", f"{_MAIN_NS}row", f"{_MAIN_NS}c"
_FORMULA, _VALUE = f"{_MAIN_NS}f", f"{_MAIN_NS}v"


# (row, index) of formulas without a stored result; per column index, (first row, count) of those with one.
FormulaCells = tuple[frozenset[tuple[int, int]], dict[int, tuple[int, int]]]
# A sheet's header, the row number of each data row, and its cells column by column.
SheetValues = tuple[tuple[Any, ...], tuple[int, ...], tuple[tuple[Any, ...], ...]]


@dataclass(frozen=True)
class RawSheet:
    """A sheet's header row and its non-blank data rows, held column by column.

    ``columns[index]`` holds the cells under header position ``index``
    (0-based, as in ``header``), one per data row; ``numbers`` holds each data
    row's worksheet row number.  Every column is as long as ``numbers``, and
    there are as many columns as the header is wide (at least
    :data:`MIN_COLUMNS`).  Validation types one column at a time, so the
    reader hands the cells over that way.
    """

    name: str
    header: tuple[Any, ...]
    numbers: Sequence[int] = ()
    columns: tuple[Sequence[Any], ...] = ()
    hidden: bool = False
    merged: tuple[str, ...] = ()  # merged ranges of more than one cell, e.g. "E5:E7"
    formula_blanks: frozenset[tuple[int, int]] = frozenset()  # (row, index) of formulas without a stored result
    formula_values: dict[int, tuple[int, int]] = field(default_factory=dict)  # index -> (first row, count) with one
    formula_results_stale: bool = False  # the workbook asks to be recalculated on opening

    def column(self, index: int) -> Sequence[Any]:
        """The cells under header position ``index`` (all None beyond the columns read)."""
        return self.columns[index] if index < len(self.columns) else (None,) * len(self.numbers)

    @property
    def rows(self) -> list[tuple[int, tuple[Any, ...]]]:
        """(row number, cells) of each data row."""
        return list(zip(self.numbers, zip(*self.columns))) if self.columns else [(n, ()) for n in self.numbers]


class RawBook(dict[str, RawSheet]):
    """The sheets by name, and findings about the file as a whole (such as macros_ignored)."""

    def __init__(self, sheets: dict[str, RawSheet], findings: list[Finding]) -> None:
        super().__init__(sheets)
        self.findings = findings


def sha256_of(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _is_blank(value: Any) -> bool:
    return value is None or (isinstance(value, str) and not value.strip())


def read_sheets(path: Path) -> RawBook:
    """Every sheet of the workbook, blank rows dropped, row numbers kept.

    Raises :class:`UnreadableWorkbook` when the file cannot be read at all;
    everything else is left to validation.
    """
    return BackgroundRead(path).result()


_gc_pauses = 0
_gc_was_enabled = False
_gc_lock = threading.Lock()


@contextmanager
def cyclic_gc_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector (reference counting still frees memory).

    Reading and validating build millions of lists and tuples and no reference cycles; the
    collector would walk all of them again at every generation threshold (measured: it triples
    the time of calamine's conversion to Python values on a 500,000-row sheet).  Pauses nest and
    may overlap across threads (a :class:`BackgroundRead` and the caller): the collector is
    restored when the last one ends."""
    global _gc_pauses, _gc_was_enabled
    with _gc_lock:
        if _gc_pauses == 0:
            _gc_was_enabled = gc.isenabled()
            gc.disable()
        _gc_pauses += 1
    try:
        yield
    finally:
        with _gc_lock:
            _gc_pauses -= 1
            if _gc_pauses == 0 and _gc_was_enabled:
                gc.enable()


class BackgroundRead:
    """A workbook read with its largest step, calamine's parse, on a worker thread.

    The constructor does, in the caller's thread, what must come first and
    holds the interpreter lock anyway: the hash and the safety scan of every
    part.  It then starts the worker, which parses the plain sheets with
    calamine, and lists the sheets with openpyxl meanwhile (or first, when
    some part is not plain, to learn which sheets those are).  calamine does
    not hold the interpreter lock while it parses, so a caller that goes on
    to import the calculation libraries (pandas, scipy: about a second) has
    them loaded by the time the sheets are (see README, Performance).
    :meth:`result` waits, reads any other sheet with openpyxl in the
    caller's thread, and returns what :func:`read_sheets` returns, or raises
    what it raises.

    Only the caller's thread touches the warnings filters (openpyxl's
    warnings are silenced while it reads): they are process-wide.
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self.sha256 = ""  # of the file as read ("" when it cannot be read)
        self._failure: UnreadableWorkbook | None = None
        self._parsed: dict[str, SheetValues] = {}
        self._worker_failure: Exception | None = None
        self._worker: threading.Thread | None = None
        try:
            self.sha256 = sha256_of(self.path)
        except OSError:
            pass  # the scan says why the file cannot be read
        try:
            self._scan = _inspect(self.path)
            if self._scan.parts and all(map(_calamine_reads, self._scan.parts.values())):
                # No part would send a sheet to openpyxl: the parse of every worksheet starts
                # now, and openpyxl lists the sheets (titles, visibility, parts) meanwhile.
                self._start_worker(None)
                self._entries = _guarded(self.path, _sheet_entries)
            else:
                self._entries = _guarded(self.path, _sheet_entries)
                fast = [title for title, _, part in self._entries if _calamine_reads(self._scan.parts.get(part))]
                if fast:
                    self._start_worker(fast)
        except UnreadableWorkbook as exc:
            self._failure = exc

    def _start_worker(self, titles: list[str] | None) -> None:
        # A daemon thread: a caller that stops early is not held until the parse ends.
        self._worker = threading.Thread(target=self._parse, args=(titles,), name="verify-read", daemon=True)
        self._worker.start()

    def _parse(self, titles: list[str] | None) -> None:
        """Parse the sheets named (every worksheet when None) into :attr:`_parsed`."""
        import python_calamine

        try:
            with cyclic_gc_paused():
                book = python_calamine.CalamineWorkbook.from_path(str(self.path))
                try:
                    if titles is None:
                        titles = [sheet.name for sheet in book.sheets_metadata
                                  if sheet.typ == python_calamine.SheetTypeEnum.WorkSheet]
                    for title in titles:
                        grid = book.get_sheet_by_name(title).to_python(skip_empty_area=False)
                        self._parsed[title] = _calamine_values(grid)
                        del grid  # freed before the next sheet's parse, not after it
                finally:
                    book.close()
        except Exception as exc:  # handed to the caller's thread by result()
            self._worker_failure = exc

    def result(self) -> RawBook:
        """The sheets, as :func:`read_sheets` gives them; raises :class:`UnreadableWorkbook`."""
        if self._worker is not None:
            self._worker.join()
        if self._failure is not None:
            raise self._failure
        if self._worker_failure is not None:
            raise UnreadableWorkbook(_open_failure(self.path.name, self._worker_failure)) from self._worker_failure
        with cyclic_gc_paused():
            sheets = _guarded(self.path, self._sheets)
        return RawBook(sheets, _macro_findings(self.path, self._scan))

    def _sheets(self, path: Path) -> dict[str, RawSheet]:
        import openpyxl

        sheets: dict[str, RawSheet] = {}
        slow_book = None
        try:
            for title, state, part_name in self._entries:
                part = self._scan.parts.get(part_name)
                if title in self._parsed:
                    header, numbers, columns = self._parsed[title]
                else:
                    if slow_book is None:
                        slow_book = openpyxl.load_workbook(path, read_only=True, data_only=True, keep_links=False)
                    header, numbers, columns = _openpyxl_values(slow_book[title])
                blanks, values = _formula_cells(path, part_name) if part and part.has_formulas else (frozenset(), {})
                sheets[title] = RawSheet(title, header, numbers, columns, hidden=state != "visible",
                                         merged=_merged_ranges(part) if part else (), formula_blanks=blanks,
                                         formula_values=values,
                                         formula_results_stale=self._scan.formula_results_stale)
        finally:
            if slow_book is not None:
                slow_book.close()
        return sheets


def _inspect(path: Path) -> ArchiveScan:
    if importlib.util.find_spec("defusedxml") is None:  # openpyxl parses through it when it is there
        raise UnreadableWorkbook("defusedxml is not installed, so untrusted XML cannot be parsed safely; "
                                 "install the package's dependencies")
    return inspect_archive(path)


T = TypeVar("T")


def _guarded(path: Path, step: Callable[[Path], T]) -> T:
    """``step(path)`` with openpyxl's warnings silenced and any failure as :class:`UnreadableWorkbook`.

    The readers' failures on malformed parts are open-ended (ParseError,
    KeyError, ValueError, TypeError, zlib.error, defusedxml's refusals...);
    a stranger's file must give a finding, never a traceback.
    """
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return step(path)
    except Exception as exc:
        raise UnreadableWorkbook(_open_failure(path.name, exc)) from exc


def _calamine_reads(part: PartScan | None) -> bool:
    """Whether calamine may read the sheet in this part (see the module docstring)."""
    return part is not None and part.plain_cells and not part.has_error_cells


def _sheet_entries(path: Path) -> list[tuple[str, str, str]]:
    """(title, state, part name) of each worksheet, in workbook order, as openpyxl lists them."""
    from openpyxl.reader.excel import ExcelReader

    excel = ExcelReader(path, read_only=True, data_only=True, keep_links=False)
    try:
        excel.read_manifest()
        excel.read_workbook()
        return [(sheet.name, sheet.state or "visible", rel.target) for sheet, rel in excel.parser.find_sheets()
                if rel.target in excel.valid_files and "chartsheet" not in rel.Type]
    finally:
        excel.archive.close()


def _open_failure(name: str, exc: Exception) -> str:
    from defusedxml import DefusedXmlException

    cause = exc.__cause__ if isinstance(exc.__cause__, Exception) else exc  # openpyxl wraps parse errors
    if isinstance(cause, DefusedXmlException):
        return (f"{name} is refused: its XML declares entities or external references, which "
                "spreadsheet programs never write and which can carry an entity-expansion attack")
    detail = (str(cause).strip().splitlines() or [""])[0][:200]
    return f"cannot open {name} as an .xlsx workbook ({type(cause).__name__}: {detail})"


def _macro_findings(path: Path, scan: ArchiveScan) -> list[Finding]:
    if not scan.macro_parts:
        return []
    return [Finding("warning", "macros_ignored", path.name,
                    f"the workbook contains macros ({', '.join(scan.macro_parts)}); they were not run "
                    "and only the stored cell values were read")]


def _calamine_values(grid: list[list[Any]]) -> SheetValues:
    """Header, row numbers and columns of a calamine grid (list index + 1 is the row number, A1 first).

    calamine gives an empty cell as ""; it becomes None, as openpyxl reads it.
    The grid is turned into columns by C-level passes (zip), not cell by cell.
    """
    header = _trim_header(tuple(None if v == "" else v for v in grid[0][:MAX_COLUMNS]) if grid else ())
    width = max(len(header), MIN_COLUMNS)
    body = grid[1:MAX_ROWS]
    if len(set(map(len, body))) > 1:  # calamine's rows are all as wide; this keeps zip from cutting any
        longest = max(map(len, body))
        body = [cells + [""] * (longest - len(cells)) for cells in body]
    columns = [_empty_as_none(column) for column in itertools.islice(zip(*body), width)]
    columns += [(None,) * len(body)] * (width - len(columns))
    return (header, *_without_blank_rows(tuple(range(2, len(body) + 2)), columns))


def _empty_as_none(column: tuple[Any, ...]) -> tuple[Any, ...]:
    return tuple(None if v == "" else v for v in column) if "" in column else column


def _without_blank_rows(numbers: tuple[int, ...], columns: list[tuple[Any, ...]]
                        ) -> tuple[tuple[int, ...], tuple[tuple[Any, ...], ...]]:
    """Drop the rows whose every cell is blank (None or spaces)."""
    blank: list[bool] | None = None
    for column in columns:
        flags = _blank_flags(column)
        if flags is None:  # a column without blanks: no row is blank
            return numbers, tuple(columns)
        blank = flags if blank is None else list(map(operator.and_, blank, flags))
    keep = [i for i, flag in enumerate(blank or ()) if not flag]
    if len(keep) == len(numbers):
        return numbers, tuple(columns)
    return _take(numbers, keep), tuple(_take(column, keep) for column in columns)


def _blank_flags(column: tuple[Any, ...]) -> list[bool] | None:
    """Whether each cell is blank, or None when none is (one C-level set build decides that)."""
    blank_texts = {v for v in set(column) if type(v) is str and not v.strip()}
    if not blank_texts and None not in column:
        return None
    return [v is None or (type(v) is str and v in blank_texts) for v in column]


def _take(values: tuple[Any, ...], keep: list[int]) -> tuple[Any, ...]:
    return tuple(values[i] for i in keep)


def _openpyxl_values(ws: Any) -> SheetValues:
    # Some writers store a wrong sheet dimension; without this, read-only mode
    # would silently stop at the declared last row.
    ws.reset_dimensions()
    header = _header(ws)
    width = max(len(header), MIN_COLUMNS)
    numbered = [
        (number, values)
        for number, values in enumerate(
            ws.iter_rows(min_row=2, max_row=MAX_ROWS, max_col=width, values_only=True), start=2)
        # count() first: an empty row is dropped without a Python call per cell
        if values.count(None) != width and not all(_is_blank(v) for v in values)
    ]
    numbers = tuple(number for number, _ in numbered)
    # read-only rows are as wide as max_col, padded with None
    columns = tuple(zip(*(values for _, values in numbered))) or ((),) * width
    return header, numbers, columns


def _header(ws: Any) -> tuple[Any, ...]:
    first_rows = ws.iter_rows(min_row=1, max_row=1, max_col=MAX_COLUMNS, values_only=True)
    try:
        header = next(first_rows, ())
    finally:
        first_rows.close()
    return _trim_header(header)


def _trim_header(header: tuple[Any, ...]) -> tuple[Any, ...]:
    last = max((i for i, v in enumerate(header) if not _is_blank(v)), default=-1)
    return tuple(header[:last + 1])


def _merged_ranges(part: PartScan) -> tuple[str, ...]:
    from openpyxl.utils.cell import range_boundaries

    ranges = []
    for ref in part.merged:
        try:
            min_col, min_row, max_col, max_row = range_boundaries(ref)
        except (ValueError, TypeError):
            continue  # not a range; openpyxl's own parse of the part decides on such a file
        if (min_col, min_row) != (max_col, max_row):
            ranges.append(ref)
    return tuple(ranges)


def _formula_cells(path: Path, part_name: str) -> FormulaCells:
    with zipfile.ZipFile(path) as archive:
        with archive.open(part_name) as stream:
            found = scan_formula_cells(stream)
        if found is None:
            with archive.open(part_name) as stream:
                found = parse_formula_cells(stream)
    return found


def _has_stored_result(value_text: str | bytes | None, cell_type: str | bytes | None) -> bool:
    """A formula's result is stored when ``<v>`` holds text, or when the cell is typed
    as text (``str``, ``inlineStr``): an empty string is then a real result."""
    return bool(value_text) or cell_type in ("str", "inlineStr", b"str", b"inlineStr")


class _Formulas:
    """Formula cells as they are found: positions without a result, per-column counts with one."""

    def __init__(self) -> None:
        self.blanks: set[tuple[int, int]] = set()
        self.values: dict[int, tuple[int, int]] = {}

    def add(self, row: int, column: int, stored: bool) -> None:
        if row > MAX_ROWS:
            return
        if stored:
            first, count = self.values.get(column - 1, (row, 0))
            self.values[column - 1] = (first, count + 1)
        else:
            self.blanks.add((row, column - 1))

    def result(self) -> FormulaCells:
        return frozenset(self.blanks), self.values


def parse_formula_cells(stream: IO[bytes]) -> FormulaCells:
    """Formula cells of a sheet part by a full XML parse (the reference for :func:`scan_formula_cells`).

    Returns (row, index) of formulas without a stored result, and per column
    index the first row and count of those with one.  Cell positions follow
    openpyxl's rules, including cells without ``r``.
    """
    from defusedxml.ElementTree import iterparse
    from openpyxl.utils.cell import coordinate_to_tuple

    found = _Formulas()
    row = column = 0
    sheet_data = None
    for event, element in iterparse(stream, events=("start", "end")):
        tag = element.tag
        if event == "start":
            if tag == _ROW:
                row, column = _row_number(element.get("r"), row), 0
            elif tag == _SHEET_DATA:
                sheet_data = element
            continue
        if tag == _CELL:
            ref = element.get("r")
            if ref:
                cell_row, column = coordinate_to_tuple(ref)
            else:
                cell_row, column = row, column + 1
            if element.find(_FORMULA) is not None:
                found.add(cell_row, column, _has_stored_result(element.findtext(_VALUE), element.get("t")))
        elif tag == _ROW and sheet_data is not None:
            sheet_data.clear()  # rows done with; keeps memory flat on long sheets
    return found.result()


# The byte scan below reads formula cells without parsing every cell: in
# SpreadsheetML a formula <f> is the first child of its cell <c> (then <v>,
# the stored result), and in sheetData an <f> occurs only there.  Each
# formula tag is walked back to its cell tag and forward over <f> and <v>;
# any formula that does not fit this shape (a CDATA section, a comment, a
# cell without its "r" address) sends the whole part to the XML parser.
_NAME = rb"(?:[A-Za-z_][\w.-]*:)?"
_CELL_TAG = re.compile(rb"<" + _NAME + rb"c(\s[^>]*)?(?<!/)>\s*")
_FORMULA_ELEMENT = re.compile(rb"<" + _NAME + rb"f(?:\s[^>]*?)?(?:/>|>[^<]*</" + _NAME + rb"f>)\s*")
_VALUE_ELEMENT = re.compile(rb"<" + _NAME + rb"v(?:\s[^>]*?)?(?:/>|>([^<]*)</" + _NAME + rb"v>)")
_ADDRESS = re.compile(rb"\sr\s*=\s*[\"']([A-Z]{1,3})([0-9]+)[\"']")
_CELL_TYPE = re.compile(rb"\st\s*=\s*[\"']([A-Za-z]+)[\"']")
_END_TAG_NAME = re.compile(_NAME)
# A row longer than this is not carried whole between chunks; the XML parser takes over.
_MAX_CARRY_BYTES = 64 << 20


def scan_formula_cells(stream: IO[bytes], chunk_bytes: int = 1 << 20) -> FormulaCells | None:
    """Formula cells of a sheet part from its bytes, or None when the XML parser must decide.

    Same result as :func:`parse_formula_cells`, at the cost of a byte scan
    plus a few regex steps per formula instead of a parse of every cell.
    """
    from openpyxl.utils.cell import column_index_from_string

    found = _Formulas()
    carry = b""
    while True:
        chunk = stream.read(chunk_bytes)
        buffer = carry + chunk
        end = _end_tag(buffer, b"sheetData", last=False)
        if end >= 0 or not chunk:
            region, carry = (buffer[:end] if end >= 0 else buffer), b""
        else:
            cut = _end_tag(buffer, b"row", last=True)
            if cut < 0:
                if len(buffer) > _MAX_CARRY_BYTES:
                    return None
                carry = buffer
                continue
            region, carry = buffer[:cut], buffer[cut:]
        for match in FORMULA_TAG.finditer(region):
            formula_start = region.rfind(b"<", 0, match.start())
            if region[formula_start + 1:formula_start + 2] == b"/":
                continue  # </x:f>, the end of a prefixed formula already taken
            cell_start = region.rfind(b"<", 0, formula_start)
            cell = _CELL_TAG.fullmatch(region, cell_start, formula_start) if cell_start >= 0 else None
            formula = _FORMULA_ELEMENT.match(region, formula_start)
            address = _ADDRESS.search(cell.group(1) or b"") if cell else None
            if not (cell and formula and address):
                return None
            value = _VALUE_ELEMENT.match(region, formula.end())
            cell_type = _CELL_TYPE.search(cell.group(1))
            found.add(int(address.group(2)), column_index_from_string(address.group(1).decode("ascii")),
                      _has_stored_result(value and value.group(1), cell_type and cell_type.group(1)))
        if end >= 0 or not chunk:
            return found.result()


def _end_tag(buffer: bytes, local: bytes, last: bool) -> int:
    """Position just after the first (or last) end tag ``</local>`` (any prefix) in ``buffer``, or -1."""
    needle = local + b">"
    position = buffer.rfind(needle) if last else buffer.find(needle)
    while position >= 0:
        opening = buffer.rfind(b"<", 0, position)
        if opening >= 0 and buffer[opening + 1:opening + 2] == b"/" and \
                _END_TAG_NAME.fullmatch(buffer, opening + 2, position):
            return position + len(needle)
        position = buffer.rfind(needle, 0, position) if last else buffer.find(needle, position + 1)
    return -1


def _row_number(text: str | None, previous: int) -> int:
    if text is None:
        return previous + 1
    number = float(text)
    if not number.is_integer():
        raise ValueError(f"{text} is not a valid row number")
    return int(number)
