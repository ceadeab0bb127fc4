"""PDF summary of one run: a view of the results.json object, rendered with Jinja2 and weasyprint.

Design decisions
----------------
* The same dict that becomes results.json is the only input. It is first
  normalised into plain records with every expected key present (missing keys
  become ``None`` and print as an em dash), so bad or partial data never makes
  the report fail and the template can use ``StrictUndefined`` to catch typos.
* Templates live in the package ``verify.report_templates`` and are rendered
  with autoescaping always on: a project name containing markup prints as text.
* Resources: the renderer may load only (a) files inside the templates
  directory with a stylesheet, image or font suffix and (b) the ``data:`` URLs
  of the charts this module generated for this very document (exact string
  match). Every network URL, every other ``file:`` URL and every other
  ``data:`` URL is refused (:class:`ResourcePolicy`).
* Reproducible bytes: the PDF creation and modification dates are midnight
  UTC at the end of the monitoring period (not the wall clock), and so is
  ``SOURCE_DATE_EPOCH`` while weasyprint writes (it fixes the timestamps of the
  embedded font subsets); the PDF /ID is derived from the content (weasyprint
  ``pdf_identifier=True``); the charts use a fixed SVG hash salt and no date.
  The date of the run is printed on the cover from ``tool.run_date``.
* weasyprint, matplotlib and Jinja2 are imported inside the functions that use
  them so that ``import verify.report_pdf`` stays cheap.
"""

from __future__ import annotations

import base64
import contextlib
import math
import os
from collections.abc import Callable, Iterator, Mapping
from datetime import date, datetime, time, timezone
from importlib import resources
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

from verify.accounting import TOTAL_KEYS
from verify.atomic import write_bytes_atomic

TEMPLATE_PACKAGE = "verify.report_templates"
TEMPLATE_NAME = "summary.html.j2"
EM_DASH = "\u2014"
# Shown when the results carry no cautions: every report carries them (accounting.md, "Cautions").
DEFAULT_CAUTIONS = (
    "This output is a recalculation aid, not an assurance statement.",
    "Program rules, the applicable methodology, ISO 14064-2/-3 and the accredited verification body's "
    "judgement govern.",
    "Defaults shown are published defaults or common practice and must be replaced by program-approved "
    "values where required.",
)

# Suffixes a template may load from its own directory; templates and code are not served.
SERVED_SUFFIXES = {
    ".css": "text/css",
    ".svg": "image/svg+xml",
    ".png": "image/png",
    ".ttf": "font/ttf",
    ".otf": "font/otf",
    ".woff": "font/woff",
    ".woff2": "font/woff2",
}

TOTALS_KEYS = TOTAL_KEYS
RECORD_KEYS: dict[str, tuple[str, ...]] = {
    "tool": ("name", "version", "run_date"),
    "input": ("path", "file_name", "sha256"),
    "project": (
        "project_name", "project_id", "pathway", "country", "region",
        "period_start", "period_end", "prepared_by",
    ),
    "totals": TOTALS_KEYS,
    "half_widths_tco2e": ("gross", "baseline", "project_emissions", "leakage", "net"),
    "monte_carlo": ("draws", "seed", "mean_tco2e", "lower_tco2e", "upper_tco2e", "confidence_pct", "distributions"),
    "vintage": ("vintage", "days", "share", *TOTALS_KEYS),
    "stratum": (
        "stratum_id", "area_ha", "estimator", "n_first", "n_last", "n_paired",
        "stock_first_tco2e", "stock_last_tco2e", "change_tco2e", "standard_error_tco2e",
        "df", "half_width_tco2e", "uncertainty_pct",
    ),
    "reversal": (
        "measured_reversal_tco2e", "reported_losses_tco2e", "avoidable_tco2e",
        "unavoidable_tco2e", "to_cancel_from_buffer_tco2e", "to_compensate_tco2e",
    ),
    "finding": ("severity", "code", "location", "message"),
    "method": ("name", "value", "unit", "source"),
    "reconciliation": (
        "materiality_pct", "claimed_issuable", "recomputed_issuable", "misstatement_tco2e",
        "misstatement_pct", "material", "rows",
    ),
    "reconciliation_row": ("vintage", "item", "claimed", "recomputed", "difference_tco2e", "difference_pct"),
    "check_plots": (
        "n_trees", "dbh_within_tolerance_pct", "height_within_tolerance_pct", "dbh_tolerance",
        "height_tolerance", "plots", "mean_bias_pct", "bias_interval_pct", "t_statistic", "df",
        "p_value", "verdict",
    ),
    "check_plot": ("plot_id", "event", "proponent_tco2e_per_ha", "verifier_tco2e_per_ha", "difference_tco2e_per_ha"),
}

SETTING_LABELS = {
    "gwp_set": "GWP100 set",
    "confidence_pct": "Confidence level",
    "uncertainty_rule": "Uncertainty deduction rule",
    "uncertainty_threshold_pct": "Uncertainty threshold",
    "uncertainty_method": "Uncertainty method",
    "monte_carlo_draws": "Monte Carlo draws",
    "random_seed": "Random seed",
    "buffer_minimum_pct": "Minimum buffer share",
    "materiality_pct": "Materiality threshold",
}
WORD_VALUED_SETTINGS = {"uncertainty_rule", "uncertainty_method"}

# (label, key in a vintage/totals record, formatter name, emphasised row)
VINTAGE_ROWS = (
    ("Days in period", "days", "integer", False),
    ("Share of period (%)", "share", "share", False),
    ("Gross removals", "gross_removals_tco2e", "tonnes", False),
    ("Baseline removals", "baseline_tco2e", "tonnes", False),
    ("Project emissions", "project_emissions_tco2e", "tonnes", False),
    ("Leakage", "leakage_tco2e", "tonnes", False),
    ("Net removals", "net_removals_tco2e", "tonnes", True),
    ("Uncertainty (%)", "uncertainty_pct", "pct", False),
    ("Uncertainty deduction", "uncertainty_deduction_tco2e", "tonnes", False),
    ("Buffer share (%)", "buffer_pct", "pct", False),
    ("Buffer", "buffer_tco2e", "tonnes", False),
    ("Issuable credits", "issuable_credits", "credits", True),
)
VINTAGES_PER_TABLE = 5
SEVERITY_RANK = {"error": 0, "warning": 1, "note": 2}


class RefusedURL(ValueError):
    """The report renderer asked for a resource the policy does not allow."""


# ---------------------------------------------------------------------------
# Number formatting: tonnes with 1 decimal, credits as integers, % with 1 decimal,
# thousands separators everywhere, missing values as an em dash.


def finite_number(value: Any) -> float | None:
    """``value`` as a float when it is a real, finite number (bools are not numbers here)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return float(value) if math.isfinite(value) else None


def _fixed(value: Any, decimals: int) -> str:
    number = finite_number(value)
    if number is None:
        return EM_DASH if value is None or isinstance(value, (int, float)) else str(value)
    if round(number, decimals) == 0:
        number = 0.0  # no "-0.0" for a value that rounds to zero
    return f"{number:,.{decimals}f}"


def format_tonnes(value: Any) -> str:
    """tCO2e with one decimal and thousands separators: 18642.83 -> ``18,642.8``."""
    return _fixed(value, 1)


def format_credits(value: Any) -> str:
    """Whole credits with thousands separators: 13866 -> ``13,866``."""
    return _fixed(value, 0)


def format_pct(value: Any) -> str:
    """A percentage with one decimal, without the sign: 12.46 -> ``12.5``."""
    return _fixed(value, 1)


def format_share(value: Any) -> str:
    """A fraction shown as a percentage with one decimal: 0.456 -> ``45.6``."""
    number = finite_number(value)
    return _fixed(value if number is None else number * 100.0, 1)


def format_integer(value: Any) -> str:
    """A count with thousands separators: 10000 -> ``10,000``."""
    return _fixed(value, 0)


def format_amount(value: Any) -> str:
    """Credits (integers) as whole numbers, tonnes (floats) with one decimal, for columns that mix them."""
    return format_credits(value) if isinstance(value, int) and not isinstance(value, bool) else format_tonnes(value)


def format_plain(value: Any) -> str:
    """Any value as written: identifiers and seeds without separators, booleans as yes/no."""
    if value is None:
        return EM_DASH
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:.10g}" if math.isfinite(value) else EM_DASH
    if isinstance(value, Mapping):
        return "; ".join(f"{key}: {format_plain(item)}" for key, item in value.items())
    if isinstance(value, (list, tuple)):
        return ", ".join(format_plain(item) for item in value)
    return str(value)


def format_statistic(value: Any) -> str:
    """A test statistic or p-value with three significant digits: 0.0047057 -> ``0.00471``."""
    number = finite_number(value)
    return EM_DASH if number is None else f"{number:.3g}"


FORMATTERS: dict[str, Callable[[Any], str]] = {
    "statistic": format_statistic,
    "tonnes": format_tonnes,
    "credits": format_credits,
    "pct": format_pct,
    "share": format_share,
    "integer": format_integer,
    "amount": format_amount,
    "plain": format_plain,
}


# ---------------------------------------------------------------------------
# Normalising the results dict into records the template can rely on.


def _mapping(value: Any) -> Mapping[str, Any]:
    return value if isinstance(value, Mapping) else {}


def record(value: Any, kind: str) -> dict[str, Any]:
    """Every key of ``RECORD_KEYS[kind]``, ``None`` where ``value`` lacks it or is not a mapping."""
    source = _mapping(value)
    return {key: source.get(key) for key in RECORD_KEYS[kind]}


def records(value: Any, kind: str) -> list[dict[str, Any]]:
    """A list of records; entries that are not mappings are skipped."""
    if not isinstance(value, (list, tuple)):
        return []
    return [record(item, kind) for item in value if isinstance(item, Mapping)]


def optional_record(value: Any, kind: str) -> dict[str, Any] | None:
    """``None`` for an absent optional section, otherwise its record."""
    return record(value, kind) if isinstance(value, Mapping) else None


def period_days(start: Any, end: Any) -> int | None:
    """Days in the monitoring period, both ends included; ``None`` if either date is not ISO."""
    first, last = parse_iso_date(start), parse_iso_date(end)
    if first is None or last is None:
        return None
    return (last - first).days + 1


def parse_iso_date(value: Any) -> date | None:
    if not isinstance(value, str):
        return None
    try:
        return date.fromisoformat(value)
    except ValueError:
        return None


def settings_rows(settings: Any) -> list[tuple[str, str]]:
    """(label, formatted value) for each setting, known ones first in a fixed order."""
    source = _mapping(settings)
    known = [key for key in SETTING_LABELS if key in source]
    extra = sorted(key for key in source if key not in SETTING_LABELS)
    rows = []
    for key in known + extra:
        value = source[key]
        label = SETTING_LABELS.get(key, key.replace("_", " ").capitalize())
        if key.endswith("_pct") and finite_number(value) is not None:
            text = f"{format_pct(value)} %"
        elif key == "monte_carlo_draws":
            text = format_integer(value)
        elif key in WORD_VALUED_SETTINGS and isinstance(value, str):
            text = value.replace("_", " ")
        else:
            text = format_plain(value)
        rows.append((label, text))
    return rows


def vintage_tables(vintages: list[dict[str, Any]], totals: dict[str, Any]) -> list[dict[str, Any]]:
    """Vintages as columns (items as rows), at most ``VINTAGES_PER_TABLE`` per table, total on the last."""
    day_counts = [finite_number(v["days"]) for v in vintages]
    total_column = dict(totals)
    total_column["days"] = sum(day_counts) if vintages and None not in day_counts else None
    total_column["share"] = 1.0 if vintages else None
    chunks = [vintages[i : i + VINTAGES_PER_TABLE] for i in range(0, len(vintages), VINTAGES_PER_TABLE)] or [[]]
    tables = []
    for index, chunk in enumerate(chunks):
        columns = list(chunk)
        headers = [format_plain(v["vintage"]) for v in chunk]
        if index == len(chunks) - 1:
            columns.append(total_column)
            headers.append("Total")
        rows = [
            {"label": label, "emphasis": emphasis, "cells": [FORMATTERS[kind](column[key]) for column in columns]}
            for label, key, kind, emphasis in VINTAGE_ROWS
        ]
        tables.append({"headers": headers, "rows": rows})
    return tables


def sorted_finding_records(findings: Any) -> list[dict[str, Any]]:
    """Errors, then warnings, then notes (anything else last), keeping the engine's order within each."""
    rows = records(findings, "finding")
    for row in rows:
        row["severity_class"] = row["severity"] if row["severity"] in SEVERITY_RANK else "other"
    return sorted(rows, key=lambda row: SEVERITY_RANK.get(row["severity"], len(SEVERITY_RANK)))


def finding_counts(findings: list[dict[str, Any]]) -> str:
    counts = {severity: 0 for severity in SEVERITY_RANK}
    for row in findings:
        if row["severity"] in counts:
            counts[row["severity"]] += 1
    return ", ".join(f"{n} {severity}{'' if n == 1 else 's'}" for severity, n in counts.items())


def has_reversal(reversal: dict[str, Any]) -> bool:
    return any((finite_number(value) or 0.0) != 0.0 for value in reversal.values())


def report_context(results: Mapping[str, Any]) -> dict[str, Any]:
    """Everything the template shows, with every value present (``None`` when missing)."""
    project = record(results.get("project"), "project")
    totals = record(results.get("totals"), "totals")
    vintages = records(results.get("vintages"), "vintage")
    findings = sorted_finding_records(results.get("findings"))
    reversal = record(results.get("reversal"), "reversal")
    monte_carlo = optional_record(results.get("monte_carlo"), "monte_carlo")
    reconciliation = optional_record(results.get("reconciliation"), "reconciliation")
    if reconciliation is not None:
        reconciliation["rows"] = records(reconciliation["rows"], "reconciliation_row")
    check_plots = optional_record(results.get("check_plots"), "check_plots")
    if check_plots is not None:
        check_plots["plots"] = records(check_plots["plots"], "check_plot")
        interval = check_plots["bias_interval_pct"]
        bounds = list(interval) if isinstance(interval, (list, tuple)) else []
        check_plots["bias_interval_pct"] = (bounds + [None, None])[:2]
    net = finite_number(totals["net_removals_tco2e"])
    end = parse_iso_date(project["period_end"])
    cautions = results.get("cautions")
    return {
        "tool": record(results.get("tool"), "tool"),
        "input": record(results.get("input"), "input"),
        "project": project,
        "period_days": period_days(project["period_start"], project["period_end"]),
        "pdf_date": end.isoformat() if end else None,
        "settings_rows": settings_rows(results.get("settings")),
        "confidence_pct": _mapping(results.get("settings")).get("confidence_pct"),
        "totals": totals,
        "net_not_positive": net is not None and net <= 0,
        "half_widths": record(results.get("half_widths_tco2e"), "half_widths_tco2e"),
        "monte_carlo": monte_carlo,
        "vintage_tables": vintage_tables(vintages, totals),
        "strata": records(results.get("strata"), "stratum"),
        "reversal": reversal,
        "has_reversal": has_reversal(reversal),
        "findings": findings,
        "finding_counts": finding_counts(findings),
        "methods": records(results.get("methods"), "method"),
        "reconciliation": reconciliation,
        "check_plots": check_plots,
        "cautions": [str(c) for c in cautions] if isinstance(cautions, (list, tuple)) and cautions else list(DEFAULT_CAUTIONS),
    }


# ---------------------------------------------------------------------------
# Resources the renderer may load.


def templates_dir() -> Path:
    """The installed ``verify.report_templates`` directory (package data, see pyproject.toml)."""
    root = resources.files(TEMPLATE_PACKAGE)
    if not isinstance(root, Path):
        raise RuntimeError(f"{TEMPLATE_PACKAGE} must be installed as a directory on disk, found {root!r}")
    return root.resolve()


def svg_data_url(svg_text: str) -> str:
    return "data:image/svg+xml;base64," + base64.b64encode(svg_text.encode("utf-8")).decode("ascii")


class ResourcePolicy:
    """Decides every URL the PDF renderer asks for.

    Allowed: ``file:`` URLs of files inside ``root`` (after resolving ``..`` and
    symlinks) whose suffix is in ``SERVED_SUFFIXES``, and the exact ``data:``
    URLs registered in ``embedded`` (the charts made for this document).
    Everything else, including every network scheme, raises :class:`RefusedURL`.
    """

    def __init__(self, root: Path, embedded: Mapping[str, tuple[bytes, str]] | None = None) -> None:
        self.root = root.resolve()
        self._embedded = dict(embedded or {})

    def open(self, url: str) -> tuple[bytes, str]:
        """(body, MIME type) of an allowed URL."""
        scheme = urlsplit(url).scheme.lower()
        if scheme == "data":
            if url in self._embedded:
                return self._embedded[url]
            raise RefusedURL("refused a data: URL that the report did not generate itself")
        if scheme != "file":
            raise RefusedURL(f"refused {scheme or 'relative'} URL {url!r}: the report loads no network resources")
        path = self.local_path(url)
        return path.read_bytes(), SERVED_SUFFIXES[path.suffix.lower()]

    def local_path(self, url: str) -> Path:
        """The file a ``file:`` URL names, if it is a servable file inside ``root``."""
        from urllib.request import url2pathname  # imports http and ssl: keep it out of module import

        parts = urlsplit(url)
        if parts.netloc not in ("", "localhost"):
            raise RefusedURL(f"refused file URL on another host: {url!r}")
        path = Path(url2pathname(parts.path)).resolve()
        if not path.is_relative_to(self.root):
            raise RefusedURL(f"refused file outside the report templates directory: {url!r}")
        if path.suffix.lower() not in SERVED_SUFFIXES or not path.is_file():
            raise RefusedURL(f"refused {url!r}: not a stylesheet, image or font file of the report templates")
        return path


def make_url_fetcher(policy: ResourcePolicy) -> Any:
    """A weasyprint URL fetcher that serves only what ``policy`` allows (refusals become render warnings)."""
    from weasyprint.urls import URLFetcher, URLFetcherResponse

    class PolicyURLFetcher(URLFetcher):
        def fetch(self, url: str, headers: Mapping[str, str] | None = None) -> URLFetcherResponse:
            body, mime_type = policy.open(url)
            return URLFetcherResponse(url, body, {"Content-Type": mime_type})

    return PolicyURLFetcher()


# ---------------------------------------------------------------------------
# Rendering.


def _charts(results: Mapping[str, Any]) -> dict[str, str]:
    """SVG text of each chart the document shows, by name."""
    from verify import charts

    svgs = {"waterfall": charts.waterfall_svg(_mapping(results.get("totals")))}
    check_plots = results.get("check_plots")
    if isinstance(check_plots, Mapping):
        plots = [p for p in check_plots.get("plots") or [] if isinstance(p, Mapping)]
        if plots:
            svgs["check_plots"] = charts.check_plot_svg(plots)
    return svgs


def template_environment(root: Path) -> Any:
    """Jinja2 over ``root``: autoescaped (workbook text is never markup), strict about undefined names."""
    import jinja2

    environment = jinja2.Environment(
        loader=jinja2.FileSystemLoader(root),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    environment.filters.update(FORMATTERS)
    return environment


def _render(results: Mapping[str, Any], root: Path) -> tuple[str, dict[str, tuple[bytes, str]]]:
    """The HTML document and the data: URLs it embeds (url -> (body, MIME type))."""
    svgs = _charts(results)
    chart_urls = {name: svg_data_url(svg) for name, svg in svgs.items()}
    embedded = {chart_urls[name]: (svg.encode("utf-8"), "image/svg+xml") for name, svg in svgs.items()}
    html = template_environment(root).get_template(TEMPLATE_NAME).render(**report_context(results), charts=chart_urls)
    return html, embedded


def render_summary_html(results: dict) -> str:
    """The HTML that :func:`write_summary_pdf` turns into the PDF (for tests and debugging)."""
    html, _ = _render(results, templates_dir())
    return html


def reproducible_epoch(results: Mapping[str, Any]) -> int:
    """Seconds since 1970 for every timestamp inside the PDF: midnight UTC at the period end, else 0."""
    end = parse_iso_date(_mapping(results.get("project")).get("period_end"))
    if end is None:
        return 0
    return int(datetime.combine(end, time(0, 0), tzinfo=timezone.utc).timestamp())


@contextlib.contextmanager
def fixed_source_date_epoch(seconds: int) -> Iterator[None]:
    """Set ``SOURCE_DATE_EPOCH`` while rendering, then restore the caller's value.

    When weasyprint subsets fonts with fontTools (no HarfBuzz subsetter on the
    system), fontTools stamps each font's ``head.modified`` with the clock
    unless ``SOURCE_DATE_EPOCH`` is set (reproducible-builds.org convention).
    The environment is process-wide, so concurrent renders in threads see it too.
    """
    previous = os.environ.get("SOURCE_DATE_EPOCH")
    os.environ["SOURCE_DATE_EPOCH"] = str(seconds)
    try:
        yield
    finally:
        if previous is None:
            os.environ.pop("SOURCE_DATE_EPOCH", None)
        else:
            os.environ["SOURCE_DATE_EPOCH"] = previous


def render_summary_pdf(results: dict) -> bytes:
    """The PDF bytes; the same ``results`` always give the same bytes on the same installation."""
    import weasyprint

    root = templates_dir()
    html, embedded = _render(results, root)
    fetcher = make_url_fetcher(ResourcePolicy(root, embedded))
    document = weasyprint.HTML(string=html, base_url=root.as_uri() + "/", url_fetcher=fetcher)
    with fixed_source_date_epoch(reproducible_epoch(results)):
        return document.write_pdf(pdf_identifier=True)


def write_summary_pdf(results: dict, path: Path, protected: tuple[Path, ...] = ()) -> None:
    """Write the PDF summary of ``results`` (the results.json dict) to ``path``, atomically."""
    write_bytes_atomic(Path(path), render_summary_pdf(results), protected)
