"""Findings: every problem the tool reports, each tied to a place in the workbook."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Literal

Severity = Literal["error", "warning", "note"]
SEVERITY_ORDER = {"error": 0, "warning": 1, "note": 2}


@dataclass(frozen=True)
class Finding:
    """One problem. ``location`` is a sheet (``Trees``), a cell (``Trees!E9``) or a whole column (``Trees!E:E``)."""

    severity: Severity
    code: str
    location: str
    message: str

    def to_dict(self) -> dict[str, str]:
        return asdict(self)


def cell_ref(sheet: str, column_letter: str, row: int) -> str:
    """A1-style address, quoting sheet names that need it (``'My sheet'!A1``)."""
    name = sheet if sheet.replace("_", "").isalnum() else "'" + sheet.replace("'", "''") + "'"
    return f"{name}!{column_letter}{row}"


def has_errors(findings: list[Finding]) -> bool:
    return any(f.severity == "error" for f in findings)


def sorted_findings(findings: list[Finding]) -> list[Finding]:
    """Errors first, then by location in reading order of the message list as produced."""
    return sorted(findings, key=lambda f: SEVERITY_ORDER[f.severity])
