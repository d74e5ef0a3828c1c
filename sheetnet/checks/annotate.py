"""An annotated copy of an audited workbook: every finding highlighted, explained in a cell note,
and listed on a findings sheet that links to each cell. The input is never modified."""

from __future__ import annotations

import re
import tempfile
import zipfile
from pathlib import Path
from xml.sax.saxutils import escape

from sheetnet.book.jsoncheck import UNWRITABLE
from sheetnet.book.layout import LAYOUT
from sheetnet.book.untrusted import read_returned_workbook
from sheetnet.checks.findings import AuditReport
from sheetnet.errors import WorkbookFormatError
from sheetnet.files import write_atomic
from sheetnet.xlsx.addresses import parse_a1, quote_sheet
from sheetnet.xlsx.cells import CellError, Workbook

FILLS = {"description": "F4B6B6", "signature": "F4B6B6", "structural": "F4B6B6", "formula_edits": "F8CBAD",
         "value_mismatches": "FFE699", "input_edits": "BDD7EE",
         "risks": "D9C3E9"}
FINDINGS_SHEET = "Audit findings"


def annotate(source: Path, report: AuditReport, out: Path, force: bool = False) -> Path:
    """Write the annotated copy to ``out`` (atomically)."""
    import openpyxl  # lazy: openpyxl is needed only for the annotated copy
    from openpyxl.comments import Comment
    from openpyxl.styles import Font, PatternFill
    from openpyxl.worksheet.hyperlink import Hyperlink

    cached = read_returned_workbook(source, allow_macros=True)
    with tempfile.TemporaryDirectory(prefix="sheetnet-annotate-") as work:
        try:
            book = openpyxl.load_workbook(_without_a_damaged_layout(source, cached, Path(work)))
        except Exception as exc:  # openpyxl raises many kinds on a file it cannot read
            raise WorkbookFormatError(f"{source}: no annotated copy: the file cannot be opened for writing one "
                                      f"({type(exc).__name__})") from None
    sheet = book.create_sheet(FINDINGS_SHEET, 0)
    sheet.append(["kind", "where", "note", "expected", "found"])
    for cell in sheet[1]:
        cell.font = Font(bold=True)
    for column, width in zip("ABCDE", (16, 28, 70, 40, 40), strict=True):
        sheet.column_dimensions[column].width = width
    notes: dict[tuple[str, str], list[str]] = {}  # every finding of a cell in its one note, in report order
    for row, finding in enumerate(report.findings, start=2):  # (max_row would rescan the sheet each time)
        target = _target(book, finding)
        where = f"{finding.sheet}!{finding.cell}" if target is not None else (finding.sheet or finding.cell)
        sheet.append([_text(finding.kind), _text(where), _text(finding.note), _text(finding.expected),
                      _text(finding.found)])
        for column in (4, 5):  # formula text shown as text, never as a live formula of this sheet
            sheet.cell(row=row, column=column).data_type = "s"
        if target is None:
            continue
        link = sheet.cell(row=row, column=2)
        link.hyperlink = Hyperlink(ref=link.coordinate, location=f"{quote_sheet(finding.sheet)}!{finding.cell}")
        link.font = Font(color="0563C1", underline="single")
        lines = notes.setdefault((finding.sheet, finding.cell), [])
        if not lines:
            target.fill = PatternFill("solid", fgColor=FILLS[finding.kind])
        text = f"sheetnet audit ({finding.kind}): {_text(finding.note)}"
        if finding.expected is not None:
            text += f"\nexpected: {_text(finding.expected)}"
        if finding.found is not None:
            text += f"\nfound: {_text(finding.found)}"
        lines.append(text)
        target.comment = Comment("\n\n".join(lines)[:2000], "sheetnet audit", width=320, height=140)
    def save(tmp: Path) -> None:
        book.save(tmp)
        keep_saved_values(tmp, [ws.title for ws in book.worksheets], cached)

    return write_atomic(Path(out), save, force=force)


def _without_a_damaged_layout(source: Path, book: Workbook, work: Path) -> Path:
    """The source, or a copy whose layout sheet is emptied when it is too large or damaged to read (it
    was reported; opening it whole would cost what the caps on it prevent)."""
    layout = book.sheets.get(LAYOUT)
    if layout is None or not (layout.oversized or layout.oversized_bytes or layout.unreadable):
        return source
    part = _sheet_part(source, LAYOUT)
    staged = work / "staged.xlsx"
    with zipfile.ZipFile(source) as src, zipfile.ZipFile(staged, "w", zipfile.ZIP_DEFLATED) as dst:
        for item in src.infolist():
            dst.writestr(item, _EMPTIED_LAYOUT if item.filename == part else src.read(item.filename))
    return staged


_EMPTIED_LAYOUT = ('<?xml version="1.0" encoding="UTF-8" standalone="yes"?><worksheet xmlns="http://schemas.'
                   'openxmlformats.org/spreadsheetml/2006/main"><sheetData><row r="1"><c r="A1" t="inlineStr"><is>'
                   '<t>(the layout sheet was left out of this copy: too large or damaged to read; see the audit)</t>'
                   '</is></c></row></sheetData></worksheet>')


def _sheet_part(source: Path, name: str) -> str:
    """The worksheet part of a sheet, through the workbook and its relationships."""
    with zipfile.ZipFile(source) as zf:
        workbook = zf.read("xl/workbook.xml").decode("utf-8", "replace")
        rels = zf.read("xl/_rels/workbook.xml.rels").decode("utf-8", "replace")
    rid = re.search(rf'<sheet [^>]*name="{re.escape(name)}"[^>]*r:id="([^"]+)"', workbook)
    target = rid and re.search(rf'<Relationship [^>]*Id="{rid.group(1)}"[^>]*Target="([^"]+)"', rels)
    return ("xl/" + target.group(1).lstrip("/").removeprefix("xl/")) if target else ""


_FORMULA_CELL = re.compile(r'<c r="([A-Z]+[0-9]+)"([^>]*)><f>([^<]*)</f><v */></c>')


def keep_saved_values(path: Path, titles: list[str], source: Workbook) -> None:
    """openpyxl writes formulas without their saved values; put the source's values back, so that
    viewers that do not recalculate still show numbers (openpyxl names sheet parts by position)."""
    with zipfile.ZipFile(path) as zf:
        infos = zf.infolist()
        parts = {item.filename: zf.read(item.filename) for item in infos}
    for n, title in enumerate(titles, start=1):
        part = f"xl/worksheets/sheet{n}.xml"
        cells = source.sheets.get(title)
        if cells is None or part not in parts:
            continue
        text = parts[part].decode("utf-8")
        parts[part] = _FORMULA_CELL.sub(lambda m, v=cells.values: _with_value(m, v), text).encode("utf-8")
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for item in infos:
            zf.writestr(item, parts[item.filename])


def _with_value(match: re.Match, values: dict) -> str:
    ref, attrs, formula = match.groups()
    value = values.get(parse_a1(ref))
    if isinstance(value, bool):
        kind, text = "b", "1" if value else "0"
    elif isinstance(value, float | int):
        kind, text = "", repr(float(value))
    elif isinstance(value, CellError):
        kind, text = "e", value.code
    elif isinstance(value, str):
        kind, text = "str", escape(value)
    else:
        return match.group(0)
    attrs = re.sub(r'\s+t="[^"]*"', "", attrs) + (f' t="{kind}"' if kind else "")
    return f'<c r="{ref}"{attrs}><f>{formula}</f><v>{text}</v></c>'


def _target(book, finding):
    if not finding.sheet or not finding.cell or finding.sheet not in book.sheetnames:
        return None
    try:
        return book[finding.sheet][finding.cell]
    except (ValueError, KeyError):
        return None


def _text(value) -> str:
    """A value as text a worksheet can hold: control characters and unpaired surrogates (which a
    returned file's description may carry) shown as U+FFFD."""
    text = "" if value is None else str(value)
    return UNWRITABLE.sub("\ufffd", text)

