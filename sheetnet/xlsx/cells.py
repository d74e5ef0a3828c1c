"""What the reader gives: the cells of each sheet (formula text, constants, cached values) and the
workbook's defined names and parts, as plain data."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from sheetnet.errors import WorkbookFormatError


@dataclass(frozen=True)
class CellError:
    """A spreadsheet error value such as ``#DIV/0!``."""

    code: str

    def __str__(self) -> str:
        return self.code


@dataclass
class SheetCells:
    """One sheet: ``formulas[(row, col)]`` (text without '='), ``values[(row, col)]`` (constants
    and cached formula results), 0-based positions."""

    name: str
    state: str = "visible"
    formulas: dict[tuple[int, int], str] = field(default_factory=dict)
    values: dict[tuple[int, int], object] = field(default_factory=dict)
    shared: dict[tuple[int, int], str] = field(default_factory=dict)  # cells whose formula came from a shared one
    merged: list[str] = field(default_factory=list)  # merged ranges, e.g. "B3:D4"
    hidden_rows: set[int] = field(default_factory=set)  # 0-based
    hidden_cols: set[int] = field(default_factory=set)  # 0-based
    oversized: int = 0  # cells in the sheet when it held more than its limit (then it was not read)
    oversized_bytes: int = 0  # the XML's size when it was too large to read at all
    unreadable: str = ""  # why a capped sheet could not be read (its damage is the caller's finding)


@dataclass
class Workbook:
    path: Path
    sheets: dict[str, SheetCells]
    names: dict[str, str]  # workbook-scoped defined names -> refers-to text (without '=')
    local_names: list[tuple[str, str, str]]  # (sheet, name, refers-to) for sheet-scoped names
    parts: list[str]
    external_targets: list[str] = field(default_factory=list)  # relationships that point outside the file

    def sheet(self, name: str) -> SheetCells:
        try:
            return self.sheets[name]
        except KeyError:
            raise WorkbookFormatError(f"{self.path}: sheet {name!r} not found") from None
