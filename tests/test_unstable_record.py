"""A training record that amplifies rounding: verify and audit neither fail a faithful workbook nor
pass an edited one.

The data: the first rows of the diabetes data set (Efron, Hastie, Johnstone & Tibshirani, "Least
Angle Regression", Annals of Statistics 32(2), 2004), as scikit-learn ships it, with its unscaled
target (25-346). Plain gradient descent at learning rate 0.5 on squared error of that size is
chaotic: Lyapunov growth of perturbations in iterated maps (Strogatz, "Nonlinear Dynamics and
Chaos", 2nd ed. 2015, section 10.5) is what the first test measures on the reference trainer itself.
"""

from __future__ import annotations

import json
from pathlib import Path

import openpyxl
import pytest

from sheetnet.book.read import read_layout
from sheetnet.checks.stability import NUDGE, check_one_at_a_time, unstable_cells
from sheetnet.checks.verify import expected_formulas
from sheetnet.xlsx.reader import read_workbook


@pytest.fixture(scope="module")
def chaotic_book(tmp_path_factory) -> Path:
    import sklearn.datasets

    from sheetnet.cli import main

    folder = tmp_path_factory.mktemp("chaotic")
    data = folder / "d.csv"
    sklearn.datasets.load_diabetes(as_frame=True).frame.head(60).to_csv(data, index=False)
    book = folder / "b.xlsx"
    assert main(["build", str(data), "--target", "target", "--epochs", "8", "--trace-epochs", "8", "--holdout", "0",
                 "--lr", "0.5", "--quiet", "-o", str(book)]) == 0
    return book


def _expected(book: Path, nudge: float = 0.0):
    workbook = read_workbook(book)
    layout, _ = read_layout(workbook)
    return workbook, expected_formulas(workbook, layout, nudge=nudge)


def test_the_reference_itself_amplifies_a_nudge_in_the_15th_digit(chaotic_book):
    """The premise: a relative change of 1e-14 in the starting parameters moves late record values by
    more than 1e-4 (10^5 times the tolerance), so no engine that rounds differently from numpy can
    match them to 1e-9."""
    _, expected = _expected(chaotic_book)
    _, nudged = _expected(chaotic_book, NUDGE)
    moved = max(abs(a[4] - b[4]) for a, b in zip(expected, nudged, strict=True)
                if type(a[4]) is float and a[0] == "Training record")
    assert moved > 1e-4


def test_a_faithful_chaotic_workbook_verifies_and_says_what_was_checked_how(chaotic_book, tmp_path, run_cli):
    code, out, err = run_cli("verify", chaotic_book, "--json", tmp_path / "r.json", "--quiet")
    report = json.loads((tmp_path / "r.json").read_text())
    assert code == 0, out + err
    assert "checked one formula at a time" in out
    assert report["verdict"] == "ok"
    unstable = report["unstable"]
    assert unstable["cells"] > 1000 and unstable["differing_count"] == 0
    assert unstable["checked_one_at_a_time"] == unstable["cells"]
    assert "Training record" in unstable["first_cell"]


def test_the_one_at_a_time_check_finds_a_wrong_reference_value(chaotic_book):
    """The check evaluates each formula on the reference values it reads: a reference value that is
    not what the formula computes from them is reported (here one is altered on purpose)."""
    workbook, expected = _expected(chaotic_book)
    _, nudged = _expected(chaotic_book, NUDGE)
    unstable = unstable_cells(expected, [nudged], 1e-9)
    assert unstable is not None
    index = next(i for i, (s, r, c, _, v) in enumerate(expected)
                 if (s, r, c) in unstable.cells and type(v) is float and s == "Training record")
    sheet, row, col, formula, value = expected[index]
    expected[index] = (sheet, row, col, formula, value + 1.0)
    check_one_at_a_time(workbook, expected, unstable, 1e-9)
    assert unstable.differing_count >= 1
    assert unstable.differing[0]["cell"] == openpyxl.utils.get_column_letter(col + 1) + str(row + 1)


@pytest.mark.parametrize("edit", ["formula", "constant"])
def test_an_edit_late_in_a_chaotic_record_still_fails(chaotic_book, tmp_path, run_cli, edit):
    """Cells rounding can move are not compared end to end, but a changed formula or a number typed
    over one there is still a finding: the formula text is checked everywhere."""
    wb = openpyxl.load_workbook(chaotic_book)
    ws = wb["Training record"]
    cell = next(c for c in ws[ws.max_row - 3] if isinstance(c.value, str) and "learning_rate" in c.value)
    cell.value = cell.value.replace("learning_rate*", "2*learning_rate*") if edit == "formula" else 0.5
    edited = tmp_path / "edited.xlsx"
    wb.save(edited)
    code, out, _ = run_cli("verify", edited, "--quiet")
    assert code != 0
    assert "FAILED" in out and f"Training record!{cell.coordinate}" in out
    code, out, _ = run_cli("audit", edited, "--quiet")
    assert cell.coordinate in out
