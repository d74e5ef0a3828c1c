"""A fast, safe reader of .xlsx cells: formula text, cached values and constants, per sheet.

Why not openpyxl here: verification must read a million cells in seconds, and openpyxl builds
an object per cell. The worksheet XML is scanned with regular expressions instead, after the
package is checked: the zip's declared sizes are capped before anything is inflated, and a
document type declaration (the carrier of entity-expansion attacks) is refused. Small parts
(workbook, relationships, shared strings) go through defusedxml.
"""

from __future__ import annotations

import html
import os
import posixpath
import re
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

from defusedxml import ElementTree as SafeET

from sheetnet.book.addresses import column_index
from sheetnet.errors import UsageError, WorkbookFormatError
from sheetnet.parallel import Background, can_fork

#: Refuse workbooks whose parts inflate to more than this in all, or any part beyond PART (zip bombs);
#: a workbook of a million formula cells is about 150 MB inflated.
MAX_UNCOMPRESSED_BYTES = 1024**3
MAX_PART_BYTES = 512 * 1024**2
MAX_COMPRESSION_RATIO = 200
#: Peak memory of verify, audit or extract, estimated from the worksheets' inflated size (measured on
#: 0.1M-1M-cell workbooks: audit peaks at about 120 MB plus 12.5 bytes per byte of sheet XML), and the
#: default cap on that estimate; SHEETNET_MAX_MEMORY_MB changes the cap.
MEMORY_BASE_BYTES = 120 * 1024**2
MEMORY_PER_SHEET_BYTE = 13
DEFAULT_MAX_MEMORY_MB = 4096

NS_MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
NS_REL = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
NS_PKG = "http://schemas.openxmlformats.org/package/2006/relationships"

_CELL = re.compile(r"<(?:\w+:)?c\b([^>]*?)(?:/>|>(.*?)</(?:\w+:)?c>)", re.S)
_ATTR = re.compile(r'([\w:]+)="([^"]*)"')
_F = re.compile(r"<(?:\w+:)?f\b([^>]*?)(?:/>|>(.*?)</(?:\w+:)?f>)", re.S)
_V = re.compile(r"<(?:\w+:)?v>(.*?)</(?:\w+:)?v>", re.S)
_T = re.compile(r"<(?:\w+:)?t\b[^>]*>(.*?)</(?:\w+:)?t>", re.S)
_SHEET_STATE = re.compile(r"<(?:\w+:)?sheetData\b")
_DIGITS = "0123456789"
_ERRORS = ("#NULL!", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#N/A", "#GETTING_DATA")


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


_OLE = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"


def _check_signature(path: Path) -> None:
    try:
        with path.open("rb") as handle:
            head = handle.read(8)
    except FileNotFoundError:
        raise WorkbookFormatError(f"{path}: file not found") from None
    except IsADirectoryError:
        raise WorkbookFormatError(f"{path}: is a folder, not a workbook") from None
    except OSError as exc:
        raise WorkbookFormatError(f"{path}: cannot read ({exc.strerror})") from None
    if head.startswith(_OLE):
        raise WorkbookFormatError(f"{path}: an encrypted (password-protected) or legacy .xls workbook; "
                                  "save it as an unprotected .xlsx first")
    if not head.startswith(b"PK"):
        raise WorkbookFormatError(f"{path}: not an .xlsx workbook (not a zip package)")
    if path.suffix.lower() == ".xlsb":
        raise WorkbookFormatError(f"{path}: binary .xlsb workbooks are not supported; save it as .xlsx")


def _check_extension(path: Path, allow_macros: bool) -> None:
    if not allow_macros and path.suffix.lower() in (".xlsm", ".xltm", ".xlam"):
        raise WorkbookFormatError(f"{path}: a macro-enabled workbook ({path.suffix}); refused: sheetnet never runs "
                                  "macros (use 'sheetnet audit' to see what the file holds)")


def macro_parts(names: list[str]) -> list[str]:
    return [n for n in names if "vbaproject" in n.lower() or (n.lower().endswith((".bin",)) and "vba" in n.lower())]


#: Parts that must be read before the others are checked (the workbook and its relationships) are
#: refused beyond this size.
SMALL_PART_BYTES = 16 * 1024**2


def _capped_parts(zf: zipfile.ZipFile, path: Path, capped: dict[str, int]) -> dict[str, int]:
    """The worksheet parts of the capped sheets, each with the most bytes it may inflate to: twice what
    the other worksheets inflate to, plus 2 MB (a capped sheet is an auxiliary one, small beside the
    rest). Larger ones are not read, and are exempt from the zip-bomb refusal, so that the caller can
    say what is wrong with them."""
    if not capped:
        return {}
    for name in ("xl/workbook.xml", "xl/_rels/workbook.xml.rels"):
        info = zf.NameToInfo.get(name)
        if info is not None and info.file_size > SMALL_PART_BYTES:
            raise WorkbookFormatError(f"{path}: part {name} inflates to {info.file_size:,} bytes; refused")
    if "xl/workbook.xml" not in zf.NameToInfo or "xl/_rels/workbook.xml.rels" not in zf.NameToInfo:
        return {}
    targets = _rels(zf, "xl/_rels/workbook.xml.rels")
    parts = {targets.get(node.get(f"{{{NS_REL}}}id"), "") for node in _xml(zf, "xl/workbook.xml").iter(
        f"{{{NS_MAIN}}}sheet") if node.get("name") in capped}
    others = sum(i.file_size for i in zf.infolist() if i.filename.startswith("xl/worksheets/") and
                 i.filename not in parts)
    return {part: 2 * others + 2 * 1024**2 for part in parts if part}


def _check_package(zf: zipfile.ZipFile, path: Path, capped: dict[str, int]) -> None:
    total = 0
    for info in zf.infolist():
        if info.filename in capped:
            continue
        total += info.file_size
        if info.file_size > MAX_PART_BYTES:
            raise WorkbookFormatError(f"{path}: part {info.filename} inflates to {info.file_size:,} bytes, over the "
                                      f"{MAX_PART_BYTES:,} limit; refused as a possible zip bomb")
        if info.compress_size and info.file_size / info.compress_size > MAX_COMPRESSION_RATIO \
                and info.file_size > 10 * 1024**2:
            raise WorkbookFormatError(f"{path}: part {info.filename} inflates {info.file_size / info.compress_size:.0f}"
                                      f"-fold; refused as a possible zip bomb")
    if total > MAX_UNCOMPRESSED_BYTES:
        raise WorkbookFormatError(
            f"{path}: parts inflate to {total:,} bytes, over the {MAX_UNCOMPRESSED_BYTES:,} limit")
    _check_memory(zf, path)


def memory_cap_bytes() -> int:
    """The cap on a run's estimated peak memory (SHEETNET_MAX_MEMORY_MB, default 4096)."""
    text = os.environ.get("SHEETNET_MAX_MEMORY_MB", "")
    try:
        megabytes = int(text) if text else DEFAULT_MAX_MEMORY_MB
    except ValueError:
        raise UsageError(f"SHEETNET_MAX_MEMORY_MB must be a whole number of megabytes, got {text!r}") from None
    return max(megabytes, 1) * 1024**2


def _check_memory(zf: zipfile.ZipFile, path: Path) -> None:
    """Refuse, before reading any sheet, a workbook whose checking would need more memory than the cap."""
    sheet_bytes = sum(i.file_size for i in zf.infolist() if i.filename.startswith("xl/worksheets/"))
    estimate = MEMORY_BASE_BYTES + MEMORY_PER_SHEET_BYTE * sheet_bytes
    cap = memory_cap_bytes()
    if estimate > cap:
        raise WorkbookFormatError(
            f"{path}: checking this workbook would need about {estimate / 1024**2:,.0f} MB of memory "
            f"({sheet_bytes / 1024**2:,.0f} MB of sheet XML), over the cap of {cap / 1024**2:,.0f} MB; "
            "set SHEETNET_MAX_MEMORY_MB to allow more")


def _xml(zf: zipfile.ZipFile, name: str):
    try:
        return SafeET.fromstring(zf.read(name))
    except KeyError:
        raise WorkbookFormatError(f"missing part {name}") from None
    except Exception as exc:  # defusedxml raises its own classes for forbidden constructs
        raise WorkbookFormatError(f"part {name} is not safe, well-formed XML ({type(exc).__name__})") from None


def _text(zf: zipfile.ZipFile, name: str) -> str:
    data = zf.read(name).decode("utf-8")
    if "<!DOCTYPE" in data[:4096].upper() or "<!ENTITY" in data.upper():
        raise WorkbookFormatError(f"part {name} declares a document type; refused (entity expansion)")
    return data


def _shared_strings(zf: zipfile.ZipFile, targets: dict[str, str]) -> list[str]:
    name = next((t for t in targets.values() if t.endswith("sharedStrings.xml")), None)
    if name is None or name not in zf.namelist():
        return []
    root = _xml(zf, name)
    out = []
    for si in root.iter(f"{{{NS_MAIN}}}si"):
        out.append("".join(t.text or "" for t in si.iter(f"{{{NS_MAIN}}}t")))
    return out


_OOXML_ESCAPE = re.compile(r"_x([0-9A-Fa-f]{4})_")


def _unescape(text: str) -> str:
    """XML entities, then the ``_xHHHH_`` escapes OOXML uses for control characters (and for a
    literal ``_x``, written ``_x005F_x``)."""
    text = html.unescape(text) if "&" in text else text
    return _OOXML_ESCAPE.sub(lambda m: chr(int(m.group(1), 16)), text) if "_x" in text else text


def _value(kind: str, raw: str | None, inline: str | None, strings: list[str]) -> object:
    if kind == "inlineStr":
        return _unescape(inline or "")
    if raw is None:
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
            values[pos] = _value(kind, vtext or None, None, strings)
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


def read_workbook(path: str | Path, sheets: list[str] | None = None, allow_macros: bool = False,
                  cell_limits: dict[str, int] | None = None) -> Workbook:
    """Read cells of every sheet (or only ``sheets``), defined names and the part list. A sheet named in
    ``cell_limits`` that holds more cells than its limit is not read (its ``oversized`` says how many).

    Refused with a clear message: non-zip, encrypted or legacy binary (.xls/.xlsb) files, zip bombs,
    XML with a document type declaration, and (unless ``allow_macros``: the audit, which reports
    them) workbooks that carry macros. Macros are never run and external links never followed.
    """
    path = Path(path)
    _check_signature(path)
    _check_extension(path, allow_macros)
    try:
        zf = zipfile.ZipFile(path)
    except FileNotFoundError:
        raise WorkbookFormatError(f"{path}: file not found") from None
    except IsADirectoryError:
        raise WorkbookFormatError(f"{path}: is a folder, not a workbook") from None
    except (zipfile.BadZipFile, OSError) as exc:
        raise WorkbookFormatError(f"{path}: not an .xlsx workbook ({exc})") from None
    with zf:
        capped = _capped_parts(zf, path, cell_limits or {})
        _check_package(zf, path, capped)
        if allow_macros is False and macro_parts(zf.namelist()):
            raise WorkbookFormatError(f"{path}: a macro-enabled workbook (VBA project inside); refused: sheetnet "
                                      "never runs macros (use 'sheetnet audit' to see what the file holds)")
        try:
            return _read(zf, path, sheets, cell_limits or {}, capped)
        except WorkbookFormatError as exc:
            text = str(exc)
            raise WorkbookFormatError(text if text.startswith(str(path)) else f"{path}: {text}") from None
        except (KeyError, ValueError, IndexError, UnicodeDecodeError) as exc:
            raise WorkbookFormatError(f"{path}: damaged workbook ({_damage(exc)})") from None


def _damage(exc: Exception) -> str:
    """What a low-level failure says about the file, in words (not Python's class names)."""
    if isinstance(exc, UnicodeDecodeError):
        return "a part is not UTF-8 text"
    if isinstance(exc, KeyError):
        return f"a part or entry it refers to is missing ({str(exc)[:80]})"
    return f"a value it holds cannot be read ({str(exc)[:80]})"


def _rels(zf: zipfile.ZipFile, name: str) -> dict[str, str]:
    folder = posixpath.dirname(posixpath.dirname(name))
    root = _xml(zf, name)
    out = {}
    for rel in root.iter(f"{{{NS_PKG}}}Relationship"):
        target = rel.get("Target", "")
        if rel.get("TargetMode") == "External":
            out[rel.get("Id")] = "external:" + target
            continue
        out[rel.get("Id")] = target.lstrip("/") if target.startswith("/") else posixpath.normpath(
            posixpath.join(folder, target))
    return out


def _read(zf: zipfile.ZipFile, path: Path, wanted: list[str] | None, limits: dict[str, int],
          capped: dict[str, int]) -> Workbook:
    names = zf.namelist()
    if "xl/workbook.xml" not in names:
        raise WorkbookFormatError("no xl/workbook.xml: not a spreadsheet workbook")
    book = _xml(zf, "xl/workbook.xml")
    targets = _rels(zf, "xl/_rels/workbook.xml.rels")
    strings = _shared_strings(zf, targets)
    sheets: dict[str, SheetCells] = {}
    order = []
    for node in book.iter(f"{{{NS_MAIN}}}sheet"):
        name = node.get("name")
        order.append(name)
        target = targets.get(node.get(f"{{{NS_REL}}}id"), "")
        if wanted is not None and name not in wanted:
            sheets[name] = SheetCells(name=name, state=node.get("state", "visible"))
            continue
        if target not in names:
            sheets[name] = SheetCells(name=name, state=node.get("state", "visible"))
            continue
        size = zf.getinfo(target).file_size
        if target in capped and size > capped[target]:
            sheets[name] = SheetCells(name=name, state=node.get("state", "visible"), oversized_bytes=size)
            continue
        try:
            sheets[name] = _read_sheet(zf, target, name, node.get("state", "visible"), strings, limits.get(name))
        except (WorkbookFormatError, ValueError, IndexError, KeyError) as exc:
            if name not in limits:
                raise
            why = str(exc) if isinstance(exc, WorkbookFormatError) else _damage(exc)
            sheets[name] = SheetCells(name=name, state=node.get("state", "visible"), unreadable=why)
    global_names, local = {}, []
    for node in book.iter(f"{{{NS_MAIN}}}definedName"):
        if node.get("localSheetId") is not None:
            index = int(node.get("localSheetId"))
            local.append((order[index] if index < len(order) else "?", node.get("name"), node.text or ""))
        else:
            global_names[node.get("name")] = node.text or ""
    external = [t.split(":", 1)[1] for t in targets.values() if t.startswith("external:")]
    return Workbook(path=path, sheets=sheets, names=global_names, local_names=local, parts=names,
                    external_targets=external)


def _read_sheet(zf: zipfile.ZipFile, target: str, name: str, state: str, strings: list[str],
                limit: int | None) -> SheetCells:
    try:
        data = _text(zf, target)
    except UnicodeDecodeError:
        raise WorkbookFormatError(f"part {target} is not UTF-8 text") from None
    count = data.count("<c ") + data.count("<c>")
    if limit is not None and count > limit:
        return SheetCells(name=name, state=state, oversized=count)
    if limit is not None:  # a capped sheet is small: it must be well-formed XML, as applications require
        _xml(zf, target)
    sheet = read_sheet_xml(name, state, data, strings)
    _sheet_structure(sheet, data)
    return sheet


_MERGE = re.compile(r'<(?:\w+:)?mergeCell\b[^>]*?\bref="([^"]+)"')
_ROW_TAG = re.compile(r"<(?:\w+:)?row\b([^>]*)>")
_COL_TAG = re.compile(r"<(?:\w+:)?col\b([^>]*?)/?>")


def _sheet_structure(sheet: SheetCells, data: str) -> None:
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
    from sheetnet.book.addresses import column_letters

    def shift(match: re.Match) -> str:
        if match.group(1):
            return match.group(1)
        col = column_index(match.group(4)) + (0 if match.group(3) else cols)
        row = int(match.group(6)) + (0 if match.group(5) else rows)
        return f"{match.group(2) or ''}{match.group(3)}{column_letters(col)}{match.group(5)}{row}"

    return _TRANSLATE.sub(shift, formula)
