"""Buyer screening: many workbooks, one row each, three outputs.

The workbooks are generated from conftest.minimal_forest() with variations.
Each screened row is checked against ``verify.engine.run`` (the library) and,
where a number can be rebuilt from the published equations, by hand as well.
"""

from __future__ import annotations

import datetime as dt
import io
import json
import multiprocessing
import os
import re
from pathlib import Path

import openpyxl
import pytest
from pypdf import PdfReader
from typer.testing import CliRunner

import verify.screen as screen_module
from conftest import minimal_forest, project_rows, table, write_workbook
from verify.atomic import OutputRefused
from verify.cli import app
from verify.engine import run
from verify.screen import (
    COLUMNS,
    DURABILITY,
    StderrProgress,
    discover_workbooks,
    portfolio_validator,
    project_row,
    screen,
    write_portfolio,
)

runner = CliRunner()
RUN_DATE = dt.date(2026, 1, 1)
EPOCH_2026_01_01 = "1767225600"  # 2026-01-01T00:00:00Z
BROKEN, NOT_A_WORKBOOK, DYING = "e_broken.xlsx", "f_not_a_workbook.xlsx", "b_birch.xlsx"


def chave_2014_eq4_kg(rho_g_cm3: float, dbh_cm: float, height_m: float) -> float:
    """Chave et al. (2014) Glob. Change Biol. 20:3177, Eq. 4: AGB = 0.0673 (rho D^2 H)^0.976."""
    return 0.0673 * (rho_g_cm3 * dbh_cm**2 * height_m) ** 0.976


def tree_tco2e(dbh_cm: float) -> float:
    # BGB = AGB x R (0.24), C = (AGB + BGB) x CF (0.47), CO2 = C x 44/12 (accounting.md section 1)
    return chave_2014_eq4_kg(0.6, dbh_cm, 15.0) * (1 + 0.24) * 0.47 * 44 / 12 / 1000


def second_stratum(sheets: dict) -> dict:
    """Add stratum S2 (50 ha) with two permanent plots that grow 20 -> 21 cm."""
    sheets["Strata"].append(["S2", 50.0, "second stratum"])
    sheets["Baseline"].append(["S2", 0.2, 10.0])
    plots, trees = table("Plots"), table("Trees")
    headers_p, headers_t = plots[0], trees[0]
    for plot in ("P3", "P4"):
        for event, day, dbh in (("start", dt.date(2024, 1, 10), 20.0), ("end", dt.date(2024, 12, 20), 21.0)):
            record = {"plot_id": plot, "stratum_id": "S2", "event": event, "measured_on": day, "plot_area_m2": 500.0}
            sheets["Plots"].append([record.get(h) for h in headers_p])
            for tree in ("1", "2"):
                record = {"plot_id": plot, "event": event, "tree_id": tree, "species": "Alpha",
                          "dbh_cm": dbh, "height_m": 15.0, "status": "live"}
                sheets["Trees"].append([record.get(h) for h in headers_t])
    return sheets


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("projects")
    sheets = minimal_forest()
    sheets["Project"] = project_rows(project_name="Alder Creek", project_id="A-1")
    write_workbook(root / "a_alder.xlsx", sheets)

    sheets = minimal_forest()
    sheets["Project"] = project_rows(project_name="Birch Hollow", project_id="B-2")
    sheets["Risk"] = table("Risk", {"risk_factor": "fire", "score_pct": 20.0}, {"risk_factor": "pests", "score_pct": 5.0})
    write_workbook(root / DYING, sheets)

    sheets = minimal_forest()
    sheets["Project"] = project_rows(project_name="Cedar Ridge", project_id="C-3")
    sheets["Leakage"] = table("Leakage", {"leakage_type": "activity_shifting", "method": "percent",
                                          "value": 15.0, "uncertainty_pct": 30.0})
    (root / "more").mkdir()
    write_workbook(root / "more" / "c_cedar.xlsx", sheets)

    sheets = second_stratum(minimal_forest())
    sheets["Project"] = project_rows(project_name="Dogwood Flats", project_id="D-4")
    write_workbook(root / "d_dogwood.xlsx", sheets)

    sheets = minimal_forest()
    sheets["Project"] = project_rows(project_name="Elm Broken", project_id="E-5")
    sheets["Trees"][1][4] = -1.0  # DBH of the first tree: Trees!E2
    write_workbook(root / BROKEN, sheets)

    (root / NOT_A_WORKBOOK).write_text("plain text, not a zip container")
    return root


@pytest.fixture(scope="module")
def portfolio(folder):
    return screen([folder], jobs=1, run_date=RUN_DATE)


def rows_by_file(portfolio) -> dict[str, dict]:
    return {row["file"]: row for row in portfolio.rows}


def test_one_row_per_workbook_in_sorted_path_order(folder, portfolio):
    expected = sorted((p for p in folder.rglob("*.xlsx")), key=lambda p: p.as_posix())
    assert [row["path"] for row in portfolio.rows] == [str(p) for p in expected]
    assert len(portfolio.rows) == 6
    assert [row["status"] for row in portfolio.rows].count("ok") == 4


def test_screened_rows_carry_the_engine_totals(portfolio):
    for row in portfolio.rows:
        if row["status"] != "ok":
            continue
        document = run(row["path"], run_date=RUN_DATE).to_dict()
        totals = document["totals"]
        assert row["issuable_credits"] == totals["issuable_credits"]
        assert row["net_removals_tco2e"] == totals["net_removals_tco2e"]
        assert row["gross_removals_tco2e"] == totals["gross_removals_tco2e"]
        assert row["uncertainty_pct"] == totals["uncertainty_pct"]
        assert row["buffer_pct"] == totals["buffer_pct"]
        # Deduction share by hand from the same totals: baseline / gross * 100.
        assert row["baseline_pct_of_gross"] == pytest.approx(
            totals["baseline_tco2e"] / totals["gross_removals_tco2e"] * 100)
        assert row["buffer_pct_of_gross"] == pytest.approx(totals["buffer_tco2e"] / totals["gross_removals_tco2e"] * 100)
        assert row["vintages"] == [v["vintage"] for v in document["vintages"]]
        assert row["sha256"] == document["input"]["sha256"]
        assert row["errors"] == 0 and row["materiality"] == "no claims" and row["check_plots"] == "no check plots"
        assert row["durability"] == DURABILITY["forest"]


def test_deduction_shares_recomputed_from_published_equations(portfolio):
    rows = rows_by_file(portfolio)
    # Gross: 100 ha x 20 trees/ha per tree (500 m2 plots) x 2 trees x change per tree,
    # tree stock from Chave et al. (2014) Eq. 4 (see test_engine.py).
    gross = 100 * 20 * 2 * (tree_tco2e(22.0) - tree_tco2e(20.0))
    baseline = 0.5 * 100 * 366 / 365.25   # accounting.md section 2: 2024 has 366 days, Julian year 365.25 d
    assert rows["a_alder.xlsx"]["baseline_pct_of_gross"] == pytest.approx(baseline / gross * 100)
    # Leakage `percent` = value/100 x max(0, gross - baseline) (accounting.md section 4).
    assert rows["c_cedar.xlsx"]["leakage_pct_of_gross"] == pytest.approx(15.0 * (gross - baseline) / gross)
    # Buffer share = sum of the Risk scores, never below the minimum (accounting.md section 7).
    assert rows[DYING]["buffer_pct"] == pytest.approx(25.0)
    # Second stratum: 50 ha x 20 x 2 x (tree(21) - tree(20)) more gross removals.
    second = 50 * 20 * 2 * (tree_tco2e(21.0) - tree_tco2e(20.0))
    assert rows["d_dogwood.xlsx"]["gross_removals_tco2e"] == pytest.approx(gross + second)


def test_failed_workbooks_carry_the_reason_with_the_cell(portfolio):
    rows = rows_by_file(portfolio)
    broken = rows[BROKEN]
    assert broken["status"] == "failed"
    assert broken["reason"].startswith("1 error: Trees!E2: ")
    assert broken["issuable_credits"] is None and broken["net_removals_tco2e"] is None
    assert broken["project_name"] == "Elm Broken" and broken["errors"] == 1
    unreadable = rows[NOT_A_WORKBOOK]
    assert unreadable["status"] == "failed"
    assert unreadable["reason"].startswith(f"1 error: {NOT_A_WORKBOOK}: ")  # the location is the file itself
    assert unreadable["sha256"] is not None and unreadable["project_name"] is None


def test_an_unexpected_exception_becomes_a_row(folder, monkeypatch):
    def failing_run(path, run_date=None):
        if Path(path).name == DYING:
            raise ZeroDivisionError("simulated defect")
        return run(path, run_date)

    monkeypatch.setattr(screen_module, "run", failing_run)
    rows = rows_by_file(screen([folder], jobs=1, run_date=RUN_DATE))
    assert rows[DYING]["status"] == "crashed"
    assert "ZeroDivisionError: simulated defect" in rows[DYING]["reason"]
    assert "Traceback" not in rows[DYING]["reason"]
    assert rows["a_alder.xlsx"]["status"] == "ok"


def die_on_one_workbook(path: str, run_date: dt.date) -> dict:
    """Stands in for the worker: the process running DYING ends abruptly, as if killed."""
    if Path(path).name == DYING:
        os._exit(3)
    return screen_module.project_row(run(path, run_date).to_dict())


@pytest.mark.skipif(multiprocessing.get_start_method() != "fork", reason="the replaced worker reaches children by fork")
def test_a_dead_worker_takes_down_only_its_own_workbook(folder, portfolio, monkeypatch):
    monkeypatch.setattr(screen_module, "screen_one", die_on_one_workbook)
    rows = rows_by_file(screen([folder], jobs=2, run_date=RUN_DATE))
    assert rows[DYING]["status"] == "crashed"
    assert "stopped abruptly" in rows[DYING]["reason"]
    expected = {row["file"]: row for row in portfolio.rows if row["file"] != DYING}
    assert {name: row for name, row in rows.items() if name != DYING} == expected


def test_project_row_verdicts_and_durability(folder):
    document = run(folder / "a_alder.xlsx", run_date=RUN_DATE).to_dict()
    document["reconciliation"] = {"material": True, "misstatement_pct": 7.0}
    document["check_plots"] = {"verdict": "no significant bias"}
    document["project"]["pathway"] = "biochar"
    row = project_row(document)
    assert row["materiality"] == "material"
    assert row["check_plots"] == "no significant bias"
    assert row["durability"].startswith("persistent carbon: fraction remaining after 100 years per IPCC 2019")
    document["reconciliation"] = {"material": False}
    assert project_row(document)["materiality"] == "not material"
    document["reconciliation"] = {"material": None}
    assert project_row(document)["materiality"] == "not determined"
    del document["reconciliation"], document["check_plots"]
    assert project_row(document)["materiality"] == "no claims"
    assert project_row(document)["check_plots"] == "no check plots"
    document["totals"] = dict(document["totals"], gross_removals_tco2e=0.0)
    assert project_row(document)["baseline_pct_of_gross"] is None  # a share of zero gross means nothing
    assert set(project_row(document)) == {c.key for c in COLUMNS}


def test_discovery_skips_lock_files_and_the_output_folder(folder, tmp_path):
    (tmp_path / "~$a.xlsx").write_bytes(b"lock")
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "portfolio.xlsx").write_bytes(b"previous output")
    (tmp_path / "notes.txt").write_text("not a workbook")
    given = folder / "a_alder.xlsx"
    found = discover_workbooks([tmp_path, given, folder / "a_alder.xlsx", tmp_path / "notes.txt"],
                               exclude=[tmp_path / "out"])
    assert found == sorted([given, tmp_path / "notes.txt"], key=lambda p: p.as_posix())


def test_progress_reports_every_workbook(folder):
    seen = []
    screen([folder / "a_alder.xlsx", folder / BROKEN], jobs=1, progress=lambda *a: seen.append(a))
    assert [(done, total) for done, total, _ in seen] == [(1, 2), (2, 2)]

    plain = io.StringIO()
    StderrProgress(plain)(1, 2, Path("x/a.xlsx"))
    assert plain.getvalue() == "screening 1/2 a.xlsx\n"

    class Terminal(io.StringIO):
        def isatty(self) -> bool:
            return True

    terminal = Terminal()
    bar = StderrProgress(terminal)
    bar(1, 2, Path("long_name.xlsx"))
    bar(2, 2, Path("b.xlsx"))
    assert terminal.getvalue() == "\rscreening 1/2 long_name.xlsx\rscreening 2/2 b.xlsx        \n"


def test_outputs_written_and_json_matches_its_schema(portfolio, tmp_path):
    written = write_portfolio(portfolio, tmp_path / "out")
    document = json.loads(written.json.read_text())
    assert sorted(portfolio_validator().iter_errors(document), key=str) == []
    assert document == portfolio.to_dict()
    assert document["summary"] == {"workbooks": 6, "screened": 4, "failed": 2, "crashed": 0}
    sheet = openpyxl.load_workbook(written.xlsx)["Portfolio"]
    assert sheet.auto_filter.ref == f"A1:{openpyxl.utils.get_column_letter(len(COLUMNS))}7"
    assert [cell.value for cell in sheet[1]] == [c.label for c in COLUMNS]
    assert sorted(p.name for p in written.pdf.parent.iterdir()) == ["portfolio.json", "portfolio.pdf", "portfolio.xlsx"]


def test_never_writes_over_a_screened_workbook(tmp_path):
    victim = write_workbook(tmp_path / "portfolio.xlsx", minimal_forest())
    before = victim.read_bytes()
    with pytest.raises(OutputRefused):
        write_portfolio(screen([victim], jobs=1, run_date=RUN_DATE), tmp_path)
    assert victim.read_bytes() == before
    assert not (tmp_path / "portfolio.json").exists()


def squeeze(text: str) -> str:
    return re.sub(r"\s+", "", text)


def test_cli_jobs_2_and_jobs_1_give_identical_outputs(folder, tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH_2026_01_01)
    outputs = {}
    for jobs in ("2", "1"):
        out = tmp_path / f"out{jobs}"
        result = runner.invoke(app, ["screen", str(folder), "--out", str(out), "--jobs", jobs])
        assert result.exit_code == 1, result.output  # two workbooks failed validation
        assert f"failed   {BROKEN}: 1 error: Trees!E2" in result.output
        assert f"wrote {out / 'portfolio.pdf'}" in result.output
        assert "Traceback" not in result.output
        outputs[jobs] = {name: (out / name).read_bytes() for name in ("portfolio.json", "portfolio.xlsx", "portfolio.pdf")}
    assert outputs["2"] == outputs["1"]

    text = squeeze("".join(page.extract_text() for page in PdfReader(io.BytesIO(outputs["1"]["portfolio.pdf"])).pages))
    for phrase in ("recalculationaid,notanassuranceopinion", "Programrules,themethodologyinforce",
                   "ISO14064-3andtheaccreditedverifiergovern", "Howtoreadthis", "nocombinedscore"):
        assert phrase in text
    for name in ("Alder Creek", "Birch Hollow", "Cedar Ridge", "Dogwood Flats", "Elm Broken", NOT_A_WORKBOOK):
        assert squeeze(name) in text


def test_cli_exit_0_and_a_second_run_ignores_the_first_portfolio(tmp_path):
    sheets = minimal_forest()
    sheets["Project"] = project_rows(project_name="Alder Creek")
    write_workbook(tmp_path / "a_alder.xlsx", sheets)
    out = tmp_path / "screening"  # inside the folder screened
    for _ in range(2):
        result = runner.invoke(app, ["screen", str(tmp_path), "--out", str(out), "--jobs", "1"])
        assert result.exit_code == 0, result.output
        assert "ok       a_alder.xlsx: Alder Creek: issuable credits" in result.output
    assert [row["file"] for row in json.loads((out / "portfolio.json").read_text())["rows"]] == ["a_alder.xlsx"]


def test_cli_exit_2_when_no_workbook_is_found(tmp_path):
    result = runner.invoke(app, ["screen", str(tmp_path), "--out", str(tmp_path / "out")])
    assert result.exit_code == 2
    assert not (tmp_path / "out").exists()
