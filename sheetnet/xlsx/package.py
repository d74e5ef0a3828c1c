"""Safety of the .xlsx package before anything is inflated: the file's signature and extension,
macro parts, zip bombs (declared sizes and compression ratios capped), and an estimate of the
memory a read needs against a cap."""

from __future__ import annotations

import os
import posixpath
import zipfile
from pathlib import Path

from defusedxml import ElementTree as SafeET

from sheetnet.errors import UsageError, WorkbookFormatError
from sheetnet.files import reading

NS_MAIN = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
NS_REL = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
NS_PKG = "http://schemas.openxmlformats.org/package/2006/relationships"

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


_OLE = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"


def check_signature(path: Path) -> None:
    with reading(path, WorkbookFormatError, "file", "a workbook"), path.open("rb") as handle:
        head = handle.read(8)
    if head.startswith(_OLE):
        raise WorkbookFormatError(f"{path}: an encrypted (password-protected) or legacy .xls workbook; "
                                  "save it as an unprotected .xlsx first")
    if not head.startswith(b"PK"):
        raise WorkbookFormatError(f"{path}: not an .xlsx workbook (not a zip package)")
    if path.suffix.lower() == ".xlsb":
        raise WorkbookFormatError(f"{path}: binary .xlsb workbooks are not supported; save it as .xlsx")


def check_extension(path: Path, allow_macros: bool) -> None:
    if not allow_macros and path.suffix.lower() in (".xlsm", ".xltm", ".xlam"):
        raise WorkbookFormatError(f"{path}: a macro-enabled workbook ({path.suffix}); refused: sheetnet never runs "
                                  "macros (use 'sheetnet audit' to see what the file holds)")


def macro_parts(names: list[str]) -> list[str]:
    return [n for n in names if "vbaproject" in n.lower() or (n.lower().endswith((".bin",)) and "vba" in n.lower())]


#: Parts that must be read before the others are checked (the workbook and its relationships) are
#: refused beyond this size.
SMALL_PART_BYTES = 16 * 1024**2


def capped_parts(zf: zipfile.ZipFile, path: Path, capped: dict[str, int]) -> dict[str, int]:
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
    targets = relationships(zf, "xl/_rels/workbook.xml.rels")
    parts = {targets.get(node.get(f"{{{NS_REL}}}id"), "") for node in part_xml(zf, "xl/workbook.xml").iter(
        f"{{{NS_MAIN}}}sheet") if node.get("name") in capped}
    others = sum(i.file_size for i in zf.infolist() if i.filename.startswith("xl/worksheets/") and
                 i.filename not in parts)
    return {part: 2 * others + 2 * 1024**2 for part in parts if part}


def check_package(zf: zipfile.ZipFile, path: Path, capped: dict[str, int]) -> None:
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
    check_memory(zf, path)


def memory_cap_bytes() -> int:
    """The cap on a run's estimated peak memory (SHEETNET_MAX_MEMORY_MB, default 4096)."""
    text = os.environ.get("SHEETNET_MAX_MEMORY_MB", "")
    try:
        megabytes = int(text) if text else DEFAULT_MAX_MEMORY_MB
    except ValueError:
        raise UsageError(f"SHEETNET_MAX_MEMORY_MB must be a whole number of megabytes, got {text!r}") from None
    return max(megabytes, 1) * 1024**2


def check_memory(zf: zipfile.ZipFile, path: Path) -> None:
    """Refuse, before reading any sheet, a workbook whose checking would need more memory than the cap."""
    sheet_bytes = sum(i.file_size for i in zf.infolist() if i.filename.startswith("xl/worksheets/"))
    estimate = MEMORY_BASE_BYTES + MEMORY_PER_SHEET_BYTE * sheet_bytes
    cap = memory_cap_bytes()
    if estimate > cap:
        raise WorkbookFormatError(
            f"{path}: checking this workbook would need about {estimate / 1024**2:,.0f} MB of memory "
            f"({sheet_bytes / 1024**2:,.0f} MB of sheet XML), over the cap of {cap / 1024**2:,.0f} MB; "
            "set SHEETNET_MAX_MEMORY_MB to allow more")


def part_xml(zf: zipfile.ZipFile, name: str):
    try:
        return SafeET.fromstring(zf.read(name))
    except KeyError:
        raise WorkbookFormatError(f"missing part {name}") from None
    except Exception as exc:  # defusedxml raises its own classes for forbidden constructs
        raise WorkbookFormatError(f"part {name} is not safe, well-formed XML ({type(exc).__name__})") from None


def part_text(zf: zipfile.ZipFile, name: str) -> str:
    data = zf.read(name).decode("utf-8")
    if "<!DOCTYPE" in data[:4096].upper() or "<!ENTITY" in data.upper():
        raise WorkbookFormatError(f"part {name} declares a document type; refused (entity expansion)")
    return data


def relationships(zf: zipfile.ZipFile, name: str) -> dict[str, str]:
    folder = posixpath.dirname(posixpath.dirname(name))
    root = part_xml(zf, name)
    out = {}
    for rel in root.iter(f"{{{NS_PKG}}}Relationship"):
        target = rel.get("Target", "")
        if rel.get("TargetMode") == "External":
            out[rel.get("Id")] = "external:" + target
            continue
        out[rel.get("Id")] = target.lstrip("/") if target.startswith("/") else posixpath.normpath(
            posixpath.join(folder, target))
    return out
