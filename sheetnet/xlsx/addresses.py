"""Typed cell addresses, and the only place where A1 text is made or parsed.

Inside sheetnet a cell is ``Cell(sheet, row, col)`` with 0-based row and column; a rectangle
is a :class:`Block`. Formula builders ask this module for reference text, never format it.
"""

from __future__ import annotations

import functools
import re
from dataclasses import dataclass
from typing import NamedTuple

MAX_ROWS = 1_048_576
MAX_COLS = 16_384
_A1 = re.compile(r"^\$?([A-Za-z]{1,3})\$?([0-9]+)$")


class Cell(NamedTuple):
    """One cell: sheet name, 0-based row and column (a tuple: cheap to make by the million)."""

    sheet: str
    row: int
    col: int

    def shift(self, rows: int = 0, cols: int = 0) -> Cell:
        return Cell(self.sheet, self.row + rows, self.col + cols)


@dataclass(frozen=True)
class Block:
    """A rectangle of cells: top-left corner (0-based) and size."""

    sheet: str
    top: int
    left: int
    nrows: int
    ncols: int

    @property
    def bottom(self) -> int:
        return self.top + self.nrows - 1

    @property
    def right(self) -> int:
        return self.left + self.ncols - 1

    def cell(self, i: int = 0, j: int = 0) -> Cell:
        if not (0 <= i < self.nrows and 0 <= j < self.ncols):
            raise IndexError(f"cell ({i}, {j}) outside a {self.nrows}x{self.ncols} block")
        return Cell(self.sheet, self.top + i, self.left + j)

    def row(self, i: int) -> Block:
        return Block(self.sheet, self.top + i, self.left, 1, self.ncols)

    def column(self, j: int) -> Block:
        return Block(self.sheet, self.top, self.left + j, self.nrows, 1)

    def rows(self, first: int, count: int) -> Block:
        return Block(self.sheet, self.top + first, self.left, count, self.ncols)

    def cells(self) -> list[Cell]:
        return [self.cell(i, j) for i in range(self.nrows) for j in range(self.ncols)]


@functools.lru_cache(maxsize=MAX_COLS)
def column_letters(col: int) -> str:
    """0 -> A, 25 -> Z, 26 -> AA."""
    if not 0 <= col < MAX_COLS:
        raise ValueError(f"column {col} outside the sheet")
    letters = ""
    col += 1
    while col:
        col, rem = divmod(col - 1, 26)
        letters = chr(65 + rem) + letters
    return letters


def column_index(letters: str) -> int:
    """A -> 0, AA -> 26."""
    value = 0
    for ch in letters.upper():
        value = value * 26 + ord(ch) - 64
    return value - 1


def quote_sheet(name: str) -> str:
    """A sheet name as a formula prefix: quoted when it is not a plain word."""
    if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_.]*", name) and not _A1.match(name):
        return name
    return "'" + name.replace("'", "''") + "'"


def a1(row: int, col: int, absolute: bool = False) -> str:
    """Row and column (0-based) as A1 text, e.g. ``(0, 2)`` -> ``C1`` or ``$C$1``."""
    if not 0 <= row < MAX_ROWS:
        raise ValueError(f"row {row} outside the sheet")
    dollar = "$" if absolute else ""
    return f"{dollar}{column_letters(col)}{dollar}{row + 1}"


def parse_a1(text: str) -> tuple[int, int]:
    """``C1`` or ``$C$1`` -> (0, 2)."""
    match = _A1.match(text)
    if not match:
        raise ValueError(f"not a cell address: {text!r}")
    return int(match.group(2)) - 1, column_index(match.group(1))


def ref(cell: Cell, here: str, absolute: bool = False) -> str:
    """Reference to ``cell`` from a formula on sheet ``here`` (sheet prefix only when needed)."""
    if cell.sheet == here and not absolute and 0 <= cell.row < MAX_ROWS:
        return f"{column_letters(cell.col)}{cell.row + 1}"  # the common case, made fast
    text = a1(cell.row, cell.col, absolute)
    return text if cell.sheet == here else f"{quote_sheet(cell.sheet)}!{text}"


def range_ref(block: Block, here: str, absolute: bool = False) -> str:
    """Reference to a block (a single cell when it is 1x1)."""
    first = a1(block.top, block.left, absolute)
    text = first if block.nrows == block.ncols == 1 else f"{first}:{a1(block.bottom, block.right, absolute)}"
    return text if block.sheet == here else f"{quote_sheet(block.sheet)}!{text}"


def cell_name(cell: Cell) -> str:
    """Human text for messages: ``'Training record'!C7``."""
    return f"{quote_sheet(cell.sheet)}!{a1(cell.row, cell.col)}"


def defined_name_target(block: Block) -> str:
    """The ``refers to`` text of a workbook-scoped defined name (always absolute, with sheet)."""
    return "=" + range_ref(block, here="", absolute=True)


_SHEET_PREFIX = re.compile(r"^(?:'((?:[^']|'')+)'|([^'!]+))!(.+)$")


def parse_range(text: str) -> Block | None:
    """A defined name's target (``Sheet!$B$2:$D$4``, ``'My sheet'!$B$2``) as a Block; None when it
    is not one rectangle on one sheet (e.g. ``#REF!``, a constant or a formula)."""
    match = _SHEET_PREFIX.match(text.strip().lstrip("="))
    if match is None:
        return None
    sheet = match.group(1).replace("''", "'") if match.group(1) is not None else match.group(2)
    first, _, last = match.group(3).partition(":")
    try:
        (r0, c0), (r1, c1) = parse_a1(first), parse_a1(last or first)
    except ValueError:
        return None
    if not (0 <= r0 <= r1 < MAX_ROWS and 0 <= c0 <= c1 < MAX_COLS):
        return None
    return Block(sheet, r0, c0, r1 - r0 + 1, c1 - c0 + 1)
