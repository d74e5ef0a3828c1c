"""sheetnet audit and extract: every edit reported under the right kind at the right cell, no false
positives on untouched files (also after a LibreOffice round trip), inputs never modified."""

from __future__ import annotations

import hashlib
import json
import zipfile
from pathlib import Path

import numpy as np
import openpyxl
import pytest

from sheetnet.net.model import load_model
from tests.test_workbook import CONFIGS, build
from tests.test_workbook_engines import defined_block


@pytest.fixture
def book(tmp_path, run_cli) -> Path:
    return build(tmp_path, run_cli, *CONFIGS["softmax-ce-batch3-momentum-l2"])


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _audit(run_cli, path: Path, *flags) -> tuple[int, dict, str]:
    report = path.parent / f"{path.stem}.audit.json"
    before = _digest(path)
    code, out, err = run_cli("audit", path, "--json", report, "--force", *flags)
    assert _digest(path) == before  # the audited file is never modified
    return code, json.loads(report.read_text()) if report.exists() else {}, out + err


def _cells(report: dict, kind: str) -> set[tuple[str, str]]:
    return {(f["sheet"], f["cell"]) for f in report[kind]}


def test_untouched_workbook_has_no_findings(book, run_cli):
    code, report, out = _audit(run_cli, book)
    assert code == 0, out
    assert report["finding_count"] == 0 and "UNCHANGED" in out


@pytest.mark.slow
@pytest.mark.libreoffice
def test_libreoffice_round_trip_of_untouched_workbook_has_no_findings(book, tmp_path, run_cli):
    from sheetnet.engines.libreoffice import recalculate

    code, report, out = _audit(run_cli, recalculate(book, tmp_path / "lo"))
    assert code == 0, out
    assert report["finding_count"] == 0


def _edit(book: Path, out: Path, change) -> Path:
    wb = openpyxl.load_workbook(book)
    change(wb)
    wb.save(out)
    return out


def _cell_of(book: Path, name: str, i: int = 0, j: int = 0) -> tuple[str, str]:
    from openpyxl.utils.cell import column_index_from_string, coordinate_from_string, get_column_letter

    sheet, corner, _, _ = defined_block(book, name)
    letters, row = coordinate_from_string(corner)
    return sheet, f"{get_column_letter(column_index_from_string(letters) + j)}{row + i}"


def _below_header(book: Path, sheet: str, header: str, rows: int) -> tuple[str, str]:
    ws = openpyxl.load_workbook(book)[sheet]
    for row in ws.iter_rows():
        for c in row:
            if c.value == header:
                return sheet, f"{c.column_letter}{c.row + rows}"
    raise AssertionError(header)


def test_value_edits_are_input_edits_at_their_cells(book, tmp_path, run_cli):
    weight = _cell_of(book, "W_1", 1, 1)
    initial = _cell_of(book, "init_b_2", 2, 0)
    rate = _cell_of(book, "learning_rate")
    data_cell = _below_header(book, "Scoring", "b", 3)

    def change(wb):
        wb[weight[0]][weight[1]].value += 0.5
        wb[initial[0]][initial[1]].value = -0.75
        wb[rate[0]][rate[1]].value = 0.02
        wb[data_cell[0]][data_cell[1]].value = 3.25

    code, report, out = _audit(run_cli, _edit(book, tmp_path / "values.xlsx", change))
    assert code == 3, out
    assert _cells(report, "input_edits") == {weight, initial, rate, data_cell}
    assert not report["formula_edits"] and not report["structural"]
    assert not report["value_mismatches"]  # the formulas still reproduce the trainer on the new inputs
    found = {f["cell"]: (f["expected"], f["found"]) for f in report["input_edits"]}
    assert found[rate[1]][1] == 0.02 and found[data_cell[1]][1] == 3.25


def test_formula_edit_and_pasted_constant_are_formula_edits(book, tmp_path, run_cli):
    z_cell = _below_header(book, "Training record", "z h1_2", 5)
    a_cell = _below_header(book, "Scoring", "a h1_1", 2)

    def change(wb):
        ws = wb[z_cell[0]]
        ws[z_cell[1]].value = ws[z_cell[1]].value.replace("+", "-", 1)
        wb[a_cell[0]][a_cell[1]].value = 0.5

    code, report, _out = _audit(run_cli, _edit(book, tmp_path / "formulas.xlsx", change))
    assert code == 3
    assert _cells(report, "formula_edits") == {z_cell, a_cell}
    assert report["value_mismatches"] and report["first_diverging_step"] is not None


def test_formula_typed_over_an_input(book, tmp_path, run_cli):
    weight = _cell_of(book, "W_2", 0, 0)
    code, report, _ = _audit(run_cli, _edit(book, tmp_path / "f.xlsx",
                                            lambda wb: wb[weight[0]].__setitem__(weight[1], "=0.1*2")))
    assert code == 3 and _cells(report, "formula_edits") == {weight}


def test_inserted_row_in_training_record_is_structural(book, tmp_path, run_cli):
    code, report, out = _audit(run_cli, _edit(book, tmp_path / "row.xlsx",
                                              lambda wb: wb["Training record"].insert_rows(9)))
    assert code == 3, out
    assert _cells(report, "structural") == {("Training record", "A9")}
    assert "inserted" in report["structural"][0]["note"]


def test_renamed_and_hidden_sheets_are_structural(book, tmp_path, run_cli):
    def change(wb):
        wb["Epochs"].title = "Loss by epoch"
        wb["Guide"].sheet_state = "hidden"

    code, report, _out = _audit(run_cli, _edit(book, tmp_path / "sheets.xlsx", change))
    assert code == 3
    notes = " | ".join(f["note"] for f in report["structural"])
    assert "'Epochs' was renamed to 'Loss by epoch'" in notes and "'Guide' was made hidden" in notes
    assert any(f["kind"] == "risks" and f["sheet"] == "Guide" for f in report["risks"])


def test_external_link_is_a_risk(book, tmp_path, run_cli):
    linked = tmp_path / "linked.xlsx"
    with zipfile.ZipFile(book) as src, zipfile.ZipFile(linked, "w", zipfile.ZIP_DEFLATED) as dst:
        for item in src.infolist():
            data = src.read(item.filename)
            if item.filename == "xl/_rels/workbook.xml.rels":
                data = data.replace(b"</Relationships>", b'<Relationship Id="rIdX" Type="http://schemas.'
                                    b'openxmlformats.org/officeDocument/2006/relationships/externalLink" '
                                    b'Target="externalLinks/externalLink1.xml"/></Relationships>')
            dst.writestr(item, data)
        dst.writestr("xl/externalLinks/externalLink1.xml", '<externalLink xmlns="http://schemas.openxmlformats.org/'
                                                           'spreadsheetml/2006/main"/>')
        dst.writestr("xl/externalLinks/_rels/externalLink1.xml.rels",
                     '<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/relationships">'
                     '<Relationship Id="rId1" Type="http://schemas.openxmlformats.org/officeDocument/2006/'
                     'relationships/externalLinkPath" Target="file:///elsewhere/other.xlsx" TargetMode="External"/>'
                     '</Relationships>')
    code, report, _ = _audit(run_cli, linked)
    assert code == 3
    assert any("external link" in f["note"] for f in report["risks"])


def test_against_original_reports_the_same_edits(book, tmp_path, run_cli):
    weight = _cell_of(book, "b_1", 0, 0)
    edited = _edit(book, tmp_path / "e.xlsx", lambda wb: wb[weight[0]].__setitem__(weight[1], 5.0))
    code, report, _ = _audit(run_cli, edited, "--against", book)
    assert code == 3 and _cells(report, "input_edits") == {weight}


def test_annotated_copy_marks_findings(book, tmp_path, run_cli):
    weight = _cell_of(book, "W_1", 0, 0)
    edited = _edit(book, tmp_path / "e.xlsx", lambda wb: wb[weight[0]].__setitem__(weight[1], 7.0))
    out = tmp_path / "annotated.xlsx"
    code, _, _ = _audit(run_cli, edited, "--annotate", out)
    assert code == 3
    wb = openpyxl.load_workbook(out)
    assert wb.sheetnames[0] == "Audit findings"
    marked = wb[weight[0]][weight[1]]
    assert marked.comment is not None and "input_edits" in marked.comment.text
    links = [c.hyperlink.location for row in wb["Audit findings"].iter_rows(min_row=2) for c in row if c.hyperlink]
    assert any(weight[1] in link for link in links)



def test_annotated_copy_keeps_saved_values(book, tmp_path, run_cli):
    """A viewer that does not recalculate still shows the numbers the file saved."""
    out = tmp_path / "annotated.xlsx"
    assert _audit(run_cli, book, "--annotate", out)[0] == 0
    saved, copied = openpyxl.load_workbook(book, data_only=True), openpyxl.load_workbook(out, data_only=True)
    formulas = [(ws.title, c.coordinate) for ws in openpyxl.load_workbook(book).worksheets for row in ws.iter_rows()
                for c in row if c.data_type == "f"]
    assert len(formulas) > 100
    assert all(copied[s][c].value == saved[s][c].value for s, c in formulas)


def test_extract_gives_the_edited_weights(book, tmp_path, run_cli):
    weight = _cell_of(book, "W_1", 2, 1)
    edited = _edit(book, tmp_path / "e.xlsx", lambda wb: wb[weight[0]].__setitem__(weight[1], -1.5))
    code, _, err = run_cli("extract", edited, "-o", tmp_path / "m.json")
    assert code == 0, err
    model = load_model(tmp_path / "m.json")
    assert model.layers[0].weights[2, 1] == -1.5
    original = openpyxl.load_workbook(book, data_only=True)
    _sheet, _corner, rows, cols = defined_block(book, "W_2")
    assert model.layers[1].weights.shape == (rows, cols)
    assert original[weight[0]][weight[1]].value != -1.5


def test_extract_after_training_recalculates_an_edited_record(book, tmp_path, run_cli):
    rate = _cell_of(book, "learning_rate")
    edited = _edit(book, tmp_path / "e.xlsx", lambda wb: wb[rate[0]].__setitem__(rate[1], 0.01))
    code, out, err = run_cli("extract", edited, "--after-training", "-o", tmp_path / "after.json")
    assert code == 0 and "recalculated" in out, err
    # The reference: train with the same flags and the edited learning rate.
    dataset, flags = CONFIGS["softmax-ce-batch3-momentum-l2"]
    flags = [f for f in flags]
    assert run_cli("train", tmp_path / f"{dataset}.csv", *flags, "--lr", "0.01", "-o", tmp_path / "t.json")[0] == 0
    after, trained = load_model(tmp_path / "after.json"), load_model(tmp_path / "t.json")
    for a, b in zip(after.layers, trained.layers, strict=True):
        np.testing.assert_allclose(a.weights, b.weights, atol=1e-9)


@pytest.mark.slow
@pytest.mark.libreoffice
def test_edits_survive_a_libreoffice_round_trip(book, tmp_path, run_cli):
    from sheetnet.engines.libreoffice import recalculate

    weight = _cell_of(book, "W_1", 0, 1)
    a_cell = _below_header(book, "Scoring", "a h1_2", 3)

    def change(wb):
        wb[weight[0]][weight[1]].value = 2.5
        wb[a_cell[0]][a_cell[1]].value = 0.125

    edited = _edit(book, tmp_path / "e.xlsx", change)
    saved = recalculate(edited, tmp_path / "lo")
    code, report, _ = _audit(run_cli, saved)
    assert code == 3
    assert _cells(report, "input_edits") == {weight}
    assert _cells(report, "formula_edits") == {a_cell}
    assert not report["structural"]


def test_added_content_and_changed_labels_are_structural(book, tmp_path, run_cli):
    def change(wb):
        wb["Calculator"]["H30"].value = "note from the reviewer"
        wb["Parameters"]["A1"].value = "Our parameters"

    code, report, _ = _audit(run_cli, _edit(book, tmp_path / "added.xlsx", change))
    assert code == 3
    assert _cells(report, "structural") == {("Calculator", "H30"), ("Parameters", "A1")}
    assert not report["input_edits"] and not report["formula_edits"]


@pytest.mark.parametrize(("change", "cell", "words"), [
    (lambda wb: wb["Parameters"].insert_rows(10), ("Parameters", "A10"), "row(s) inserted"),
    (lambda wb: wb["Calculator"].insert_cols(3), ("Calculator", "C1"), "column(s) inserted"),
])
def test_rows_and_columns_inserted_on_block_sheets_are_structural(book, tmp_path, run_cli, change, cell, words):
    code, report, out = _audit(run_cli, _edit(book, tmp_path / "moved.xlsx", change))
    assert code == 3, out
    assert cell in _cells(report, "structural"), report["structural"]
    assert any(words in f["note"] for f in report["structural"])
    assert not report["input_edits"]  # the moved block is not misread as edited inputs
