"""The command line is a thin wrapper: same answers as the library, documented exit codes."""

from __future__ import annotations

import json
import subprocess
import sys

from typer.testing import CliRunner

from conftest import minimal_forest, write_workbook
from verify import __version__
from verify.cli import app
from verify.workbook import findings_summary, load_workbook

runner = CliRunner()


def test_version():
    result = runner.invoke(app, ["--version"])
    assert result.exit_code == 0
    assert __version__ in result.output


def test_usage_error_exits_2():
    assert runner.invoke(app, ["check"]).exit_code == 2
    assert runner.invoke(app, ["template", "--pathway", "ocean", "-o", "x.xlsx"]).exit_code == 2
    assert runner.invoke(app, ["no-such-command"]).exit_code == 2


def test_template_refuses_non_xlsx_target(tmp_path):
    assert runner.invoke(app, ["template", "-p", "forest", "-o", str(tmp_path / "t.csv")]).exit_code == 2


def test_check_clean_workbook_exits_0(tmp_path):
    path = write_workbook(tmp_path / "w.xlsx", minimal_forest())
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 0, result.output
    assert "0 error(s)" in result.output


def test_check_with_problems_exits_1_and_names_cells(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][1][4] = -5.0
    path = write_workbook(tmp_path / "w.xlsx", sheets)
    result = runner.invoke(app, ["check", str(path)])
    assert result.exit_code == 1
    assert "Trees!E2" in result.output


def test_check_json_equals_library_result(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][1][6] = "alive"
    path = write_workbook(tmp_path / "w.xlsx", sheets)
    result = runner.invoke(app, ["check", "--json", str(path)])
    assert result.exit_code == 1
    assert json.loads(result.output) == findings_summary(load_workbook(path))


def test_check_lists_calculation_findings_of_a_valid_workbook(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][1][4] = 4.0   # below the model's 5 cm minimum: an extrapolation, a warning
    path = write_workbook(tmp_path / "w.xlsx", sheets)
    result = runner.invoke(app, ["check", "--json", str(path)])
    assert result.exit_code == 0
    located = {(f["code"], f["location"]) for f in json.loads(result.output)["findings"]}
    assert ("dbh_outside_model_range", "Trees!E2") in located


def test_missing_file_is_a_finding_not_a_traceback(tmp_path):
    result = runner.invoke(app, ["check", str(tmp_path / "absent.xlsx")])
    assert result.exit_code == 1
    assert "Traceback" not in result.output
    assert "not_a_workbook" in result.output


def test_console_script_runs():
    result = subprocess.run([sys.executable, "-m", "verify", "--version"], capture_output=True, text=True)
    assert result.returncode == 0
    assert __version__ in result.stdout
