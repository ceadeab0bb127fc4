"""One test per finding code, each asserting the exact cell reported."""

from __future__ import annotations

import datetime as dt

import pytest

from conftest import minimal_forest, project_rows, write_workbook
from verify.workbook import load_workbook

# Trees headers in contract order: A plot_id, B event, C tree_id, D species,
# E dbh_cm, F height_m, G status. Row 2 is the first tree.


def findings_of(tmp_path, sheets):
    return load_workbook(write_workbook(tmp_path / "w.xlsx", sheets)).findings


def codes_at(findings):
    return {(f.code, f.location) for f in findings}


def test_minimal_workbook_is_clean(tmp_path):
    book = load_workbook(write_workbook(tmp_path / "w.xlsx", minimal_forest()))
    assert book.ok, book.findings
    assert [f for f in book.findings if f.severity != "note"] == []
    assert book.project["gwp_set"] == "AR6"  # default from the Project schema
    assert book.table("Trees")["dbh_cm"].tolist()[:2] == [20.0, 20.0]
    assert book.table("Trees")["row"].tolist()[:2] == [2, 3]


def test_missing_sheet(tmp_path):
    sheets = minimal_forest()
    del sheets["Trees"]
    assert ("missing_sheet", "Trees") in codes_at(findings_of(tmp_path, sheets))


def test_absent_optional_sheet_is_a_note(tmp_path):
    sheets = minimal_forest()
    del sheets["Leakage"]
    findings = findings_of(tmp_path, sheets)
    assert [(f.severity, f.code, f.location) for f in findings if f.location == "Leakage"] == [
        ("note", "sheet_absent", "Leakage")
    ]


def test_missing_column_points_at_next_free_header_cell(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"] = [row[:4] + row[5:] for row in sheets["Trees"]]  # drop dbh_cm
    assert ("missing_column", "Trees!G1") in codes_at(findings_of(tmp_path, sheets))


def test_duplicate_column(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"] = [row + [row[4]] for row in sheets["Trees"]]
    assert ("duplicate_column", "Trees!H1") in codes_at(findings_of(tmp_path, sheets))


def test_missing_value(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][2][4] = None
    assert ("missing_value", "Trees!E3") in codes_at(findings_of(tmp_path, sheets))


def test_wrong_type(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][3][4] = "twenty"
    assert ("wrong_type", "Trees!E4") in codes_at(findings_of(tmp_path, sheets))


def test_wrong_date(tmp_path):
    sheets = minimal_forest()
    sheets["Plots"][1][3] = "10/01/2024"
    assert ("wrong_type", "Plots!D2") in codes_at(findings_of(tmp_path, sheets))


def test_iso_text_date_is_accepted(tmp_path):
    sheets = minimal_forest()
    sheets["Plots"][1][3] = "2024-01-10"
    book = load_workbook(write_workbook(tmp_path / "w.xlsx", sheets))
    assert book.ok
    assert book.table("Plots")["measured_on"].iloc[0] == dt.date(2024, 1, 10)


@pytest.mark.parametrize("sheet,row,col,value,cell", [
    ("Trees", 2, 4, -3.0, "Trees!E3"),           # negative DBH
    ("Species", 1, 4, 1.2, "Species!E2"),        # carbon fraction above 1
    ("Strata", 1, 1, 0.0, "Strata!B2"),          # zero area
])
def test_out_of_range(tmp_path, sheet, row, col, value, cell):
    sheets = minimal_forest()
    sheets[sheet][row][col] = value
    assert ("out_of_range", cell) in codes_at(findings_of(tmp_path, sheets))


def test_unknown_choice(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][1][6] = "alive"
    findings = findings_of(tmp_path, sheets)
    assert ("unknown_choice", "Trees!G2") in codes_at(findings)
    assert "live, dead" in next(f.message for f in findings if f.code == "unknown_choice")


def test_duplicate_id_names_first_row(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"].append(list(sheets["Trees"][1]))  # row 10 repeats row 2
    findings = findings_of(tmp_path, sheets)
    duplicate = next(f for f in findings if f.code == "duplicate_id")
    assert duplicate.location == "Trees!C10"
    assert "first at row 2" in duplicate.message


@pytest.mark.parametrize("sheet,row,col,value,cell", [
    ("Trees", 1, 3, "Beta", "Trees!D2"),          # species not on Species
    ("Plots", 1, 1, "S9", "Plots!B2"),            # stratum not on Strata
    ("Trees", 1, 0, "P9", "Trees!B2"),            # (plot, event) not on Plots
    ("Species", 1, 1, "M9", "Species!B2"),        # model not on Allometry
])
def test_unknown_reference(tmp_path, sheet, row, col, value, cell):
    sheets = minimal_forest()
    sheets[sheet][row][col] = value
    assert ("unknown_reference", cell) in codes_at(findings_of(tmp_path, sheets))


def test_period_order(tmp_path):
    sheets = minimal_forest()
    sheets["Project"] = project_rows(period_start=dt.date(2025, 1, 1), period_end=dt.date(2024, 1, 1))
    assert ("period_order", "Project!B7") in codes_at(findings_of(tmp_path, sheets))


def test_missing_project_field_names_where_to_add_it(tmp_path):
    sheets = minimal_forest()
    sheets["Project"] = project_rows(country=None)
    assert ("missing_value", "Project!A7") in codes_at(findings_of(tmp_path, sheets))


def test_unknown_project_field_is_a_warning(tmp_path):
    sheets = minimal_forest()
    sheets["Project"].append(["colour", "green"])
    findings = findings_of(tmp_path, sheets)
    assert [(f.severity, f.location) for f in findings if f.code == "unknown_field"] == [("warning", "Project!A8")]


def test_empty_required_sheet(tmp_path):
    sheets = minimal_forest()
    sheets["Strata"] = sheets["Strata"][:1]
    assert ("empty_sheet", "Strata") in codes_at(findings_of(tmp_path, sheets))


def test_too_few_events(tmp_path):
    sheets = minimal_forest()
    event_column = {"Plots": 2, "Trees": 1}
    for name, column in event_column.items():
        rows = sheets[name]
        sheets[name] = [rows[0]] + [r for r in rows[1:] if r[column] == "start"]
    assert ("too_few_events", "Plots") in codes_at(findings_of(tmp_path, sheets))


def test_model_needs_height(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][4][5] = None
    assert ("model_needs_height", "Trees!F5") in codes_at(findings_of(tmp_path, sheets))


def test_model_needs_density(tmp_path):
    sheets = minimal_forest()
    sheets["Species"][1][2] = None
    assert ("model_needs_density", "Species!C2") in codes_at(findings_of(tmp_path, sheets))


def test_incomplete_subplot(tmp_path):
    sheets = minimal_forest()
    sheets["Plots"][1][5] = 100.0
    assert ("incomplete_subplot", "Plots!G2") in codes_at(findings_of(tmp_path, sheets))


def test_not_a_workbook(tmp_path):
    path = tmp_path / "w.xlsx"
    path.write_text("plot_id,event\nP1,start\n")
    findings = load_workbook(path).findings
    assert [(f.code, f.location) for f in findings] == [("not_a_workbook", "w.xlsx")]


def test_header_with_stray_space_and_case_is_read_with_a_note(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][0][4] = " DBH_cm "
    book = load_workbook(write_workbook(tmp_path / "w.xlsx", sheets))
    assert book.ok
    assert ("header_normalised", "Trees!E1") in codes_at(book.findings)


def test_every_problem_reported_in_one_pass(tmp_path):
    sheets = minimal_forest()
    sheets["Trees"][1][4] = -1.0
    sheets["Trees"][2][6] = "alive"
    sheets["Species"][1][4] = 2.0
    sheets["Plots"][1][1] = "S9"
    found = codes_at(findings_of(tmp_path, sheets))
    assert {("out_of_range", "Trees!E2"), ("unknown_choice", "Trees!G3"),
            ("out_of_range", "Species!E2"), ("unknown_reference", "Plots!B2")} <= found


def test_input_file_is_not_modified(tmp_path):
    path = write_workbook(tmp_path / "w.xlsx", minimal_forest())
    before = path.read_bytes(), path.stat().st_mtime_ns
    load_workbook(path)
    assert (path.read_bytes(), path.stat().st_mtime_ns) == before


def test_reference_needs_the_pair_not_each_part(tmp_path):
    # Plot P2 and event "end" each exist on Plots, but not together: the Trees rows naming
    # (P2, end) point at no plot visit (the workbook contract: a reference names a whole key).
    sheets = minimal_forest()
    header, *rows = sheets["Plots"]
    sheets["Plots"] = [header] + [r for r in rows if not (r[0] == "P2" and r[2] == "end")]
    found = codes_at(findings_of(tmp_path, sheets))
    assert {("unknown_reference", "Trees!B8"), ("unknown_reference", "Trees!B9")} <= found
    assert not any(code == "unknown_reference" and cell != "Trees!B8" and cell != "Trees!B9"
                   for code, cell in found)


@pytest.mark.parametrize("seed", range(6))
def test_key_codes_match_python_tuple_equality(seed):
    # Reference: Python's own equality of key tuples (1 == 1.0, "a" != "A"), compared pairwise.
    import random

    import pandas as pd

    from verify.validation import key_codes

    rng = random.Random(seed)
    pool = ["a", "A", "b", 1, 1.0, 2.5, None]
    width = 1 + seed % 3  # one, two and three key columns

    def table(rows: int) -> pd.DataFrame:
        return pd.DataFrame({f"k{i}": [rng.choice(pool) for _ in range(rows)] for i in range(width)})
    left, right = table(40), table(25)
    codes = [c.tolist() for c in key_codes(left, right)]
    keys = [list(left.itertuples(index=False, name=None)), list(right.itertuples(index=False, name=None))]
    flat = [(k, c) for table_keys, table_codes in zip(keys, codes) for k, c in zip(table_keys, table_codes)]
    for key_a, code_a in flat:
        for key_b, code_b in flat:
            assert (code_a == code_b) == (key_a == key_b), (key_a, key_b)
