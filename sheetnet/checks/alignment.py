"""Where each cell of the layout is now, as data: per sheet a map of rows and columns (and a
sort's permutation), the changes found, and how a formula's references move with the cells (the
way a spreadsheet application rewrites them). checks.align finds these maps."""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from sheetnet.xlsx.addresses import (
    Block,
    Cell,
    a1,
    column_index,
    column_letters,
    quote_sheet,
)


@dataclass(frozen=True)
class Change:
    """One structural change, reported once: on the file's sheet, at the file's cell."""

    sheet: str
    cell: str
    note: str


@dataclass
class SheetMap:
    """Expected row/column -> the file's (-1: gone). ``reordered`` rows moved as a permutation."""

    found: str
    rows: np.ndarray
    cols: np.ndarray
    reordered: frozenset = frozenset()
    inserted_rows: frozenset = frozenset()  # the file's rows that no expected row maps to
    inserted_cols: frozenset = frozenset()

    @property
    def identity(self) -> bool:
        return not self.reordered and bool(np.all(self.rows == np.arange(len(self.rows)))) and \
            bool(np.all(self.cols == np.arange(len(self.cols))))

    def row(self, r: int) -> int:
        return int(self.rows[r]) if 0 <= r < len(self.rows) else r + self._row_tail()

    def col(self, c: int) -> int:
        return int(self.cols[c]) if 0 <= c < len(self.cols) else c + self._col_tail()

    def _row_tail(self) -> int:
        valid = self.rows[self.rows >= 0]
        return int(valid[-1] - np.flatnonzero(self.rows >= 0)[-1]) if valid.size else 0

    def _col_tail(self) -> int:
        valid = self.cols[self.cols >= 0]
        return int(valid[-1] - np.flatnonzero(self.cols >= 0)[-1]) if valid.size else 0


@dataclass
class Alignment:
    """Where every layout cell is now. ``sheets``: expected sheet -> its map (missing sheets absent)."""

    sheets: dict[str, SheetMap] = field(default_factory=dict)
    moves: dict[str, list[tuple[Block, Block]]] = field(default_factory=dict)  # expected sheet -> (from, to)
    changes: list[Change] = field(default_factory=list)
    missing: list[str] = field(default_factory=list)
    added: list[str] = field(default_factory=list)

    @property
    def identity(self) -> bool:
        return not self.missing and not self.moves and all(m.found == s and m.identity for s, m in self.sheets.items())

    def _moved(self, sheet: str, row: int, col: int) -> Cell | None:
        """Where a cell of a block that was cut and pasted elsewhere (maybe onto another sheet) is now
        (None: it is not in such a block)."""
        for source, target in self.moves.get(sheet, ()):
            if source.top <= row <= source.bottom and source.left <= col <= source.right:
                return Cell(target.sheet, target.top + row - source.top, target.left + col - source.left)
        return None

    @property
    def reordered(self) -> list[str]:
        return [sheet for sheet, m in self.sheets.items() if m.reordered]

    def sheet_name(self, sheet: str) -> str | None:
        m = self.sheets.get(sheet)
        return None if m is None else m.found

    def locate(self, cell: Cell) -> Cell | None:
        m = self.sheets.get(cell.sheet)
        if m is None:
            return None
        moved = self._moved(cell.sheet, cell.row, cell.col)
        if moved is not None:
            return moved
        row, col = m.row(cell.row), m.col(cell.col)
        return None if row < 0 or col < 0 else Cell(m.found, row, col)

    def locate_block(self, block: Block) -> Block | None:
        """Where a block is now (a range keeps its corners; rows inserted inside widen it)."""
        m = self.sheets.get(block.sheet)
        if m is None:
            return None
        first = self._moved(block.sheet, block.top, block.left)
        last = self._moved(block.sheet, block.bottom, block.right)
        if first is not None and last is not None:
            return Block(first.sheet, first.row, first.col, last.row - first.row + 1, last.col - first.col + 1)
        rows = _span(m.rows, block.top, block.bottom, m.row)
        cols = _span(m.cols, block.left, block.right, m.col)
        if rows is None or cols is None:
            return None
        return Block(m.found, rows[0], cols[0], rows[1] - rows[0] + 1, cols[1] - cols[0] + 1)

    def translate(self, formula: str, here: Cell) -> str:
        """Expected formula text (written at ``here`` in the layout) as the application rewrote it."""
        return _REF.sub(lambda match: self._reference(match, here), formula)

    def _reference(self, match: re.Match, here: Cell) -> str:
        if match.group("string"):
            return match.group("string")
        prefix = match.group("sheet")
        sheet = _unquote(prefix[:-1]) if prefix else here.sheet
        m = self.sheets.get(sheet)
        if m is None:
            return match.group(0)
        r0, c0 = int(match.group("r0")) - 1, column_index(match.group("c0"))
        moved = self._moved_reference(match, sheet, r0, c0, here)
        if moved is not None:
            return moved
        if match.group("c1") is None:
            moved = self._point(m, r0, c0, here, sheet, bool(match.group("rd0")))
            text = "#REF!" if moved is None else _a1(moved, match.group("cd0"), match.group("rd0"))
        else:
            r1, c1 = int(match.group("r1")) - 1, column_index(match.group("c1"))
            if self._moves_with_sort(m, here, sheet, r0) and self._moves_with_sort(m, here, sheet, r1):
                first = self._point(m, r0, c0, here, sheet, bool(match.group("rd0")))
                last = self._point(m, r1, c1, here, sheet, bool(match.group("rd1")))
                rows = None if first is None or last is None else (first[0], last[0])
            elif m.reordered and (r0 in m.reordered or r1 in m.reordered):
                rows = (r0, r1)  # a range over sorted rows, from outside them: its position is kept
            else:
                rows = _span(m.rows, r0, r1, m.row)
            cols = _span(m.cols, c0, c1, m.col)
            if rows is None or cols is None:
                text = "#REF!"
            else:
                text = (_a1((rows[0], cols[0]), match.group("cd0"), match.group("rd0")) + ":" +
                        _a1((rows[1], cols[1]), match.group("cd1"), match.group("rd1")))
        return self._prefixed(prefix, m.found, text)

    @staticmethod
    def _prefixed(prefix: str | None, sheet: str, text: str) -> str:
        return f"{quote_sheet(sheet)}!{text}" if prefix and text != "#REF!" else text

    def _moved_reference(self, match: re.Match, sheet: str, r0: int, c0: int, here: Cell) -> str | None:
        """A reference into a block that was cut and pasted elsewhere: to the block's new place (with the
        sheet's name when that is not the formula's own sheet), or None."""
        first = self._moved(sheet, r0, c0)
        if first is None:
            return None
        text = _a1((first.row, first.col), match.group("cd0"), match.group("rd0"))
        if match.group("c1") is not None:
            last = self._moved(sheet, int(match.group("r1")) - 1, column_index(match.group("c1")))
            if last is None:
                return None
            text += ":" + _a1((last.row, last.col), match.group("cd1"), match.group("rd1"))
        return text if first.sheet == self.sheet_name(here.sheet) else f"{quote_sheet(first.sheet)}!{text}"

    def _point(self, m: SheetMap, row: int, col: int, here: Cell, sheet: str, absolute_row: bool):
        if m.reordered and row in m.reordered:
            if self._moves_with_sort(m, here, sheet, row) and not absolute_row:
                moved_here = m.row(here.row)  # a relative reference moves with its row in a sort
                now = moved_here + row - here.row  # above the sheet's first row it is #REF!
                return None if moved_here < 0 or now < 0 or m.col(col) < 0 else (now, m.col(col))
            return (row, m.col(col)) if m.col(col) >= 0 else None  # from outside: the position is kept
        r, c = m.row(row), m.col(col)
        return None if r < 0 or c < 0 else (r, c)

    @staticmethod
    def _moves_with_sort(m: SheetMap, here: Cell, sheet: str, row: int) -> bool:
        """A reference from a sorted row to a sorted row of the same sheet travels with its row."""
        return bool(m.reordered) and here.sheet == sheet and here.row in m.reordered and row in m.reordered


_REF = re.compile(
    r"""(?P<string>"(?:[^"]|"")*")|(?P<sheet>(?:'(?:[^']|'')+'|[A-Za-z_][\w.]*)!)?"""
    r"""(?<![\w.$])(?P<cd0>\$?)(?P<c0>[A-Z]{1,3})(?P<rd0>\$?)(?P<r0>[0-9]+)"""
    r"""(?::(?P<cd1>\$?)(?P<c1>[A-Z]{1,3})(?P<rd1>\$?)(?P<r1>[0-9]+))?(?![\w(!])""")


def _unquote(text: str) -> str:
    return text[1:-1].replace("''", "'") if text.startswith("'") else text


def _a1(pos: tuple[int, int], col_dollar: str, row_dollar: str) -> str:
    return f"{col_dollar}{column_letters(pos[1])}{row_dollar}{pos[0] + 1}"


def _span(mapping: np.ndarray, first: int, last: int, point) -> tuple[int, int] | None:
    """Where a range first..last is now: its first and last surviving members (a range shrinks when
    its end is deleted and widens when something is inserted inside it)."""
    if first >= len(mapping) or last < 0:
        return (point(first), point(last)) if point(first) >= 0 and point(last) >= 0 else None
    window = mapping[max(first, 0):min(last, len(mapping) - 1) + 1]
    alive = window[window >= 0]
    if not alive.size:
        return None
    low, high = int(alive.min()), int(alive.max())
    if last >= len(mapping):
        high = max(high, point(last))
    return low, high


def describe_changes(m: SheetMap, cells: dict) -> list[Change]:
    """The structural changes one sheet's map says happened, one Change each."""
    changes = []
    changes += _moves(m.found, m.rows, "row", lambda i: a1(i, 0), lambda i: str(i + 1), m.reordered)
    changes += _moves(m.found, m.cols, "column", lambda i: a1(0, i), column_letters, frozenset())
    if m.reordered:
        first, last = min(m.reordered), max(m.reordered)
        changes.append(Change(m.found, a1(int(m.rows[first]), 0),
                              f"{len(m.reordered)} rows of {m.found} were reordered (sorted): the rows sheetnet "
                              f"wrote as {first + 1}-{last + 1} are now in another order; references from other "
                              "rows still point at the old positions"))
    return changes


def _moves(sheet: str, mapping: np.ndarray, what: str, cell, name, reordered: frozenset) -> list[Change]:
    """Insertions (a jump in the map) and deletions (a run of -1) along rows or columns."""
    changes = []
    previous_expected, previous_found = -1, -1
    i = 0
    while i < len(mapping):
        if mapping[i] < 0:
            j = i
            while j + 1 < len(mapping) and mapping[j + 1] < 0:
                j += 1
            at = previous_found + 1
            count = j - i + 1
            changes.append(Change(sheet, cell(at), f"{count} {what}(s) deleted at {what} {name(at)} of {sheet} "
                                                   f"(sheetnet wrote them as {name(i)}-{name(j)})"))
            i = j + 1
            continue
        if i not in reordered and previous_expected not in reordered:
            gap = int(mapping[i]) - previous_found - (i - previous_expected)
            if gap > 0:
                at = previous_found + (i - previous_expected)
                changes.append(Change(sheet, cell(at), f"{gap} {what}(s) inserted at {what} {name(at)} of {sheet}"))
        previous_expected, previous_found = i, int(mapping[i])
        i += 1
    return changes
