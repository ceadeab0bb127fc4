"""Write the three views of one result: results.json, results.xlsx, summary.pdf."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from .atomic import guard_not_input
from .engine import RunResult
from .results_json import write_results_json
from .results_xlsx import write_results_xlsx

JSON_NAME, XLSX_NAME, PDF_NAME = "results.json", "results.xlsx", "summary.pdf"


@dataclass(frozen=True)
class WrittenOutputs:
    json: Path
    xlsx: Path
    pdf: Path | None


def write_outputs(result: RunResult, out_dir: Path, pdf: bool = True) -> WrittenOutputs:
    """Write every output of ``result`` into ``out_dir``, each atomically, never over the input."""
    out_dir = Path(out_dir)
    document = result.to_dict()
    protected = (result.book.path,)
    targets = [out_dir / JSON_NAME, out_dir / XLSX_NAME] + ([out_dir / PDF_NAME] if pdf else [])
    for target in targets:
        guard_not_input(target, protected)
    written = WrittenOutputs(
        json=write_results_json(document, out_dir / JSON_NAME, protected),
        xlsx=write_results_xlsx(document, out_dir / XLSX_NAME, protected),
        pdf=None,
    )
    if pdf:
        from .report_pdf import write_summary_pdf  # weasyprint only when a PDF is written

        write_summary_pdf(document, out_dir / PDF_NAME, protected)
        written = WrittenOutputs(written.json, written.xlsx, out_dir / PDF_NAME)
    return written
