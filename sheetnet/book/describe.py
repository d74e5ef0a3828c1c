"""The workbook's description of itself: its :class:`BookSpec`, sheet and name list, and
fingerprints of what the build wrote, stored as JSON on a hidden sheet.

Verification and audit rebuild the layout from this description alone, so it must carry every
structural choice (shapes, activations, loss, schedule of the training record).
"""

from __future__ import annotations

import hashlib
import json
from typing import Any

from sheetnet.book.layout import BookLayout
from sheetnet.book.spec import BookInputs, BookSpec
from sheetnet.version import __version__

FORMAT = "sheetnet-layout"
VERSION = 1
SIGNATURE_ALGORITHM = "HMAC-SHA256"
#: The first cell of the hidden layout sheet; the description follows in column A from row 2.
LAYOUT_TITLE = "sheetnet layout description (JSON, split over the cells below): do not edit"


class Fingerprints:
    """Running SHA-256 digests of every sheet's formulas and input values, in writing order."""

    def __init__(self) -> None:
        self.formulas: dict[str, Any] = {}
        self.inputs: dict[str, Any] = {}

    def add_all(self, sheet: str, entries) -> None:
        """Fold a batch of entries (in writing order) into the sheet's two digests."""
        formulas = [f"{e.row},{e.col},{e.content}" for e in entries if e.role == "formula"]
        inputs = [f"{e.row},{e.col},{e.content!r}" for e in entries if e.role == "input"]
        for target, lines in ((self.formulas, formulas), (self.inputs, inputs)):
            if lines:
                target.setdefault(sheet, hashlib.sha256()).update(("\n".join(lines) + "\n").encode())

    def to_dict(self) -> dict[str, dict[str, str]]:
        return {"formulas": {k: v.hexdigest() for k, v in sorted(self.formulas.items())},
                "inputs": {k: v.hexdigest() for k, v in sorted(self.inputs.items())}}


def spec_to_dict(spec: BookSpec) -> dict[str, Any]:
    record = None
    if spec.record is not None:
        record = {"steps": [list(s) for s in spec.record.steps], "epochs": list(spec.record.epochs),
                  "momentum": spec.record.momentum, "l2": spec.record.l2}
    sampled = {"case_rows": list(spec.case_rows)} if spec.case_rows else {}
    if spec.record_note:
        sampled["record_note"] = spec.record_note
    if spec.input_ranges:
        sampled["input_ranges"] = [list(pair) for pair in spec.input_ranges]
    return sampled | {
        "inputs": list(spec.inputs), "outputs": list(spec.outputs), "units": list(spec.units),
        "activations": [a.to_dict() for a in spec.activations], "loss": spec.loss, "task": spec.task,
        "classes": list(spec.classes), "target": list(spec.target), "target_kind": spec.target_kind,
        "n_cases": spec.n_cases, "sets": list(spec.sets), "record": record,
        "scaling_method": spec.scaling_method, "provenance": [list(p) for p in spec.provenance],
    }


def _layers_to_list(layers) -> list:
    return [{"weights": layer.weights.tolist(), "bias": layer.bias.tolist()} for layer in layers]


def inputs_to_dict(inputs: BookInputs) -> dict[str, Any]:
    """The editable values as built, so an audit can say exactly which changed and from what."""
    return {
        "layers": _layers_to_list(inputs.layers), "offset": inputs.offset.tolist(),
        "divisor": inputs.divisor.tolist(), "data": [list(row) for row in inputs.data],
        "threshold": inputs.threshold, "calculator": inputs.calculator.tolist(),
        "learning_rate": inputs.learning_rate, "momentum": inputs.momentum, "l2": inputs.l2,
        "initial": _layers_to_list(inputs.initial),
    }


def describe(layout: BookLayout, inputs: BookInputs, sheets: list[str], fingerprints: Fingerprints) -> dict:
    """The description stored on the hidden layout sheet (as JSON text: ``description_text``)."""
    return {
        "format": FORMAT, "version": VERSION, "tool": f"sheetnet {__version__}",
        "spec": spec_to_dict(layout.spec), "sheets": sheets,
        "names": {name: block.__dict__ for name, block in layout.defined_names().items()},
        "fingerprints": fingerprints.to_dict(), "inputs": inputs_to_dict(inputs),
    }


def description_text(data: dict) -> str:
    """Compact JSON with sorted keys: the form the signature is computed over."""
    return json.dumps(data, separators=(",", ":"), sort_keys=True)
