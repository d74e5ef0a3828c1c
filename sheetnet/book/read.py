"""Reading a sheetnet workbook back: its layout description, and the editable inputs as they are
in the file now (wherever the layout, or a re-alignment of it, says they are). The counterpart of
``write``.

Input cells are checked as they are read: a learning rate of 0, a cleared weight, text where a
number belongs or a threshold outside [0, 1] is an :class:`InvalidInput` naming the cell and why,
never a crash further on.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from sheetnet.book.layout import BookLayout, ParamBlocks
from sheetnet.book.spec import BookInputs, BookSpec
from sheetnet.book.untrusted import NEEDED_TO_VERIFY, Description, read_description
from sheetnet.errors import InvalidInputsError
from sheetnet.net.model import Layer
from sheetnet.xlsx.addresses import Block, Cell, cell_name
from sheetnet.xlsx.cells import CellError, Workbook

#: Where a cell of the layout is in the file now (None: nowhere); the identity when nothing moved.
Locate = Callable[[Cell], Cell | None]


def read_layout(book: Workbook) -> tuple[BookLayout, Description]:
    """The layout the workbook was built with, from its checked description; DescriptionError when
    the parts every check needs (format and spec) cannot be trusted."""
    description = read_description(book)
    return description.require(*NEEDED_TO_VERIFY), description


@dataclass(frozen=True)
class InvalidInput:
    """An input cell whose value the network cannot use: ``cell`` as it is in the file now."""

    cell: Cell
    what: str
    found: object
    reason: str
    group: str  # "parameters", "scaling", "training", "threshold", "calculator" or "data"
    deleted: bool = False  # the cell is gone (``cell`` is then where the layout put it)

    def __str__(self) -> str:
        if self.deleted:
            return f"{cell_name(self.cell)} ({self.what}) was deleted"
        return f"{cell_name(self.cell)} ({self.what}) {_shown(self.found)}: {self.reason}"


def _shown(value: object) -> str:
    if value is None:
        return "is empty"
    return f"holds {value!s}" if isinstance(value, CellError) else f"holds {value!r:.60}"


#: Rules for input cells: (allowed empty, check of the number or None, reason when it fails).
RULES = {
    "number": (False, None, "must be a number"),
    "optional": (True, None, "must be a number or empty"),
    "nonzero": (False, lambda v: v != 0, "must be a number other than 0 (it divides)"),
    "positive": (False, lambda v: v > 0, "must be a positive number"),
    "fraction": (False, lambda v: 0 <= v <= 1, "must be a number in [0, 1]"),
    "momentum": (False, lambda v: 0 <= v < 1, "must be a number in [0, 1)"),
    "nonnegative": (False, lambda v: v >= 0, "must be a number >= 0"),
}


class InputReader:
    """Reads input cells through ``locate``; collects every invalid one (read as 0, or a safe value)."""

    def __init__(self, book: Workbook, locate: Locate | None = None) -> None:
        self.book = book
        self.locate = locate or (lambda cell: cell)
        self.invalid: list[InvalidInput] = []

    def raw(self, cell: Cell) -> object:
        """The value at a layout cell as the file holds it now (None where the cell is gone)."""
        where = self.locate(cell)
        sheet = None if where is None else self.book.sheets.get(where.sheet)
        return None if sheet is None else sheet.values.get((where.row, where.col))

    def number(self, cell: Cell, what: str, group: str, rule: str = "number", fallback: float = 0.0) -> float:
        empty_ok, check, reason = RULES[rule]
        where = self.locate(cell)
        if where is None or where.sheet not in self.book.sheets:
            self.invalid.append(InvalidInput(cell, what, None, "the cell was deleted", group, deleted=True))
            return fallback
        value = self.raw(cell)
        if value is None and empty_ok:
            return 0.0
        number = float(value) if isinstance(value, float | int) and not isinstance(value, bool) else None
        if number is None or not math.isfinite(number) or (check is not None and not check(number)):
            self.invalid.append(InvalidInput(where, what, value, reason, group))
            return fallback
        return number

    def block(self, block: Block, what: Callable[[int, int], str], group: str, rule: str = "number",
              fallback: float = 0.0) -> np.ndarray:
        return np.array([[self.number(block.cell(i, j), what(i, j), group, rule, fallback)
                          for j in range(block.ncols)] for i in range(block.nrows)], dtype=float)


def _layers(reader: InputReader, spec: BookSpec, blocks: ParamBlocks, prefix: str) -> tuple[Layer, ...]:
    layers = []
    for k, (w, b, act) in enumerate(zip(blocks.weights, blocks.bias, spec.activations, strict=True)):
        units, sources = spec.unit_names(k), spec.source_names(k)
        weights = reader.block(w, lambda i, j, k=k, u=units, s=sources: f"{prefix}weight W_{k + 1}({u[i]},{s[j]})",
                               "parameters" if not prefix else "training")
        bias = reader.block(b, lambda i, j, k=k, u=units: f"{prefix}bias b_{k + 1}({u[i]})",
                            "parameters" if not prefix else "training")
        layers.append(Layer(weights=weights, bias=bias[:, 0], activation=act))
    return tuple(layers)


def _data(reader: InputReader, layout: BookLayout) -> tuple[tuple[float | str, ...], ...]:
    spec, table = layout.spec, layout.scoring
    rows = []
    for n in range(spec.n_cases):
        inputs = tuple(reader.number(table.cell(n, ("raw", i)), f"data, case {n + 1}, {name!r}", "data")
                       for i, name in enumerate(spec.inputs))
        targets = []
        for c, name in enumerate(spec.target):
            cell = table.cell(n, ("target", c))
            if spec.encodes_targets:  # class labels: any text (an unknown label encodes as no class)
                value = reader.raw(cell)
                targets.append("" if value is None else value)
            else:
                targets.append(reader.number(cell, f"data, case {n + 1}, target {name!r}", "data"))
        rows.append(inputs + tuple(targets))
    return tuple(rows)


def read_inputs_checked(book: Workbook, layout: BookLayout, locate: Locate | None = None
                        ) -> tuple[BookInputs, list[InvalidInput]]:
    """Every editable value as the file holds it now, and the cells holding values the network
    cannot use (those are read as safe stand-ins: 0, 1 for a divisor, 0.5 for the threshold)."""
    spec = layout.spec
    reader = InputReader(book, locate)
    names = spec.inputs
    record = layout.record is not None
    inputs = BookInputs(
        layers=_layers(reader, spec, layout.parameters, ""),
        offset=reader.block(layout.offset, lambda i, j: f"scaling offset of {names[j]}", "scaling")[0],
        divisor=reader.block(layout.divisor, lambda i, j: f"scaling divisor of {names[j]}", "scaling", "nonzero",
                             1.0)[0],
        data=_data(reader, layout),
        threshold=reader.number(layout.threshold, "decision threshold", "threshold", "fraction", 0.5)
        if layout.threshold is not None else 0.5,
        calculator=reader.block(layout.calculator.raw, lambda i, j: f"calculator input {names[j]}", "calculator",
                                "optional")[0],
        learning_rate=reader.number(layout.learning_rate, "learning rate", "training", "positive", 0.1)
        if record else 0.1,
        momentum=reader.number(layout.momentum, "momentum", "training", "momentum")
        if layout.momentum is not None else 0.0,
        l2=reader.number(layout.l2, "L2 penalty", "training", "nonnegative") if layout.l2 is not None else 0.0,
        initial=_layers(reader, spec, layout.initial, "initial ") if record else (),
    )
    return inputs, reader.invalid


def read_inputs(book: Workbook, layout: BookLayout, locate: Locate | None = None,
                groups: tuple[str, ...] | None = None) -> BookInputs:
    """Every editable value as the file holds it now; InvalidInputsError naming the first cell that
    holds a value the network cannot use (only cells of ``groups``, when given, count)."""
    inputs, invalid = read_inputs_checked(book, layout, locate)
    invalid = [item for item in invalid if groups is None or item.group in groups]
    if invalid:
        more = f" (and {len(invalid) - 1} more invalid input cells)" if len(invalid) > 1 else ""
        raise InvalidInputsError(f"{book.path}: input cell {invalid[0]}{more}; 'sheetnet audit' shows what changed",
                                 invalid)
    return inputs


def input_cells(layout: BookLayout, inputs: BookInputs) -> list[tuple[str, tuple[int, int], object, str]]:
    """(sheet, position, value, description) of every editable input."""
    spec = layout.spec
    out = []

    def block(b: Block, values, what) -> None:
        for i in range(b.nrows):
            for j in range(b.ncols):
                out.append((b.sheet, (b.top + i, b.left + j), float(values[i][j]), what(i, j)))

    block(layout.offset, [inputs.offset], lambda i, j: f"scaling offset of {spec.inputs[j]}")
    block(layout.divisor, [inputs.divisor], lambda i, j: f"scaling divisor of {spec.inputs[j]}")
    _layer_inputs(block, layout.parameters, inputs.layers, spec, "")
    if layout.initial is not None and inputs.initial:
        _layer_inputs(block, layout.initial, inputs.initial, spec, "initial ")
    block(layout.calculator.raw, [inputs.calculator], lambda i, j: f"calculator input {spec.inputs[j]}")
    for cell, value, what in ((layout.threshold, inputs.threshold, "decision threshold"),
                              (layout.learning_rate, inputs.learning_rate, "learning rate"),
                              (layout.momentum, inputs.momentum, "momentum"), (layout.l2, inputs.l2, "L2 penalty")):
        if cell is not None:
            out.append((cell.sheet, (cell.row, cell.col), float(value), what))
    names = (*spec.inputs, *spec.target)
    for n, row in enumerate(inputs.data):
        for c, value in enumerate(row):
            key = ("raw", c) if c < len(spec.inputs) else ("target", c - len(spec.inputs))
            cell = layout.scoring.cell(n, key)
            out.append((cell.sheet, (cell.row, cell.col), value, f"data, case {n + 1}, column {names[c]!r}"))
    return out


def _layer_inputs(block, blocks, layers, spec, prefix: str) -> None:
    for k, layer in enumerate(layers):
        units, sources = spec.unit_names(k), spec.source_names(k)
        block(blocks.weights[k], layer.weights, lambda i, j, k=k, u=units, s=sources:
              f"{prefix}weight W_{k + 1}({u[i]},{s[j]})")
        block(blocks.bias[k], layer.bias[:, None], lambda i, j, k=k, u=units: f"{prefix}bias b_{k + 1}({u[i]})")
