"""The ``verify`` command: thin wrappers around library functions.

Heavy libraries (pandas, openpyxl, weasyprint) are imported inside the
commands so that ``verify --help`` stays fast.
"""

from __future__ import annotations

import json
from enum import Enum
from pathlib import Path
from typing import TYPE_CHECKING, Optional

import typer

from . import TOOL_NAME, __version__

if TYPE_CHECKING:
    from .reader import BackgroundRead

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


def _print_finding_digest(findings: list) -> None:
    """One line per finding code: how many, and where the first ones are."""
    by_code: dict[tuple[str, str], list[str]] = {}
    for f in findings:
        if f.severity != "note":
            by_code.setdefault((f.severity, f.code), []).append(f.location)
    for (severity, code), locations in by_code.items():
        shown = ", ".join(locations[:3]) + (", ..." if len(locations) > 3 else "")
        typer.echo(f"{severity:<8}{code:<32}{len(locations):>5} at {shown}", err=True)
    if by_code:
        typer.echo("every finding, with its message, is in results.json, results.xlsx and summary.pdf", err=True)


def _start_reading(workbook: Path) -> BackgroundRead:
    """Scan the workbook and start its parse on a worker thread before the calculation libraries
    are imported: their import (about a second) then overlaps the parse instead of preceding it."""
    from .reader import BackgroundRead

    return BackgroundRead(workbook)


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
    """Validate a workbook and list every problem by cell. Exit 1 when there are errors.

    A workbook that passes validation is also computed, so the data-quality
    findings of the calculation (extrapolated models, implausible growth...)
    are listed too.
    """
    read = _start_reading(workbook)
    from .engine import run as run_engine
    from .workbook import findings_summary

    result = run_engine(workbook, read=read)
    summary = findings_summary(result.book, result.findings)
    if as_json:
        typer.echo(json.dumps(summary, indent=2))
    else:
        _print_findings(result.findings)
        verdict = "ready to run" if summary["ok"] else "fix the errors above"
        typer.echo(f"{workbook.name}: {_summary_line(result.findings)}; {verdict}")
    raise typer.Exit(EXIT_OK if summary["ok"] else EXIT_FINDINGS)


def _headline(document: dict) -> str:
    totals = document["totals"]
    net = totals["net_removals_tco2e"]
    return (
        f"{document['project']['project_name']}: net removals {net:,.1f} tCO2e, "
        f"issuable credits {totals['issuable_credits']:,} "
        f"({len(document['vintages'])} vintage(s))"
    )


def _run_and_write(workbook: Path, out: Path, pdf: bool) -> None:
    read = _start_reading(workbook)
    from .atomic import OutputRefused
    from .engine import run as run_engine
    from .outputs import write_outputs

    result = run_engine(workbook, read=read)
    if not result.ok:
        _print_findings(result.findings, err=True)
        typer.echo(f"{workbook.name}: {_summary_line(result.findings)}; nothing computed", err=True)
        raise typer.Exit(EXIT_FINDINGS)
    try:
        written = write_outputs(result, out, pdf=pdf)
    except OutputRefused as exc:
        typer.echo(str(exc), err=True)
        raise typer.Exit(EXIT_USAGE)
    _print_finding_digest(result.findings)
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


@app.command()
def screen(
    paths: list[Path] = typer.Argument(..., help="Workbooks, or folders searched recursively for *.xlsx."),
    out: Path = typer.Option(..., "--out", "-o", help="Folder for portfolio.xlsx, portfolio.json and portfolio.pdf."),
    jobs: Optional[int] = typer.Option(
        None, "--jobs", "-j", min=1, help="Worker processes (default: the number of CPUs); 1 runs in this process."
    ),
) -> None:
    """Screen many workbooks side by side: one row per project, no combined score.

    Exit 0 when every workbook was recomputed; 1 when any failed validation, could not be read or
    made the tool fail (its row says why); 2 when no workbook was found or an output would overwrite one.
    """
    import sys

    from .atomic import OutputRefused
    from .screen import StderrProgress, discover_workbooks, row_summary, write_portfolio
    from .screen import screen as screen_workbooks

    files = discover_workbooks(paths, exclude=[out])  # never screen a previous portfolio.xlsx
    if not files:
        where = "outside the output folder " if discover_workbooks(paths) else ""
        typer.echo(f"no .xlsx workbook found {where}in the paths given", err=True)
        raise typer.Exit(EXIT_USAGE)
    portfolio = screen_workbooks(files, jobs=jobs, progress=StderrProgress(sys.stderr))
    for row in portfolio.rows:
        typer.echo(row_summary(row))
    try:
        written = write_portfolio(portfolio, out)
    except OutputRefused as exc:
        typer.echo(str(exc), err=True)
        raise typer.Exit(EXIT_USAGE)
    for path in (written.xlsx, written.json, written.pdf):
        typer.echo(f"wrote {path}")
    raise typer.Exit(EXIT_FINDINGS if portfolio.failed else EXIT_OK)
