"""Writing the workbook with XlsxWriter: the only module that imports it.

XlsxWriter rather than openpyxl because it stores a cached value beside every formula (so
viewers that do not recalculate show the numbers), writes charts and cell notes, streams rows
in constant-memory mode, and gives byte-identical files for identical input.
"""

from __future__ import annotations

import datetime as dt
import warnings
from collections.abc import Iterable, Iterator
from pathlib import Path

import numpy as np
import xlsxwriter
from xlsxwriter.worksheet import Worksheet

from sheetnet.book import layout as L
from sheetnet.book import plan
from sheetnet.book.addresses import defined_name_target, range_ref
from sheetnet.book.describe import Fingerprints
from sheetnet.book.guide import guide_lines
from sheetnet.book.layout import BookLayout
from sheetnet.book.numbers import Numbers
from sheetnet.book.plan import Entry
from sheetnet.errors import WorkbookFormatError

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
    """Formulas are written exactly as built: sheetnet's vocabulary has no function that needs
    XlsxWriter's future-function prefixes, so its per-formula rewriting is skipped."""

    def _prepare_formula(self, formula, expand_future_functions=False):
        return formula[1:] if formula.startswith("=") else formula


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


def write_entries(sheet: Worksheet, entries: Iterable[Entry], formats: dict, ordered: bool = False) -> int:
    """Write entries (sorted first unless the caller yields them row by row); return the count."""
    stream: Iterable[Entry] = entries if ordered else sorted(entries, key=lambda e: (e.row, e.col))
    count = 0
    last_row = -1
    for entry in stream:
        if entry.row < last_row:
            raise WorkbookFormatError(f"internal: rows out of order on sheet {sheet.name!r}")
        last_row = entry.row
        _write(sheet, entry, formats)
        count += 1
    return count


def _guide(book, formats, layout: BookLayout, names: dict) -> None:
    sheet = book.add_worksheet(L.GUIDE, worksheet_class=_Sheet)
    sheet.set_column(0, 0, 30)
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


def _sheet(book, name: str, widths: tuple[int, int] = (22, 14), header_row: int | None = None) -> Worksheet:
    sheet = book.add_worksheet(name, worksheet_class=_Sheet)
    sheet.set_column(0, 0, widths[0])
    sheet.set_column(1, 16383, widths[1])
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
    sheet.write_string(0, 0, "sheetnet layout description (JSON, split over the cells below): do not edit")
    for n, chunk in enumerate(chunks):
        sheet.write_string(n + 1, 0, chunk)
    sheet.hide()


def _define_names(book, names: dict) -> None:
    for name, block in names.items():
        if book.define_name(name, defined_name_target(block)) not in (0, None):
            raise WorkbookFormatError(f"internal: defined name {name!r} was refused")


def write_book(path: Path, layout: BookLayout, numbers: Numbers, describe_with) -> int:
    """Write every sheet; ``describe_with(fingerprints, sheet names)`` gives the layout description
    text once every cell is written. Returns the number of formula cells."""
    book = xlsxwriter.Workbook(str(path), {"constant_memory": True, "in_memory": False,
                                           "strings_to_numbers": False, "strings_to_formulas": False,
                                           "strings_to_urls": False})
    book.set_properties({"title": "sheetnet workbook", "created": FIXED_DATE, "author": "sheetnet",
                         "comments": "Neural network as live formulas, written by sheetnet"})
    book.set_calc_mode("auto")
    formats = _formats(book)
    names = layout.defined_names()
    tally = Tally()
    spec = layout.spec
    wide = min(40, max(14, 2 + max(len(n) for n in (*spec.inputs, *spec.outputs, *spec.target))))
    sheets = [(L.PARAMETERS, plan.parameter_entries, (22, wide), None, False),
              (L.CALCULATOR, plan.calculator_entries, (22, wide), None, False)]
    if spec.n_cases:
        sheets.append((L.SCORING, plan.scoring_entries, (22, wide), (layout.scoring.first_row, 2), True))
    if layout.record is not None:
        sheets += [(L.SETUP, plan.setup_entries, (26, wide), None, False),
                   (L.RECORD, plan.record_entries, (7, 16), (layout.record.first_row, 3), True),
                   (L.EPOCHS, plan.epoch_entries, (10, 14), (layout.epochs.first_row, 1), False)]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        _guide(book, formats, layout, names)
        for name, entries, widths, freeze, ordered in sheets:
            sheet = _sheet(book, name, widths, None if freeze is None else freeze[0] - 1)
            if freeze:
                sheet.freeze_panes(*freeze)
                sheet.set_row(freeze[0] - 1, 48)  # room for wrapped column headers
            write_entries(sheet, tally.stream(name, entries(layout, numbers)), formats, ordered=ordered)
            if name == L.EPOCHS:
                _epochs_chart(book, sheet, layout)
        _layout_sheet(book, describe_with(tally.fingerprints, [L.GUIDE, *(s[0] for s in sheets), L.LAYOUT]))
        _define_names(book, names)
        book.get_worksheet_by_name(L.GUIDE).activate()
        book.close()
    return tally.formulas


class Tally:
    """Counts formula cells and fingerprints formulas and inputs as entries stream past."""

    def __init__(self) -> None:
        self.formulas = 0
        self.fingerprints = Fingerprints()

    def stream(self, sheet: str, entries: Iterable[Entry]) -> Iterator[Entry]:
        for entry in entries:
            if entry.role == "formula":
                self.formulas += 1
            self.fingerprints.add(sheet, entry.row, entry.col, entry.role, entry.content)
            yield entry
