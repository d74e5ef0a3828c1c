"""Verify, audit and extract on what spreadsheet users do, with every edit made inside LibreOffice
(which shifts references when rows move, moves defined names with their cells, rewrites references
to a renamed sheet, and saves 15 significant digits). Each case expects its exact findings and no
other."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import openpyxl
import pytest

from sheetnet.book.read import read_layout
from sheetnet.engines.libreoffice import recalculate as libreoffice_recalculate
from sheetnet.xlsx.addresses import a1, cell_name
from sheetnet.xlsx.reader import read_workbook
from tests.conftest import write_csv
from tests.lo_edit import edit_in_libreoffice

pytestmark = [pytest.mark.slow, pytest.mark.libreoffice_bridge]


@pytest.fixture(scope="module")
def built(tmp_path_factory) -> dict:
    """A 3-class workbook from invented data (seeded): 60 cases, 3 inputs, batches of 4, 2 epochs."""
    from sheetnet.cli import main

    folder = tmp_path_factory.mktemp("realign")
    rng = np.random.default_rng(11)
    x = rng.normal(size=(60, 3)).round(3)
    kind = np.array(["low", "mid", "high"])[np.digitize(x[:, 0] + 0.5 * x[:, 1], [-0.5, 0.5])]
    rows = [[*r, k] for r, k in zip(x.tolist(), kind, strict=True)]
    data = write_csv(folder / "d.csv", ["u", "v", "w", "kind"], rows)
    book = folder / "book.xlsx"
    assert main(["build", str(data), "--target", "kind", "--hidden", "3", "--epochs", "2", "--batch-size", "4",
                 "--holdout", "0", "--quiet", "-o", str(book)]) == 0
    assert main(["extract", str(book), "-o", str(folder / "model.json")]) == 0
    layout, _ = read_layout(read_workbook(book))
    return {"book": book, "layout": layout, "model": json.loads((folder / "model.json").read_text())}


def _edited(built, tmp_path, operations) -> Path:
    return edit_in_libreoffice(built["book"], tmp_path / "edited.xlsx", operations)


def _audit(run_cli, path: Path) -> tuple[int, dict]:
    report = path.with_suffix(".json")
    code, _out, err = run_cli("audit", path, "--json", report)
    assert "internal error" not in err, err
    return code, json.loads(report.read_text())


def _only(report: dict, **expected_counts) -> None:
    """The report's counts are exactly these (kinds not named: none)."""
    counts = {kind: n for kind, n in report["counts"].items() if n}
    assert counts == {k: v for k, v in expected_counts.items() if v}, json.dumps(report, indent=1)[:3000]


def _verify(run_cli, path: Path) -> tuple[int, dict, str]:
    report = path.with_suffix(".verify.json")
    code, out, err = run_cli("verify", path, "--json", report)
    assert "internal error" not in err, err
    return code, json.loads(report.read_text()), out + err


def _where(layout, cell) -> str:
    return a1(cell.row, cell.col)


def test_inserted_data_row_and_a_number_typed_over_a_formula(built, tmp_path, run_cli):
    layout = built["layout"]
    row = layout.scoring.first_row + 10  # 0-based: a row inside the data
    target = layout.record.cell(5, ("d", 0, 1))  # a delta of the record, which is not on the Scoring sheet
    edited = _edited(built, tmp_path, [{"op": "insert_rows", "sheet": "Scoring", "at": row, "count": 1},
                                       {"op": "value", "sheet": "Training record", "cell": _where(layout, target),
                                        "value": 0.25}])
    code, report = _audit(run_cli, edited)
    assert code == 3
    structural = report["structural"]
    assert len(structural) == 1 and structural[0]["cell"] == a1(row, 0) and "inserted" in structural[0]["note"]
    assert [(f["sheet"], f["cell"], f["note"]) for f in report["formula_edits"]] == [
        ("Training record", _where(layout, target), "a constant typed over a formula")]
    assert not report["input_edits"] and not report["description"]
    code, data, _out = _verify(run_cli, edited)
    assert code == 1 and data["verdict"] == "mismatch" and len(data["realigned"]) == 1
    where = ("Training record", _where(layout, target))
    assert [(d["sheet"], d["cell"]) for d in data["formula_differences"]] == [where]


@pytest.mark.parametrize("operations, words", [
    ([{"op": "insert_rows", "sheet": "Parameters", "at": 2, "count": 2}], "2 row(s) inserted at row 3 of Parameters"),
    ([{"op": "insert_columns", "sheet": "Parameters", "at": 1, "count": 1}], "column(s) inserted at column B"),
    # (columns inserted inside a range a formula uses would widen it and change the arithmetic)
    ([{"op": "insert_columns", "sheet": "Training record", "at": 3, "count": 2}], "2 column(s) inserted"),
    ([{"op": "rename", "sheet": "Parameters", "to": "Model weights"}], "'Parameters' was renamed to 'Model weights'"),
    ([{"op": "rename", "sheet": "Training record", "to": "Steps"}], "'Training record' was renamed to 'Steps'"),
    ([{"op": "move", "sheet": "Parameters", "range": "B16:D18", "to": "H40"}], "block W_1 was moved"),
    ([{"op": "insert_rows", "sheet": "Calculator", "at": 6, "count": 3}], "3 row(s) inserted at row 7 of Calculator"),
    ([{"op": "move", "sheet": "Parameters", "range": "B22:D24", "to": "H20", "to_sheet": "Calculator"}],
     "block W_2 was moved from Parameters!B22 to Calculator!H20"),
    ([{"op": "insert_columns", "sheet": "Parameters", "at": 0, "count": 1}], "column(s) inserted at column A"),
    ([{"op": "insert_rows", "sheet": "Training setup", "at": 0, "count": 2}], "2 row(s) inserted at row 1"),
    ([{"op": "delete_rows", "sheet": "Scoring", "at": 0, "count": 2}], "2 row(s) deleted at row 1 of Scoring"),
    ([{"op": "insert_rows", "sheet": "Guide", "at": 5, "count": 1}], "1 row(s) inserted at row 6 of Guide"),
    ([{"op": "insert_rows", "sheet": "Parameters", "at": 16, "count": 1}], "1 row(s) inserted at row 17"),
    # A name that looks like a cell reference: LibreOffice writes references to it unquoted (P2!$B$5)
    ([{"op": "rename", "sheet": "Parameters", "to": "P2"}], "'Parameters' was renamed to 'P2'"),
    ([{"op": "rename", "sheet": "Training setup", "to": "TS1"}], "'Training setup' was renamed to 'TS1'"),
], ids=["rows above parameters", "column in parameters", "columns in record", "parameters renamed",
        "record renamed", "block moved", "rows in calculator", "block moved to another sheet", "column before A",
        "rows above row 1", "title rows deleted", "row in the guide", "row inside a parameter block",
        "renamed like a cell", "setup renamed like a cell"])
def test_structural_edits_are_followed(operations, words, built, tmp_path, run_cli):
    edited = _edited(built, tmp_path, operations)
    code, report = _audit(run_cli, edited)
    assert code == 3
    _only(report, structural=1)
    assert words in report["structural"][0]["note"]
    code, data, out = _verify(run_cli, edited)
    followed = 0 if "Guide" in words else 1  # verify needs no prose: the Guide is the audit's
    assert code == 0 and data["verdict"] == "ok" and len(data["realigned"]) == followed, out
    if "row(s) deleted" in words:
        return  # the deleted rows held the Scoring summary's formulas
    code, out, err = run_cli("extract", edited, "-o", tmp_path / "m.json")
    assert code == 0, err
    model = json.loads((tmp_path / "m.json").read_text())
    assert model["layers"] == built["model"]["layers"] and model["scaling"] == built["model"]["scaling"]


def test_sorted_data_rows(built, tmp_path, run_cli):
    layout = built["layout"]
    table = layout.scoring
    last_col = table.left + len(table.columns) - 1
    area = f"A{table.first_row + 1}:{a1(table.first_row + table.nrows - 1, last_col)}"
    edited = _edited(built, tmp_path, [{"op": "sort", "sheet": "Scoring", "range": area,
                                        "column": table.col(("raw", 0)), "descending": True}])
    code, report = _audit(run_cli, edited)
    assert code == 3
    assert len(report["structural"]) == 1 and "reordered (sorted)" in report["structural"][0]["note"]
    assert not report["formula_edits"] and not report["input_edits"]
    code, _out, err = run_cli("verify", edited)
    assert code == 2 and "reordered" in err and "sheetnet audit" in err and len(err.strip().splitlines()) == 1
    # The record now trains on other cases: extract --after-training takes what the workbook computes
    # (as LibreOffice recalculates it on load; the values it saved right after the sort can be stale),
    # not the trainer's run on the original order.
    code, out, err = run_cli("extract", edited, "--after-training", "-o", tmp_path / "m.json")
    assert code == 0 and "recalculated" in out, err
    final_w = layout.final.weights[0]
    recalculated = libreoffice_recalculate(edited, tmp_path / "lo")
    saved = openpyxl.load_workbook(recalculated, data_only=True)[final_w.sheet]
    in_file = [[saved.cell(final_w.top + i + 1, final_w.left + j + 1).value for j in range(final_w.ncols)]
               for i in range(final_w.nrows)]
    extracted = json.loads((tmp_path / "m.json").read_text())["layers"][0]["weights"]
    assert np.allclose(extracted, in_file, rtol=1e-9, atol=1e-12)


def test_a_relative_reference_carried_above_the_first_row_by_a_sort_is_ref():
    """In a sort, a relative reference travels with its row (LibreOffice's default); one carried above
    the sheet's first row is #REF! in the application, so the expected text is #REF! too, never a row 0
    or a negative row."""
    from sheetnet.checks.alignment import Alignment, SheetMap
    from sheetnet.xlsx.addresses import Cell

    sheet = SheetMap("S", np.arange(7)[::-1].copy(), np.arange(10), reordered=frozenset(range(7)))
    alignment = Alignment(sheets={"S": sheet})
    # Written at row 7 (index 6), now at row 1: "one row up" and a range "two rows up" are above row 1.
    assert alignment.translate("=B6+SUM(C5:D5)", Cell("S", 6, 0)) == "=#REF!+SUM(#REF!)"
    # Written at row 1, now at row 7: "one row down" is row 8.
    assert alignment.translate("=B2", Cell("S", 0, 0)) == "=B8"


def test_a_number_typed_over_a_final_parameter_is_extracted(built, tmp_path, run_cli):
    final_w = built["layout"].final.weights[0]
    edited = _edited(built, tmp_path, [{"op": "value", "sheet": final_w.sheet, "cell": a1(final_w.top, final_w.left),
                                        "value": 1.5}])
    code, _out, err = run_cli("extract", edited, "--after-training", "-o", tmp_path / "m.json")
    assert code == 0, err
    assert json.loads((tmp_path / "m.json").read_text())["layers"][0]["weights"][0][0] == 1.5


def test_deleted_data_row(built, tmp_path, run_cli):
    layout = built["layout"]
    row = layout.scoring.first_row + 7
    edited = _edited(built, tmp_path, [{"op": "delete_rows", "sheet": "Scoring", "at": row, "count": 1}])
    code, report = _audit(run_cli, edited)
    notes = [f["note"] for f in report["structural"]]
    assert code == 3 and any("1 row(s) deleted at row" in n for n in notes) and any("#REF!" in n for n in notes)
    assert not report["formula_edits"] and not report["input_edits"]
    code, _out, err = run_cli("verify", edited)
    assert code == 2 and "was deleted" in err and len(err.strip().splitlines()) == 1


@pytest.mark.parametrize("name, value, reason", [
    ("learning_rate", 0, "must be a positive number"),
    ("learning_rate", "fast", "must be a positive number"),
    ("learning_rate", None, "must be a positive number"),
    ("W_1", None, "must be a number"),
    ("W_1", "0.5x", "must be a number"),
    ("threshold", 2, "must be a number in [0, 1]"),
], ids=["rate 0", "rate text", "rate cleared", "weight cleared", "weight text", "threshold 2"])
def test_invalid_values_in_input_cells_are_findings(name, value, reason, built, tmp_path, run_cli):
    layout = built["layout"]
    block = layout.defined_names()[name]
    cell = block.cell(0, 0)
    op = {"op": "clear"} if value is None else {"op": "text", "text": value} if isinstance(value, str) else \
        {"op": "value", "value": value}
    edited = _edited(built, tmp_path, [{**op, "sheet": cell.sheet, "cell": _where(layout, cell)}])
    code, report = _audit(run_cli, edited)
    assert code == 3
    assert [(f["sheet"], f["cell"]) for f in report["input_edits"]] == [(cell.sheet, _where(layout, cell))]
    assert reason in report["input_edits"][0]["note"]
    code, _out, err = run_cli("verify", edited)
    assert code == 2 and cell_name(cell) in err and reason in err and len(err.strip().splitlines()) == 1
    code, _out, err = run_cli("extract", edited, "--after-training", "-o", tmp_path / "m.json")
    if name == "threshold":
        assert code == 0  # the threshold is not a parameter of the model
    else:
        assert code == 1 and cell_name(cell) in err and not (tmp_path / "m.json").exists()


def test_untouched_parameters_come_back_exactly_after_a_round_trip(built, tmp_path, run_cli):
    """LibreOffice saves 15 significant digits; extract gives build's values back, and after training the
    trainer's, while an edited weight comes back as the file holds it."""
    layout = built["layout"]
    weight = layout.defined_names()["W_2"].cell(1, 2)
    edited = _edited(built, tmp_path, [{"op": "value", "sheet": weight.sheet, "cell": _where(layout, weight),
                                        "value": 0.123456789012345}])
    assert run_cli("extract", edited, "-o", tmp_path / "m.json")[0] == 0
    model = json.loads((tmp_path / "m.json").read_text())
    expected = json.loads(json.dumps(built["model"]["layers"]))
    expected[1]["weights"][1][2] = 0.123456789012345
    assert model["layers"] == expected and model["scaling"] == built["model"]["scaling"]
    untouched = _edited(built, tmp_path, [])
    assert run_cli("extract", untouched, "--after-training", "-o", tmp_path / "a.json")[0] == 0
    assert run_cli("extract", built["book"], "--after-training", "-o", tmp_path / "b.json")[0] == 0
    assert json.loads((tmp_path / "a.json").read_text())["layers"] == json.loads((tmp_path / "b.json").read_text())[
        "layers"]
