"""The sheet schemas: one JSON Schema (2020-12) per sheet, the single source of truth.

The template writer, the importer's validation and its messages all read the
specifications built here from ``schemas/*.schema.json``.  Sheet-level facts
(layout, pathways, unique keys, references between sheets) live in the
``x-sheet`` annotation; column units in ``x-unit``.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from typing import Any, Literal

from jsonschema import Draft202012Validator

PATHWAYS = ("forest", "soil", "biochar")

# The importer checks columns vectorised, so it implements this subset of
# JSON Schema itself; a schema using anything else is refused at load time
# rather than silently not enforced.
SUPPORTED_PROPERTY_KEYWORDS = frozenset({
    "title", "description", "type", "format", "enum", "minimum", "maximum",
    "exclusiveMinimum", "exclusiveMaximum", "default", "maxLength", "examples",
    "x-unit", "x-pathways",
})

ColumnType = Literal["string", "number", "integer", "date", "enum"]


@dataclass(frozen=True)
class ColumnSpec:
    name: str
    kind: ColumnType
    description: str
    required: bool
    unit: str | None = None
    enum: tuple[str, ...] = ()
    minimum: float | None = None
    maximum: float | None = None
    exclusive_minimum: float | None = None
    exclusive_maximum: float | None = None
    max_length: int | None = None
    default: Any = None
    pathways: tuple[str, ...] = PATHWAYS
    schema: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)

    def range_text(self) -> str:
        """The allowed range in words, e.g. ``> 0 and <= 1500``."""
        parts = []
        if self.minimum is not None:
            parts.append(f">= {self.minimum:g}")
        if self.exclusive_minimum is not None:
            parts.append(f"> {self.exclusive_minimum:g}")
        if self.maximum is not None:
            parts.append(f"<= {self.maximum:g}")
        if self.exclusive_maximum is not None:
            parts.append(f"< {self.exclusive_maximum:g}")
        return " and ".join(parts)

    def header_note(self) -> str:
        """Text of the note attached to the header cell in the template."""
        lines = [self.description]
        if self.unit:
            lines.append(f"Unit: {self.unit}")
        if self.enum:
            lines.append("One of: " + ", ".join(self.enum))
        if self.range_text():
            lines.append("Allowed: " + self.range_text())
        if self.kind == "date":
            lines.append("A date (or text YYYY-MM-DD)")
        lines.append("Required" if self.required else "Optional")
        if self.default is not None:
            lines.append(f"Default: {self.default}")
        return "\n".join(lines)


@dataclass(frozen=True)
class Reference:
    """Values of ``columns`` must exist as ``target`` columns of ``sheet``."""

    columns: tuple[str, ...]
    sheet: str
    target: tuple[str, ...]


@dataclass(frozen=True)
class SheetSpec:
    name: str
    title: str
    description: str
    layout: Literal["table", "key_value"]
    presence: dict[str, str]
    columns: tuple[ColumnSpec, ...]
    unique: tuple[tuple[str, ...], ...] = ()
    references: tuple[Reference, ...] = ()
    key_header: str = "field"
    value_header: str = "value"
    schema: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)

    def column(self, name: str) -> ColumnSpec:
        return next(c for c in self.columns if c.name == name)

    @property
    def headers(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns)

    def applies_to(self, pathway: str) -> bool:
        return pathway in self.presence

    def is_required(self, pathway: str) -> bool:
        return self.presence.get(pathway) == "required"


def _column_kind(prop: dict[str, Any]) -> ColumnType:
    if "enum" in prop:
        return "enum"
    if prop.get("format") == "date":
        return "date"
    return prop["type"]


def _column_from_schema(name: str, prop: dict[str, Any], required: bool) -> ColumnSpec:
    unsupported = set(prop) - SUPPORTED_PROPERTY_KEYWORDS
    if unsupported:
        raise ValueError(f"column {name}: unsupported schema keywords {sorted(unsupported)}")
    return ColumnSpec(
        name=name,
        kind=_column_kind(prop),
        description=prop.get("description", ""),
        required=required,
        unit=prop.get("x-unit"),
        enum=tuple(prop.get("enum", ())),
        minimum=prop.get("minimum"),
        maximum=prop.get("maximum"),
        exclusive_minimum=prop.get("exclusiveMinimum"),
        exclusive_maximum=prop.get("exclusiveMaximum"),
        max_length=prop.get("maxLength"),
        default=prop.get("default"),
        pathways=tuple(prop.get("x-pathways", PATHWAYS)),
        schema=prop,
    )


def _presence(sheet_meta: dict[str, Any]) -> dict[str, str]:
    presence = sheet_meta["presence"]
    if isinstance(presence, str):
        return {p: presence for p in sheet_meta["pathways"]}
    return dict(presence)


def sheet_from_schema(schema: dict[str, Any]) -> SheetSpec:
    Draft202012Validator.check_schema(schema)
    meta = schema["x-sheet"]
    required = set(schema.get("required", ()))
    columns = tuple(
        _column_from_schema(name, prop, name in required)
        for name, prop in schema["properties"].items()
    )
    return SheetSpec(
        name=schema["title"],
        title=schema["title"],
        description=schema.get("description", ""),
        layout=meta["layout"],
        presence=_presence(meta),
        columns=columns,
        unique=tuple(tuple(u) for u in meta.get("unique", ())),
        references=tuple(
            Reference(tuple(r["columns"]), r["sheet"], tuple(r["target"]))
            for r in meta.get("references", ())
        ),
        key_header=meta.get("key_header", "field"),
        value_header=meta.get("value_header", "value"),
        schema=schema,
    )


# Order of sheets in the template and in reports: project facts, then shared
# tables, then each pathway's data.
SHEET_ORDER = (
    "Project", "Strata", "Baseline", "Emissions", "Leakage", "Risk", "Reversals",
    "Claims", "Plots", "Trees", "Species", "Allometry", "CheckPlots",
    "SoilSamples", "Batches",
)


def read_schema_text(name: str) -> str:
    return resources.files("verify.schemas").joinpath(f"{name}.schema.json").read_text("utf-8")


@lru_cache(maxsize=None)
def all_sheets() -> dict[str, SheetSpec]:
    """Every sheet specification, keyed by sheet name, in template order."""
    return {name: sheet_from_schema(json.loads(read_schema_text(name))) for name in SHEET_ORDER}


def sheets_for(pathway: str) -> list[SheetSpec]:
    """The sheets a workbook of ``pathway`` may contain, in template order."""
    return [s for s in all_sheets().values() if s.applies_to(pathway)]


def project_fields(pathway: str | None = None) -> tuple[ColumnSpec, ...]:
    fields = all_sheets()["Project"].columns
    if pathway is None:
        return fields
    return tuple(f for f in fields if pathway in f.pathways)
