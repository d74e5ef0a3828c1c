"""One spelling for every cell: formula text and constants as two applications may write them.

Spreadsheet applications rewrite what they save without changing its meaning: LibreOffice writes
``1E-12`` as ``1E-012`` and keeps 15 significant digits of a number; case and spaces vary. Formula
comparison (verify, audit) and the signature's cell digests use these canonical forms, so an
untouched workbook saved by another application still compares equal.
"""

from __future__ import annotations

import re

_SPACE_OUTSIDE_STRINGS = re.compile(r'("(?:[^"]|"")*")|\s+')
_NUMBER = re.compile(r'("(?:[^"]|"")*")|(?<![A-Za-z_$0-9.])([0-9]+\.?[0-9]*(?:[Ee][+-]?[0-9]+)?)(?![A-Za-z_(0-9])')
_STRING = re.compile(r'("(?:[^"]|"")*")')


def normalize_formula(text: str) -> str:
    """Formula text compared without '=', spaces, case of names or the spelling of numbers
    (LibreOffice writes 1E-12 as 1E-012)."""
    text = text[1:] if text.startswith("=") else text
    text = _SPACE_OUTSIDE_STRINGS.sub(lambda m: m.group(1) or "", text)
    text = _NUMBER.sub(lambda m: m.group(1) or repr(float(m.group(2))), text)
    parts = _STRING.split(text)
    return "".join(p if p.startswith('"') else p.upper().replace("_XLFN.", "") for p in parts)


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


def target_text(refers_to: str) -> str:
    """A defined name's target without '=', '$' or sheet quotes, upper-cased."""
    return refers_to.replace("$", "").replace("'", "").lstrip("=").upper()
