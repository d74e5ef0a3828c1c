"""Scanning one worksheet's XML into cells with regular expressions (an object per cell, as XML
libraries build, is too slow for a million cells): values, formulas (shared ones translated to
each cell), merged ranges and hidden rows and columns."""

from __future__ import annotations

import html
import re

from sheetnet.errors import WorkbookFormatError
from sheetnet.parallel import Background, can_fork
from sheetnet.xlsx.addresses import column_index, column_letters
from sheetnet.xlsx.cells import CellError, SheetCells

_CELL = re.compile(r"<(?:\w+:)?c\b([^>]*?)(?:/>|>(.*?)</(?:\w+:)?c>)", re.S)
_ATTR = re.compile(r'([\w:]+)="([^"]*)"')
_F = re.compile(r"<(?:\w+:)?f\b([^>]*?)(?:/>|>(.*?)</(?:\w+:)?f>)", re.S)
_V = re.compile(r"<(?:\w+:)?v>(.*?)</(?:\w+:)?v>", re.S)
_T = re.compile(r"<(?:\w+:)?t\b[^>]*>(.*?)</(?:\w+:)?t>", re.S)
_SHEET_STATE = re.compile(r"<(?:\w+:)?sheetData\b")
_DIGITS = "0123456789"
_ERRORS = ("#NULL!", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#N/A", "#GETTING_DATA")


_OOXML_ESCAPE = re.compile(r"_x([0-9A-Fa-f]{4})_")


def _unescape(text: str) -> str:
    """XML entities, then the ``_xHHHH_`` escapes OOXML uses for control characters (and for a
    literal ``_x``, written ``_x005F_x``)."""
    text = html.unescape(text) if "&" in text else text
    return _OOXML_ESCAPE.sub(lambda m: chr(int(m.group(1), 16)), text) if "_x" in text else text


def _value(kind: str, raw: str | None, inline: str | None, strings: list[str]) -> object:
    if kind == "inlineStr":
        return _unescape(inline or "")
    if raw is None or (raw == "" and kind != "str"):  # an empty <v/> saves no value, except empty text
        return None
    raw = _unescape(raw)
    if kind == "s":
        index = int(raw) if raw.isdigit() and len(raw) < 12 else -1
        if not 0 <= index < len(strings):
            raise WorkbookFormatError(f"a cell refers to shared string {raw[:15]!r}, which the workbook does not "
                                      f"have ({len(strings):,} strings)")
        return strings[index]
    if kind in ("str", "e") or (kind == "" and raw in _ERRORS):
        return CellError(raw) if kind == "e" or raw in _ERRORS else raw
    if kind == "b":
        return raw == "1"
    return float(raw)


_FAST_CELL = re.compile(r'<c r="([A-Z]{1,3})([0-9]+)"([^>]*?)(?:/>|>(?:<f([^>]*?)(?:/>|>([^<]*)</f>))?'
                        r'(?:<v>([^<]*)</v>)?(?:<is>(.*?)</is>)?</c>)', re.S)


#: Sheets larger than this are scanned in two halves at once (2 cores).
SPLIT_BYTES = 8 * 1024 * 1024


def read_sheet_xml(name: str, state: str, data: str, strings: list[str]) -> SheetCells:
    """All cells of one worksheet's XML.

    The common shape of a cell (``r`` as its first attribute, formula, value, inline string) is read
    with one regular expression over the whole sheet; if that does not account for every ``<c``
    element, the sheet is read again cell by cell with a tolerant scanner. A large sheet is scanned
    in two halves, the second in a child process.
    """
    body_start = _SHEET_STATE.search(data)
    offset = body_start.start() if body_start else 0
    middle = data.find("<row ", offset + (len(data) - offset) // 2) if len(data) > SPLIT_BYTES else -1
    if middle > 0 and can_fork():
        second = Background(_scan, data, middle, len(data), strings)
        first = _scan(data, offset, middle, strings)
        rest = second.result()
    else:
        first, rest = _scan(data, offset, len(data), strings), None
    if first is None or (rest is None and middle > 0 and can_fork()):
        return _read_sheet_slowly(name, state, data, strings, offset)
    sheet = SheetCells(name=name, state=state, formulas=first[0], values=first[1])
    shared = first[2]
    if rest is not None:
        sheet.formulas.update(rest[0])
        sheet.values.update(rest[1])
        shared += rest[2]
    _resolve_shared(sheet, shared)
    return sheet


def _scan(data: str, start: int, end: int, strings: list[str]):
    """(formulas, values, shared formulas) of the cells in data[start:end], or None when the fast
    pattern does not account for every cell there."""
    cells = _FAST_CELL.findall(data, start, end)
    if len(cells) != data.count("<c ", start, end):
        return None
    columns: dict[str, int] = {}
    formulas: dict[tuple[int, int], str] = {}
    values: dict[tuple[int, int], object] = {}
    shared: list[tuple[tuple[int, int], str, str]] = []
    for letters, digits, attrs, fattrs, ftext, vtext, inline in cells:
        col = columns.get(letters)
        if col is None:
            col = columns[letters] = column_index(letters)
        pos = (int(digits) - 1, col)
        kind = _attribute(attrs, "t") if ' t="' in attrs else ""
        if ftext or fattrs:
            if ' t="shared"' in fattrs:
                shared.append((pos, _attribute(fattrs, "si"), _unescape(ftext)))
            else:
                formulas[pos] = _unescape(ftext)
        if kind == "inlineStr":
            values[pos] = _unescape("".join(_T.findall(inline)))
        elif kind == "" and vtext and vtext[0] != "#":
            values[pos] = float(vtext)
        else:
            values[pos] = _value(kind, vtext, None, strings)
    return formulas, values, shared


def _resolve_shared(sheet: SheetCells, shared: list[tuple[tuple[int, int], str, str]]) -> None:
    """Shared formulas: the master carries the text; the others are the master moved."""
    masters = {si: (pos, text) for pos, si, text in shared if text}
    for pos, si, text in shared:
        if text:
            sheet.formulas[pos] = text
        elif si in masters:
            origin, master = masters[si]
            sheet.formulas[pos] = translate(master, pos[0] - origin[0], pos[1] - origin[1])
            sheet.shared[pos] = si


def _read_sheet_slowly(name: str, state: str, data: str, strings: list[str], offset: int) -> SheetCells:
    sheet = SheetCells(name=name, state=state)
    shared: list[tuple[tuple[int, int], str, str]] = []
    for match in _CELL.finditer(data, offset):
        attrs, body = match.group(1), match.group(2) or ""
        ref = _attribute(attrs, "r")
        letters = ref.rstrip(_DIGITS)
        pos = (int(ref[len(letters):]) - 1, column_index(letters))
        kind = _attribute(attrs, "t") if re.search(r'(?:^|\s)t="', attrs) else ""
        f = _F.search(body)
        if f is not None:
            text = _unescape(f.group(2) or "")
            if re.search(r'(?:^|\s)t="shared"', f.group(1)):
                shared.append((pos, _attribute(f.group(1), "si"), text))
            else:
                sheet.formulas[pos] = text
        v = _V.search(body)
        inline = "".join(_T.findall(body)) if kind == "inlineStr" else None
        sheet.values[pos] = _value(kind, v.group(1) if v else None, inline, strings)
    _resolve_shared(sheet, shared)
    return sheet


def _attribute(attrs: str, name: str) -> str:
    """The value of one attribute in a tag's attribute text."""
    key = f' {name}="'
    at = attrs.find(key)
    if at < 0:
        match = re.search(rf'(?:^|\s)(?:\w+:)?{name}="([^"]*)"', attrs)
        if match is None:
            raise WorkbookFormatError(f"a cell without its {name!r} attribute")
        return match.group(1)
    at += len(key)
    return attrs[at:attrs.index('"', at)]


_MERGE = re.compile(r'<(?:\w+:)?mergeCell\b[^>]*?\bref="([^"]+)"')
_ROW_TAG = re.compile(r"<(?:\w+:)?row\b([^>]*)>")
_COL_TAG = re.compile(r"<(?:\w+:)?col\b([^>]*?)/?>")


def sheet_structure(sheet: SheetCells, data: str) -> None:
    """Merged ranges, hidden rows and hidden columns (what an audit must see)."""
    sheet.merged = _MERGE.findall(data)
    for attrs in _ROW_TAG.findall(data):
        if 'hidden="1"' in attrs or 'hidden="true"' in attrs:
            sheet.hidden_rows.add(int(_attribute(attrs, "r")) - 1)
    head = data[: data.find("<sheetData")] if "<sheetData" in data else data
    for attrs in _COL_TAG.findall(head):
        if 'hidden="1"' in attrs or 'hidden="true"' in attrs:
            sheet.hidden_cols.update(range(int(_attribute(attrs, "min")) - 1, int(_attribute(attrs, "max"))))


_TRANSLATE = re.compile(
    r"""("(?:[^"]|"")*")|((?:'(?:[^']|'')+'|[A-Za-z_][\w.]*)!)?(\$?)([A-Z]{1,3})(\$?)([0-9]+)(?![\w(!])""")


def translate(formula: str, rows: int, cols: int) -> str:
    """Shift the relative references of a formula (a shared formula's master, moved to a dependent)."""

    def shift(match: re.Match) -> str:
        if match.group(1):
            return match.group(1)
        col = column_index(match.group(4)) + (0 if match.group(3) else cols)
        row = int(match.group(6)) + (0 if match.group(5) else rows)
        return f"{match.group(2) or ''}{match.group(3)}{column_letters(col)}{match.group(5)}{row}"

    return _TRANSLATE.sub(shift, formula)
