"""Strict reading of untrusted JSON: every value's type and range checked, each problem named by
its JSON path, none raised, so that every problem of a document can be reported at once."""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any

import numpy as np

#: Deeper nesting than this is refused before parsing (sheetnet's own documents nest 6 deep).
MAX_DEPTH = 10
_STRINGS = re.compile(r'"[^"\\]*(?:\\.[^"\\]*)*"', re.S)
_NOT_BRACKETS = re.compile(r"[^\[\]{}]+")


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a document: ``part`` is its top-level section, ``where`` the JSON path
    (or the sheet or name it disagrees with), ``what`` the disagreement in words."""

    part: str
    where: str
    what: str

    def __str__(self) -> str:
        return f"{self.where}: {self.what}" if self.where else self.what


def nesting_depth(text: str) -> int:
    """How deep arrays and objects nest (brackets inside strings do not count); linear time."""
    skeleton = np.frombuffer(_NOT_BRACKETS.sub("", _STRINGS.sub("", text)).encode("ascii"), dtype=np.uint8)
    if not skeleton.size:
        return 0
    steps = np.where((skeleton == ord("[")) | (skeleton == ord("{")), 1, -1)
    return int(np.cumsum(steps).max())


#: What a worksheet cell cannot hold (XML 1.0 forbids C0 controls but tab, newline and return; UTF-8
#: cannot encode an unpaired surrogate).
UNWRITABLE = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff]")


class Checker:
    """Collects problems of one section; each method returns the checked value or None."""

    def __init__(self, part: str) -> None:
        self.part = part
        self.problems: list[Problem] = []

    def add(self, where: str, what: str) -> None:
        self.problems.append(Problem(self.part, where, what))

    def obj(self, value: Any, where: str, required: tuple[str, ...], optional: tuple[str, ...] = ()) -> dict | None:
        if not isinstance(value, dict):
            self.add(where, f"expected an object, found {_kind(value)}")
            return None
        missing = [k for k in required if k not in value]
        unknown = sorted(k for k in value if k not in required and k not in optional)
        if missing:
            self.add(where, f"missing {', '.join(repr(k) for k in missing)}")
        if unknown:
            self.add(where, f"unknown {', '.join(repr(k) for k in unknown[:5])}")
        return None if missing else value

    def array(self, value: Any, where: str, low: int = 0, high: int | None = None, length: int | None = None
              ) -> list | None:
        if not isinstance(value, list):
            self.add(where, f"expected a list, found {_kind(value)}")
            return None
        if length is not None and len(value) != length:
            self.add(where, f"expected {length:,} items, found {len(value):,}")
            return None
        if len(value) < low or (high is not None and len(value) > high):
            self.add(where, f"{len(value):,} items; expected {_range_text(low, high)}")
            return None
        return value

    def integer(self, value: Any, where: str, low: int, high: int) -> int | None:
        if not isinstance(value, int) or isinstance(value, bool):
            self.add(where, f"expected a whole number, found {_kind(value)}")
            return None
        if not low <= value <= high:
            self.add(where, f"{value:,} is outside {low:,}..{high:,}")
            return None
        return value

    def number(self, value: Any, where: str, low: float = -math.inf, high: float = math.inf,
               low_open: bool = False, high_open: bool = False) -> float | None:
        if not isinstance(value, int | float) or isinstance(value, bool):
            self.add(where, f"expected a number, found {_kind(value)}")
            return None
        value = float(value)
        if not math.isfinite(value):
            self.add(where, f"{value} is not a finite number")
            return None
        if value < low or value > high or (low_open and value == low) or (high_open and value == high):
            bounds = f"{'(' if low_open else '['}{low:g}, {high:g}{')' if high_open else ']'}"
            self.add(where, f"{value!r} is outside {bounds}")
            return None
        return value

    def numbers(self, value: Any, where: str, length: int) -> list[float] | None:
        """A list of ``length`` finite numbers (the first bad item is named)."""
        items = self.array(value, where, length=length)
        if items is None:
            return None
        for n, item in enumerate(items):
            if not isinstance(item, int | float) or isinstance(item, bool) or not math.isfinite(item):
                self.add(f"{where}[{n}]", f"expected a finite number, found {_kind(item)}")
                return None
        return [float(v) for v in items]

    def text(self, value: Any, where: str, max_length: int = 1000, choices: tuple[str, ...] | None = None
             ) -> str | None:
        if not isinstance(value, str):
            self.add(where, f"expected text, found {_kind(value)}")
            return None
        if len(value) > max_length:
            self.add(where, f"text of {len(value):,} characters; at most {max_length:,}")
            return None
        if UNWRITABLE.search(value):
            self.add(where, "holds a control character or an unpaired surrogate, which no workbook cell can hold")
            return None
        if choices is not None and value not in choices:
            self.add(where, f"{value[:40]!r} is not one of {', '.join(choices)}")
            return None
        return value

    def texts(self, value: Any, where: str, low: int, high: int, unique: bool = False, max_length: int = 1000
              ) -> tuple[str, ...] | None:
        items = self.array(value, where, low, high)
        if items is None:
            return None
        for n, item in enumerate(items):
            if self.text(item, f"{where}[{n}]", max_length) is None:
                return None
        if unique and len(set(items)) != len(items):
            twice = next(t for t in items if items.count(t) > 1)
            self.add(where, f"{twice[:40]!r} appears twice")
            return None
        return tuple(items)

    def flag(self, value: Any, where: str) -> bool | None:
        if not isinstance(value, bool):
            self.add(where, f"expected true or false, found {_kind(value)}")
            return None
        return value

    def hexdigest(self, value: Any, where: str, length: int) -> str | None:
        text = self.text(value, where, length)
        if text is not None and not re.fullmatch(f"[0-9a-f]{{{length}}}", text):
            self.add(where, f"expected {length} hexadecimal digits")
            return None
        return text


def json_differences(expected: Any, found: Any, path: str = "", limit: int = 20) -> list[tuple[str, str]]:
    """(JSON path, what differs) where two parsed documents differ, the first ``limit`` of them."""
    out: list[tuple[str, str]] = []
    _differences(expected, found, path or "(top level)", out, limit)
    return out


def _differences(expected: Any, found: Any, path: str, out: list, limit: int) -> None:
    if len(out) >= limit or expected == found:
        return
    if isinstance(expected, dict) and isinstance(found, dict):
        for key in sorted(set(expected) | set(found), key=str):
            where = key if path == "(top level)" else f"{path}.{key}"
            _differences(expected.get(key), found.get(key), where, out, limit)
    elif isinstance(expected, list) and isinstance(found, list) and len(expected) == len(found):
        for n, (a, b) in enumerate(zip(expected, found, strict=True)):
            _differences(a, b, f"{path}[{n}]", out, limit)
    else:
        out.append((path, f"{_kind(expected)} became {_kind(found)}"))


def _kind(value: Any) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | float):
        return repr(value) if len(repr(value)) < 30 else "a long number"
    if isinstance(value, str):
        return f"text {value[:30]!r}" + ("..." if len(value) > 30 else "")
    return {list: "a list", dict: "an object"}.get(type(value), type(value).__name__)


def _range_text(low: int, high: int | None) -> str:
    return f"at least {low:,}" if high is None else f"{low:,}..{high:,}"
