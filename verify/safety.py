"""Refuse hostile or broken files before any XML parser sees them.

An .xlsx/.xlsm workbook is a zip archive of XML parts (ECMA-376 Part 2,
Open Packaging Conventions).  :func:`inspect_archive` reads only the zip
directory and the raw bytes of each part, and refuses, with a message a
user can act on:

- an empty file, a text/CSV file or random bytes renamed to .xlsx;
- a Compound File (OLE2) container: an encrypted (password-protected)
  workbook or a legacy .xls file;
- a damaged or truncated zip, encrypted zip members, compression methods
  spreadsheet programs never write;
- a zip bomb: too many parts, too large once unpacked, or a part whose
  compression ratio is far beyond that of real sheet XML;
- an XML part with a DOCTYPE (the carrier of entity-expansion attacks such
  as "billion laughs"; spreadsheet programs never write one), or in an
  encoding other than UTF-8, which would hide markup from these byte scans.

It also reports, per part, what a byte scan can see cheaply: whether the
part holds formula elements (``<f>``) and which merged ranges it declares
(``<mergeCell ref=...>``), so the reader parses a sheet a second time only
when it holds formulas, and learns merged ranges that read-only parsing
does not expose; whether every cell is addressed in the plain shape
``<c r="A1"...`` within columns A-Z and rows below 1,000,000, which bounds
the rectangle the fast value reader allocates (see :mod:`verify.reader`);
and whether any cell may hold a stored error value (``t="e"``).

Why byte scans are trustworthy here: in XML text content ``<`` is always
escaped, so a ``<`` followed by a name is markup; this holds for every
ASCII-compatible encoding, which is why any other encoding is refused.
Decompression is bounded by the declared sizes checked below: the standard
library stops inflating a member at its declared size (and then fails its
CRC check if the member lied).
"""

from __future__ import annotations

import re
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import IO

# --------------------------------------------------------------- limits
#
# Measured on a 500,000-row Trees sheet (7 columns) written by openpyxl:
# the sheet part is 181 MB unpacked, 15.9 MB packed (11:1); with every row
# identical it is 175 MB at 16:1.  Real sheet XML stays near 10-20:1 because
# every row repeats its own row number and cell references, while a run of
# identical bytes (the stuff of zip bombs) deflates about 1000:1.

# Unpacked size of all parts together.  Five times the 500k-row measurement,
# so about 2.5 million contract rows still pass; beyond this, parsing alone
# would take tens of minutes and gigabytes of memory.
MAX_TOTAL_UNCOMPRESSED_BYTES = 1 << 30  # 1 GiB

# Largest compression ratio accepted for a part that is big enough to matter.
# Ten times the ratio of real sheet XML, a fifth of what deflate reaches on
# repeated bytes.
MAX_MEMBER_RATIO = 200

# Parts smaller than this are not ratio-checked: a small, highly repetitive
# part (an empty sheet full of formatting, a style table) is harmless even
# at 1000:1, and the total limit above bounds them all.
RATIO_CHECKED_ABOVE_BYTES = 8 << 20  # 8 MiB

# A workbook holds a few dozen parts (sheets, styles, relationships, a few
# images).  Ten thousand is far beyond any real one; a zip directory with
# millions of entries is itself a memory attack.
MAX_MEMBERS = 10_000

# Bytes read at a time when scanning a part.
SCAN_CHUNK_BYTES = 1 << 20
# A tag longer than this is not kept whole across chunk boundaries; real
# tags are a few dozen bytes.
MAX_TAG_BYTES = 1 << 16

# Compound File Binary header signature ([MS-CFB] §2.2): the container of
# password-protected OOXML workbooks and of legacy .xls files.
OLE2_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"
ZIP_MAGICS = (b"PK\x03\x04", b"PK\x05\x06")  # a local file header, an empty archive

# Compression methods spreadsheet programs write (APPNOTE 4.4.5: 0 stored,
# 8 deflated).  Others (bzip2, lzma) inflate in one unbounded call.
ALLOWED_COMPRESSION = frozenset({zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED})

# Parts that hold macros: VBA projects and the older macro sheets.  They are
# never run; their presence is reported.
MACRO_PART = re.compile(r"(^|/)vbaProject\.bin$|^xl/macrosheets/|^xl/dialogsheets/", re.IGNORECASE)

# XML 1.0 (Fifth Edition) Appendix F: byte signatures of encodings that are
# not ASCII-compatible (UCS-4, UTF-16 with and without byte-order mark, EBCDIC).
# Each is followed by "<", so a binary part (an image) is not mistaken for XML.
_NON_ASCII_XML_STARTS = (
    b"\x00\x00\xfe\xff\x00\x00\x00\x3c", b"\xff\xfe\x00\x00\x3c\x00\x00\x00",
    b"\x00\x00\x00\x3c", b"\x3c\x00\x00\x00",
    b"\xfe\xff\x00\x3c", b"\xff\xfe\x3c\x00", b"\x00\x3c\x00\x3f", b"\x3c\x00\x3f\x00",
    b"\x4c\x6f\xa7\x94",
)
_XML_DECLARATION = re.compile(rb"<\?xml[^>]*?encoding\s*=\s*[\"']([A-Za-z0-9._-]+)[\"']")
_SAFE_ENCODINGS = frozenset({"utf-8", "utf8", "us-ascii", "ascii"})

# A formula element tag, with or without a namespace prefix: <f>, <f t="shared" .../>, <x:f>
# (and </x:f>, which only follows a start tag).
# The literal "f" first lets the regex engine skip quickly; the look-behind checks the markup.
FORMULA_TAG = re.compile(rb"f(?<=[<:]f)[\s/>]")
_MERGE_TAG = re.compile(rb"mergeCell(?<=[<:]mergeCell)\s[^>]*?\bref\s*=\s*[\"']([^\"']*)[\"']")
_DOCTYPE = b"<!DOCTYPE"
# A cell start tag that is not in the plain shape <c r="A1"...: no address, another attribute
# first, a column beyond Z or a row of seven digits or more.  A cell tag with a namespace prefix
# (<x:c ...>) is caught by the second pattern (so is the text ":c ", which only costs speed).
_UNPLAIN_CELL = re.compile(rb'<c(?![\w.:-])(?! r="[A-Z][0-9]{1,6}")')
_PREFIXED_CELL = re.compile(rb":c[\s/>]")
# A cell typed as a stored error value (ECMA-376 Part 1, ST_CellType "e").
_ERROR_TYPE = re.compile(rb"\st\s*=\s*[\"']e[\"']")
# The workbook part's <calcPr fullCalcOnLoad="1"/>: its writer asks for a full recalculation on
# opening, i.e. the stored formula results are not to be trusted (libraries that cannot
# calculate write this, with placeholder results such as 0).
_FULL_CALC_ON_LOAD = re.compile(rb"\sfullCalcOnLoad\s*=\s*[\"'](?:1|true)[\"']")


class UnreadableWorkbook(Exception):
    """The file is not a workbook this tool can open; the message says why and what to do."""


class UnsafePart(Exception):
    """A part's bytes show something no spreadsheet program writes; the message says what."""


@dataclass(frozen=True)
class PartScan:
    """What a byte scan saw in one XML part."""

    has_formulas: bool
    merged: tuple[str, ...]  # merged ranges as written, e.g. ("A1:B2",)
    asks_recalculation: bool = False
    plain_cells: bool = True  # every cell tag is <c r="A1"..., column A-Z, row below 1,000,000
    has_error_cells: bool = False  # some cell may be typed t="e" (a stored error value)


@dataclass(frozen=True)
class ArchiveScan:
    """The parts of a workbook that passed the checks, and its macro parts."""

    parts: dict[str, PartScan]
    macro_parts: tuple[str, ...]

    @property
    def formula_results_stale(self) -> bool:
        """The workbook asks to be recalculated on opening: stored formula results may be placeholders."""
        return any(part.asks_recalculation for part in self.parts.values())


def inspect_archive(path: Path) -> ArchiveScan:
    """Check ``path`` as an untrusted workbook; raise :class:`UnreadableWorkbook` to refuse it."""
    path = Path(path)
    try:
        with open(path, "rb") as handle:
            head = handle.read(512)
    except OSError as exc:
        raise UnreadableWorkbook(f"cannot read {path.name}: {exc.strerror or exc}") from exc
    _refuse_non_zip(path.name, head)
    try:
        with zipfile.ZipFile(path) as archive:
            infos = archive.infolist()
            _check_directory(path.name, infos)
            parts = {info.filename: _scan_member(path.name, archive, info) for info in infos}
    except (zipfile.BadZipFile, zipfile.LargeZipFile, EOFError, OSError, ValueError,
            NotImplementedError) as exc:
        raise UnreadableWorkbook(
            f"{path.name} is damaged or incomplete (a truncated download or copy?): {exc}. "
            "Get the file again, or open and save it in a spreadsheet program"
        ) from exc
    macros = tuple(name for name in parts if MACRO_PART.search(name))
    return ArchiveScan(parts, macros)


def _refuse_non_zip(name: str, head: bytes) -> None:
    if not head:
        raise UnreadableWorkbook(f"{name} is empty (0 bytes)")
    if head.startswith(OLE2_MAGIC):
        raise UnreadableWorkbook(
            f"{name} is an encrypted (password-protected) workbook or a legacy .xls file, "
            "not an .xlsx workbook; remove the password, or save it as .xlsx, and check it again"
        )
    if not head.startswith(ZIP_MAGICS):
        kind = "a text file, perhaps CSV," if _looks_like_text(head) else "not a zip archive"
        raise UnreadableWorkbook(
            f"{name} is not an .xlsx workbook ({kind} with an .xlsx name); "
            "open it in a spreadsheet program and save it as .xlsx"
        )


def _looks_like_text(head: bytes) -> bool:
    text = head.decode("utf-8", "ignore")
    return bool(text) and all(c.isprintable() or c in "\r\n\t" for c in text)


def _check_directory(name: str, infos: list[zipfile.ZipInfo]) -> None:
    if len(infos) > MAX_MEMBERS:
        raise UnreadableWorkbook(
            f"{name} is refused: it holds {len(infos):,} parts, more than the limit of "
            f"{MAX_MEMBERS:,} (a workbook holds a few dozen)"
        )
    total = sum(info.file_size for info in infos)
    if total > MAX_TOTAL_UNCOMPRESSED_BYTES:
        raise UnreadableWorkbook(
            f"{name} is refused: it would unpack to {_size(total)}, more than the limit of "
            f"{_size(MAX_TOTAL_UNCOMPRESSED_BYTES)} (a zip bomb, or far larger than a monitoring workbook)"
        )
    for info in infos:
        if info.flag_bits & 0x1:
            raise UnreadableWorkbook(
                f"{name} is refused: part {info.filename} is zip-encrypted, which spreadsheet "
                "programs never write; save the workbook again without encryption"
            )
        if info.compress_type not in ALLOWED_COMPRESSION:
            raise UnreadableWorkbook(
                f"{name} is refused: part {info.filename} uses zip compression method "
                f"{info.compress_type}, which spreadsheet programs never write"
            )
        ratio = info.file_size / max(info.compress_size, 1)
        if info.file_size > RATIO_CHECKED_ABOVE_BYTES and ratio > MAX_MEMBER_RATIO:
            raise UnreadableWorkbook(
                f"{name} is refused: part {info.filename} would expand {ratio:,.0f}:1 to "
                f"{_size(info.file_size)}; the limit is {MAX_MEMBER_RATIO}:1 (real sheet data "
                "stays near 10-20:1), so this looks like a zip bomb"
            )


def _size(n_bytes: int) -> str:
    for unit, scale in (("GiB", 1 << 30), ("MiB", 1 << 20), ("KiB", 1 << 10)):
        if n_bytes >= scale:
            return f"{n_bytes / scale:,.1f} {unit}"
    return f"{n_bytes} bytes"


def _scan_member(name: str, archive: zipfile.ZipFile, info: zipfile.ZipInfo) -> PartScan:
    with archive.open(info) as stream:
        try:
            return scan_part(stream)
        except UnsafePart as exc:
            raise UnreadableWorkbook(f"{name} is refused: part {info.filename} {exc}") from exc


def scan_part(stream: IO[bytes], chunk_bytes: int = SCAN_CHUNK_BYTES) -> PartScan:
    """Formula elements and merged ranges of one part, read as bytes in chunks.

    Raises :class:`UnsafePart` for a DOCTYPE or an XML encoding that is not
    ASCII-compatible.  A tag cut by a chunk boundary is completed with the
    next chunk: the tail from the last ``<`` is carried over.
    """
    has_formulas = asks_recalculation = has_error_cells = False
    plain_cells = True
    merged: dict[str, None] = {}  # ordered set: a range seen twice across a boundary counts once
    carry = b""
    first = True
    while chunk := stream.read(chunk_bytes):
        if first:
            _check_encoding(chunk)
            first = False
        buffer = carry + chunk
        if _DOCTYPE in buffer:
            raise UnsafePart(
                "contains a DOCTYPE declaration, which spreadsheet programs never write and "
                "which can carry an XML entity-expansion attack"
            )
        if not has_formulas and FORMULA_TAG.search(buffer):
            has_formulas = True
        if not asks_recalculation and b"fullCalcOnLoad" in buffer and _FULL_CALC_ON_LOAD.search(buffer):
            asks_recalculation = True
        if b"mergeCell" in buffer:
            merged.update(dict.fromkeys(m.decode("ascii", "replace") for m in _MERGE_TAG.findall(buffer)))
        if not has_error_cells and (b'"e"' in buffer or b"'e'" in buffer) and _ERROR_TYPE.search(buffer):
            has_error_cells = True
        last_tag = buffer.rfind(b"<", max(0, len(buffer) - MAX_TAG_BYTES))
        # Tags before the last "<" are complete; the last one is seen whole with the next chunk.
        complete = last_tag if last_tag >= 0 else len(buffer)
        if plain_cells and (_UNPLAIN_CELL.search(buffer, 0, complete) or _PREFIXED_CELL.search(buffer)):
            plain_cells = False
        carry = buffer[last_tag:] if last_tag >= 0 else buffer[-len(_DOCTYPE):]
    return PartScan(has_formulas, tuple(merged), asks_recalculation, plain_cells, has_error_cells)


def _check_encoding(start: bytes) -> None:
    if start.startswith(_NON_ASCII_XML_STARTS):
        raise UnsafePart("is XML in UTF-16, UTF-32 or EBCDIC; spreadsheet programs write UTF-8")
    declaration = _XML_DECLARATION.match(start.removeprefix(b"\xef\xbb\xbf").lstrip())
    if declaration and declaration.group(1).decode("ascii").lower() not in _SAFE_ENCODINGS:
        raise UnsafePart(
            f"is XML in encoding {declaration.group(1).decode('ascii')}; spreadsheet programs write UTF-8"
        )
