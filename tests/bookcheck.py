"""Test helpers: recompute a workbook with engines that are not sheetnet's code and compare."""

from __future__ import annotations

import json
import os
import re
from pathlib import Path

import numpy as np
import openpyxl

os.environ.setdefault("TQDM_DISABLE", "1")


def formula_cells(path: Path) -> dict[tuple[str, str], str]:
    book = openpyxl.load_workbook(path)
    return {(ws.title, c.coordinate): c.value for ws in book.worksheets for row in ws.iter_rows() for c in row
            if isinstance(c.value, str) and c.value.startswith("=") and c.data_type == "f"}


def cached_values(path: Path) -> dict[tuple[str, str], object]:
    book = openpyxl.load_workbook(path, data_only=True)
    return {(ws.title, c.coordinate): c.value for ws in book.worksheets for row in ws.iter_rows() for c in row}


def formulas_package_values(path: Path) -> dict[tuple[str, str], object]:
    """Every cell as the `formulas` package (an engine outside this project) computes it."""
    import formulas

    solution = formulas.ExcelModel().loads(str(path)).finish().calculate()
    book = openpyxl.load_workbook(path, read_only=True)
    titles = {ws.title.upper(): ws.title for ws in book.worksheets}
    out = {}
    name = Path(path).name.upper()
    for key, ranges in solution.items():
        if "!" not in key or ":" in key.split("!")[1]:
            continue
        sheet_part, coord = key.rsplit("!", 1)
        book_sheet = sheet_part.strip("'")
        if not book_sheet.upper().startswith(f"[{name}]"):
            continue
        sheet = titles.get(book_sheet[len(name) + 2:].upper())
        if sheet is not None:
            out[(sheet, coord)] = ranges.value[0, 0]
    return out


def libreoffice_values(path: Path, out_dir: Path) -> dict[tuple[str, str], object]:
    from sheetnet.engines.libreoffice import recalculate

    return cached_values(recalculate(path, out_dir))


def mismatches(expected: dict, found: dict, cells, tol: float = 1e-9) -> list[tuple]:
    """Cells whose found value differs from the expected one (numbers within ``tol``)."""
    bad = []
    for key in cells:
        exp, got = expected.get(key), found.get(key)
        if isinstance(exp, int | float) and not isinstance(exp, bool):
            try:
                ok = abs(float(got) - exp) <= tol * max(1.0, abs(exp))
            except (TypeError, ValueError):
                ok = False
        else:
            ok = str(exp) == str(got) or (exp in (None, "") and got in (None, ""))
        if not ok:
            bad.append((key, exp, got))
    return bad


def block_values(path: Path, sheet: str, top_left: str, rows: int, cols: int, values: dict | None = None):
    """A rectangle of values as a numpy array (from ``values`` or the file's cached values)."""
    values = values if values is not None else cached_values(path)
    from openpyxl.utils.cell import column_index_from_string, coordinate_from_string, get_column_letter

    letters, row = coordinate_from_string(top_left)
    col = column_index_from_string(letters)
    return np.array([[values[(sheet, f"{get_column_letter(col + j)}{row + i}")] for j in range(cols)]
                     for i in range(rows)], dtype=float)


_NUMBER_TEXT = re.compile(r"-?\d+(?:\.\d+)?(?:[eE][-+]?\d+)?")


def same_up_to_rounding(a, b, tol: float) -> bool:
    """Equal, except that numbers (also inside texts and parsed JSON) may differ by ``tol`` relative:
    training on another machine's BLAS sums in another order, so trained numbers differ in the last
    digits while everything else must be identical."""
    if a == b or isinstance(a, bool) or isinstance(b, bool):
        return a == b
    if isinstance(a, int | float) and isinstance(b, int | float):
        return abs(a - b) <= tol * max(1.0, abs(a), abs(b))
    if isinstance(a, str) and isinstance(b, str):
        numbers_a, numbers_b = _NUMBER_TEXT.findall(a), _NUMBER_TEXT.findall(b)
        return _NUMBER_TEXT.split(a) == _NUMBER_TEXT.split(b) and len(numbers_a) == len(numbers_b) and all(
            same_up_to_rounding(float(x), float(y), tol) for x, y in zip(numbers_a, numbers_b, strict=True))
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(same_up_to_rounding(a[k], b[k], tol) for k in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(same_up_to_rounding(x, y, tol) for x, y in zip(a, b, strict=True))
    return a == b


def layout_description(path: Path) -> dict:
    """The layout description stored in a workbook, parsed."""
    sheet = openpyxl.load_workbook(path)["sheetnet_layout"]
    return json.loads("".join(c.value for (c,) in sheet.iter_rows(min_row=2, max_col=1) if c.value))
