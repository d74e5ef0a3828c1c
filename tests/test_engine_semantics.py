"""The embedded engine's fast path against the `formulas` package's own implementation, function by
function, on a wide sample of arguments (numbers at the edges, text, logical values, empty cells and
error values). Oracle: the `formulas` package (vinci1it2000/formulas), an Excel formula engine outside
this project. Its one documented deviation from Excel, 2^1024 giving #VALUE! instead of #NUM!, is the
only case where we follow Excel instead (the project's FACTS, measured)."""

from __future__ import annotations

import itertools
import math
import os
from pathlib import Path

import numpy as np
import pytest

from sheetnet.engines.embedded import Engine
from sheetnet.xlsx.cells import CellError, SheetCells, Workbook

os.environ.setdefault("TQDM_DISABLE", "1")

SCALARS = [-1000.0, -800.0, -2.5, -1.0, 0.0, 0.5, 1.0, 3.0, 709.0, 710.0, 1e308, "abc", "3", "", True, False, None,
           CellError("#N/A"), CellError("#DIV/0!")]
UNARY = ["EXP(A1)", "LN(A1)", "SQRT(A1)", "TANH(A1)", "ABS(A1)", "-A1", "A1%", "MAX(A1,0)", "IF(A1,1,2)"]
BINARY = ["A1+B1", "A1-B1", "A1*B1", "A1/B1", "A1^B1", "A1=B1", "A1<>B1", "A1<B1", "A1<=B1", "A1>B1", "A1>=B1",
          "A1&B1", "MAX(A1,B1)", "IF(A1>=0,1/(1+EXP(-A1)),EXP(A1)/(1+EXP(A1)))*B1"]
SMALL = [-2.5, 0.0, 1.0, 710.0, "abc", "3", True, None, CellError("#N/A")]
ROWS = [[1.0, 2.0, 3.0], [0.5, "x", None], [-1.0, True, 4.0], [2.0, CellError("#NUM!"), 1.0], ["a", "B", "c"],
        [1e308, 1e308, 1.0]]
ARRAY_FORMULAS = ["SUMPRODUCT(A1:C1,A2:C2)", "SUMPRODUCT(A1:C1-A2:C2,A1:C1)", "SUMPRODUCT(EXP(A1:C1-MAX(A1:C1)))",
                  "SUMXMY2(A1:C1,A2:C2)", "AVERAGE(A1:C1)", "COUNT(A1:C2)", "MAX(A1:C1)", "SUM(A1:C1)",
                  "SUMPRODUCT(ABS(A1:C1-A2:C2))/COUNT(A2:C2)", "MATCH(MAX(A1:C1),A1:C1,0)", "INDEX(A1:C1,2)",
                  'COUNTIFS(A1:C1,"=b",A2:C2,">=0.5")', 'AVERAGEIFS(A2:C2,A1:C1,"<>a")', "SUMPRODUCT(A1:C1,A2:B2)"]


def ours(formula: str, cells: dict[tuple[int, int], object]):
    sheet = SheetCells(name="S", values=dict(cells), formulas={(9, 0): formula})
    book = Workbook(path=Path("t.xlsx"), sheets={"S": sheet}, names={}, local_names=[], parts=[])
    engine = Engine(book)
    result = engine.run()
    return result.values(book)["S"][(9, 0)], type(engine.stores["S"].formulas[9 * 16384][0]).__name__


def theirs(formula: str, cells: dict[tuple[int, int], object]):
    import formulas
    import schedula
    from formulas.tokens.operand import XlError

    func = formulas.Parser().ast("=" + formula)[1].compile()
    args = []
    for name in func.inputs:
        refs = name.split(":")
        (r0, c0), (r1, c1) = (_pos(refs[0]), _pos(refs[-1]))
        block = [[_to(cells.get((r, c)), XlError, schedula.EMPTY) for c in range(c0, c1 + 1)]
                 for r in range(r0, r1 + 1)]
        args.append(np.array(block, dtype=object))  # a reference, even to one cell, is a range
    with np.errstate(all="ignore"):
        result = func(*args)
    value = result.ravel()[0] if hasattr(result, "ravel") else result
    if isinstance(value, XlError):
        return CellError(str(value))
    if isinstance(value, complex) or (isinstance(value, float | np.floating) and not np.isfinite(value)):
        # The formulas package returns complex numbers and infinities where Excel shows #NUM!
        # (Microsoft Support, "POWER function" and "Excel specifications and limits": numbers
        # beyond 1.79E+308 are not representable; measured in the project's FACTS).
        return CellError("#NUM!")
    if isinstance(value, np.bool_ | bool):
        return bool(value)
    if isinstance(value, np.generic):
        value = value.item()
    return float(value) if isinstance(value, int | float) and not isinstance(value, bool) else value


def _pos(text: str) -> tuple[int, int]:
    from sheetnet.xlsx.addresses import parse_a1

    return parse_a1(text)


def _to(value, error_type, empty):
    if isinstance(value, CellError):
        return error_type(value.code)
    return empty if value is None else value


def same(a, b) -> bool:
    if isinstance(a, CellError) or isinstance(b, CellError):
        return isinstance(a, CellError) and isinstance(b, CellError) and a.code == b.code
    if isinstance(a, float) and isinstance(b, float):
        return a == b or abs(a - b) <= 1e-12 * max(1.0, abs(b))
    return a == b and type(a) is type(b)


def _excel_deviation(formula: str, cells: dict):
    """Where the formulas package departs from Excel, the engine follows Excel. Returns Excel's
    result for those cases, else None."""
    a, b = cells.get((0, 0)), cells.get((0, 1))
    errors = any(isinstance(v, CellError) for v in cells.values())
    if formula.startswith("MAX(") and not errors and any(isinstance(v, str) for v in cells.values()):
        # OASIS OpenFormula (ODF 1.2 Part 2, 2011) 6.18.45 and Microsoft Support, "MAX function": text in a
        # reference is ignored;
        # the formulas package gives #VALUE! for numeric text such as "3".
        numbers = [v for v in cells.values() if isinstance(v, float)] + ([0.0] if "0)" in formula else [])
        return max(numbers) if numbers else 0.0
    a, b = (0.0 if v is None else float(v) if isinstance(v, str) and v.replace(".", "", 1).isdigit() else v
            for v in (a, b))
    if "^" in formula and isinstance(a, float) and isinstance(b, float):
        if a == 0 and b < 0:
            # 0^-x: LibreOffice 7.4 gives #NUM! (measured here); the formulas package #VALUE!.
            return CellError("#NUM!")
        if a != 0 and b * math.log(abs(a)) > 709.78:
            return CellError("#NUM!")  # overflow: Excel #NUM!, formulas #VALUE! (FACTS §1, measured)
    return None


@pytest.mark.parametrize("formula", UNARY)
def test_unary_functions_agree_with_formulas_package(formula):
    for value in SCALARS:
        cells = {(0, 0): value}
        got, path = ours(formula, cells)
        assert path == "function", formula  # compiled on the fast path
        expected = _excel_deviation(formula, cells)
        expected = theirs(formula, cells) if expected is None else expected
        assert same(got, expected), (formula, value, got, expected)


@pytest.mark.parametrize("formula", BINARY)
def test_operators_agree_with_formulas_package(formula):
    for a, b in itertools.product(SMALL, repeat=2):
        cells = {(0, 0): a, (0, 1): b}
        got, _ = ours(formula, cells)
        expected = _excel_deviation(formula, cells)
        expected = theirs(formula, cells) if expected is None else expected
        assert same(got, expected), (formula, a, b, got, expected)


@pytest.mark.parametrize("formula", ARRAY_FORMULAS)
def test_range_functions_agree_with_formulas_package(formula):
    for first, second in itertools.product(ROWS, repeat=2):
        cells = {(0, c): v for c, v in enumerate(first)} | {(1, c): v for c, v in enumerate(second)}
        got, _ = ours(formula, cells)
        expected = theirs(formula, cells)
        assert same(got, expected), (formula, first, second, got, expected)


def test_functions_outside_the_fast_path_use_the_general_path():
    got, path = ours("ROUND(A1*B1,2)", {(0, 0): 1.2345, (0, 1): 2.0})
    assert path == "GeneralPath" and got == 2.47
