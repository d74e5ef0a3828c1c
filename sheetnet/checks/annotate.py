"""An annotated copy of an audited workbook: every finding highlighted, explained in a cell note,
and listed on a findings sheet that links to each cell. The input is never modified."""

from __future__ import annotations

from pathlib import Path

from sheetnet.book.addresses import quote_sheet
from sheetnet.checks.findings import AuditReport
from sheetnet.files import write_atomic

FILLS = {"description": "F4B6B6", "signature": "F4B6B6", "structural": "F4B6B6", "formula_edits": "F8CBAD",
         "value_mismatches": "FFE699", "input_edits": "BDD7EE",
         "risks": "D9C3E9"}
FINDINGS_SHEET = "Audit findings"


def annotate(source: Path, report: AuditReport, out: Path, force: bool = False) -> Path:
    """Write the annotated copy to ``out`` (atomically)."""
    import openpyxl
    from openpyxl.comments import Comment
    from openpyxl.styles import Font, PatternFill
    from openpyxl.worksheet.hyperlink import Hyperlink

    book = openpyxl.load_workbook(source)
    sheet = book.create_sheet(FINDINGS_SHEET, 0)
    sheet.append(["kind", "where", "note", "expected", "found"])
    for cell in sheet[1]:
        cell.font = Font(bold=True)
    for column, width in zip("ABCDE", (16, 28, 70, 40, 40), strict=True):
        sheet.column_dimensions[column].width = width
    for finding in report.findings:
        target = _target(book, finding)
        row = sheet.max_row + 1
        where = f"{finding.sheet}!{finding.cell}" if target is not None else (finding.sheet or finding.cell)
        sheet.append([finding.kind, where, finding.note, _text(finding.expected), _text(finding.found)])
        if target is None:
            continue
        link = sheet.cell(row=row, column=2)
        link.hyperlink = Hyperlink(ref=link.coordinate, location=f"{quote_sheet(finding.sheet)}!{finding.cell}")
        link.font = Font(color="0563C1", underline="single")
        target.fill = PatternFill("solid", fgColor=FILLS[finding.kind])
        text = f"sheetnet audit ({finding.kind}): {finding.note}"
        if finding.expected is not None:
            text += f"\nexpected: {_text(finding.expected)}"
        if finding.found is not None:
            text += f"\nfound: {_text(finding.found)}"
        target.comment = Comment(text[:2000], "sheetnet audit", width=320, height=140)
    return write_atomic(Path(out), lambda tmp: book.save(tmp), force=force)


def _target(book, finding):
    if not finding.sheet or not finding.cell or finding.sheet not in book.sheetnames:
        return None
    try:
        return book[finding.sheet][finding.cell]
    except (ValueError, KeyError):
        return None


def _text(value) -> str:
    return "" if value is None else str(value)
