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
DEMO_WORKBOOK = "forest_demo.xlsx"


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


def _headline(document: dict) -> str:
    totals = document["totals"]
    net = totals["net_removals_tco2e"]
    return (
        f"{document['project']['project_name']}: net removals {net:,.1f} tCO2e, "
        f"issuable credits {totals['issuable_credits']:,} "
        f"({len(document['vintages'])} vintage(s))"
    )


def _run_and_write(workbook: Path, out: Path, pdf: bool) -> None:
    from .atomic import OutputRefused
    from .engine import run as run_engine
    from .outputs import write_outputs

    result = run_engine(workbook)
    if not result.ok:
        _print_findings(result.findings, err=True)
        typer.echo(f"{workbook.name}: {_summary_line(result.findings)}; nothing computed", err=True)
        raise typer.Exit(EXIT_FINDINGS)
    try:
        written = write_outputs(result, out, pdf=pdf)
    except OutputRefused as exc:
        typer.echo(str(exc), err=True)
        raise typer.Exit(EXIT_USAGE)
    warnings = [f for f in result.findings if f.severity != "note"]
    if warnings:
        _print_findings(warnings, err=True)
    typer.echo(_headline(result.to_dict()))
    for path in (written.json, written.xlsx, written.pdf):
        if path is not None:
            typer.echo(f"wrote {path}")


@app.command()
def run(
    workbook: Path = typer.Argument(..., help="The project workbook (.xlsx)."),
    out: Path = typer.Option(..., "--out", "-o", help="Folder for results.json, results.xlsx and summary.pdf."),
    pdf: bool = typer.Option(True, "--pdf/--no-pdf", help="Also write the PDF summary."),
) -> None:
    """Validate, recompute the claim and write the results. Exit 1 when the workbook has errors."""
    _run_and_write(workbook, out, pdf)


@app.command()
def demo(
    out: Path = typer.Option(Path("verify-demo-output"), "--out", "-o", help="Folder for the outputs."),
    pdf: bool = typer.Option(True, "--pdf/--no-pdf", help="Also write the PDF summary."),
) -> None:
    """Run the bundled fictional demo project and say where the outputs are."""
    from importlib import resources

    with resources.as_file(resources.files("verify.demo_projects") / DEMO_WORKBOOK) as workbook:
        typer.echo(f"demo workbook: {workbook}")
        _run_and_write(workbook, out, pdf)
