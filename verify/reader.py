"""Raw reading of a workbook: cached cell values and their addresses, nothing more.

The file is opened read-only with cached values only (``data_only``), so a
formula is never evaluated and the input is never written.
"""

from __future__ import annotations

import hashlib
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import openpyxl
from openpyxl.utils.exceptions import InvalidFileException


@dataclass(frozen=True)
class RawSheet:
    """A sheet's header row and its data rows, each row with its Excel row number."""

    name: str
    header: tuple[Any, ...]
    rows: list[tuple[int, tuple[Any, ...]]]


class UnreadableWorkbook(Exception):
    """The file is not a workbook this tool can open; the message says why."""


def sha256_of(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _is_blank(value: Any) -> bool:
    return value is None or (isinstance(value, str) and not value.strip())


def read_sheets(path: Path) -> dict[str, RawSheet]:
    """Every sheet of the workbook, blank rows dropped, row numbers kept."""
    try:
        book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except (InvalidFileException, zipfile.BadZipFile, KeyError, OSError, ValueError) as exc:
        raise UnreadableWorkbook(f"cannot open {path.name} as an .xlsx workbook ({exc})") from exc
    try:
        return {ws.title: _read_sheet(ws) for ws in book.worksheets}
    finally:
        book.close()


def _read_sheet(ws: Any) -> RawSheet:
    # Some writers store a wrong sheet dimension; without this, read-only mode
    # would silently stop at the declared last row.
    ws.reset_dimensions()
    header: tuple[Any, ...] = ()
    rows: list[tuple[int, tuple[Any, ...]]] = []
    for number, values in enumerate(ws.iter_rows(values_only=True), start=1):
        if number == 1:
            header = tuple(values)
        elif not all(_is_blank(v) for v in values):
            rows.append((number, tuple(values)))
    return RawSheet(ws.title, header, rows)
