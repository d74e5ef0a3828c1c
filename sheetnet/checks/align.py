"""Re-alignment: where each cell of the layout is in a workbook that a spreadsheet application has
restructured (rows or columns inserted or deleted, sheets renamed, table rows sorted).

A spreadsheet application moves cells and rewrites every reference to them, and moves defined
names with their cells. So the comparison must not look for a cell where ``build`` put it, but
where the application moved it, and must expect each formula with its references moved the same
way. This module finds, per sheet, a map from the layout's rows and columns to the file's, from
anchors whose identity does not depend on position:

* texts sheetnet wrote outside the tables' bodies (titles, headers, labels), paired in reading
  order;
* defined names (the application moves them with their blocks);
* the tables' row labels (case numbers; step and case of the training record; epochs), which move
  with their rows, also when rows are sorted.

Rows and columns are whole-sheet operations, so one row map and one column map per sheet follow
insertions and deletions; a permutation of table rows (a sort) is followed for the cells that
moved, while references from outside the sorted rows keep their positions, as applications do by
default. What cannot be followed (a sheet that is missing, cells cut and pasted elsewhere) is
reported and left out.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable
from dataclasses import replace

import numpy as np

from sheetnet.book import layout as L
from sheetnet.book import plan
from sheetnet.book.canonical import target_text
from sheetnet.book.cells.entry import Entry
from sheetnet.book.expected import expected_numbers
from sheetnet.book.guide import guide_lines
from sheetnet.book.layout import BookLayout, SheetTable, build_layout
from sheetnet.book.read import read_inputs_checked
from sheetnet.book.spec import BookInputs
from sheetnet.book.untrusted import layout_extents
from sheetnet.checks.alignment import Alignment, Change, SheetMap, describe_changes
from sheetnet.errors import SheetNetError, WorkbookFormatError
from sheetnet.xlsx.addresses import (
    a1,
    defined_name_target,
    parse_range,
)
from sheetnet.xlsx.cells import Workbook

#: Text roles of the plan that serve as anchors (outside the tables' bodies).
ANCHOR_ROLES = ("title", "header", "label", "text")


def alignment_for(book: Workbook, layout: BookLayout, original: BookInputs | None) -> Alignment | None:
    """None when the workbook is laid out exactly as built (checked cheaply: the common case), else
    its alignment, anchored on the texts the plan writes (from the original inputs when trusted)."""
    if looks_unmoved(book, layout):
        return None
    inputs = original if original is not None else read_inputs_checked(book, layout)[0]
    try:
        return align(book, layout, light_entries(layout, inputs))
    except SheetNetError as exc:
        raise WorkbookFormatError(f"the workbook was restructured and cannot be re-aligned ({exc})") from None


def light_entries(layout: BookLayout, inputs: BookInputs) -> list[tuple[str, Entry]]:
    """Every cell outside the training record's body, cheaply: texts and the formulas of the other
    sheets do not depend on how long the record is, so a record of one (the widest) step gives them
    without replaying the whole run."""
    spec = layout.spec
    if spec.record is not None:
        longest = max(spec.record.steps, key=len)  # the widest step decides the record's columns
        spec = replace(spec, record=replace(spec.record, steps=(longest,), epochs=(1,)))
    return list(plan.all_entries(build_layout(spec), expected_numbers(spec, inputs)))


def looks_unmoved(book: Workbook, layout: BookLayout) -> bool:
    """Every sheet under its name, every defined name on its block, every sheet's extent as built,
    every table header in place and every table row label where it was written."""

    if any(sheet not in book.sheets for sheet in layout.sheet_names()):
        return False
    if any(target_text(book.names.get(name, "")) != target_text(defined_name_target(block))
           for name, block in layout.defined_names().items()):
        return False
    for sheet, extent in layout_extents(layout).items():
        cells = book.sheets[sheet].values
        if max((r for r, _ in cells), default=-1) != extent.last_row or \
                max((c for _, c in cells), default=-1) != extent.last_col:
            return False
    for table, labels in _tables(layout):
        cells = book.sheets[table.sheet].values
        if any(cells.get((table.header_row, table.col(c.key))) != c.header for c in table.columns):
            return False
        columns = [table.col(key) for key in _label_keys(table)]
        for label, n in labels.items():
            row = table.first_row + n
            if tuple(_key(cells.get((row, c))) for c in columns) != label:
                return False
    return True


def align(book: Workbook, layout: BookLayout, entries: Iterable[tuple[str, object]]) -> Alignment:
    """The alignment of ``book`` to ``layout``; ``entries`` are the plan's (sheet, entry) pairs (only
    their positions and constant texts are used)."""
    guide = guide_entries(layout)
    anchors = _anchor_texts(layout, [*entries, *guide])
    alignment = Alignment()
    mapping = _map_sheets(alignment, book, layout, anchors)
    extents = {**_extents(layout), L.GUIDE: (max(e.row for _, e in guide), 1)}
    for sheet, found in mapping.items():
        votes = _Votes()
        cells = book.sheets[found].values
        _text_votes(votes, anchors.get(sheet, []), cells)
        for table, labels in _tables(layout):
            if table.sheet == sheet:
                _table_votes(votes, table, labels, cells)
        rows, cols = extents.get(sheet, (0, 0))
        sheet_map = _sheet_map(found, votes, rows + 1, cols + 1, cells)
        alignment.sheets[sheet] = sheet_map
        alignment.changes += describe_changes(sheet_map, cells)
    _find_moves(alignment, book, layout)
    return alignment


def _find_moves(alignment: Alignment, book: Workbook, layout: BookLayout) -> None:
    """Named blocks cut and pasted elsewhere: the name points at a block of the same size away from
    where the rows and columns put it, and that place is empty now. (A name that points elsewhere
    while its block's cells are still in place is a changed name, which the audit reports.)"""
    for name, block in layout.defined_names().items():
        target = parse_range(book.names.get(name, ""))
        placed = alignment.locate_block(block)
        sheets = {m.found for m in alignment.sheets.values()}
        if target is None or placed is None or target == placed or target.sheet not in sheets or \
                (target.nrows, target.ncols) != (block.nrows, block.ncols):
            continue
        values = book.sheets[placed.sheet].values
        if any(values.get((placed.top + i, placed.left + j)) not in (None, "")
               for i in range(placed.nrows) for j in range(placed.ncols)):
            continue
        alignment.moves.setdefault(block.sheet, []).append((block, target))
        alignment.changes.append(Change(target.sheet, a1(target.top, target.left),
                                        f"block {name} was moved from {placed.sheet}!{a1(placed.top, placed.left)} "
                                        f"to {target.sheet}!{a1(target.top, target.left)}"))


def guide_entries(layout: BookLayout) -> list[tuple[str, Entry]]:
    """The Guide's texts as entries (the Guide is prose, not a plan sheet, but its rows move too)."""
    lines = guide_lines(layout, layout.defined_names())
    return [(L.GUIDE, Entry(row, col, "text", text)) for row, (_, left, right) in enumerate(lines)
            for col, text in ((0, left), (1, right)) if text]


def _extents(layout: BookLayout) -> dict[str, tuple[int, int]]:

    return {sheet: (e.last_row, e.last_col) for sheet, e in layout_extents(layout).items()}


def _tables(layout: BookLayout) -> list[tuple[SheetTable, dict]]:
    """Each table and its row labels: label (tuple of label cells' values) -> table row index."""
    out = []
    if layout.spec.n_cases:
        out.append((layout.scoring, {(float(layout.spec.case_number(n)),): n for n in range(layout.spec.n_cases)}))
    if layout.record is not None:
        labels = {}
        for s, (first, _count) in enumerate(layout.step_rows):
            for p, case in enumerate(layout.spec.record.steps[s]):
                labels[(float(s + 1), float(layout.spec.case_number(case)))] = first + p
        out.append((layout.record, labels))
        out.append((layout.epochs, {(float(e + 1),): e for e in range(layout.spec.record.n_epochs)}))
    return out


def _label_keys(table: SheetTable) -> tuple[tuple, ...]:
    return (("step",), ("case",)) if table.sheet == L.RECORD else ((table.columns[0].key),)


def _anchor_texts(layout: BookLayout, entries) -> dict[str, list[tuple[tuple[int, int], object]]]:
    """Per sheet: (position, constant) of the texts sheetnet wrote outside the tables' bodies."""
    bodies = {table.sheet: (table.first_row, table.first_row + table.nrows - 1) for table, _ in _tables(layout)}
    out: dict[str, list] = {}
    for sheet, entry in entries:
        if entry.role not in ANCHOR_ROLES or entry.content in (None, ""):
            continue
        body = bodies.get(sheet)
        if body is not None and body[0] <= entry.row <= body[1]:
            continue
        out.setdefault(sheet, []).append(((entry.row, entry.col), entry.content))
    return out


def _map_sheets(alignment: Alignment, book: Workbook, layout: BookLayout, anchors: dict) -> dict[str, str]:
    """Expected sheet -> the file's sheet (the same name, or the renamed sheet its names or texts
    point to); renamed, missing and added sheets become changes."""
    expected = [s for s in layout.sheet_names() if s != L.LAYOUT]
    mapping = {name: name for name in expected if name in book.sheets}
    spare = [name for name in book.sheets if name not in expected and name != L.LAYOUT]
    for name in expected:
        if name in mapping:
            continue
        match = _renamed(book, layout, name, spare, anchors.get(name, []))
        if match is None:
            alignment.missing.append(name)
            alignment.changes.append(Change(name, "", f"sheet {name!r} is missing"))
            continue
        mapping[name] = match
        spare.remove(match)
        alignment.changes.append(Change(match, "A1", f"sheet {name!r} was renamed to {match!r}"))
    alignment.added = spare
    alignment.changes += [Change(name, "", f"sheet {name!r} was added") for name in spare]
    return mapping


def _renamed(book: Workbook, layout: BookLayout, name: str, spare: list[str], texts: list) -> str | None:
    """The spare sheet that the defined names of ``name``'s blocks now point to, or whose texts best
    match (at least 60% of them)."""
    pointed = Counter()
    for defined, block in layout.defined_names().items():
        found = parse_range(book.names.get(defined, ""))
        if block.sheet == name and found is not None and found.sheet in spare:
            pointed[found.sheet] += 1
    if pointed:
        return pointed.most_common(1)[0][0]
    wanted = {text for _, text in texts if isinstance(text, str)}
    best, score = None, 0.0
    for candidate in spare:
        have = {v for v in book.sheets[candidate].values.values() if isinstance(v, str)}
        overlap = len(wanted & have) / max(1, len(wanted))
        if overlap > score:
            best, score = candidate, overlap
    return best if score >= 0.6 else None


class _Votes:
    def __init__(self) -> None:
        self.rows: dict[int, Counter] = {}
        self.cols: dict[int, Counter] = {}

    def row(self, expected: int, found: int, weight: int = 1) -> None:
        self.rows.setdefault(expected, Counter())[found] += weight

    def col(self, expected: int, found: int, weight: int = 1) -> None:
        self.cols.setdefault(expected, Counter())[found] += weight


def _text_votes(votes: _Votes, anchors: list, cells: dict) -> None:
    """Each anchor text paired, in reading order, with the same text in the file (when the text
    occurs as often in the file as in the layout)."""
    where: dict[object, list] = {}
    for (row, col), text in anchors:
        where.setdefault(_key(text), []).append((row, col))
    found: dict[object, list] = {}
    wanted = set(where)
    for pos, value in cells.items():
        key = _key(value)
        if key in wanted:
            found.setdefault(key, []).append(pos)
    for key, expected in where.items():
        have = sorted(found.get(key, []))
        if len(have) != len(expected):
            continue
        for (r, c), (fr, fc) in zip(sorted(expected), have, strict=True):
            votes.row(r, fr)
            votes.col(c, fc)


def _key(value: object) -> object:
    if isinstance(value, bool) or value is None:
        return None
    return float(value) if isinstance(value, int | float) else value


def _table_votes(votes: _Votes, table: SheetTable, labels: dict, cells: dict) -> None:
    """A table's rows found by their labels, in the label columns the header anchors located."""
    label_cols = []
    for key in _label_keys(table):  # where the header anchors put the label column (else where it was)
        counter = votes.cols.get(table.col(key))
        label_cols.append(counter.most_common(1)[0][0] if counter else table.col(key))
    header = votes.rows.get(table.header_row)
    start = header.most_common(1)[0][0] + 1 if header else 0  # a deleted header: look at every row
    rows_present = sorted({r for r, _ in cells if r >= start})
    for found_row in rows_present:
        key = tuple(_key(cells.get((found_row, c))) for c in label_cols)
        n = labels.get(key)
        if n is not None:
            votes.row(table.first_row + n, found_row, 2)


def _one_to_one(votes: dict[int, Counter], size: int) -> np.ndarray:
    """Each expected position -> its most voted position in the file; where two claim the same
    one, the better supported keeps it (the other is left to the filling)."""
    mapping = np.full(size, -1, dtype=np.int64)
    holder: dict[int, tuple[int, int]] = {}
    for expected in range(size):
        counter = votes.get(expected)
        if not counter:
            continue
        found, weight = counter.most_common(1)[0]
        rival = holder.get(found)
        if rival is not None and rival[1] >= weight:
            continue
        if rival is not None:
            mapping[rival[0]] = -1
        mapping[expected] = found
        holder[found] = (expected, weight)
    return mapping


def _sheet_map(found: str, votes: _Votes, n_rows: int, n_cols: int, cells: dict) -> SheetMap:
    rows = _fill(_one_to_one(votes.rows, n_rows))
    cols = _fill(_one_to_one(votes.cols, n_cols))
    reordered = _reordered(rows)
    used_rows, used_cols = set(rows[rows >= 0].tolist()), set(cols[cols >= 0].tolist())
    last_row, last_col = (max(rows.max(), 0), max(cols.max(), 0))
    inserted_rows = {r for r, _ in cells if r <= last_row and r not in used_rows}
    inserted_cols = {c for _, c in cells if c <= last_col and c not in used_cols}
    return SheetMap(found, rows, cols, frozenset(reordered), frozenset(inserted_rows), frozenset(inserted_cols))


def _fill(mapping: np.ndarray) -> np.ndarray:
    """Positions without an anchor take the shift of the nearest anchored one above (or below), unless
    that lands on a position another one holds (then they are gone)."""
    anchored = np.flatnonzero(mapping >= 0)
    if not anchored.size:
        return np.arange(len(mapping))
    out = mapping.copy()
    taken = set(mapping[anchored].tolist())
    for i in np.flatnonzero(mapping < 0):
        above = anchored[anchored < i]
        near = above[-1] if above.size else anchored[anchored > i][0]
        candidate = int(mapping[near] + (i - near))
        if candidate >= 0 and candidate not in taken and _between(mapping, anchored, i, candidate):
            out[i] = candidate
            taken.add(candidate)
    return out


def _between(mapping: np.ndarray, anchored: np.ndarray, i: int, candidate: int) -> bool:
    """The candidate keeps the order with the next anchored position below (a deleted row must not
    take the place of the row that moved up into it)."""
    below = anchored[anchored > i]
    return not below.size or candidate < mapping[below[0]]


def _reordered(rows: np.ndarray) -> set[int]:
    """Expected rows that moved as part of a permutation (a sort): those out of increasing order."""
    alive = np.flatnonzero(rows >= 0)
    if alive.size < 2:
        return set()
    found = rows[alive]
    if np.all(np.diff(found) > 0):
        return set()
    # the smallest window of expected rows outside which the order is increasing
    increasing_prefix = np.maximum.accumulate(found)
    decreasing_suffix = np.minimum.accumulate(found[::-1])[::-1]
    out_of_place = np.flatnonzero((found != increasing_prefix) | (found != decreasing_suffix))
    if not out_of_place.size:
        return set()
    first, last = out_of_place.min(), out_of_place.max()
    return set(alive[first:last + 1].tolist())
