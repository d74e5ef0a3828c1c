"""The audit's checks of a workbook aligned to its layout (``align``): structure, risks, inputs,
formulas and recalculated values. Every check looks for a layout cell where the alignment says it
is now, and expects each formula with its references moved as the application moved them, so an
inserted row is one structural finding, not thousands of formula edits.
"""

from __future__ import annotations

import re
from collections import Counter

from sheetnet.book import layout as L
from sheetnet.book.canonical import same_formula, same_value, target_text
from sheetnet.book.guide import guide_lines
from sheetnet.book.layout import BookLayout
from sheetnet.book.read import InvalidInput, input_cells
from sheetnet.book.spec import BookInputs
from sheetnet.checks.alignment import Alignment
from sheetnet.checks.findings import AuditReport, Finding, plain
from sheetnet.xlsx.addresses import Cell, a1, defined_name_target, parse_a1
from sheetnet.xlsx.cells import CellError, SheetCells, Workbook

VOLATILE = ("NOW", "TODAY", "RAND", "RANDBETWEEN", "OFFSET", "INDIRECT", "INFO", "CELL", "RANDARRAY")
_VOLATILE = re.compile(r'"(?:[^"]|"")*"|\b(' + "|".join(VOLATILE) + r")\s*\(", re.I)
LABEL_ROLES = ("title", "text", "header", "label")


# ---------------------------------------------------------------- structure


def check_structure(report: AuditReport, book: Workbook, layout: BookLayout, alignment: Alignment) -> None:
    """Each structural change once (with what the inserted rows or columns hold), hidden sheets,
    defined names that do not follow their blocks, merged cells over blocks."""
    for change in alignment.changes:
        report.add(Finding(change.sheet, change.cell, "structural", None, None,
                           change.note + _inserted_content(book, alignment, change)))
    for m in alignment.sheets.values():
        state = book.sheets[m.found].state
        if state != "visible":
            report.add(Finding(m.found, "", "structural", "visible", state, f"sheet {m.found!r} was made {state}"))
    _check_names(report, book, layout, alignment)
    _check_merges(report, book, layout, alignment)


def _inserted_content(book: Workbook, alignment: Alignment, change) -> str:
    """For an insertion: how many cells the inserted rows or columns hold (they are not compared)."""
    if "inserted" not in change.note:
        return ""
    m = next((m for m in alignment.sheets.values() if m.found == change.sheet), None)
    if m is None:
        return ""
    inside = m.inserted_rows if " row(s) " in change.note else m.inserted_cols
    index = 0 if " row(s) " in change.note else 1
    count = sum(1 for pos, v in book.sheets[m.found].values.items() if pos[index] in inside and v not in (None, ""))
    return f"; the inserted cells hold {count} value(s) or formula(s), not compared" if count else ""


def _check_names(report: AuditReport, book: Workbook, layout: BookLayout, alignment: Alignment) -> None:

    expected = {}
    for name, block in layout.defined_names().items():
        moved = alignment.locate_block(block)
        expected[name] = None if moved is None else defined_name_target(moved)
    found = {name: target for name, target in book.names.items() if not name.startswith("_xlnm")}
    for name, target in expected.items():
        if name not in found:
            report.add(Finding("", name, "structural", target, None, f"defined name {name} is missing"))
        elif target is not None and target_text(found[name]) != target_text(target):
            report.add(Finding("", name, "structural", target, found[name], f"defined name {name} now refers "
                                                                           "elsewhere than its block"))
    for name, target in found.items():
        if name not in expected:
            report.add(Finding("", name, "structural", None, target, f"defined name {name} was added"))
    for sheet, name, target in book.local_names:
        if not name.startswith("_xlnm"):
            report.add(Finding(sheet, name, "structural", None, target, f"sheet-scoped name {name} was added"))


def _check_merges(report: AuditReport, book: Workbook, layout: BookLayout, alignment: Alignment) -> None:
    tables = [t.block for t in (layout.scoring if layout.spec.n_cases else None, layout.record, layout.epochs) if t]
    for block in tables + list(layout.parameters.weights) + list(layout.parameters.bias):
        moved = alignment.locate_block(block)
        if moved is None:
            continue
        for merged in book.sheets[moved.sheet].merged:
            first, _, last = merged.partition(":")
            (r0, c0), (r1, c1) = parse_a1(first), parse_a1(last or first)
            if r0 <= moved.bottom and r1 >= moved.top and c0 <= moved.right and c1 >= moved.left:
                report.add(Finding(moved.sheet, first, "structural", None, merged,
                                   f"merged cells {merged} cover a block"))


# ---------------------------------------------------------------- risks


def check_risks(report: AuditReport, book: Workbook) -> None:
    if book.path.suffix.lower() in (".xlsm", ".xltm", ".xlam"):
        report.add(Finding("", book.path.name, "risks", ".xlsx", book.path.suffix,
                           "a macro-enabled file type; sheetnet never runs macros"))
    for part in book.parts:
        low = part.lower()
        if "vbaproject" in low or (low.endswith(".bin") and "vba" in low):
            report.add(Finding("", part, "risks", None, part, "the file carries macros (a VBA project); they are "
                                                                "never run by sheetnet"))
        elif "externallink" in low:
            report.add(Finding("", part, "risks", None, part, "external link to another workbook (not followed)"))
        elif low.endswith("connections.xml") or "querytable" in low:
            report.add(Finding("", part, "risks", None, part, "data connection (not followed)"))
    for target in book.external_targets:
        report.add(Finding("", target, "risks", None, target, "a relationship points outside the file (not followed)"))
    for name, cells in book.sheets.items():
        _sheet_risks(report, name, cells)


def _sheet_risks(report: AuditReport, name: str, cells: SheetCells) -> None:
    if cells.state != "visible" and name != L.LAYOUT and (cells.values or cells.formulas):
        report.add(Finding(name, "", "risks", "visible", cells.state, f"sheet {name!r} is {cells.state} and holds "
                                                                       "content"))
    for pos, formula in cells.formulas.items():
        if any(m.group(1) for m in _VOLATILE.finditer(formula)):
            report.add(Finding(name, a1(*pos), "risks", None, "=" + formula, "volatile function"))
        if "[" in formula and re.search(r"\[[^\]]+\]", formula.split('"')[0]):
            report.add(Finding(name, a1(*pos), "risks", None, "=" + formula, "reference to another workbook"))
    errors = sorted(pos for pos, value in cells.values.items() if isinstance(value, CellError))
    if errors:  # one finding a sheet: an error spreads to every cell that uses it
        codes = sorted({cells.values[pos].code for pos in errors})
        report.add(Finding(name, a1(*errors[0]), "risks", None, len(errors),
                           f"{len(errors):,} cell(s) on {name} show spreadsheet errors ({', '.join(codes)}), "
                           f"the first at {a1(*errors[0])}"))
    blank = sorted(pos for pos in cells.formulas if cells.values.get(pos) is None)
    if blank:  # one finding a sheet: a program that does not calculate saved the file
        report.add(Finding(name, a1(*blank[0]), "risks", None, len(blank),
                           f"{len(blank):,} formula cell(s) on {name} hold no saved value, the first at "
                           f"{a1(*blank[0])}: viewers that do not recalculate show them blank; opening and "
                           "saving the file in a spreadsheet application fills them"))
    for pos, value in cells.values.items():
        if value is not None and (pos[0] in cells.hidden_rows or pos[1] in cells.hidden_cols):
            report.add(Finding(name, a1(*pos), "risks", None, plain(value), "content in a hidden row or column"))


# ---------------------------------------------------------------- inputs


def check_inputs(report: AuditReport, book: Workbook, layout: BookLayout, original: BookInputs,
                 alignment: Alignment, invalid: list[InvalidInput]) -> None:
    """Every input cell against its original value; a value the network cannot use says why."""
    reasons = {item.cell: item.reason for item in invalid if not item.deleted}
    for sheet, pos, old, what in input_cells(layout, original):
        where = alignment.locate(Cell(sheet, *pos))
        if where is None:
            continue
        cells, here = book.sheets[where.sheet], (where.row, where.col)
        if here in cells.formulas:
            report.add(Finding(where.sheet, a1(*here), "formula_edits", old, "=" + cells.formulas[here],
                               f"a formula typed over an input ({what})"))
            continue
        new = cells.values.get(here)
        reason = reasons.get(where)
        if not same_value(new, old) or reason:
            note = f"{what} changed" + (f" to a value the network cannot use: {reason}" if reason else "")
            report.add(Finding(where.sheet, a1(*here), "input_edits", old, plain(new), note))


# ---------------------------------------------------------------- formulas and labels


def check_formulas(report: AuditReport, book: Workbook, entries: list, alignment: Alignment,
                   reference_formulas: dict | None) -> None:
    """Formulas and labels where the alignment puts them, and content sheetnet did not write."""
    covered: dict[str, set] = {}
    lost: Counter = Counter()
    for sheet, entry in entries:
        here = Cell(sheet, entry.row, entry.col)
        where = alignment.locate(here)
        if where is None:
            continue
        covered.setdefault(where.sheet, set()).add((where.row, where.col))
        cells = book.sheets[where.sheet]
        if entry.role in LABEL_ROLES:
            _check_label(report, cells, where, entry.content)
        elif entry.role == "formula":
            expected = entry.content
            if reference_formulas is not None:
                expected = reference_formulas.get((sheet, (entry.row, entry.col)), expected)
            if not alignment.identity:
                expected = alignment.translate(expected, here)
            if _check_formula(report, cells, where, expected):
                lost[where.sheet] += 1
    for sheet, count in lost.items():
        report.add(Finding(sheet, "", "structural", None, count, f"{count} formula(s) on {sheet} show #REF!: cells "
                                                                 "they used were deleted"))
    _check_added(report, book, alignment, covered)


def _check_formula(report: AuditReport, cells: SheetCells, where: Cell, expected: str) -> bool:
    """One formula cell; True when it lost a reference as a consequence of a deletion."""
    here = (where.row, where.col)
    found = cells.formulas.get(here)
    if found is None:
        value = cells.values.get(here)
        note = "a constant typed over a formula" if value not in (None, "") else "a formula was deleted"
        report.add(Finding(where.sheet, a1(*here), "formula_edits", expected, plain(value), note))
        return False
    if same_formula(found, expected, where.sheet):
        return "#REF!" in expected
    if "#REF!" in found.upper():
        if "#REF!" in expected:
            return True
        report.add(Finding(where.sheet, a1(*here), "structural", expected, "=" + found,
                           "#REF! in a formula (a referenced cell was deleted)"))
        return False
    report.add(Finding(where.sheet, a1(*here), "formula_edits", expected, "=" + found,
                       "the formula is not what sheetnet writes here"))
    return False


def _check_label(report: AuditReport, cells: SheetCells, where: Cell, text) -> None:
    """Headers, labels and titles: changed wording is reported (it can mislead a reader)."""
    here = (where.row, where.col)
    if here in cells.formulas:
        report.add(Finding(where.sheet, a1(*here), "formula_edits", text, "=" + cells.formulas[here],
                           "a formula typed over a label"))
    elif not same_value(cells.values.get(here), float(text) if isinstance(text, int) else text):
        report.add(Finding(where.sheet, a1(*here), "structural", text, plain(cells.values.get(here)),
                           "a label or header was changed"))


def check_guide(report: AuditReport, book: Workbook, layout: BookLayout, alignment: Alignment) -> None:
    """The Guide states what the description says (network, sheets, names, provenance, scaling): a
    difference means the Guide or the description was edited. One finding, with the first cell."""
    m = alignment.sheets.get(L.GUIDE)
    if m is None:
        return
    values = book.sheets[m.found].values
    differing, covered = [], set()
    for row, (_, left, right) in enumerate(guide_lines(layout, layout.defined_names())):
        for col, text in ((0, left), (1, right)):
            where = alignment.locate(Cell(L.GUIDE, row, col))
            if where is None:
                continue
            covered.add((where.row, where.col))
            if not same_value(values.get((where.row, where.col)), text or None):
                differing.append(a1(where.row, where.col))
    if differing:
        report.add(Finding(m.found, differing[0], "structural", None, None,
                           f"the Guide's text differs from what the layout description gives in {len(differing)} "
                           "cell(s): the Guide or the description was edited"))
    added = sorted(pos for pos, value in values.items() if value not in (None, "") and pos not in covered
                   and pos[0] not in m.inserted_rows and pos[1] not in m.inserted_cols)
    for pos in added:
        report.add(Finding(m.found, a1(*pos), "structural", None, plain(values[pos]),
                           "content added where sheetnet wrote nothing"))


def _check_added(report: AuditReport, book: Workbook, alignment: Alignment, covered: dict[str, set]) -> None:
    """Cells sheetnet did not write (outside inserted rows and columns, which their change reports)."""
    for sheet, m in alignment.sheets.items():
        if sheet == L.GUIDE:
            continue
        cells, mine = book.sheets[m.found], covered.get(m.found, set())
        for pos in sorted(set(cells.formulas) | set(cells.values)):
            if pos in mine or pos[0] in m.inserted_rows or pos[1] in m.inserted_cols:
                continue
            if pos in cells.formulas:
                report.add(Finding(m.found, a1(*pos), "formula_edits", None, "=" + cells.formulas[pos],
                                   "a formula where sheetnet wrote none"))
            elif cells.values[pos] not in (None, ""):
                report.add(Finding(m.found, a1(*pos), "structural", None, plain(cells.values[pos]),
                                   "content added where sheetnet wrote nothing"))
