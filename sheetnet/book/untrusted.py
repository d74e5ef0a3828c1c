"""The layout description of a returned workbook, read as untrusted input.

Verify, audit and extract rebuild every expected cell from the description that ``build`` stored on
a hidden sheet. Anyone who can edit the workbook can edit that description, so before anything is
allocated from it, it is checked in this order:

1. its text: size and nesting caps, valid JSON;
2. a strict schema (``schema``): types, ranges, finite numbers, lengths, shapes, and the spec's parts
   consistent with each other;
3. against the spreadsheet's limits and the workbook actually present: every block inside a sheet,
   no sheet asked to hold (much) more rows, columns or cells than it holds, the parameter blocks the
   same size as the defined names that point at them;
4. its derived parts: the stored names and sheet list equal what the spec implies, the stored
   original inputs have the spec's shapes.

Every problem is collected (never raised here) with the part it concerns, so each command decides:
verify needs only the spec, extract the spec (and the original inputs when present), and audit
reports every problem as a finding.
"""

from __future__ import annotations

import dataclasses
import json
import re
from dataclasses import dataclass, field
from typing import Any

from sheetnet.book import layout as L
from sheetnet.book.describe import FORMAT, LAYOUT_TITLE, SIGNATURE_ALGORITHM, VERSION
from sheetnet.book.jsoncheck import MAX_DEPTH, Checker, Problem, nesting_depth
from sheetnet.book.layout import LAYOUT, BookLayout, SheetTable, build_layout
from sheetnet.book.schema import read_original_inputs, read_spec
from sheetnet.book.spec import BookInputs, BookSpec
from sheetnet.errors import DescriptionError, WorkbookFormatError
from sheetnet.strictjson import RepeatedKey, without_repeated_keys
from sheetnet.xlsx.addresses import MAX_COLS, MAX_ROWS, Block, Cell, a1, column_letters, parse_range
from sheetnet.xlsx.cells import Workbook
from sheetnet.xlsx.reader import read_workbook

#: The description's text is refused beyond this many characters, and beyond CHARS_PER_CELL for each
#: cell the other sheets hold, plus SMALL_DESCRIPTION (a description takes under 0.5 a cell when a
#: record is replayed, about 20 for a hand-written model's parameters with no data).
MAX_DESCRIPTION_CHARS = 128_000_000
CHARS_PER_CELL = 64
SMALL_DESCRIPTION = 1_000_000
#: The layout sheet holds the description in chunks of 30,000 characters; more cells than this is not
#: a description (and is not read).
MAX_LAYOUT_CELLS = MAX_DESCRIPTION_CHARS // 30_000 + 16
#: Of one kind of problem, at most this many are listed one by one.
LISTED = 20
_TOP_KEYS = ("format", "version", "tool", "spec", "sheets", "names", "fingerprints", "inputs")
#: What verify needs from the description; extract needs the same.
NEEDED_TO_VERIFY = ("format", "spec")


@dataclass
class Description:
    """The checked description. ``layout`` is None when the spec cannot be trusted; ``original``
    (the inputs as built) is None when that section cannot."""

    data: dict | None
    layout: BookLayout | None
    original: BookInputs | None
    problems: list[Problem] = field(default_factory=list)

    @property
    def spec(self) -> BookSpec | None:
        return None if self.layout is None else self.layout.spec

    def problems_in(self, *parts: str) -> list[Problem]:
        return [p for p in self.problems if p.part in parts]

    def require(self, *parts: str) -> BookLayout:
        """The layout, or DescriptionError naming the first problem in ``parts``."""
        problems = self.problems_in(*parts)
        if problems or self.layout is None:
            problems = problems or self.problems
            more = f" (and {len(problems) - 1} more; 'sheetnet audit' lists them)" if len(problems) > 1 else ""
            raise DescriptionError(f"the workbook's layout description cannot be trusted: {problems[0]}{more}",
                                   problems)
        return self.layout

    @property
    def signature(self) -> dict | None:
        return None if self.data is None else self.data.get("signature")


def read_returned_workbook(path, allow_macros: bool = False) -> Workbook:
    """A workbook that came back from others, read with the layout sheet capped (a bloated one is
    not read at all: ``read_description`` reports it)."""
    return read_workbook(path, allow_macros=allow_macros, cell_limits={LAYOUT: MAX_LAYOUT_CELLS})


def layout_sheet_name(book: Workbook) -> str | None:
    """The layout sheet: under its name, or renamed (recognised by its first cell)."""
    if LAYOUT in book.sheets:
        return LAYOUT
    return next((name for name, sheet in book.sheets.items()
                 if str(sheet.values.get((0, 0), "")).startswith(LAYOUT_TITLE[:27])), None)


def looks_like_sheetnet(book: Workbook) -> bool:
    """A workbook with sheetnet's sheets or names, whatever happened to its layout sheet."""
    return {L.PARAMETERS, L.CALCULATOR} <= set(book.sheets) or {"W_1", "b_1"} <= set(book.names)


def description_text(book: Workbook, sheet: str = LAYOUT) -> str:
    """The JSON text, joined from the cells of the hidden layout sheet."""
    if sheet not in book.sheets:
        raise WorkbookFormatError(f"{book.path}: not a sheetnet workbook (no {LAYOUT!r} sheet with its layout)")
    cells = book.sheets[sheet].values
    rows = sorted(row for (row, col), value in cells.items() if col == 0 and row >= 1 and isinstance(value, str))
    return "".join(cells[(row, 0)] for row in rows)


def layout_sheet_problems(book: Workbook, sheet: str) -> list[Problem]:
    """The layout sheet holds its title, the description's chunks in column A from row 2, and nothing
    else, and stays hidden: anything more was put there by hand."""
    check = Checker("layout sheet")  # not needed to verify: the description itself may still be sound
    cells = book.sheets[sheet]
    if cells.state != "hidden":
        check.add(f"sheet {sheet!r}", f"the layout sheet is {cells.state}; build hides it")
    if cells.values.get((0, 0)) != LAYOUT_TITLE:
        check.add(f"{sheet}!A1", "the layout sheet's title was changed")
    chunks = sorted(row for (row, col), value in cells.values.items() if col == 0 and row >= 1)
    others = [(row, col) for (row, col) in cells.values if col != 0]
    if cells.formulas:
        row, col = min(cells.formulas)
        check.add(f"{sheet}!{a1(row, col)}", "a formula on the layout sheet (the description is text)")
    if others:
        check.add(f"{sheet}!{a1(*min(others))}", f"{len(others)} cell(s) besides the description on the layout "
                                                  "sheet")
    if chunks != list(range(1, len(chunks) + 1)) or any(not isinstance(cells.values[(r, 0)], str) for r in chunks):
        check.add(f"sheet {sheet!r}", "the description's cells are not the text cells A2, A3, ... one after another")
    return check.problems


def read_description(book: Workbook) -> Description:
    """The description checked as untrusted input; problems are collected, not raised. A workbook with
    sheetnet's sheets but no layout sheet is a problem too; one with neither is not a sheetnet workbook."""
    sheet = layout_sheet_name(book)
    if sheet is None:
        if not looks_like_sheetnet(book):
            description_text(book)  # raises: not a sheetnet workbook
        return Description(None, None, None, [Problem("format", "", f"the hidden layout sheet {LAYOUT!r} was "
                                                                    "deleted")])
    layout_sheet = book.sheets[sheet]
    oversized, too_large = layout_sheet.oversized, layout_sheet.oversized_bytes
    renamed = [] if sheet == LAYOUT else [Problem("format", "", f"the hidden layout sheet {LAYOUT!r} was renamed "
                                                                f"to {sheet!r}")]
    if oversized or too_large or layout_sheet.unreadable:
        what = f"holds {oversized:,} cells; a description takes at most {MAX_LAYOUT_CELLS:,}" if oversized else \
            f"is {too_large:,} bytes of XML, more than a description of this workbook's sheets could need" \
            if too_large else f"cannot be read ({layout_sheet.unreadable})"
        return Description(None, None, None, [*renamed, Problem("format", "", f"the layout sheet {what}")])
    text = description_text(book, sheet)
    data, problems = _parse(text, _size_cap(book))
    problems = renamed + layout_sheet_problems(book, sheet) + problems
    if data is None:
        return Description(None, None, None, problems)
    spec, spec_problems = read_spec(data["spec"])
    problems += spec_problems
    layout = None
    if spec is not None:
        layout = build_layout(spec)
        against = _against_the_workbook(layout, book)
        problems += against
        layout = None if against else layout
    original = None
    if layout is not None:
        problems += _derived_parts(data, layout)
        original, input_problems = read_original_inputs(data["inputs"], layout.spec)
        problems += input_problems
    problems += _fingerprints(data.get("fingerprints"), data.get("sheets"), data.get("signature") is not None)
    problems += _signature(data.get("signature"))
    return Description(data, layout, original, problems)


def _size_cap(book: Workbook) -> int:
    """The longest description this workbook's other sheets could need."""
    cells = sum(len(sheet.values) for sheet in book.sheets.values())
    return min(MAX_DESCRIPTION_CHARS, SMALL_DESCRIPTION + CHARS_PER_CELL * cells)


def _parse(text: str, cap: int) -> tuple[dict | None, list[Problem]]:
    check = Checker("format")
    if not text:
        check.add("", "the layout sheet holds no description (its cells were cleared or the sheet is unreadable)")
        return None, check.problems
    if len(text) > cap:
        check.add("", f"the description is {len(text):,} characters long; the workbook's sheets hold enough for "
                      f"at most {cap:,}")
        return None, check.problems
    if nesting_depth(text) > MAX_DEPTH:
        check.add("", f"the description nests deeper than {MAX_DEPTH} levels")
        return None, check.problems
    try:
        data = json.loads(text, object_pairs_hook=without_repeated_keys)
    except json.JSONDecodeError as exc:
        check.add("", f"not valid JSON (character {exc.pos:,}: {exc.msg})")
        return None, check.problems
    except RepeatedKey as exc:
        check.add("", f"the key {str(exc)[:40]!r} appears twice in one object: readers disagree on which one counts")
        return None, check.problems
    except (ValueError, RecursionError) as exc:
        check.add("", f"not valid JSON ({exc})")
        return None, check.problems
    raw = check.obj(data, "(top level)", _TOP_KEYS, ("signature",))
    if raw is None:
        return None, check.problems
    if raw["format"] != FORMAT:
        check.add("format", f"expected {FORMAT!r}, found {raw['format']!r:.40}")
    if type(raw["version"]) is not int or raw["version"] != VERSION:
        check.add("version", f"version {raw['version']!r:.20} is not supported (this sheetnet reads {VERSION})")
    tool = check.text(raw["tool"], "tool", 200)
    if tool is not None and not re.fullmatch(r"sheetnet \d+\.\d+\.\d+", tool):
        check.add("tool", f"{tool[:40]!r} is not the name of a sheetnet version")
    return (None if check.problems else raw), check.problems


# ---------------------------------------------------------------- against the workbook


def _room(held: int) -> int:
    """How far a description may reach past what a sheet holds: rows and columns that users delete,
    or cells they clear, must not make a genuine description look altered."""
    return held + 16 + held // 10


@dataclass
class _Extent:
    """The last row and column used on a sheet, and how many distinct rows hold something."""

    last_row: int = -1
    last_col: int = -1
    rows: int = 0


def _covered_rows(spans: list[tuple[int, int]]) -> int:
    """How many distinct rows a set of (top, bottom) spans covers."""
    count, reached = 0, -1
    for top, bottom in sorted(spans):
        if bottom > reached:
            count += bottom - max(top, reached + 1) + 1
            reached = bottom
    return count


def layout_extents(layout: BookLayout) -> dict[str, _Extent]:
    """Per sheet: the last row and column any block reaches, and the rows the blocks cover."""
    spans: dict[str, list[tuple[int, int]]] = {}
    extents: dict[str, _Extent] = {}

    def put(sheet: str, top: int, bottom: int, right: int) -> None:
        extent = extents.setdefault(sheet, _Extent())
        extent.last_row, extent.last_col = max(extent.last_row, bottom), max(extent.last_col, right)
        spans.setdefault(sheet, []).append((top, bottom))

    def visit(item: Any) -> None:
        if isinstance(item, SheetTable):
            visit(item.block)
        elif isinstance(item, Block):
            put(item.sheet, item.top, item.bottom, item.right)
        elif isinstance(item, Cell):
            put(item.sheet, item.row, item.row, item.col)
        elif isinstance(item, tuple | list):
            for part in item:
                visit(part)
        elif isinstance(item, dict):
            for part in item.values():
                visit(part)
        elif dataclasses.is_dataclass(item) and not isinstance(item, type):
            for f in dataclasses.fields(item):
                visit(getattr(item, f.name))

    for f in dataclasses.fields(layout):
        if f.name not in ("spec", "step_rows"):
            visit(getattr(layout, f.name))
    present = set(layout.sheet_names())  # a workbook without cases has no Scoring sheet (its table is empty)
    for sheet, extent in extents.items():
        extent.rows = _covered_rows(spans[sheet])
    return {sheet: extent for sheet, extent in extents.items() if sheet in present}


def _held(book: Workbook) -> dict[str, _Extent]:
    held = {}
    for name, cells in book.sheets.items():
        rows = {r for r, _ in cells.values}  # every cell the reader found, formula or constant
        held[name] = _Extent(max(rows, default=-1), max((c for _, c in cells.values), default=-1), len(rows))
    return held


def _against_the_workbook(layout: BookLayout, book: Workbook) -> list[Problem]:
    check = Checker("spec")
    held = _held(book)
    others = [extent for name, extent in held.items() if name != LAYOUT]
    largest = _Extent(max((e.last_row for e in others), default=-1), max((e.last_col for e in others), default=-1),
                      max((e.rows for e in others), default=0))
    for sheet, claimed in layout_extents(layout).items():
        if claimed.last_row >= MAX_ROWS or claimed.last_col >= MAX_COLS:
            check.add(f"sheet {sheet!r}", f"the description reaches row {claimed.last_row + 1:,}, column "
                                          f"{claimed.last_col + 1:,}: outside the sheet's {MAX_ROWS:,} x {MAX_COLS:,}")
            continue
        found = held.get(sheet, largest)  # a renamed sheet may be any of the others
        _compare_extent(check, sheet, claimed, found, sheet not in held)
    _parameter_names(check, layout, book)
    return check.problems


def _compare_extent(check: Checker, sheet: str, claimed: _Extent, found: _Extent, missing: bool) -> None:
    where = f"sheet {sheet!r}"
    if missing and claimed.rows > _room(found.rows):
        check.add(where, f"is not in the workbook (deleted or renamed), and the description needs {claimed.rows:,} "
                         f"rows of cells there, more than any sheet holds ({found.rows:,})")
    elif claimed.rows > _room(found.rows):
        check.add(where, f"the description needs {claimed.rows:,} rows of cells; the sheet holds {found.rows:,}")
    elif claimed.last_row > _room(found.last_row + 1) - 1:
        check.add(where, f"the description needs rows down to {claimed.last_row + 1:,}; the sheet's last row is "
                         f"{found.last_row + 1:,}")
    elif claimed.last_col > _room(found.last_col + 1) - 1:
        check.add(where, f"the description needs columns up to {column_letters(claimed.last_col)}; the sheet "
                         f"holds columns up to {column_letters(max(found.last_col, 0))}")


def _parameter_names(check: Checker, layout: BookLayout, book: Workbook) -> None:
    """Each block the file names (W_1, b_1, scale_offset...) is about the size the description gives it:
    applications move names with their cells (rows inserted or deleted inside a block change it a
    little, which the audit reports as structure)."""
    for name, block in layout.defined_names().items():
        found = parse_range(book.names.get(name, ""))
        if found is not None and (block.nrows > _room(found.nrows) or block.ncols > _room(found.ncols)):
            check.add(f"defined name {name}", f"the description makes it {block.nrows} x {block.ncols} cells; the "
                                              f"workbook's {name} covers {found.nrows} x {found.ncols}")


# ---------------------------------------------------------------- derived parts


def _derived_parts(data: dict, layout: BookLayout) -> list[Problem]:
    """The stored names and sheet list are functions of the spec: any difference was made by hand."""
    names = Checker("names")
    stored = data["names"] if isinstance(data["names"], dict) else None
    if stored is None:
        names.add("names", "expected an object")
    expected = {name: dataclasses.asdict(block) for name, block in layout.defined_names().items()}
    if stored is not None and stored != expected:
        differing = [name for name in sorted(set(stored) | set(expected), key=str)
                     if stored.get(name) != expected.get(name)]
        for name in differing[:LISTED]:
            names.add(f"names.{name}", f"stored as {_block_text(stored.get(name))}, but the spec places it at "
                                       f"{_block_text(expected.get(name))}")
        if len(differing) > LISTED:
            names.add("names", f"and {len(differing) - LISTED:,} more names differ from the spec's")
    sheets = Checker("sheets")
    if data["sheets"] != layout.sheet_names():
        sheets.add("sheets", f"the stored sheet list differs from the spec's: {', '.join(layout.sheet_names())}")
    return names.problems + sheets.problems


def _block_text(block: Any) -> str:
    if block is None:
        return "nothing"
    try:
        return f"{block['sheet']}!{a1(block['top'], block['left'])} ({block['nrows']} x {block['ncols']})"
    except (KeyError, TypeError, ValueError):
        return repr(block)[:60]


def _fingerprints(value: Any, sheets: Any, signed: bool) -> list[Problem]:
    check = Checker("fingerprints")
    raw = check.obj(value, "fingerprints", ("formulas", "inputs"), ("cells", "names"))
    if raw is None:
        return check.problems
    if signed != ("cells" in raw) or signed != ("names" in raw):
        check.add("fingerprints", "cell and name digests come with a signature, and only with one (a signature "
                                  "was removed, or digests were added)")
    known = set(sheets) if isinstance(sheets, list) and all(isinstance(s, str) for s in sheets) else set()
    for kind in ("formulas", "inputs", "cells"):
        digests = check.obj(raw.get(kind, {}), f"fingerprints.{kind}", (), tuple(known))
        for sheet, digest in (digests or {}).items():
            check.hexdigest(digest, f"fingerprints.{kind}.{sheet}", 64)
    if "names" in raw:
        check.hexdigest(raw["names"], "fingerprints.names", 64)
    return check.problems


def _signature(value: Any) -> list[Problem]:
    check = Checker("signature")
    if value is not None:
        raw = check.obj(value, "signature", ("algorithm", "key_id", "mac"))
        if raw is not None:
            check.text(raw["algorithm"], "signature.algorithm", choices=(SIGNATURE_ALGORITHM,))
            check.hexdigest(raw["key_id"], "signature.key_id", 16)
            check.hexdigest(raw["mac"], "signature.mac", 64)
    return check.problems
