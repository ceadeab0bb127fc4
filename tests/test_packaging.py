"""Both a regular and an editable install find schemas/ and report_templates/ at run time."""

from __future__ import annotations

import os
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

import verify

REPO = Path(__file__).resolve().parents[1]

PROBE = (
    "import verify, pathlib;"
    "from importlib import resources;"
    "from verify.schema import all_sheets;"
    "print(pathlib.Path(verify.__file__).parent);"
    "print(len(all_sheets()));"
    "print(resources.files('verify.report_templates').joinpath('__init__.py').is_file())"
)


def test_editable_or_source_install_reads_repository_resources():
    from importlib import resources

    assert Path(str(resources.files("verify.schemas"))).resolve() == REPO / "schemas"
    assert Path(verify.__file__).resolve().parent == REPO / "verify"


@pytest.fixture(scope="module")
def wheel(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("wheel")
    subprocess.run(
        [sys.executable, "-m", "pip", "wheel", "--no-deps", "--no-build-isolation", "-q", "-w", str(out), str(REPO)],
        check=True, capture_output=True,
    )
    return next(out.glob("*.whl"))


def test_wheel_ships_schemas_and_report_templates(wheel):
    names = set(zipfile.ZipFile(wheel).namelist())
    for schema in (REPO / "schemas").glob("*.json"):
        assert f"verify/schemas/{schema.name}" in names
    for template in (REPO / "report_templates").iterdir():
        if template.suffix in {".html", ".css", ".j2"}:
            assert f"verify/report_templates/{template.name}" in names


def test_regular_install_finds_resources(wheel, tmp_path):
    target = tmp_path / "site"
    subprocess.run([sys.executable, "-m", "pip", "install", "--no-deps", "-q", "--target", str(target), str(wheel)],
                   check=True, capture_output=True)
    env = {**os.environ, "PYTHONPATH": str(target)}
    result = subprocess.run([sys.executable, "-c", PROBE], cwd=tmp_path, env=env,
                            capture_output=True, text=True, check=True)
    package_dir, sheet_count, templates_found = result.stdout.split()
    assert Path(package_dir) == target / "verify"
    assert int(sheet_count) == 15
    assert templates_found == "True"
