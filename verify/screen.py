"""Buyer screening: run many workbooks and compare them side by side.

``screen`` runs :func:`verify.engine.run` on every workbook (in worker
processes) and keeps one compact row per workbook, computed from the results
document by the pure function :func:`project_row`. ``write_portfolio`` writes
three views of the same rows: portfolio.xlsx, portfolio.json and
portfolio.pdf.

Design decisions
----------------
* No composite score. Each column is a plain quantity from the results
  document (or a share of gross removals) and is defined in ``COLUMNS``; the
  same definitions are printed in the workbook, the JSON and the PDF.
* A workbook that fails validation, cannot be read, or makes the tool fail
  unexpectedly still gets its row, with the reason; it never stops the others.
  A worker process that dies (killed, out of memory) breaks the whole pool, so
  the workbooks it took down with it are rerun one by one, each in a fresh
  single-worker pool, and only the culprit ends up as a crashed row.
* Workers return only the row (a few hundred bytes), not the document.
* Deterministic output: inputs are deduplicated and sorted by path, rows keep
  that order whatever order the workers finish in, every run of one screening
  shares one run date (``SOURCE_DATE_EPOCH`` fixes it, as for ``verify run``),
  and file metadata dates are fixed.
"""

from __future__ import annotations

import datetime as dt
import math
import os
import sys
from concurrent.futures import Future, ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping, TextIO

from . import TOOL_NAME, __version__
from .atomic import atomic_path, guard_not_input, write_text_atomic
from .engine import CAUTIONS, run, today
from .results_json import document_validator, json_document_text
from .results_xlsx import reproducible_xlsx_bytes

PORTFOLIO_XLSX, PORTFOLIO_JSON, PORTFOLIO_PDF = "portfolio.xlsx", "portfolio.json", "portfolio.pdf"
WORKBOOK_SUFFIX = ".xlsx"
LOCK_FILE_PREFIX = "~$"  # a spreadsheet program's lock file beside an open workbook: not a workbook
REASON_ERRORS_SHOWN = 3

STATUS_OK, STATUS_FAILED, STATUS_CRASHED = "ok", "failed", "crashed"
NO_CLAIMS, NO_CHECK_PLOTS = "no claims", "no check plots"
MATERIAL, NOT_MATERIAL, NOT_DETERMINED = "material", "not material", "not determined"

DURABILITY = {
    "forest": "reversible biological storage; depends on buffer and monitoring",
    "soil": "reversible biological storage; depends on buffer and monitoring",
    "biochar": "persistent carbon: fraction remaining after 100 years per IPCC 2019 Refinement Vol.4 Ch.2 Ap.4",
}

SCREENING_CAUTIONS = [
    "Rows are not ranked by any combined score: compare each column on its own, with its definition.",
    "Projects may use different confidence levels, uncertainty rules and buffer minimums; "
    "these settings are shown per project and affect the deductions.",
]

# Deductions from gross removals, in the order of the accounting chain: (row key, totals key).
DEDUCTIONS = (
    ("baseline_pct_of_gross", "baseline_tco2e"),
    ("project_emissions_pct_of_gross", "project_emissions_tco2e"),
    ("leakage_pct_of_gross", "leakage_tco2e"),
    ("uncertainty_deduction_pct_of_gross", "uncertainty_deduction_tco2e"),
    ("buffer_pct_of_gross", "buffer_tco2e"),
)


@dataclass(frozen=True)
class Column:
    """One column of the comparison: row key, header, display kind and its plain definition."""

    key: str
    label: str
    kind: str  # text | tonnes | credits | pct | count | list
    definition: str


COLUMNS: tuple[Column, ...] = (
    Column("file", "File", "text", "Workbook file name (its full path and SHA-256 are the last two columns)."),
    Column("status", "Status", "text",
           "ok: the workbook passed validation and was recomputed. failed: it has errors or could not be "
           "read; no numbers are shown. crashed: the tool failed unexpectedly on this workbook."),
    Column("reason", "Reason", "text",
           "Why a workbook was not recomputed: the number of errors and the first few, each with its cell."),
    Column("project_name", "Project", "text", "Project name from the Project sheet."),
    Column("project_id", "Project ID", "text", "The proponent's own identifier."),
    Column("pathway", "Pathway", "text", "forest, soil or biochar: the quantification method applied."),
    Column("period_start", "Period start", "text", "First day of the monitoring period claimed."),
    Column("period_end", "Period end", "text", "Last day of the monitoring period claimed (inclusive)."),
    Column("vintages", "Vintages", "list",
           "Calendar years the monitoring period falls in; every quantity is allocated to them in "
           "proportion to days."),
    Column("issuable_credits", "Issuable credits (tCO2e)", "credits",
           "Net removals less the uncertainty deduction and the buffer contribution, rounded down to "
           "whole tonnes per vintage."),
    Column("net_removals_tco2e", "Net removals (tCO2e)", "tonnes",
           "Gross removals less baseline removals, project emissions and leakage."),
    Column("gross_removals_tco2e", "Gross removals (tCO2e)", "tonnes",
           "Removals by the project before any deduction: stock change (forest, soil) or persistent "
           "carbon (biochar). The base of every '% of gross' column."),
    Column("baseline_pct_of_gross", "Baseline (% of gross)", "pct",
           "Baseline removals (what the land would have removed without the project) as % of gross "
           "removals. Negative when the baseline is a net emission."),
    Column("project_emissions_pct_of_gross", "Project emissions (% of gross)", "pct",
           "Emissions caused by the project's own activities (fuel, fertiliser...) as % of gross removals."),
    Column("leakage_pct_of_gross", "Leakage (% of gross)", "pct",
           "Emissions displaced outside the project boundary as % of gross removals."),
    Column("uncertainty_deduction_pct_of_gross", "Uncertainty deduction (% of gross)", "pct",
           "Tonnes withheld because the estimate is uncertain (by the project's uncertainty rule) as % "
           "of gross removals."),
    Column("buffer_pct_of_gross", "Buffer contribution (% of gross)", "pct",
           "Tonnes set aside in the pooled buffer against future reversals as % of gross removals."),
    Column("uncertainty_pct", "Uncertainty (% of net)", "pct",
           "Half-width of the confidence interval of net removals as % of net removals, at the "
           "project's confidence level. Empty when net removals are not positive."),
    Column("confidence_pct", "Confidence level (%)", "pct",
           "Two-sided confidence level of the uncertainty: 95 % gives wider intervals than 90 %."),
    Column("uncertainty_rule", "Uncertainty rule", "text",
           "lower_bound: the claim is the lower confidence bound. excess_over_threshold: only the "
           "uncertainty above the project's threshold is deducted."),
    Column("buffer_pct", "Buffer share (%)", "pct",
           "Share of net removals (after the uncertainty deduction) set aside in the buffer: the sum of "
           "the Risk scores, never below the minimum."),
    Column("durability", "Durability", "text",
           "Forest and soil: reversible biological storage; depends on buffer and monitoring. Biochar: "
           "persistent carbon: fraction remaining after 100 years per IPCC 2019 Refinement Vol.4 Ch.2 Ap.4."),
    Column("measured_reversal_tco2e", "Measured reversal (tCO2e)", "tonnes",
           "Loss shown by the remeasurement in this period (net removals below zero)."),
    Column("reported_losses_tco2e", "Reported losses (tCO2e)", "tonnes",
           "Losses the proponent listed on the Reversals sheet within the period (fire, harvest...)."),
    Column("errors", "Errors", "count", "Findings that stop the recalculation; each names its cell."),
    Column("warnings", "Warnings", "count",
           "Findings to review (for example a tree outside the allometric model's range); the "
           "recalculation still ran."),
    Column("materiality", "Claims vs recomputed", "text",
           "material / not material: whether the difference between the proponent's claimed and the "
           "recomputed issuable credits exceeds the materiality threshold. no claims: the workbook has "
           "no claimed figures. not determined: claims exist but no verdict could be formed."),
    Column("check_plots", "Check plots", "text",
           "Verdict of the independent check-plot remeasurement on bias, or 'no check plots'."),
    Column("path", "Path", "text", "Path of the workbook as screened."),
    Column("sha256", "SHA-256", "text", "Fingerprint of the workbook's bytes: the exact file screened."),
)
ROW_KEYS = tuple(column.key for column in COLUMNS)

Progress = Callable[[int, int, Path], None]


# ---------------------------------------------------------------------------
# One row from one results document (pure).


def _number(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return float(value) if math.isfinite(value) else None


def pct_of_gross(value_tco2e: Any, gross_tco2e: Any) -> float | None:
    """``value / gross * 100``; ``None`` when gross removals are not positive (a share of them means nothing)."""
    value, gross = _number(value_tco2e), _number(gross_tco2e)
    if value is None or gross is None or gross <= 0.0:
        return None
    return value / gross * 100.0


def durability_note(pathway: Any) -> str | None:
    return DURABILITY.get(pathway) if isinstance(pathway, str) else None


def materiality_verdict(reconciliation: Any) -> str:
    if not isinstance(reconciliation, Mapping):
        return NO_CLAIMS
    material = reconciliation.get("material")
    if isinstance(material, bool):
        return MATERIAL if material else NOT_MATERIAL
    return NOT_DETERMINED


def check_plot_verdict(check_plots: Any) -> str:
    verdict = check_plots.get("verdict") if isinstance(check_plots, Mapping) else None
    return str(verdict) if verdict not in (None, "") else NO_CHECK_PLOTS


def failure_reason(findings: list[Mapping[str, Any]]) -> str:
    """``"2 errors: Trees!E2: message; Trees!E3: message"``: the count and the first few errors with cells."""
    errors = [f for f in findings if f.get("severity") == "error"]
    if not errors:
        return "no result was computed"
    shown = "; ".join(f"{f.get('location')}: {f.get('message')}" for f in errors[:REASON_ERRORS_SHOWN])
    more = f"; and {len(errors) - REASON_ERRORS_SHOWN} more" if len(errors) > REASON_ERRORS_SHOWN else ""
    return f"{len(errors)} error{'s' if len(errors) != 1 else ''}: {shown}{more}"


def _empty_row(path: str) -> dict[str, Any]:
    row: dict[str, Any] = dict.fromkeys(ROW_KEYS)
    row.update(file=Path(path).name, path=path, vintages=[])
    return row


def project_row(document: Mapping[str, Any]) -> dict[str, Any]:
    """The comparison row of one results document (``RunResult.to_dict()``), keys as ``COLUMNS``.

    Numbers are shown only when the workbook passed validation and the chain
    ran (no error findings); otherwise the row says why, with cells.
    """
    source = document.get("input") or {}
    project = document.get("project") or {}
    settings = document.get("settings") or {}
    findings = [f for f in document.get("findings") or [] if isinstance(f, Mapping)]
    totals = document.get("totals")
    row = _empty_row(str(source.get("path") or source.get("file_name") or ""))
    row.update(
        file=source.get("file_name") or row["file"],
        sha256=source.get("sha256") or None,
        project_name=project.get("project_name"),
        project_id=project.get("project_id"),
        pathway=project.get("pathway"),
        period_start=project.get("period_start"),
        period_end=project.get("period_end"),
        durability=durability_note(project.get("pathway")),
        errors=sum(f.get("severity") == "error" for f in findings),
        warnings=sum(f.get("severity") == "warning" for f in findings),
        materiality=materiality_verdict(document.get("reconciliation")),
        check_plots=check_plot_verdict(document.get("check_plots")),
    )
    if row["errors"] or not isinstance(totals, Mapping):
        row.update(status=STATUS_FAILED, reason=failure_reason(findings))
        return row
    gross = totals.get("gross_removals_tco2e")
    reversal = document.get("reversal") or {}
    row.update(
        status=STATUS_OK,
        vintages=[v.get("vintage") for v in document.get("vintages") or []],
        issuable_credits=totals.get("issuable_credits"),
        net_removals_tco2e=totals.get("net_removals_tco2e"),
        gross_removals_tco2e=gross,
        uncertainty_pct=totals.get("uncertainty_pct"),
        confidence_pct=settings.get("confidence_pct"),
        uncertainty_rule=settings.get("uncertainty_rule"),
        buffer_pct=totals.get("buffer_pct"),
        measured_reversal_tco2e=reversal.get("measured_reversal_tco2e"),
        reported_losses_tco2e=reversal.get("reported_losses_tco2e"),
    )
    for key, total_key in DEDUCTIONS:
        row[key] = pct_of_gross(totals.get(total_key), gross)
    return row


def row_summary(row: Mapping[str, Any]) -> str:
    """One line per project for the terminal: the headline numbers, or the reason it was not recomputed."""
    if row.get("status") != STATUS_OK:
        return f"{row.get('status'):<9}{row.get('file')}: {row.get('reason')}"
    net = _number(row.get("net_removals_tco2e"))
    net_text = f"{net:,.1f} tCO2e" if net is not None else "not available"
    return (f"{STATUS_OK:<9}{row.get('file')}: {row.get('project_name')}: issuable credits "
            f"{row.get('issuable_credits'):,}, net removals {net_text}, "
            f"{row.get('errors')} error(s), {row.get('warnings')} warning(s)")


def crash_row(path: str | Path, reason: str) -> dict[str, Any]:
    """The row of a workbook on which the tool itself failed: no numbers, the reason in plain words."""
    row = _empty_row(str(path))
    row.update(status=STATUS_CRASHED, reason=reason)
    return row


def screen_one(path: str, run_date: dt.date) -> dict[str, Any]:
    """Worker: run one workbook and return its row; any exception becomes a crashed row, never a traceback."""
    try:
        return project_row(run(path, run_date).to_dict())
    except Exception as exc:  # noqa: BLE001 - one workbook must not stop the screening
        return crash_row(path, f"the tool failed on this workbook ({type(exc).__name__}: {exc}); "
                               "please report it with the workbook")


# ---------------------------------------------------------------------------
# Many workbooks.


def discover_workbooks(paths: Iterable[str | Path], exclude: Iterable[str | Path] = ()) -> list[Path]:
    """Files as given and every *.xlsx under each folder (recursively), deduplicated and sorted by path.

    Lock files (``~$name.xlsx``) are skipped, and so is anything under an
    ``exclude`` folder (the output folder, so a second screening does not read
    the first one's portfolio.xlsx).
    """
    excluded = [Path(p).resolve() for p in exclude]
    found: dict[Path, Path] = {}
    for given in map(Path, paths):
        candidates = (
            (p for p in given.rglob("*") if p.suffix.lower() == WORKBOOK_SUFFIX and p.is_file())
            if given.is_dir() else [given]
        )
        for path in candidates:
            resolved = path.resolve()
            if path.name.startswith(LOCK_FILE_PREFIX) or any(resolved.is_relative_to(e) for e in excluded):
                continue
            found.setdefault(resolved, path)
    return sorted(found.values(), key=lambda p: p.as_posix())


@dataclass
class Portfolio:
    """One row per workbook, in the sorted order of their paths."""

    rows: list[dict[str, Any]]
    run_date: dt.date = field(default_factory=today)

    @property
    def failed(self) -> list[dict[str, Any]]:
        """Rows that were not recomputed: failed validation, unreadable, or crashed."""
        return [row for row in self.rows if row["status"] != STATUS_OK]

    def to_dict(self) -> dict[str, Any]:
        """The portfolio.json document (schemas/portfolio.schema.json)."""
        return {
            "tool": {"name": TOOL_NAME, "version": __version__, "run_date": self.run_date.isoformat()},
            "summary": {
                "workbooks": len(self.rows),
                "screened": len(self.rows) - len(self.failed),
                "failed": sum(row["status"] == STATUS_FAILED for row in self.rows),
                "crashed": sum(row["status"] == STATUS_CRASHED for row in self.rows),
            },
            "columns": [{"key": c.key, "label": c.label, "definition": c.definition} for c in COLUMNS],
            "rows": [{key: row.get(key) for key in ROW_KEYS} for row in self.rows],
            "cautions": CAUTIONS + SCREENING_CAUTIONS,
        }


def worker_count(jobs: int | None, workbooks: int) -> int:
    """``jobs`` (default: the CPU count), never more than there are workbooks; at least 1."""
    if jobs is not None and jobs < 1:
        raise ValueError(f"jobs must be at least 1, got {jobs}")
    return max(1, min(jobs or os.cpu_count() or 1, workbooks))


def screen(
    paths: list[Path],
    jobs: int | None = None,
    progress: Progress | None = None,
    run_date: dt.date | None = None,
) -> Portfolio:
    """Run every workbook in ``paths`` (files, or folders searched for *.xlsx) and return their rows.

    ``jobs`` worker processes (default ``os.cpu_count()``); ``jobs=1`` runs in
    this process. ``progress(done, total, path)`` is called as each workbook
    finishes, in completion order. Rows come back in sorted path order.
    """
    files = discover_workbooks(paths)
    run_date = run_date or today()
    done = 0

    def finished(path: Path) -> None:
        nonlocal done
        done += 1
        if progress is not None:
            progress(done, len(files), path)

    workers = worker_count(jobs, len(files))
    rows: dict[int, dict[str, Any]]
    if workers == 1:
        rows = {}
        for index, path in enumerate(files):
            rows[index] = screen_one(str(path), run_date)
            finished(path)
    else:
        rows = _screen_in_pool(files, workers, run_date, finished)
    return Portfolio([rows[index] for index in range(len(files))], run_date)


def _screen_in_pool(
    files: list[Path], workers: int, run_date: dt.date, finished: Callable[[Path], None]
) -> dict[int, dict[str, Any]]:
    rows: dict[int, dict[str, Any]] = {}
    taken_down: list[int] = []
    with ProcessPoolExecutor(max_workers=workers) as pool:
        futures = {pool.submit(screen_one, str(path), run_date): index for index, path in enumerate(files)}
        for future in as_completed(futures):
            index = futures[future]
            if isinstance(future.exception(), BrokenProcessPool):
                taken_down.append(index)
                continue
            rows[index] = _row_of(future, files[index])
            finished(files[index])
    for index in sorted(taken_down):
        rows[index] = _screen_isolated(files[index], run_date)
        finished(files[index])
    return rows


def _screen_isolated(path: Path, run_date: dt.date) -> dict[str, Any]:
    """Rerun one workbook alone, so a worker that dies takes down nothing else."""
    with ProcessPoolExecutor(max_workers=1) as pool:
        return _row_of(pool.submit(screen_one, str(path), run_date), path)


def _row_of(future: Future, path: Path) -> dict[str, Any]:
    exception = future.exception()
    if exception is None:
        return future.result()
    if isinstance(exception, BrokenProcessPool):
        return crash_row(path, "the worker process running this workbook stopped abruptly "
                               "(killed or out of memory); try it alone with verify run")
    return crash_row(path, f"the tool failed on this workbook ({type(exception).__name__}: {exception})")


class StderrProgress:
    """``screening 7/20 name.xlsx``: one line rewritten with \\r on a terminal, one line per workbook otherwise."""

    def __init__(self, stream: TextIO | None = None) -> None:
        self.stream = stream or sys.stderr
        self.rewrite = bool(getattr(self.stream, "isatty", lambda: False)())
        self._width = 0

    def __call__(self, done: int, total: int, path: Path) -> None:
        text = f"screening {done}/{total} {path.name}"
        if self.rewrite:
            self.stream.write("\r" + text.ljust(self._width) + ("\n" if done == total else ""))
            self._width = len(text)
        else:
            self.stream.write(text + "\n")
        self.stream.flush()


# ---------------------------------------------------------------------------
# The three views.


def portfolio_validator() -> Any:
    return document_validator("portfolio")


NUMBER_FORMATS = {"tonnes": "#,##0.0", "credits": "#,##0", "pct": "0.0", "count": "0"}


def build_portfolio_workbook(document: Mapping[str, Any]) -> Any:
    """Sheet ``Portfolio`` (one row per project, autofilter on the header) and ``How to read this``."""
    from openpyxl import Workbook
    from openpyxl.styles import Alignment, Font
    from openpyxl.utils import get_column_letter

    from .results_xlsx import DOCUMENT_TIME, set_value, write_table

    book = Workbook()
    sheet = book.active
    sheet.title = "Portfolio"
    labels = [c.label for c in COLUMNS]
    records = [
        {c.label: ", ".join(map(str, row[c.key])) if c.kind == "list" else row[c.key] for c in COLUMNS}
        for row in document["rows"]
    ]
    write_table(sheet, records, labels)
    last_column = get_column_letter(len(COLUMNS))
    sheet.auto_filter.ref = f"A1:{last_column}{len(records) + 1}"
    for index, column in enumerate(COLUMNS, start=1):
        letter = get_column_letter(index)
        sheet.cell(row=1, column=index).alignment = Alignment(wrap_text=True, vertical="bottom")
        if column.kind in NUMBER_FORMATS:
            for cell in sheet[letter][1:]:
                cell.number_format = NUMBER_FORMATS[column.kind]
    for key, width in (("reason", 60), ("project_name", 30), ("durability", 50), ("path", 40), ("sha256", 68)):
        sheet.column_dimensions[get_column_letter(ROW_KEYS.index(key) + 1)].width = width
    sheet.freeze_panes = "B2"

    guide = book.create_sheet("How to read this")
    lines: list[tuple[str, str]] = [
        ("Portfolio screening", f"{document['tool']['name']} {document['tool']['version']}, "
                                f"run date {document['tool']['run_date']}"),
        ("", ""),
    ]
    lines += [(c.label, c.definition) for c in COLUMNS]
    lines += [("", "")] + [("Caution", text) for text in document["cautions"]]
    for number, (label, text) in enumerate(lines, start=1):
        set_value(guide.cell(row=number, column=1), label)
        set_value(guide.cell(row=number, column=2), text)
        guide.cell(row=number, column=1).font = Font(bold=True)
        guide.cell(row=number, column=2).alignment = Alignment(wrap_text=True, vertical="top")
    guide.column_dimensions["A"].width = 36
    guide.column_dimensions["B"].width = 100
    book.properties.creator = document["tool"]["name"]
    book.properties.created = book.properties.modified = DOCUMENT_TIME
    return book


@dataclass(frozen=True)
class PortfolioFiles:
    xlsx: Path
    json: Path
    pdf: Path


def write_portfolio(portfolio: Portfolio, out_dir: Path) -> PortfolioFiles:
    """Write portfolio.xlsx, portfolio.json and portfolio.pdf into ``out_dir``, each atomically.

    Refuses (``verify.atomic.OutputRefused``) before writing anything when a
    target is one of the screened workbooks.
    """
    from .screen_pdf import write_portfolio_pdf

    out_dir = Path(out_dir)
    document = portfolio.to_dict()
    protected = tuple(Path(row["path"]) for row in portfolio.rows)
    files = PortfolioFiles(out_dir / PORTFOLIO_XLSX, out_dir / PORTFOLIO_JSON, out_dir / PORTFOLIO_PDF)
    for target in (files.xlsx, files.json, files.pdf):
        guard_not_input(target, protected)
    with atomic_path(files.xlsx, protected) as temporary:
        temporary.write_bytes(reproducible_xlsx_bytes(build_portfolio_workbook(document)))
    write_text_atomic(files.json, json_document_text(document), protected)
    write_portfolio_pdf(document, files.pdf, protected)
    return files
