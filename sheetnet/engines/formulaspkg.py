"""The `formulas` package (an Excel formula engine outside this project) as a third recalculation
engine: it compiles the whole workbook into its own model and calculates every cell.

It is slow and hungry: loading handles about 300-550 formula cells a second at about 40-50 KB of
memory each (measured on a 2-core machine), so it is offered for workbooks of at most
``MAX_CELLS`` formula cells, and refused beyond with an estimate of what it would take.
"""

from __future__ import annotations

import os
import warnings
from pathlib import Path

import numpy as np

from sheetnet.errors import EvaluationError, UsageError
from sheetnet.xlsx.addresses import parse_a1
from sheetnet.xlsx.cells import CellError, Workbook

#: Formula cells beyond which the `formulas` engine is refused (about a minute and 1.2 GB there).
MAX_CELLS = 25_000
#: Measured rates, for the estimate given when refusing (see DEVELOPERS.md).
SECONDS_PER_CELL = 1 / 330
BYTES_PER_CELL = 48_000


def check_size(book: Workbook) -> int:
    """The number of formula cells, or a usage error (this engine was asked for a workbook it cannot
    handle) with an estimate of what it would take."""
    cells = sum(len(sheet.formulas) for sheet in book.sheets.values())
    if cells > MAX_CELLS:
        raise UsageError(
            f"the formulas engine handles at most {MAX_CELLS:,} formula cells; this workbook has {cells:,}, which "
            f"would take about {cells * SECONDS_PER_CELL / 60:,.0f} minutes and {cells * BYTES_PER_CELL / 1e9:,.1f} "
            "GB (use --engine embedded or libreoffice)")
    return cells


def recalculate(book: Workbook) -> dict[str, dict[tuple[int, int], object]]:
    """Every formula cell's value as the `formulas` package computes it, per sheet."""
    check_size(book)
    os.environ.setdefault("TQDM_DISABLE", "1")
    import formulas  # lazy: the formulas package costs seconds to import and only this engine or path needs it

    path = Path(book.path).resolve()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            solution = formulas.ExcelModel().loads(str(path)).finish().calculate()
        except Exception as exc:  # the package raises many kinds; any is a failure of this engine
            raise EvaluationError(f"the formulas package could not calculate {path.name} "
                                  f"({type(exc).__name__}: {exc})") from None
    by_upper = {name.upper(): name for name in book.sheets}
    prefix = f"'[{path.name.upper()}]"
    values: dict[str, dict[tuple[int, int], object]] = {name: {} for name in book.sheets}
    for key, ranges in solution.items():
        sheet_part, _, coordinate = str(key).rpartition("!")
        if ":" in coordinate or not sheet_part.upper().startswith(prefix):
            continue
        sheet = by_upper.get(sheet_part[len(prefix):].rstrip("'").upper())
        if sheet is None:
            continue
        pos = parse_a1(coordinate)
        if pos in book.sheets[sheet].formulas:
            values[sheet][pos] = _plain(np.asarray(ranges.value)[0, 0])
    return values


def _plain(value: object) -> object:
    """A value of the package as sheetnet's reader gives it: floats, text, booleans, CellError."""
    if isinstance(value, np.bool_ | bool):
        return bool(value)
    if isinstance(value, np.floating | np.integer | int | float):
        return float(value)
    if isinstance(value, str):
        return value
    text = str(value)
    return CellError(text) if text.startswith("#") else text
