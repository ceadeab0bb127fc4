"""The ``verify`` command: thin wrappers around library functions.

Heavy libraries (pandas, openpyxl, weasyprint) are imported inside the
commands so that ``verify --help`` stays fast.
"""

from __future__ import annotations

import json
from enum import Enum
from pathlib import Path
from typing import Optional

import typer

from . import TOOL_NAME, __version__

app = typer.Typer(
    name="verify",
    help="Recompute carbon-removal monitoring claims from a project workbook. "
    "A recalculation aid, not an assurance opinion.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

EXIT_OK, EXIT_FINDINGS, EXIT_USAGE = 0, 1, 2


class Pathway(str, Enum):
    forest = "forest"
    soil = "soil"
    biochar = "biochar"


def _version(value: bool) -> None:
    if value:
        typer.echo(f"{TOOL_NAME} {__version__}")
        raise typer.Exit(EXIT_OK)


@app.callback()
def main(
    version: Optional[bool] = typer.Option(
        None, "--version", callback=_version, is_eager=True, help="Print the version and exit."
    ),
) -> None:
    """Recompute carbon-removal monitoring claims from a project workbook."""


def _print_findings(findings: list, err: bool = False) -> None:
    for f in findings:
        typer.echo(f"{f.severity:<8}{f.location:<24}{f.code:<24}{f.message}", err=err)


def _summary_line(findings: list) -> str:
    counts = {s: sum(f.severity == s for f in findings) for s in ("error", "warning", "note")}
    return f"{counts['error']} error(s), {counts['warning']} warning(s), {counts['note']} note(s)"


@app.command()
def template(
    pathway: Pathway = typer.Option(..., "--pathway", "-p", help="forest, soil or biochar."),
    output: Path = typer.Option(..., "--output", "-o", help="Where to write the blank .xlsx."),
) -> None:
    """Write the blank input workbook for a pathway."""
    from .template import write_template

    if output.suffix.lower() != ".xlsx":
        typer.echo("the template must be written to a .xlsx file", err=True)
        raise typer.Exit(EXIT_USAGE)
    write_template(pathway.value, output)
    typer.echo(f"wrote {output}")


@app.command()
def check(
    workbook: Path = typer.Argument(..., help="The project workbook (.xlsx)."),
    as_json: bool = typer.Option(False, "--json", help="Print the findings as JSON."),
) -> None:
    """Validate a workbook and list every problem by cell. Exit 1 when there are errors."""
    from .workbook import findings_summary, load_workbook

    book = load_workbook(workbook)
    if as_json:
        typer.echo(json.dumps(findings_summary(book), indent=2))
    else:
        _print_findings(book.findings)
        verdict = "ready to run" if book.ok else "fix the errors above"
        typer.echo(f"{workbook.name}: {_summary_line(book.findings)}; {verdict}")
    raise typer.Exit(EXIT_OK if book.ok else EXIT_FINDINGS)
