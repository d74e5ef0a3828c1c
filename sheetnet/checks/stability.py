"""Training records that amplify rounding: which reference values rounding alone can move past the
tolerance, and how those cells are checked instead.

Gradient descent with a large step on a badly scaled problem is chaotic: a change in the 15th digit
of one starting weight can grow to the size of the weights within a few hundred steps (measured on
an unscaled regression target at learning rate 0.1: 3e-15 after one step, 4e-9 after 100, 2e+2
after 300). Two correct implementations that round differently (numpy's sums and a spreadsheet's)
then disagree late in the record, and the difference says nothing about the formulas.

Such cells are found by running the reference three times: from the starting parameters as the file
holds them and nudged up and down by :data:`NUDGE`. Where the runs differ by more than the tolerance, an engine's
end-to-end value is not held against the reference; each of those formulas is evaluated instead on
the reference values of the cells it reads, which shows, one step at a time, that it computes what
the trainer computes there.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from sheetnet.checks.findings import LIST_LIMIT, plain
from sheetnet.checks.tolerance import agree
from sheetnet.engines.embedded import Engine
from sheetnet.xlsx.addresses import a1
from sheetnet.xlsx.cells import Workbook

#: Relative nudge of the starting parameters: about 45 units in the last place, ten times or more
#: the rounding differences between engines that accumulate along a step (about 1e-16 relative per
#: operation), so a cell that rounding can move past the tolerance shows up; far below any edit.
NUDGE = 1e-14

#: A cell counts as moved when the nudge moves it by a hundredth of the tolerance: engines round their
#: EXP, LN and sums a few units in the last place apart at every step, not only in the starting values,
#: so the nudge alone can understate how far two correct engines drift (seen on a record continuing an
#: imported graph's random weights: engines 1e-9 apart on rows the nudge had not yet moved that far).
MARGIN = 100.0

Expected = list[tuple[str, int, int, str, object]]


@dataclass
class Unstable:
    """Cells whose reference value rounding can move past the tolerance, and their one-at-a-time check."""

    cells: frozenset[tuple[str, int, int]]
    first: dict[str, str]  # per sheet, the first such cell (A1)
    spread: float  # the largest movement of a reference value under the nudge
    checked: int = 0
    differing: list[dict] = field(default_factory=list)
    differing_count: int = 0

    @property
    def holds(self) -> bool:
        return self.differing_count == 0

    def summary(self, tolerance: float) -> str:
        """Which values were not compared end to end, and why."""
        where = ", ".join(f"{sheet} from {cell}" for sheet, cell in self.first.items())
        return (f"{len(self.cells):,} value(s) ({where} on) are not determined to {tolerance:g} by the computation "
                f"itself: nudging the training record's starting parameters by {NUDGE:g} (relative) moves them by up "
                f"to {self.spread:.3g} (the training amplifies rounding; a smaller learning rate, or a record of "
                "fewer steps, avoids it). Engines' values there are not compared end to end; each of those "
                f"{self.checked:,} formulas was evaluated instead on the reference values of the cells it reads")

    def outcome(self) -> str:
        if self.holds:
            return "all agree with the reference trainer, step by step"
        first = self.differing[0]
        return (f"{self.differing_count:,} differ; first at {first['sheet']}!{first['cell']} "
                f"(expected {first['expected']!r}, found {first['found']!r})")

    def to_dict(self) -> dict:
        return {"cells": len(self.cells), "first_cell": self.first, "spread": self.spread,
                "checked_one_at_a_time": self.checked, "differing": self.differing,
                "differing_count": self.differing_count}


def unstable_cells(expected: Expected, nudged: list[Expected], tolerance: float) -> Unstable | None:
    """The cells where the reference and a nudged reference differ by more than the tolerance, and on
    each sheet every formula cell below the first such row: a sheet's rows follow the computation's
    order (a later step never feeds an earlier one), and a value that two nudged runs happen to give
    alike (a saturated unit) is no more determined than its neighbours."""
    first_row: dict[str, int] = {}
    spread = 0.0
    for other in nudged:
        for (sheet, row, _, _, value), (_, _, _, _, moved_to) in zip(expected, other, strict=True):
            if value == moved_to or type(value) is not float or type(moved_to) is not float:
                continue
            moved = abs(value - moved_to)
            if not moved <= tolerance / MARGIN * max(1.0, abs(value)):  # NaN counts as moved
                first_row[sheet] = min(row, first_row.get(sheet, row))
                spread = max(spread, moved) if moved == moved else spread
    if not first_row:
        return None
    cells = frozenset((sheet, row, col) for sheet, row, col, _, _ in expected
                      if sheet in first_row and row >= first_row[sheet])
    first: dict[str, str] = {}
    for sheet, row, col, _, _ in expected:
        if (sheet, row, col) in cells:
            first.setdefault(sheet, a1(row, col))
    return Unstable(cells=cells, first=first, spread=spread)


def check_one_at_a_time(book: Workbook, expected: Expected, unstable: Unstable, tolerance: float) -> None:
    """Evaluate each unstable formula on the reference values of the formula cells it reads (the
    embedded engine) and record where the result still differs from the reference."""

    given: dict[str, dict[tuple[int, int], object]] = {}
    targets, references = [], []
    for sheet, row, col, _, value in expected:
        cells = book.sheets.get(sheet)
        if cells is None or (row, col) not in cells.formulas:
            continue  # a constant typed over a formula stays what the user typed
        given.setdefault(sheet, {})[row, col] = value
        if (sheet, row, col) in unstable.cells:
            targets.append((sheet, row, col))
            references.append(value)
    found = Engine(book).each_on(given, targets)
    unstable.checked = len(targets)
    for (sheet, row, col), value, reference in zip(targets, found, references, strict=True):
        if not agree(value, reference, tolerance):
            unstable.differing_count += 1
            if len(unstable.differing) < LIST_LIMIT:
                unstable.differing.append({"sheet": sheet, "cell": a1(row, col), "expected": plain(reference),
                                           "found": plain(value)})
