"""One cell as data (Entry) and the spellings of values shared by every sheet's cells."""

from __future__ import annotations

from typing import NamedTuple

from sheetnet.net.activations import Activation


class Entry(NamedTuple):
    """One cell. ``role``: title, text, header, label, input or formula. ``content`` is the
    constant or the formula text; ``value`` the reference (cached) value of a formula.
    (A tuple: a large workbook makes millions of them.)"""

    row: int
    col: int
    role: str
    content: object
    value: object = None
    note: str | None = None
    style: str = ""  # a display hint for the writer: "count", "ratio" or "data"


def activation_text(act: Activation) -> str:
    if act.name == "sigmoid":
        return f"sigmoid, steepness {act.steepness:g}, midpoint {act.midpoint:g}"
    if act.name == "step":
        return f"step (1 if z >= {act.midpoint:g}, else 0)"
    return act.name


def label_value(label: str) -> float | str:
    """A class label as a cell value: a number when it reads as one."""
    try:
        return float(label)
    except ValueError:
        return label
