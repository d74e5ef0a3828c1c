"""One spelling for every cell: formula text and constants as two applications may write them.

Spreadsheet applications rewrite what they save without changing its meaning: LibreOffice writes
``1E-12`` as ``1E-012`` and keeps 15 significant digits of a number; case and spaces vary. Formula
comparison (verify, audit) and the signature's cell digests use these canonical forms, so an
untouched workbook saved by another application still compares equal.
"""

from __future__ import annotations

import re

from sheetnet.xlsx.addresses import quote_sheet

_SPACE_OUTSIDE_STRINGS = re.compile(r'("(?:[^"]|"")*")|\s+')
_NUMBER = re.compile(r'("(?:[^"]|"")*")|(?<![A-Za-z_$0-9.])([0-9]+\.?[0-9]*(?:[Ee][+-]?[0-9]+)?)(?![A-Za-z_(0-9])')
_STRING = re.compile(r'("(?:[^"]|"")*")')


def normalize_formula(text: str) -> str:
    """Formula text compared without '=', spaces, case of names, quotes around sheet names or the
    spelling of numbers (LibreOffice writes 1E-12 as 1E-012)."""
    text = text[1:] if text.startswith("=") else text
    text = _SPACE_OUTSIDE_STRINGS.sub(lambda m: m.group(1) or "", text)
    text = _NUMBER.sub(lambda m: m.group(1) or repr(float(m.group(2))), text)
    parts = _STRING.split(text)
    return "".join(p if p.startswith('"') else _unquoted_sheets(p.upper().replace("_XLFN.", "")) for p in parts)


_QUOTED_SHEET = re.compile(r"'((?:[^']|'')+)'!")


def _unquoted_sheets(text: str) -> str:
    """Sheet names without their quotes: LibreOffice leaves a name such as P2 or TS1 unquoted where
    sheetnet (and Excel) quote it because it looks like a cell reference."""
    return _QUOTED_SHEET.sub(lambda m: m.group(1).replace("''", "'") + "!", text)


def same_formula(found: str, expected: str, sheet: str) -> bool:
    """Two spellings of one formula on ``sheet``: also when one names the sheet in a reference to its
    own cells (LibreOffice keeps the sheet's name on a block pasted onto the sheet that uses it)."""
    if found == expected.removeprefix("="):
        return True
    a, b = normalize_formula(found), normalize_formula(expected)
    if a == b:
        return True
    own = normalize_formula(quote_sheet(sheet) + "!")
    return a.replace(own, "") == b.replace(own, "")


def constant_text(value: object) -> str | None:
    """A constant as one line of text, or None for an empty cell. Numbers keep 15 significant
    digits: what every application stores, and idempotent (15 digits of a 15-digit number are
    the same digits), so a round trip through any of them gives the same text."""
    if value is None or value == "":
        return None
    if isinstance(value, bool):
        return "b:" + ("TRUE" if value else "FALSE")
    if isinstance(value, int | float):
        return "n:" + format(float(value), ".15g")
    if isinstance(value, str):
        return "s:" + value
    return "e:" + str(value)  # a spreadsheet error value


#: Relative change below which a number counts as unchanged (a round trip through an application
#: that stores 15 significant digits must not read as an edit).
SAME_NUMBER = 1e-13


def same_value(a, b) -> bool:
    """Two cell values are the same: numbers within SAME_NUMBER relative, empty and "" alike."""
    numbers = (float, int)
    if type(a) in numbers and type(b) in numbers:
        return a == b or abs(a - b) <= SAME_NUMBER * max(abs(a), abs(b))
    if a in (None, "") and b in (None, ""):
        return True
    return type(a) is type(b) and a == b


def target_text(refers_to: str) -> str:
    """A defined name's target without '=', '$' or sheet quotes, upper-cased."""
    return refers_to.replace("$", "").replace("'", "").lstrip("=").upper()
