"""Reading a sheetnet workbook back: its layout description, and the editable inputs as they are
in the file now (wherever the layout says they are). The counterpart of ``write``."""

from __future__ import annotations

import numpy as np

from sheetnet.book.addresses import Block, Cell, cell_name
from sheetnet.book.layout import SCORING, BookLayout, ParamBlocks
from sheetnet.book.spec import BookInputs, BookSpec
from sheetnet.book.untrusted import NEEDED_TO_VERIFY, Description, read_description
from sheetnet.book.xlsxread import CellError, Workbook
from sheetnet.errors import WorkbookFormatError
from sheetnet.net.model import Layer


def read_layout(book: Workbook) -> tuple[BookLayout, Description]:
    """The layout the workbook was built with, from its checked description; DescriptionError when
    the parts every check needs (format and spec) cannot be trusted."""
    description = read_description(book)
    return description.require(*NEEDED_TO_VERIFY), description


def _value(book: Workbook, cell: Cell):
    sheet = book.sheets.get(cell.sheet)
    if sheet is None:
        raise WorkbookFormatError(f"{book.path}: sheet {cell.sheet!r} is missing")
    return sheet.values.get((cell.row, cell.col))


def number_at(book: Workbook, cell: Cell) -> float:
    """An input cell as a number; an empty cell counts as 0, as it does in a formula."""
    value = _value(book, cell)
    if value is None:
        return 0.0
    if isinstance(value, bool):
        return float(value)
    if isinstance(value, float | int):
        return float(value)
    if isinstance(value, CellError):
        raise WorkbookFormatError(f"{book.path}: input cell {cell_name(cell)} holds the error {value}")
    try:
        return float(value)
    except ValueError:
        raise WorkbookFormatError(f"{book.path}: input cell {cell_name(cell)} holds text {value!r}, "
                                  "not a number") from None


def block_numbers(book: Workbook, block: Block) -> np.ndarray:
    return np.array([[number_at(book, block.cell(i, j)) for j in range(block.ncols)] for i in range(block.nrows)])


def _layers(book: Workbook, spec: BookSpec, blocks: ParamBlocks) -> tuple[Layer, ...]:
    return tuple(Layer(weights=block_numbers(book, w), bias=block_numbers(book, b)[:, 0], activation=act)
                 for w, b, act in zip(blocks.weights, blocks.bias, spec.activations, strict=True))


def _data(book: Workbook, layout: BookLayout) -> tuple[tuple[float | str, ...], ...]:
    spec, table = layout.spec, layout.scoring
    if spec.n_cases == 0:
        return ()
    cells = book.sheets[SCORING].values if SCORING in book.sheets else {}
    rows = []
    for n in range(spec.n_cases):
        inputs = tuple(number_at(book, table.cell(n, ("raw", i))) for i in range(len(spec.inputs)))
        targets = []
        for c in range(len(spec.target)):
            cell = table.cell(n, ("target", c))
            value = cells.get((cell.row, cell.col))
            targets.append("" if value is None else value)
        rows.append(inputs + tuple(targets))
    return tuple(rows)


def read_inputs(book: Workbook, layout: BookLayout) -> BookInputs:
    """Every editable value as the file holds it now."""
    spec = layout.spec
    record = layout.record is not None
    return BookInputs(
        layers=_layers(book, spec, layout.parameters),
        offset=block_numbers(book, layout.offset)[0],
        divisor=block_numbers(book, layout.divisor)[0],
        data=_data(book, layout),
        threshold=number_at(book, layout.threshold) if layout.threshold is not None else 0.5,
        calculator=block_numbers(book, layout.calculator.raw)[0],
        learning_rate=number_at(book, layout.learning_rate) if record else 0.1,
        momentum=number_at(book, layout.momentum) if layout.momentum is not None else 0.0,
        l2=number_at(book, layout.l2) if layout.l2 is not None else 0.0,
        initial=_layers(book, spec, layout.initial) if record else (),
    )
