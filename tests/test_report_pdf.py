"""PDF summary: content, escaping, resource policy, reproducible bytes, cheap import.

tests/data/sample_results.json is invented demo data in the results.json shape
(a fictional forest project); its method rows name real sources only as
labels to print, nothing is computed from them here. Text is read back with
pypdf, an implementation independent of the renderer.
"""

from __future__ import annotations

import copy
import json
import os
import re
import subprocess
import sys
import textwrap
from dataclasses import dataclass
from pathlib import Path

import pytest
from pypdf import PdfReader

from verify import charts
from verify.report_pdf import (
    EM_DASH,
    RefusedURL,
    ResourcePolicy,
    format_credits,
    format_pct,
    format_plain,
    format_share,
    format_tonnes,
    make_url_fetcher,
    record,
    render_summary_html,
    templates_dir,
    vintage_tables,
    write_summary_pdf,
)

SAMPLE_PATH = Path(__file__).parent / "data" / "sample_results.json"
INJECTED_MARKUP = '<img src="http://example.invalid/x.png"> <img src="file:///etc/passwd">'


def squeeze(text: str) -> str:
    """Text without any whitespace: PDF extraction wraps long values (the hash) across lines."""
    return re.sub(r"\s+", "", text)


@dataclass(frozen=True)
class Rendered:
    path: Path
    pdf_bytes: bytes
    text: str
    requested_urls: list[str]


@pytest.fixture(scope="module")
def sample_results() -> dict:
    return json.loads(SAMPLE_PATH.read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def injected_results(sample_results: dict) -> dict:
    results = copy.deepcopy(sample_results)
    results["project"]["project_name"] = "Kestrel Ridge " + INJECTED_MARKUP
    return results


@pytest.fixture(scope="module")
def rendered(injected_results: dict, tmp_path_factory: pytest.TempPathFactory) -> Rendered:
    """One render for the module, recording every URL weasyprint asks the policy for."""
    requested: list[str] = []
    original_open = ResourcePolicy.open

    def recording_open(self: ResourcePolicy, url: str) -> tuple[bytes, str]:
        requested.append(url)
        return original_open(self, url)

    path = tmp_path_factory.mktemp("report") / "summary.pdf"
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(ResourcePolicy, "open", recording_open)
        write_summary_pdf(injected_results, path)
    text = "\n".join(page.extract_text() for page in PdfReader(path).pages)
    return Rendered(path, path.read_bytes(), text, requested)


# --- content -----------------------------------------------------------------


def test_headline_issuable_credits_is_printed_with_thousands_separator(rendered: Rendered, sample_results: dict) -> None:
    assert sample_results["totals"]["issuable_credits"] == 13866
    assert "13,866" in rendered.text


def test_input_sha256_is_printed(rendered: Rendered, sample_results: dict) -> None:
    sha256 = sample_results["input"]["sha256"]
    assert re.fullmatch(r"[0-9a-f]{64}", sha256)
    assert sha256 in squeeze(rendered.text)


def test_every_caution_is_printed(rendered: Rendered, sample_results: dict) -> None:
    assert sample_results["cautions"]
    for caution in sample_results["cautions"]:
        assert squeeze(caution) in squeeze(rendered.text)


def test_page_numbers_say_page_x_of_y(rendered: Rendered) -> None:
    pages = len(PdfReader(rendered.path).pages)
    assert pages >= 2
    assert f"page 1 of {pages}" in rendered.text
    assert f"page {pages} of {pages}" in rendered.text


def test_markup_in_project_name_is_printed_as_text(rendered: Rendered) -> None:
    assert squeeze(INJECTED_MARKUP) in squeeze(rendered.text)


def test_renderer_loaded_only_the_stylesheet_and_its_own_charts(rendered: Rendered) -> None:
    stylesheet = (templates_dir() / "summary.css").as_uri()
    assert stylesheet in rendered.requested_urls
    for url in rendered.requested_urls:
        assert url == stylesheet or url.startswith("data:image/svg+xml;base64,"), url
        assert "example.invalid" not in url and "/etc/passwd" not in url


# --- resource policy ---------------------------------------------------------


REFUSED_URLS = [
    "http://example.invalid/x.png",
    "https://example.invalid/style.css",
    "ftp://example.invalid/font.ttf",
    "//example.invalid/x.png",
    "file:///etc/passwd",
    "file://otherhost/etc/passwd",
    "data:image/svg+xml;base64,PHN2Zy8+",
]


@pytest.mark.parametrize("url", REFUSED_URLS)
def test_policy_refuses_network_foreign_files_and_foreign_data(url: str) -> None:
    with pytest.raises(RefusedURL):
        ResourcePolicy(templates_dir()).open(url)


def test_policy_refuses_escape_from_templates_dir_and_template_source() -> None:
    root = templates_dir()
    policy = ResourcePolicy(root)
    with pytest.raises(RefusedURL):
        policy.open(root.as_uri() + "/../pyproject.toml")
    with pytest.raises(RefusedURL):
        policy.open((root / "summary.html.j2").as_uri())


def test_policy_serves_stylesheet_and_registered_chart() -> None:
    root = templates_dir()
    chart_url = "data:image/svg+xml;base64,PHN2Zy8+"
    policy = ResourcePolicy(root, {chart_url: (b"<svg/>", "image/svg+xml")})
    assert policy.open((root / "summary.css").as_uri()) == ((root / "summary.css").read_bytes(), "text/css")
    assert policy.open(chart_url) == (b"<svg/>", "image/svg+xml")


@pytest.mark.parametrize("url", ["http://example.invalid/x.png", "file:///etc/passwd"])
def test_weasyprint_fetcher_refuses(url: str) -> None:
    fetcher = make_url_fetcher(ResourcePolicy(templates_dir()))
    with pytest.raises(RefusedURL):
        fetcher.fetch(url)
    with pytest.raises(RefusedURL):
        fetcher(url)


# --- reproducibility and writing ---------------------------------------------


def test_second_write_in_process_gives_identical_bytes_and_leaves_no_temp_file(
    rendered: Rendered, injected_results: dict
) -> None:
    write_summary_pdf(injected_results, rendered.path)  # overwrites the fixture's file
    assert rendered.path.read_bytes() == rendered.pdf_bytes
    assert [p.name for p in rendered.path.parent.iterdir()] == ["summary.pdf"]


def test_write_in_another_process_gives_identical_bytes(
    rendered: Rendered, injected_results: dict, tmp_path: Path
) -> None:
    results_path = tmp_path / "results.json"
    results_path.write_text(json.dumps(injected_results), encoding="utf-8")
    script = textwrap.dedent(
        f"""
        import json, pathlib
        from verify.report_pdf import write_summary_pdf
        results = json.loads(pathlib.Path({str(results_path)!r}).read_text(encoding="utf-8"))
        write_summary_pdf(results, pathlib.Path({str(tmp_path / "again.pdf")!r}))
        """
    )
    # A different hash seed catches output that depends on set or dict-of-str ordering.
    env = {**os.environ, "PYTHONHASHSEED": "12345"}
    subprocess.run([sys.executable, "-c", script], check=True, env=env, timeout=300)
    assert (tmp_path / "again.pdf").read_bytes() == rendered.pdf_bytes


def test_import_does_not_load_weasyprint_or_matplotlib() -> None:
    script = (
        "import sys, verify.report_pdf, verify.charts\n"
        "print(sorted(m for m in sys.modules if m.split('.')[0] in {'weasyprint', 'matplotlib', 'jinja2'}))"
    )
    completed = subprocess.run([sys.executable, "-c", script], check=True, capture_output=True, text=True, timeout=120)
    assert completed.stdout.strip() == "[]"


# --- HTML view and formatting --------------------------------------------------


def test_optional_sections_render_only_when_present(sample_results: dict) -> None:
    with_sections = render_summary_html(sample_results)
    assert "Reconciliation with the claim" in with_sections
    assert "Check plots" in with_sections
    without = copy.deepcopy(sample_results)
    without["reconciliation"] = None
    without["check_plots"] = None
    html = render_summary_html(without)
    assert "Reconciliation with the claim" not in html
    assert "Check plots" not in html


def test_html_escapes_markup_from_the_results(injected_results: dict) -> None:
    html = render_summary_html(injected_results)
    assert INJECTED_MARKUP not in html
    assert "&lt;img src=&#34;http://example.invalid/x.png&#34;&gt;" in html


def test_missing_data_renders_with_dashes_and_default_cautions() -> None:
    html = render_summary_html({"totals": {"net_removals_tco2e": -250.0, "uncertainty_pct": None}})
    assert "Net removals are not positive" in html
    assert "not an assurance statement" in html
    assert EM_DASH in html


def test_number_formats() -> None:
    # Expected strings written by hand from the rules: tonnes 1 decimal, credits integers,
    # % 1 decimal, thousands separators, missing values as an em dash, negatives with a plain minus.
    assert format_tonnes(18642.83) == "18,642.8"
    assert format_tonnes(-1210.44) == "-1,210.4"
    assert format_tonnes(-0.04) == "0.0"
    assert format_tonnes(None) == EM_DASH
    assert format_tonnes(float("nan")) == EM_DASH
    assert format_credits(13866) == "13,866"
    assert format_pct(12.46) == "12.5"
    assert format_share(0.45604) == "45.6"
    assert format_plain(20240301) == "20240301"
    assert format_plain(27.0) == "27"
    assert format_plain(1234567.8) == "1234567.8"
    assert format_plain(True) == "yes"
    assert format_plain("Trees!E17") == "Trees!E17"


def test_waterfall_svg_is_deterministic_and_undated(sample_results: dict) -> None:
    first = charts.waterfall_svg(sample_results["totals"])
    assert first == charts.waterfall_svg(sample_results["totals"])
    assert "<svg" in first and "<dc:date>" not in first


def test_waterfall_steps_walk_from_gross_to_net(sample_results: dict) -> None:
    totals = sample_results["totals"]
    steps = charts.waterfall_steps(totals)
    after_leakage = sum(step.value_tco2e for step in steps[:4])
    # The sample's net removals = gross - baseline - emissions - leakage (accounting.md §5), to rounding.
    assert after_leakage == pytest.approx(totals["net_removals_tco2e"], abs=0.15)
    assert charts.running_minimum(charts.waterfall_steps({"gross_removals_tco2e": 100.0, "net_removals_tco2e": -40.0})) == -40.0


def test_many_vintages_are_split_into_tables_with_one_total_column() -> None:
    vintages = [{"vintage": 2020 + i, "days": 365, "share": 1 / 7, "issuable_credits": 100} for i in range(7)]
    tables = vintage_tables([record(v, "vintage") for v in vintages], record({"issuable_credits": 700}, "totals"))
    assert [t["headers"] for t in tables] == [
        ["2020", "2021", "2022", "2023", "2024"],
        ["2025", "2026", "Total"],
    ]
    days_row = tables[-1]["rows"][0]
    assert days_row["label"] == "Days in period" and days_row["cells"][-1] == "2,555"  # 7 x 365
    credits_row = tables[-1]["rows"][-1]
    assert credits_row["cells"] == ["100", "100", "700"]
