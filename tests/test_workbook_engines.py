"""Workbooks recomputed by LibreOffice headless (a real spreadsheet application) and by the
`formulas` package: agreement with the trainer, live edits, saturation, published examples."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import openpyxl
import pytest
import xlsxwriter

from sheetnet.net.model import load_model
from tests.bookcheck import (
    block_values,
    cached_values,
    formula_cells,
    formulas_package_values,
    libreoffice_values,
    mismatches,
)
from tests.conftest import write_csv
from tests.test_workbook import defined_block

pytestmark = pytest.mark.libreoffice

RNG = np.random.default_rng(5)


def _numeric_csv(tmp_path: Path, n: int = 10) -> Path:
    x = RNG.uniform(-2, 2, (n, 3)).round(3)
    y = (np.sin(x[:, 0]) + 0.5 * x[:, 1] * x[:, 2]).round(3)
    rows = [[*row, t] for row, t in zip(x.tolist(), y, strict=True)]
    return write_csv(tmp_path / "num.csv", ["p", "q", "r", "y"], rows)


def _class_csv(tmp_path: Path, n: int = 60) -> Path:
    x = RNG.normal(0, 1, (n, 2)).round(3)
    labels = np.where(x[:, 0] + x[:, 1] > 0.3, "high", np.where(x[:, 0] - x[:, 1] > 0, "mid", "low"))
    return write_csv(tmp_path / "cls.csv", ["u", "v", "band"], [[*row, lab] for row, lab in zip(x.tolist(), labels,
                                                                                                  strict=True)])


@pytest.mark.slow
@pytest.mark.parametrize("flags", [
    ["--target", "band", "--hidden", "4", "--epochs", "3", "--batch-size", "5", "--momentum", "0.3"],
    ["--target", "band", "--hidden", "3", "--output", "sigmoid", "--task", "multiclass", "--epochs", "2",
     "--l2", "0.02", "--activation", "tanh"],
])
def test_libreoffice_recomputes_every_cell_like_the_trainer(flags, tmp_path, run_cli):
    book = tmp_path / "b.xlsx"
    code, _, err = run_cli("build", _class_csv(tmp_path), *flags, "-o", book)
    assert code == 0, err
    cells = formula_cells(book)
    # Oracle: LibreOffice Calc headless recalculation; tolerance 1e-9 (it stores 15 significant digits).
    bad = mismatches(cached_values(book), libreoffice_values(book, tmp_path / "lo"), cells)
    assert len(cells) > 3000 and not bad, bad[:5]


def _set_cell(book: Path, out: Path, name: str, value: float, offset: tuple[int, int] = (0, 0)) -> None:
    from openpyxl.utils.cell import column_index_from_string, coordinate_from_string, get_column_letter

    sheet, corner, _, _ = defined_block(book, name)
    letters, row = coordinate_from_string(corner)
    cell = f"{get_column_letter(column_index_from_string(letters) + offset[1])}{row + offset[0]}"
    wb = openpyxl.load_workbook(book)
    wb[sheet][cell].value = value
    wb.save(out)


def _final_parameters(book: Path, values: dict, n_layers: int) -> list[tuple[np.ndarray, np.ndarray]]:
    out = []
    for k in range(1, n_layers + 1):
        w = block_values(book, *defined_block(book, f"final_W_{k}"), values=values)
        b = block_values(book, *defined_block(book, f"final_b_{k}"), values=values)
        out.append((w, b[:, 0]))
    return out


def _assert_edit_reproduces(book: Path, tmp_path: Path, name: str, value: float, offset: tuple[int, int],
                            trained) -> None:
    """Edit one input cell, recalculate in LibreOffice, and compare the final block with ``trained``."""
    edited = tmp_path / "edited" / "b.xlsx"
    edited.parent.mkdir()
    _set_cell(book, edited, name, value, offset=offset)
    values = libreoffice_values(edited, tmp_path / "lo")
    for (w, b), layer in zip(_final_parameters(edited, values, len(trained.layers)), trained.layers, strict=True):
        np.testing.assert_allclose(w, layer.weights, atol=1e-9)
        np.testing.assert_allclose(b, layer.bias, atol=1e-9)


FLAGS = ["--target", "y", "--hidden", "3", "--activation", "tanh", "--epochs", "4", "--batch-size", "3", "--seed", "4"]


@pytest.mark.slow
def test_learning_rate_edited_in_the_file_reproduces_train(tmp_path, run_cli):
    data = _numeric_csv(tmp_path)
    book = tmp_path / "b.xlsx"
    assert run_cli("build", data, *FLAGS, "-o", book)[0] == 0
    assert run_cli("train", data, *FLAGS, "--lr", "0.37", "-o", tmp_path / "m.json")[0] == 0
    _assert_edit_reproduces(book, tmp_path, "learning_rate", 0.37, (0, 0), load_model(tmp_path / "m.json"))


@pytest.mark.slow
def test_initial_weight_edited_in_the_file_reproduces_train_from_that_model(tmp_path, run_cli):
    data = _numeric_csv(tmp_path)
    model = {"format": "sheetnet-model", "version": 1, "inputs": ["p", "q", "r"], "outputs": ["y"],
             "task": "regression", "loss": "squared", "scaling": None, "target": ["y"],
             "layers": [{"weights": [[0.2, -0.1, 0.4], [0.3, 0.5, -0.2]], "bias": [0.1, -0.1], "activation": "sigmoid"},
                        {"weights": [[0.7, -0.6]], "bias": [0.05], "activation": "identity"}]}
    (tmp_path / "m.json").write_text(json.dumps(model))
    flags = ["--epochs", "3", "--batch-size", "2", "--lr", "0.2", "--no-shuffle"]
    book = tmp_path / "b.xlsx"
    code, _, err = run_cli("build", "--model", tmp_path / "m.json", data, *flags, "-o", book)
    assert code == 0, err
    model["layers"][0]["weights"][1][2] = -0.35
    (tmp_path / "m2.json").write_text(json.dumps(model))
    assert run_cli("train", data, "--target", "y", "--init", tmp_path / "m2.json", *flags,
                   "-o", tmp_path / "t.json")[0] == 0
    _assert_edit_reproduces(book, tmp_path, "init_W_1", -0.35, (1, 2), load_model(tmp_path / "t.json"))


@pytest.mark.slow
def test_saturated_units_give_no_spreadsheet_errors(tmp_path, run_cli):
    big = 1e4
    model = {"format": "sheetnet-model", "version": 1, "inputs": ["s", "t"], "outputs": ["a", "b", "c"],
             "task": "multiclass", "loss": "cross-entropy", "classes": ["a", "b", "c"], "target": ["k"],
             "layers": [{"weights": [[big, -big], [-big, big]], "bias": [0, 0], "activation": "sigmoid"},
                        {"weights": [[big, 0], [0, big], [-big, -big]], "bias": [0, 0, 0], "activation": "softmax"}]}
    (tmp_path / "m.json").write_text(json.dumps(model))
    rows = [[0.5, -0.5, "a"], [-0.5, 0.5, "c"], [0.09, -0.1, "b"], [-1, 1, "b"]]
    data = write_csv(tmp_path / "d.csv", ["s", "t", "k"], rows)
    book = tmp_path / "b.xlsx"
    code, _, err = run_cli("build", "--model", tmp_path / "m.json", data, "--epochs", "1", "--lr", "1e-6",
                           "-o", book)
    assert code == 0, err
    cells = formula_cells(book)
    for values in (libreoffice_values(book, tmp_path / "lo"), formulas_package_values(book)):
        errors = [(k, values[k]) for k in cells if isinstance(values.get(k), str) and values[k].startswith("#")]
        errors += [(k, v) for k in cells if (v := values.get(k)) is not None and not isinstance(v, str | int | float)
                   and str(v).startswith("#")]
        assert not errors, errors[:5]
        assert not mismatches(cached_values(book), values, cells)


def goodfellow_xor_model(path: Path) -> Path:
    """Goodfellow, Bengio & Courville, Deep Learning (MIT Press 2016), §6.1: W=[[1,1],[1,1]], c=[0,-1],
    w=[1,-2], b=0, ReLU hidden units, linear output."""
    model = {"format": "sheetnet-model", "version": 1, "inputs": ["x1", "x2"], "outputs": ["y"],
             "task": "regression", "loss": "squared", "target": ["y"],
             "layers": [{"weights": [[1, 1], [1, 1]], "bias": [0, -1], "activation": "relu"},
                        {"weights": [[1, -2]], "bias": [0], "activation": "identity"}]}
    path.write_text(json.dumps(model))
    return path


@pytest.mark.parametrize("pattern", [(0, 0, 0), (0, 1, 1), (1, 0, 1), (1, 1, 0)])
def test_goodfellow_relu_xor_calculator(pattern, tmp_path, run_cli):
    book = tmp_path / "xor.xlsx"
    assert run_cli("build", "--model", goodfellow_xor_model(tmp_path / "m.json"), "-o", book)[0] == 0
    wb = openpyxl.load_workbook(book)
    wb["Calculator"]["B4"].value, wb["Calculator"]["C4"].value = pattern[0], pattern[1]
    edited = tmp_path / "edited.xlsx"
    wb.save(edited)
    values = formulas_package_values(edited)
    last_activation_row = max(r for (sheet, coord), v in cached_values(book).items()
                              if sheet == "Calculator" and coord.startswith("A") and v == "activation a"
                              for r in [int(coord[1:])])
    output = [values[("Calculator", f"B{last_activation_row}")]]
    # Outside check: Goodfellow et al. (2016) §6.1: the network outputs exactly 0, 1, 1, 0.
    assert output == [pattern[2]]


@pytest.mark.slow
def test_goodfellow_relu_xor_scoring_in_libreoffice(tmp_path, run_cli):
    data = write_csv(tmp_path / "xor.csv", ["x1", "x2", "y"], [[0, 0, 0], [0, 1, 1], [1, 0, 1], [1, 1, 0]])
    book = tmp_path / "xor.xlsx"
    assert run_cli("build", "--model", goodfellow_xor_model(tmp_path / "m.json"), data, "--epochs", "1",
                   "-o", book)[0] == 0
    values = libreoffice_values(book, tmp_path / "lo")
    header = {v: k for k, v in cached_values(book).items() if k[0] == "Scoring" and v == "a y"}
    (_, coord), = header.values()
    col = "".join(ch for ch in coord if ch.isalpha())
    row = int("".join(ch for ch in coord if ch.isdigit()))
    # Outside check: Goodfellow et al. (2016) §6.1, outputs exactly 0, 1, 1, 0 (atol 1e-12).
    got = [values[("Scoring", f"{col}{row + i}")] for i in range(1, 5)]
    np.testing.assert_allclose(got, [0, 1, 1, 0], atol=1e-12)


PUBLISHED = [
    # Microsoft Support function pages ("EXP function", "LN function", "TANH function", "MAX function"):
    # published display values; tolerance half a unit in the last printed digit.
    ("EXP(1)", 2.71828183, 5e-9), ("EXP(2)", 7.3890561, 5e-8),
    ("LN(86)", 4.4543473, 5e-8), ("LN(2.7182818)", 1.0, 1e-7), ("LN(EXP(3))", 3.0, 1e-12),
    ("TANH(-2)", -0.964028, 5e-7), ("TANH(0)", 0.0, 0.0), ("TANH(0.5)", 0.462117, 5e-7),
    ("MAX(A20:A24)", 27.0, 0.0), ("MAX(A20:A24,30)", 30.0, 0.0),
]


def _published_book(path: Path) -> Path:
    book = xlsxwriter.Workbook(str(path))
    sheet = book.add_worksheet("F")
    for i, value in enumerate([10, 7, 9, 27, 2]):
        sheet.write_number(19 + i, 0, value)
    for i, (formula, _, _) in enumerate(PUBLISHED):
        sheet.write_formula(i, 1, "=" + formula)
    book.close()
    return path


@pytest.mark.parametrize("engine", ["formulas", pytest.param("libreoffice", marks=pytest.mark.slow)])
def test_published_function_examples(engine, tmp_path):
    book = _published_book(tmp_path / "f.xlsx")
    values = formulas_package_values(book) if engine == "formulas" else libreoffice_values(book, tmp_path / "lo")
    for i, (formula, expected, tol) in enumerate(PUBLISHED):
        assert abs(float(values[("F", f"B{i + 1}")]) - expected) <= tol, formula
