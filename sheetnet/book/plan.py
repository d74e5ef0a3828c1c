"""Every cell of the workbook as data: position, role, content (constant or formula text) and
reference value, generated sheet by sheet and row by row from the layout.

The writer writes these entries; the verifier compares engine results with their values; the
auditor compares the file's formulas with their formula text. Nothing here knows a file format.
"""

from __future__ import annotations

from collections.abc import Iterator

from sheetnet.book.cells.calculator import calculator_entries
from sheetnet.book.cells.entry import Entry
from sheetnet.book.cells.epochs import epoch_entries
from sheetnet.book.cells.parameters import parameter_entries, setup_entries
from sheetnet.book.cells.record import record_entries
from sheetnet.book.cells.scoring import scoring_entries
from sheetnet.book.expected import Numbers
from sheetnet.book.layout import (
    CALCULATOR,
    EPOCHS,
    PARAMETERS,
    RECORD,
    SCORING,
    SETUP,
    BookLayout,
)

#: The cells of each sheet that has any (the Guide is prose; the layout sheet is the description).
SHEET_ENTRIES = {PARAMETERS: parameter_entries, CALCULATOR: calculator_entries, SCORING: scoring_entries,
                 SETUP: setup_entries, RECORD: record_entries, EPOCHS: epoch_entries}


def all_entries(layout: BookLayout, numbers: Numbers) -> Iterator[tuple[str, Entry]]:
    """(sheet name, entry) for every cell sheetnet writes, sheet by sheet in the workbook's order."""
    for sheet in layout.sheet_names():
        entries = SHEET_ENTRIES.get(sheet)
        if entries is not None:
            for entry in entries(layout, numbers):
                yield sheet, entry
