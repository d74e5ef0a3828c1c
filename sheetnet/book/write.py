"""Writing the workbook with XlsxWriter: the only module that imports it.

XlsxWriter rather than openpyxl because it stores a cached value beside every formula (so
viewers that do not recalculate show the numbers), writes charts and cell notes, streams rows
in constant-memory mode, and gives byte-identical files for identical input.
"""

from __future__ import annotations

import datetime as dt
import itertools
import re
import warnings
from collections.abc import Iterable, Iterator
from pathlib import Path

import numpy as np
import xlsxwriter
from xlsxwriter.worksheet import Worksheet

from sheetnet.book import layout as L
from sheetnet.book import plan
from sheetnet.book.cells.entry import Entry
from sheetnet.book.describe import LAYOUT_TITLE, Fingerprints
from sheetnet.book.expected import Numbers
from sheetnet.book.guide import guide_lines
from sheetnet.book.layout import BookLayout
from sheetnet.book.signing import CellDigests
from sheetnet.errors import WorkbookFormatError
from sheetnet.xlsx.addresses import a1, defined_name_target, range_ref

FIXED_DATE = dt.datetime(2000, 1, 1, 0, 0, 0)
LAYOUT_CHUNK = 30_000

STYLE = {
    "title": {"bold": True, "font_size": 12, "font_color": "#1F3A5F"},
    "text": {"italic": True, "font_color": "#404040"},
    "header": {"bold": True, "bg_color": "#D9E2EC", "border": 1, "text_wrap": True, "valign": "top"},
    "label": {"font_color": "#404040"},
    "input": {"bg_color": "#FFF4C2", "font_color": "#1A4D8F", "border": 1, "border_color": "#C9B458",
              "num_format": "0.000000"},
    "formula": {"num_format": "0.000000"},
}


class _Sheet(Worksheet):
    """XlsxWriter's worksheet with four changes, all tested:

    * formulas are written exactly as built (sheetnet's vocabulary has no function that needs the
      future-function prefixes, so XlsxWriter's per-formula rewriting is skipped);
    * numbers are written with ``repr`` (17 significant digits), so every double round-trips;
    * a formula whose text result is empty is saved as that empty text (XlsxWriter leaves the value
      untyped, which readers take as "no saved value");
    * :meth:`write_row_xml` appends a whole row of cells at once in constant-memory mode, which
      the large tables use (a row written this way has no notes and no row formatting).
    """

    def _prepare_formula(self, formula, expand_future_functions=False):
        return formula[1:] if formula.startswith("=") else formula

    def _xml_number_element(self, number, attributes=()) -> None:
        attr = "".join(f' {key}="{value}"' for key, value in attributes)
        self.fh.write(f"<c{attr}><v>{_number_text(number)}</v></c>")

    def _xml_formula_element(self, formula, result, attributes=()) -> None:
        if result == "" and not any(key == "t" for key, _ in attributes):
            attributes = [*attributes, ("t", "str")]
        super()._xml_formula_element(formula, result, attributes)

    def write_row_xml(self, row: int, first_col: int, last_col: int, cells: str) -> None:
        if self._check_dimensions(row, first_col) or self._check_dimensions(row, last_col):
            raise WorkbookFormatError(f"row {row + 1} of sheet {self.name!r} is outside the sheet")
        if row > self.previous_row:
            self._write_single_row(row)  # flush a row still held by the ordinary write_* methods
        self.fh.write(f'<row r="{row + 1}">{cells}</row>')
        self.previous_row = row


def _number_text(value: float) -> str:
    if type(value) is float:
        return repr(value)
    if isinstance(value, int | np.integer) and not isinstance(value, bool):
        return str(int(value))
    return repr(float(value))


_XML_ESCAPES = str.maketrans({"&": "&amp;", "<": "&lt;", ">": "&gt;"})
_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f]")


def _xml_text(text: str) -> str:
    """XML character data; control characters become Excel's _xHHHH_ escapes."""
    if "_x" in text:
        text = text.replace("_x", "_x005F_x")
    return _CONTROL.sub(lambda m: f"_x{ord(m.group()):04X}_", text).translate(_XML_ESCAPES)


def _cell_xml(entry: Entry, style_index: int) -> str:
    """One <c> element: a formula with its cached value, a number or an inline string."""
    where = f'r="{a1(entry.row, entry.col)}" s="{style_index}"'
    if entry.role == "formula":
        formula = _xml_text(entry.content[1:])
        value = entry.value
        if isinstance(value, str):
            return f'<c {where} t="str"><f>{formula}</f><v>{_xml_text(value)}</v></c>'
        return f"<c {where}><f>{formula}</f><v>{_number_text(value)}</v></c>"
    if isinstance(entry.content, str):
        space = ' xml:space="preserve"' if entry.content != entry.content.strip() else ""
        return f'<c {where} t="inlineStr"><is><t{space}>{_xml_text(entry.content)}</t></is></c>'
    return f"<c {where}><v>{_number_text(entry.content)}</v></c>"


HINTS = {"count": {"num_format": "0"}, "ratio": {"num_format": "0.0000"}, "data": {"num_format": "General"}}


def _formats(book: xlsxwriter.Workbook) -> dict:
    formats = {role: book.add_format(props) for role, props in STYLE.items()}
    for role, props in STYLE.items():
        for hint, extra in HINTS.items():
            formats[role, hint] = book.add_format({**props, **extra})
    return formats


def _write(sheet: Worksheet, entry: Entry, formats: dict) -> None:
    fmt = formats[entry.role, entry.style] if entry.style else formats[entry.role]
    if entry.role == "formula":
        value = entry.value
        if isinstance(value, float | np.floating | int):
            value = float(value)  # written with repr(): the cached number round-trips exactly
        code = sheet.write_formula(entry.row, entry.col, entry.content, fmt, value)
    elif isinstance(entry.content, str):
        code = sheet.write_string(entry.row, entry.col, entry.content, fmt)
    elif entry.content is None:
        code = sheet.write_blank(entry.row, entry.col, None, fmt)
    else:
        code = sheet.write_number(entry.row, entry.col, entry.content, fmt)
    if code not in (0, None):
        raise WorkbookFormatError(f"cannot write cell at row {entry.row + 1}, column {entry.col + 1} (code {code})")
    if entry.note:
        sheet.write_comment(entry.row, entry.col, entry.note, {"x_scale": 2.2, "y_scale": 1.6})


def _digest(digests: CellDigests | None, sheet: str, entries: Iterable[Entry]) -> None:
    """Fold cells, given in row and column order, into the signature's cell digests."""
    if digests is not None:
        for e in entries:
            digests.add(sheet, e.row, e.col, e.content if e.role == "formula" else None, e.content, e.role == "input")


def write_entries(sheet: _Sheet, entries: Iterable[Entry], formats: dict, ordered: bool = False,
                  digests: CellDigests | None = None) -> None:
    """Write entries; ``ordered`` streams come row by row and plain rows are appended whole.
    ``digests`` (when signing) receives every cell in row and column order."""
    if not ordered:
        entries = sorted(entries, key=lambda e: (e.row, e.col))
        _digest(digests, sheet.name, entries)
        for entry in entries:
            _write(sheet, entry, formats)
        return
    style_index = {key: fmt._get_xf_index() for key, fmt in formats.items()}
    last_row = -1
    for row, group in itertools.groupby(entries, key=lambda e: e.row):
        if row <= last_row:
            raise WorkbookFormatError(f"internal: rows out of order on sheet {sheet.name!r}")
        last_row = row
        cells = sorted(group, key=lambda e: e.col)
        _digest(digests, sheet.name, cells)
        if any(e.note for e in cells) or row in sheet.row_info:
            for entry in cells:
                _write(sheet, entry, formats)
            continue
        xml = "".join(_cell_xml(e, style_index[(e.role, e.style) if e.style else e.role]) for e in cells)
        sheet.write_row_xml(row, cells[0].col, cells[-1].col, xml)


def _guide(book, formats, layout: BookLayout, names: dict, digests: CellDigests | None) -> None:
    sheet = book.add_worksheet(L.GUIDE, worksheet_class=_Sheet)
    sheet.set_column(0, 0, 46)
    sheet.set_column(1, 1, 100)
    sheet.fit_to_pages(1, 0)
    wrapped = {role: book.add_format({**STYLE[role], "text_wrap": True, "valign": "top"}) for role in ("text", "label")}
    for row, (role, left, right) in enumerate(guide_lines(layout, names)):
        lines = max(1, -(-len(right) // 105))
        if lines > 1:
            sheet.set_row(row, 15 * lines)
        if left:
            sheet.write_string(row, 0, left, formats[role])
        if right:
            sheet.write_string(row, 1, right, wrapped["text" if role == "text" else "label"])
        if digests is not None:
            for col, text in ((0, left), (1, right)):
                digests.add(L.GUIDE, row, col, None, text)


def _sheet(book, name: str, widths: tuple[int, int] = (22, 14), header_row: int | None = None,
           columns: int = 64) -> Worksheet:
    sheet = book.add_worksheet(name, worksheet_class=_Sheet)
    sheet.set_column(0, 0, widths[0])
    sheet.set_column(1, max(columns, 2) - 1, widths[1])
    sheet.set_landscape()
    sheet.set_paper(9)  # A4
    if header_row is None:
        sheet.fit_to_pages(1, 0)
    else:
        sheet.repeat_rows(header_row)
    return sheet


def _epochs_chart(book, sheet: Worksheet, layout: BookLayout) -> None:
    table = layout.epochs
    chart = book.add_chart({"type": "line"})
    chart.add_series({
        "name": "mean loss",
        "categories": "=" + range_ref(table.column_block(("epoch",)), "", absolute=True),
        "values": "=" + range_ref(table.column_block(("loss",)), "", absolute=True),
        "line": {"color": "#1F3A5F", "width": 1.75},
    })
    chart.set_title({"name": "Training loss per epoch"})
    chart.set_x_axis({"name": "epoch"})
    chart.set_y_axis({"name": "mean loss"})
    chart.set_legend({"none": True})
    sheet.insert_chart(1, len(table.columns) + 1, chart, {"x_scale": 1.4, "y_scale": 1.3})


def _layout_sheet(book, description: str) -> None:
    sheet = book.add_worksheet(L.LAYOUT, worksheet_class=_Sheet)
    chunks = [description[i:i + LAYOUT_CHUNK] for i in range(0, len(description), LAYOUT_CHUNK)] or [""]
    sheet.write_string(0, 0, LAYOUT_TITLE)
    for n, chunk in enumerate(chunks):
        sheet.write_string(n + 1, 0, chunk)
    sheet.hide()


def _define_names(book, names: dict) -> None:
    for name, block in names.items():
        if book.define_name(name, defined_name_target(block)) not in (0, None):
            raise WorkbookFormatError(f"internal: defined name {name!r} was refused")


def write_book(path: Path, layout: BookLayout, numbers: Numbers, describe_with, progress=None,
               digests: CellDigests | None = None) -> int:
    """Write every sheet; ``describe_with(fingerprints, sheet names)`` gives the layout description
    text once every cell is written (and, when signing, folded into ``digests``). Returns the number
    of formula cells."""
    book = xlsxwriter.Workbook(str(path), {"constant_memory": True, "in_memory": False,
                                           "strings_to_numbers": False, "strings_to_formulas": False,
                                           "strings_to_urls": False})
    book.set_properties({"title": "sheetnet workbook", "created": FIXED_DATE, "author": "sheetnet",
                         "comments": "Neural network as live formulas, written by sheetnet"})
    book.set_calc_mode("auto")
    formats = _formats(book)
    names = layout.defined_names()
    tally = Tally(progress)
    spec = layout.spec
    wide = min(40, max(14, 2 + max(len(n) for n in (*spec.inputs, *spec.outputs, *spec.target))))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        _guide(book, formats, layout, names, digests)
        for name in layout.sheet_names():
            entries = plan.SHEET_ENTRIES.get(name)
            if entries is None:
                continue
            widths, freeze, ordered = _display(layout, name, wide)
            sheet = _sheet(book, name, widths, None if freeze is None else freeze[0] - 1, _width(layout, name))
            if freeze:
                sheet.freeze_panes(*freeze)
                sheet.set_row(freeze[0] - 1, 48)  # room for wrapped column headers
            write_entries(sheet, tally.stream(name, entries(layout, numbers)), formats, ordered=ordered,
                          digests=digests)
            if name == L.EPOCHS:
                _epochs_chart(book, sheet, layout)
        _layout_sheet(book, describe_with(tally.fingerprints, layout.sheet_names()))
        _define_names(book, names)
        book.get_worksheet_by_name(L.GUIDE).activate()
        book.close()
    if progress is not None:
        progress(progress.total)
    return tally.formulas


def _display(layout: BookLayout, sheet: str, wide: int) -> tuple[tuple[int, int], tuple[int, int] | None, bool]:
    """Column widths (first, others), the frozen corner (tables) and whether rows stream in order."""
    if sheet == L.SCORING:
        return (22, wide), (layout.scoring.first_row, 2), True
    if sheet == L.RECORD:
        return (7, 16), (layout.record.first_row, 3), True
    if sheet == L.EPOCHS:
        return (10, 14), (layout.epochs.first_row, 1), False
    return (26 if sheet == L.SETUP else 22, wide), None, False


def _width(layout: BookLayout, sheet: str) -> int:
    """How many columns a sheet uses (for column widths)."""
    tables = {L.SCORING: layout.scoring, L.RECORD: layout.record, L.EPOCHS: layout.epochs}
    table = tables.get(sheet)
    if table is not None:
        return table.left + len(table.columns)
    spec = layout.spec
    return 2 + max(len(spec.inputs), *spec.units, len(spec.classes))


class Tally:
    """Counts formula cells and fingerprints formulas and inputs as entries stream past."""

    def __init__(self, progress=None) -> None:
        self.formulas = 0
        self.fingerprints = Fingerprints()
        self.progress = progress

    def stream(self, sheet: str, entries: Iterable[Entry]) -> Iterator[Entry]:
        batch: list[Entry] = []
        for entry in entries:
            if entry.role == "formula":
                self.formulas += 1
            batch.append(entry)
            if len(batch) >= 4096:
                self.fingerprints.add_all(sheet, batch)
                batch = []
                if self.progress is not None:
                    self.progress(min(self.formulas, self.progress.total))
            yield entry
        self.fingerprints.add_all(sheet, batch)


def write_rate_book(path: Path, curves: dict[str, list[float]], rows: list[list[object]]) -> None:
    """A small workbook comparing learning rates: loss per epoch per rate, a native line chart, a summary."""
    book = xlsxwriter.Workbook(str(path), {"strings_to_numbers": False, "strings_to_formulas": False})
    book.set_properties({"title": "sheetnet learning-rate comparison", "created": FIXED_DATE, "author": "sheetnet"})
    formats = _formats(book)
    sheet = book.add_worksheet("Learning rates")
    sheet.set_landscape()
    sheet.fit_to_pages(1, 0)
    sheet.set_column(0, 0, 10)
    sheet.set_column(1, len(curves) + 1, 16)
    sheet.write_string(0, 0, "Mean training loss per epoch, one column per learning rate (same initial weights)",
                       formats["title"])
    sheet.write_string(2, 0, "epoch", formats["header"])
    length = max(len(v) for v in curves.values())
    for j, (label, values) in enumerate(curves.items(), start=1):
        sheet.write_string(2, j, label, formats["header"])
        for i, value in enumerate(values):
            if np.isfinite(value):
                sheet.write_number(3 + i, j, float(value), formats["formula"])
    for i in range(length):
        sheet.write_number(3 + i, 0, i + 1, formats["label"])
    chart = book.add_chart({"type": "line"})
    for j, label in enumerate(curves, start=1):
        chart.add_series({"name": label, "categories": ["Learning rates", 3, 0, 2 + length, 0],
                          "values": ["Learning rates", 3, j, 2 + length, j]})
    chart.set_title({"name": "Training loss per epoch by learning rate"})
    chart.set_x_axis({"name": "epoch"})
    chart.set_y_axis({"name": "mean loss"})
    sheet.insert_chart(2, len(curves) + 2, chart, {"x_scale": 1.5, "y_scale": 1.4})
    top = 4 + length
    for i, row in enumerate(rows):
        for j, value in enumerate(row):
            role = "header" if i == 0 else "label"
            if isinstance(value, float | int) and not isinstance(value, bool) and np.isfinite(value):
                sheet.write_number(top + i, j, float(value), formats["label" if j == 0 else "formula"])
            else:
                sheet.write_string(top + i, j, str(value), formats[role])
    book.close()
