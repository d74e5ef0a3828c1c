"""Test helper: alter the layout description stored inside a built workbook, as anyone who can edit
the file could (the hidden sheet is rewritten; every other part is copied unchanged)."""

from __future__ import annotations

import json
import zipfile
from collections.abc import Callable
from pathlib import Path
from xml.sax.saxutils import escape

from sheetnet.book.describe import LAYOUT_TITLE

LAYOUT_SHEET_NAME = "sheetnet_layout"
CHUNK = 30_000


def _layout_part(zf: zipfile.ZipFile) -> str:
    """The worksheet part of the hidden layout sheet (found through the workbook's relationships)."""
    import re

    workbook = zf.read("xl/workbook.xml").decode()
    rid = re.search(rf'<sheet name="{LAYOUT_SHEET_NAME}"[^>]*r:id="([^"]+)"', workbook).group(1)
    rels = zf.read("xl/_rels/workbook.xml.rels").decode()
    target = re.search(rf'Id="{rid}"[^>]*Target="([^"]+)"', rels) or re.search(
        rf'Target="([^"]+)"[^>]*Id="{rid}"', rels)
    return "xl/" + target.group(1).lstrip("/").removeprefix("xl/")


def read_description(book: Path) -> dict:
    import re

    with zipfile.ZipFile(book) as zf:
        xml = zf.read(_layout_part(zf)).decode()
    texts = re.findall(r"<t[^>]*>(.*?)</t>", xml, re.S)
    from html import unescape

    return json.loads("".join(unescape(t) for t in texts[1:]))


def description_sheet_xml(text: str) -> str:
    chunks = [text[i:i + CHUNK] for i in range(0, len(text), CHUNK)] or [""]
    rows = "".join(f'<row r="{n + 2}"><c r="A{n + 2}" t="inlineStr"><is><t>{escape(chunk)}</t></is></c></row>'
                   for n, chunk in enumerate(chunks))
    return ('<?xml version="1.0" encoding="UTF-8" standalone="yes"?>'
            '<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main"><sheetData>'
            f'<row r="1"><c r="A1" t="inlineStr"><is><t>{escape(LAYOUT_TITLE)}</t></is></c></row>' + rows +
            "</sheetData></worksheet>")


def write_description_text(book: Path, out: Path, text: str) -> Path:
    """A copy of ``book`` whose hidden layout sheet holds ``text`` instead of the description."""
    with zipfile.ZipFile(book) as src:
        part = _layout_part(src)
        with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
            for item in src.infolist():
                data = description_sheet_xml(text) if item.filename == part else src.read(item.filename)
                dst.writestr(item, data)
    return out


def alter_description(book: Path, out: Path, mutate: Callable[[dict], object]) -> Path:
    """A copy of ``book`` whose description is ``mutate(parsed description)``: a document, or text
    written as it is; non-standard JSON (NaN, Infinity) is written as Python's json writes it."""
    data = mutate(read_description(book))
    return write_description_text(book, out, data if isinstance(data, str) else json.dumps(data))
