"""The template is generated from the schemas and round-trips through the importer."""

from __future__ import annotations

import datetime as dt

import openpyxl
import pytest

from conftest import minimal_forest
from verify.schema import sheets_for
from verify.template import write_template
from verify.workbook import load_workbook


@pytest.mark.parametrize("pathway", ["forest", "soil", "biochar"])
def test_template_sheets_and_headers_follow_the_schemas(tmp_path, pathway):
    path = write_template(pathway, tmp_path / "t.xlsx")
    book = openpyxl.load_workbook(path)
    specs = sheets_for(pathway)
    assert book.sheetnames == ["Instructions"] + [s.name for s in specs]
    for spec in specs:
        ws = book[spec.name]
        assert ws.freeze_panes == "A2"
        if spec.layout == "table":
            assert [c.value for c in ws[1]] == list(spec.headers)
            for cell, column in zip(ws[1], spec.columns):
                assert cell.comment is not None and column.description in cell.comment.text
                if column.unit:
                    assert f"Unit: {column.unit}" in cell.comment.text


def test_template_has_dropdowns_for_enumerations(tmp_path):
    book = openpyxl.load_workbook(write_template("forest", tmp_path / "t.xlsx"))
    rules = {str(rule.sqref): rule for rule in book["Trees"].data_validations.dataValidation}
    assert rules["G2:G200000"].type == "list"
    assert rules["G2:G200000"].formula1 == '"live,dead"'
    assert rules["E2:E200000"].type == "decimal"


def test_template_project_sheet_prefills_pathway_and_defaults(tmp_path):
    ws = openpyxl.load_workbook(write_template("soil", tmp_path / "t.xlsx"))["Project"]
    values = {row[0].value: row[1].value for row in ws.iter_rows(min_row=2)}
    assert values["pathway"] == "soil"
    assert values["gwp_set"] == "AR6"
    assert values["soil_method"] == "fixed_depth"


def test_template_filled_in_passes_check(tmp_path):
    """Round trip: template -> fill the cells as a user would -> check finds no error."""
    path = write_template("forest", tmp_path / "t.xlsx")
    book = openpyxl.load_workbook(path)
    data = minimal_forest()
    project = {row[0]: row[1] for row in data["Project"][1:]}
    for row in book["Project"].iter_rows(min_row=2):
        if row[0].value in project:
            row[1].value = project[row[0].value]
    for name, rows in data.items():
        if name == "Project":
            continue
        ws = book[name]
        headers = [c.value for c in ws[1]]
        assert headers == rows[0]
        for record in rows[1:]:
            ws.append(record)
    book.save(path)
    loaded = load_workbook(path)
    assert loaded.ok, loaded.findings
    assert loaded.project["period_end"] == dt.date(2024, 12, 31)
    assert len(loaded.table("Trees")) == 8
