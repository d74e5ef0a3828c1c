"""The workbook says how its training record relates to the parameters in use (record_gap and a
banner), and no formula carries a model constant (the probability clip, the target cut, the threshold,
a class label) as a literal: each is a named cell a reviewer can find."""

from __future__ import annotations

import re

import openpyxl
import pytest

from tests.conftest import write_csv


def _names(path) -> dict[str, str]:
    book = openpyxl.load_workbook(path)
    return {name: next(iter(d.destinations)) for name, d in book.defined_names.items()}


def _value(path, name: str):
    sheet, cell = _names(path)[name]
    return openpyxl.load_workbook(path, data_only=True)[sheet][cell.replace("$", "")].value


def test_a_full_replay_has_no_gap_and_no_banner(xor_csv, tmp_path, run_cli):
    book = tmp_path / "full.xlsx"
    code, _, err = run_cli("build", xor_csv, "--target", "y", "--hidden", "3", "--epochs", "4", "--batch-size", "2",
                           "--quiet", "-o", book)
    assert code == 0, err
    assert abs(_value(book, "record_gap")) < 1e-12  # the same arithmetic in the same order: rounding at most
    setup = openpyxl.load_workbook(book)["Training setup"]
    assert setup["A2"].value is None
    assert run_cli("verify", book, "--quiet")[0] == 0


def test_a_partial_record_has_a_gap_and_says_why(xor_csv, tmp_path, run_cli):
    book = tmp_path / "part.xlsx"
    code, _, err = run_cli("build", xor_csv, "--target", "y", "--hidden", "3", "--epochs", "40", "--trace-epochs",
                           "2", "--quiet", "-o", book)
    assert code == 0, err
    assert _value(book, "record_gap") > 1e-6
    banner = openpyxl.load_workbook(book)["Training setup"]["A2"].value
    assert "epochs 1-2 of 40" in banner and "Parameters sheet holds the end of the full run" in banner
    guide = {r[0]: r[1] for r in openpyxl.load_workbook(book)["Guide"].iter_rows(values_only=True) if r[0]}
    assert guide["Training record"] == banner
    assert run_cli("verify", book, "--quiet")[0] == 0


def test_a_record_that_continues_a_given_model_says_so(xor_csv, tmp_path, run_cli):
    assert run_cli("train", xor_csv, "--target", "y", "--epochs", "5", "--quiet", "-o", tmp_path / "m.json")[0] == 0
    book = tmp_path / "m.xlsx"
    assert run_cli("build", "--model", tmp_path / "m.json", xor_csv, "--quiet", "-o", book)[0] == 0
    assert "continues training from the model's weights" in openpyxl.load_workbook(book)["Training setup"]["A2"].value


LITERALS = re.compile(r"(?<![\w.$])(0\.5|1E-12|1e-12|0\.000000000001)(?![\w.])")


@pytest.mark.parametrize("rows, target, extra", [
    ([[a, b, ["no", "yes"][a ^ b]] for a in (0, 1) for b in (0, 1)] * 5, "y", []),
    ([[a, b, a * 0.8 + b * 0.1] for a in (0, 1) for b in (0, 1)] * 5, "y", ["--task", "binary"]),
    ([[a, b, ["r", "g", "b"][(a + 2 * b) % 3]] for a in (0, 1) for b in (0, 1)] * 5, "y", []),
    ([[a, b, a + b] for a in (0, 1) for b in (0, 1)] * 5, "y", []),
], ids=["binary labels", "binary probabilities", "multiclass", "regression"])
def test_no_formula_holds_a_model_constant_or_a_class_label(rows, target, extra, tmp_path, run_cli):
    data = write_csv(tmp_path / "d.csv", ["a", "b", target], rows)
    book = tmp_path / "b.xlsx"
    code, _, err = run_cli("build", data, "--target", target, *extra, "--epochs", "2", "--quiet", "-o", book)
    assert code == 0, err
    workbook = openpyxl.load_workbook(book)
    labels = {str(r[2]) for r in rows if isinstance(r[2], str)}
    header = next(c.row for c in workbook["Scoring"]["A"] if c.value == "case")
    for sheet in workbook.worksheets:
        for row in sheet.iter_rows():
            for cell in row:
                text = cell.value
                if not (isinstance(text, str) and text.startswith("=")):
                    continue
                assert not LITERALS.search(text), (sheet.title, cell.coordinate, text)
                if sheet.title != "Scoring" or cell.row > header:  # the confusion matrix's criteria escape wildcards
                    assert not any(f'"{label}"' in text for label in labels), (sheet.title, cell.coordinate, text)
    assert run_cli("verify", book, "--quiet")[0] == 0


def _warning_after(book, tmp_path, name, values) -> str:
    """The calculator's warning as LibreOffice recalculates it with ``values`` typed as inputs."""
    from tests.bookcheck import libreoffice_values

    workbook = openpyxl.load_workbook(book)
    sheet = workbook["Calculator"]
    for col, value in zip("BCD", values, strict=False):
        sheet[f"{col}4"].value = value
    edited = tmp_path / f"{name}.xlsx"
    workbook.save(edited)
    return libreoffice_values(edited, tmp_path / name).get(("Calculator", "B8")) or ""


@pytest.mark.slow
@pytest.mark.libreoffice
def test_the_calculator_warns_outside_the_training_range(tmp_path, run_cli):
    rows = [[a / 10, b / 10, int(a > b)] for a in range(10) for b in range(10)]  # inputs span 0 .. 0.9
    data = write_csv(tmp_path / "d.csv", ["length", "width", "y"], rows)
    book = tmp_path / "b.xlsx"
    assert run_cli("build", data, "--target", "y", "--epochs", "2", "--quiet", "-o", book)[0] == 0
    assert _value(book, "calculator_warning") in (None, "")
    assert _names(book)["calculator_inputs"] == ("Calculator", "$B$4:$C$4")
    assert _warning_after(book, tmp_path, "inside", [0.5, 0.2]) == ""
    assert _warning_after(book, tmp_path, "outside", [1.5, -3]) == \
        "length is above its training range; width is below its training range; "
    assert _warning_after(book, tmp_path, "blank", [None, "12OO"]) == \
        "length is blank or not a number; width is blank or not a number; "
    sheet = openpyxl.load_workbook(book)["Calculator"]
    sheet["B4"].value = 9999
    sheet.parent.save(tmp_path / "far.xlsx")
    code, out, _ = run_cli("verify", tmp_path / "far.xlsx", "--engine", "both", "--quiet")
    assert code in (0, 4), out  # the warning's new text is reproduced; only saved values may be stale
