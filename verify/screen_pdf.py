"""portfolio.pdf: the screening of many workbooks as a side-by-side comparison.

A view of the portfolio.json document only (``Portfolio.to_dict()``). It
reuses the single-project report's machinery from :mod:`verify.report_pdf`:
the resource policy (only files inside ``report_templates/`` and the charts
made for this document may load; every network URL is refused), the number
formatters, autoescaped Jinja2 templates. Bytes are reproducible: the PDF
dates are the run date at midnight UTC, the /ID is derived from the content,
charts use a fixed SVG hash salt and no date. weasyprint and matplotlib are
imported inside the functions that use them.
"""

from __future__ import annotations

import datetime as dt
import io
import textwrap
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from .charts import GRID, INK, MUTED, chart_style
from .report_pdf import (
    fixed_source_date_epoch,
    ResourcePolicy,
    finite_number,
    make_url_fetcher,
    svg_data_url,
    template_environment,
    templates_dir,
)

TEMPLATE_NAME = "portfolio.html.j2"
CHART_ROWS_PER_FIGURE = 15  # keeps one chart, its heading and caption within a landscape A4 page
LABEL_LINE_CHARS, LABEL_LINES = 32, 2
ROW_PITCH_IN = 0.28
SVG_HASH_SALT = "carbon-verify-portfolio"

# Okabe & Ito (2008), "Color Universal Design": distinguishable with common colour-vision deficiencies.
# Hex values from memory; check against the source.
SEGMENTS = (
    ("baseline_pct_of_gross", "Baseline", "#56B4E9"),
    ("project_emissions_pct_of_gross", "Project emissions", "#E69F00"),
    ("leakage_pct_of_gross", "Leakage", "#CC79A7"),
    ("uncertainty_deduction_pct_of_gross", "Uncertainty deduction", "#0072B2"),
    ("buffer_pct_of_gross", "Buffer contribution", "#D55E00"),
)
REMAINDER = "#e4e9ec"
UNCERTAINTY_COLOUR = "#0072B2"


# ---------------------------------------------------------------------------
# Rows for display.


def display_labels(rows: Sequence[Mapping[str, Any]]) -> list[str]:
    """Project name (file name when there is none); a name shared by several rows gets its file name too."""
    names = [str(row.get("project_name") or row.get("file") or "") for row in rows]
    return [
        f"{name} ({row.get('file')})" if names.count(name) > 1 and name != row.get("file") else name
        for name, row in zip(names, rows)
    ]


def by_issuable_credits(rows: Sequence[Mapping[str, Any]]) -> list[Mapping[str, Any]]:
    """Screened rows, most issuable credits first; ties in path order (the input order is path order)."""
    screened = [row for row in rows if row.get("status") == "ok"]
    return sorted(screened, key=lambda row: -(finite_number(row.get("issuable_credits")) or 0.0))


def chart_label(label: str) -> str:
    """The label wrapped on at most two lines; what does not fit ends in an ellipsis."""
    lines = textwrap.wrap(label, LABEL_LINE_CHARS) or [""]
    if len(lines) > LABEL_LINES:
        rest = " ".join(lines[LABEL_LINES - 1 :])
        lines = lines[: LABEL_LINES - 1] + [rest[: LABEL_LINE_CHARS - 1] + "\u2026"]
    return "\n".join(lines)


def _chunks(items: Sequence[Any], size: int) -> list[Sequence[Any]]:
    return [items[i : i + size] for i in range(0, len(items), size)]


# ---------------------------------------------------------------------------
# Charts (matplotlib, SVG text).


def _svg_text(figure: Any) -> str:
    buffer = io.StringIO()
    figure.savefig(buffer, format="svg", metadata={"Date": None})
    return buffer.getvalue()


def _figure_height_in(bars: int) -> float:
    return 0.75 + ROW_PITCH_IN * bars


def _style_axes(axes: Any, labels: Sequence[str]) -> None:
    axes.set_yticks(range(len(labels)), [chart_label(label) for label in labels])
    axes.set_ylim(len(labels) - 0.5, -0.5)  # first row on top, as in the table
    axes.tick_params(axis="y", length=0, pad=4)
    axes.tick_params(axis="x", length=2.5, width=0.5)
    axes.grid(axis="x", color=GRID, linewidth=0.5)
    axes.set_axisbelow(True)
    for side in ("top", "right", "left"):
        axes.spines[side].set_visible(False)
    axes.spines["bottom"].set_linewidth(0.5)


def deductions_svg(rows: Sequence[Mapping[str, Any]], labels: Sequence[str]) -> str:
    """Stacked horizontal bars: each deduction as % of gross removals, then issuable credits as the pale rest.

    Positive shares stack rightwards from 0, a negative share (a baseline that
    is a net emission) leftwards, so every segment keeps its true length.
    """
    import matplotlib
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch

    with matplotlib.rc_context(chart_style(SVG_HASH_SALT)):
        figure = Figure(figsize=(10.2, _figure_height_in(len(rows)) + 0.35))
        axes = figure.add_axes((0.27, 0.42 / figure.get_figheight(), 0.64, 1 - 0.87 / figure.get_figheight()))
        right_edge, left_edge = 100.0, 0.0
        for y, row in enumerate(rows):
            right, left = 0.0, 0.0
            for key, _name, colour in SEGMENTS:
                share = finite_number(row.get(key)) or 0.0
                start = right if share >= 0 else left
                axes.barh(y, share, left=start, height=0.62, color=colour, linewidth=0)
                right, left = (right + share, left) if share >= 0 else (right, left + share)
            issuable = _issuable_pct(row)
            axes.barh(y, issuable, left=right, height=0.62, color=REMAINDER, linewidth=0)
            deducted = right + left
            axes.text(max(right + issuable, 100.0) + 1.5, y, f"{deducted:,.1f} % deducted",
                      va="center", ha="left", color=INK, fontsize=7)
            right_edge, left_edge = max(right_edge, right + issuable), min(left_edge, left)
        axes.axvline(0.0, color=INK, linewidth=0.7)
        axes.axvline(100.0, color=MUTED, linewidth=0.6, linestyle="--")
        axes.set_xlim(left_edge - 2.0, right_edge * 1.16)
        axes.set_xlabel("% of gross removals")
        _style_axes(axes, labels)
        handles = [Patch(color=colour, label=name) for _key, name, colour in SEGMENTS]
        handles.append(Patch(color=REMAINDER, label="Issuable credits"))
        figure.legend(handles=handles, loc="upper center", ncol=len(handles), frameon=False,
                      bbox_to_anchor=(0.59, 1.0), fontsize=7, handlelength=1.2, columnspacing=1.2)
        return _svg_text(figure)


def _issuable_pct(row: Mapping[str, Any]) -> float:
    issuable, gross = finite_number(row.get("issuable_credits")), finite_number(row.get("gross_removals_tco2e"))
    if issuable is None or gross is None or gross <= 0.0:
        return 0.0
    return issuable / gross * 100.0


def uncertainty_svg(rows: Sequence[Mapping[str, Any]], labels: Sequence[str]) -> str:
    """Horizontal bars: uncertainty of net removals (% of net) with the confidence level beside each value."""
    import matplotlib
    from matplotlib.figure import Figure

    values = [finite_number(row.get("uncertainty_pct")) for row in rows]
    top = max([v for v in values if v is not None] + [1.0])
    with matplotlib.rc_context(chart_style(SVG_HASH_SALT)):
        figure = Figure(figsize=(10.2, _figure_height_in(len(rows))))
        axes = figure.add_axes((0.27, 0.42 / figure.get_figheight(), 0.64, 1 - 0.52 / figure.get_figheight()))
        for y, (row, value) in enumerate(zip(rows, values)):
            confidence = finite_number(row.get("confidence_pct"))
            at = f" at {confidence:g} % confidence" if confidence is not None else ""
            if value is None:
                axes.text(0.0, y, "  not defined: net removals not positive", va="center", color=MUTED, fontsize=7)
                continue
            axes.barh(y, value, height=0.62, color=UNCERTAINTY_COLOUR, linewidth=0)
            axes.text(value + top * 0.015, y, f"{value:,.1f} %{at}", va="center", ha="left", color=INK, fontsize=7)
        axes.set_xlim(0.0, top * 1.35)
        axes.set_xlabel("Uncertainty of net removals (% of net removals, half-width of the confidence interval)")
        _style_axes(axes, labels)
        return _svg_text(figure)


# ---------------------------------------------------------------------------
# Rendering.


def portfolio_context(document: Mapping[str, Any]) -> tuple[dict[str, Any], dict[str, str]]:
    """What the template shows, and the SVG text of every chart by its data: URL."""
    rows = [row for row in document.get("rows") or [] if isinstance(row, Mapping)]
    rows = [dict(row, label=label) for row, label in zip(rows, display_labels(rows))]
    screened = by_issuable_credits(rows)
    problems = [row for row in rows if row.get("status") != "ok"]
    svgs: dict[str, str] = {}
    chart_pages = []
    for chunk in _chunks(screened, CHART_ROWS_PER_FIGURE):
        chunk_labels = [row["label"] for row in chunk]
        page = {}
        for name, svg in (("deductions", deductions_svg(chunk, chunk_labels)),
                          ("uncertainty", uncertainty_svg(chunk, chunk_labels))):
            page[name] = svg_data_url(svg)
            svgs[page[name]] = svg
        chart_pages.append(page)
    run_date = str((document.get("tool") or {}).get("run_date") or "")
    context = {
        "tool": document.get("tool") or {},
        "summary": document.get("summary") or {},
        "pdf_date": run_date if _is_iso_date(run_date) else None,
        "screened": screened,
        "problems": problems,
        "chart_pages": chart_pages,
        "columns": document.get("columns") or [],
        "cautions": document.get("cautions") or [],
    }
    return context, svgs


def _is_iso_date(text: str) -> bool:
    try:
        dt.date.fromisoformat(text)
    except ValueError:
        return False
    return True


def _render(document: Mapping[str, Any], root: Path) -> tuple[str, dict[str, tuple[bytes, str]]]:
    context, svgs = portfolio_context(document)
    html = template_environment(root).get_template(TEMPLATE_NAME).render(**context)
    embedded = {url: (svg.encode("utf-8"), "image/svg+xml") for url, svg in svgs.items()}
    return html, embedded


def render_portfolio_html(document: Mapping[str, Any]) -> str:
    """The HTML that :func:`render_portfolio_pdf` prints (for tests and debugging)."""
    html, _ = _render(document, templates_dir())
    return html


def _epoch_of(run_date: str | None) -> int:
    if not run_date:
        return 0
    midnight = dt.datetime.combine(dt.date.fromisoformat(run_date), dt.time(0, 0), tzinfo=dt.timezone.utc)
    return int(midnight.timestamp())


def render_portfolio_pdf(document: Mapping[str, Any]) -> bytes:
    """The PDF bytes; the same document always gives the same bytes on the same installation."""
    import weasyprint

    root = templates_dir()
    html, embedded = _render(document, root)
    fetcher = make_url_fetcher(ResourcePolicy(root, embedded))
    page = weasyprint.HTML(string=html, base_url=root.as_uri() + "/", url_fetcher=fetcher)
    run_date = str((document.get("tool") or {}).get("run_date") or "")
    with fixed_source_date_epoch(_epoch_of(run_date if _is_iso_date(run_date) else None)):
        return page.write_pdf(pdf_identifier=True)


def write_portfolio_pdf(document: Mapping[str, Any], path: Path, protected: tuple[Path, ...] = ()) -> Path:
    """Write portfolio.pdf atomically; never over a ``protected`` file (the screened workbooks)."""
    from .atomic import atomic_path

    data = render_portfolio_pdf(document)
    with atomic_path(Path(path), protected) as temporary:
        temporary.write_bytes(data)
    return Path(path)
