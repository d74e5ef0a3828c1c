"""A fast, safe reader of .xlsx cells: formula text, cached values and constants, per sheet.

Why not openpyxl here: verification must read a million cells in seconds, and openpyxl builds
an object per cell. The worksheet XML is scanned with regular expressions instead, after the
package is checked: the zip's declared sizes are capped before anything is inflated, and a
document type declaration (the carrier of entity-expansion attacks) is refused. Small parts
(workbook, relationships, shared strings) go through defusedxml.
"""

from __future__ import annotations

import zipfile
from pathlib import Path

from sheetnet.errors import WorkbookFormatError
from sheetnet.xlsx.cells import SheetCells, Workbook
from sheetnet.xlsx.package import (
    NS_MAIN,
    NS_REL,
    capped_parts,
    check_extension,
    check_package,
    check_signature,
    macro_parts,
    part_text,
    part_xml,
    relationships,
)
from sheetnet.xlsx.sheetxml import read_sheet_xml, sheet_structure


def _shared_strings(zf: zipfile.ZipFile, targets: dict[str, str]) -> list[str]:
    name = next((t for t in targets.values() if t.endswith("sharedStrings.xml")), None)
    if name is None or name not in zf.namelist():
        return []
    root = part_xml(zf, name)
    out = []
    for si in root.iter(f"{{{NS_MAIN}}}si"):
        out.append("".join(t.text or "" for t in si.iter(f"{{{NS_MAIN}}}t")))
    return out


def read_workbook(path: str | Path, sheets: list[str] | None = None, allow_macros: bool = False,
                  cell_limits: dict[str, int] | None = None) -> Workbook:
    """Read cells of every sheet (or only ``sheets``), defined names and the part list. A sheet named in
    ``cell_limits`` that holds more cells than its limit is not read (its ``oversized`` says how many).

    Refused with a clear message: non-zip, encrypted or legacy binary (.xls/.xlsb) files, zip bombs,
    XML with a document type declaration, and (unless ``allow_macros``: the audit, which reports
    them) workbooks that carry macros. Macros are never run and external links never followed.
    """
    path = Path(path)
    check_signature(path)
    check_extension(path, allow_macros)
    try:
        zf = zipfile.ZipFile(path)
    except FileNotFoundError:
        raise WorkbookFormatError(f"{path}: file not found") from None
    except IsADirectoryError:
        raise WorkbookFormatError(f"{path}: is a folder, not a workbook") from None
    except (zipfile.BadZipFile, OSError) as exc:
        raise WorkbookFormatError(f"{path}: not an .xlsx workbook ({exc})") from None
    with zf:
        capped = capped_parts(zf, path, cell_limits or {})
        check_package(zf, path, capped)
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




def _read(zf: zipfile.ZipFile, path: Path, wanted: list[str] | None, limits: dict[str, int],
          capped: dict[str, int]) -> Workbook:
    names = zf.namelist()
    if "xl/workbook.xml" not in names:
        raise WorkbookFormatError("no xl/workbook.xml: not a spreadsheet workbook")
    book = part_xml(zf, "xl/workbook.xml")
    targets = relationships(zf, "xl/_rels/workbook.xml.rels")
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
        data = part_text(zf, target)
    except UnicodeDecodeError:
        raise WorkbookFormatError(f"part {target} is not UTF-8 text") from None
    count = data.count("<c ") + data.count("<c>")
    if limit is not None and count > limit:
        return SheetCells(name=name, state=state, oversized=count)
    if limit is not None:  # a capped sheet is small: it must be well-formed XML, as applications require
        part_xml(zf, target)
    sheet = read_sheet_xml(name, state, data, strings)
    sheet_structure(sheet, data)
    return sheet


