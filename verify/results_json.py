"""results.json: the result document as JSON, checked against schemas/results.schema.json."""

from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path
from typing import Any, Mapping

from jsonschema import Draft202012Validator

from .atomic import write_text_atomic
from .schema import read_schema_text


@lru_cache(maxsize=None)
def document_validator(schema_name: str) -> Draft202012Validator:
    """Validator of an output document against ``schemas/<schema_name>.schema.json``."""
    schema = json.loads(read_schema_text(schema_name))
    return Draft202012Validator(schema, format_checker=Draft202012Validator.FORMAT_CHECKER)


def results_validator() -> Draft202012Validator:
    return document_validator("results")


def json_document_text(document: Mapping[str, Any]) -> str:
    # allow_nan=False: NaN is not JSON; the engine turns it into null first.
    return json.dumps(document, indent=2, ensure_ascii=False, allow_nan=False) + "\n"


def write_results_json(document: dict[str, Any], target: Path, protected: tuple[Path, ...] = ()) -> Path:
    write_text_atomic(target, json_document_text(document), protected)
    return target
