"""The layout description's sections read strictly: :class:`BookSpec` and the stored original
:class:`BookInputs` from untrusted JSON, with every type, range, length and shape checked before
anything is allocated from it. Problems are returned, not raised (see ``jsoncheck``)."""

from __future__ import annotations

from typing import Any

import numpy as np

from sheetnet.book.jsoncheck import Checker, Problem
from sheetnet.book.spec import BookInputs, BookSpec, RecordSpec
from sheetnet.errors import ModelFileError
from sheetnet.net.activations import LOSSES, NAMES, Activation
from sheetnet.net.model import SCALING_METHODS, TASKS, Layer
from sheetnet.xlsx.addresses import MAX_COLS, MAX_ROWS

#: Networks deeper than this are not "small"; refusing them keeps every layout list short.
MAX_LAYERS = 64
TARGET_KINDS = ("labels", "probabilities", "values", "none")
SETS = ("training", "holdout", "")
MAX_NAME = 255
MAX_PROVENANCE = 1000
MAX_NOTE = 100_000

_SPEC_KEYS = ("inputs", "outputs", "units", "activations", "loss", "task", "classes", "target", "target_kind",
              "n_cases", "sets", "record", "scaling_method", "provenance")
_INPUT_KEYS = ("layers", "offset", "divisor", "data", "threshold", "calculator", "learning_rate", "momentum", "l2",
               "initial")


def read_spec(data: Any) -> tuple[BookSpec | None, list[Problem]]:
    """The spec section, or None and why not."""
    check = Checker("spec")
    raw = check.obj(data, "spec", _SPEC_KEYS, ("case_rows", "record_note", "input_ranges"))
    if raw is None:
        return None, check.problems
    inputs = check.texts(raw["inputs"], "spec.inputs", 1, MAX_COLS - 2, unique=True, max_length=MAX_NAME)
    units = _units(check, raw["units"])
    outputs = check.texts(raw["outputs"], "spec.outputs", 1, MAX_COLS - 2, unique=True, max_length=MAX_NAME)
    activations = _activations(check, raw["activations"], units)
    loss = check.text(raw["loss"], "spec.loss", choices=LOSSES)
    task = check.text(raw["task"], "spec.task", choices=TASKS)
    classes = check.texts(raw["classes"], "spec.classes", 0, MAX_COLS - 2, unique=True, max_length=MAX_NAME)
    target = check.texts(raw["target"], "spec.target", 0, MAX_COLS - 2, unique=True, max_length=MAX_NAME)
    kind = check.text(raw["target_kind"], "spec.target_kind", choices=TARGET_KINDS)
    n_cases = check.integer(raw["n_cases"], "spec.n_cases", 0, MAX_ROWS)
    sets = _sets(check, raw["sets"], n_cases)
    scaling = check.text(raw["scaling_method"], "spec.scaling_method", choices=("none", *SCALING_METHODS))
    provenance = _provenance(check, raw["provenance"])
    record = None if raw["record"] is None else _record(check, raw["record"], n_cases)
    case_rows = _case_rows(check, raw.get("case_rows", []), n_cases)
    record_note = check.text(raw.get("record_note", ""), "spec.record_note", max_length=MAX_NOTE)
    ranges = _ranges(check, raw.get("input_ranges"), None if inputs is None else len(inputs))
    parts = (inputs, units, outputs, activations, loss, task, classes, target, kind, n_cases, sets, scaling, provenance,
             case_rows, record_note, ranges)
    if check.problems or any(p is None for p in parts):
        return None, check.problems
    spec = BookSpec(inputs=inputs, outputs=outputs, units=units, activations=activations, loss=loss, task=task,
                    classes=classes, target=target, target_kind=kind, n_cases=n_cases, sets=sets, record=record,
                    scaling_method=scaling, provenance=provenance, case_rows=case_rows,
                    record_note=record_note, input_ranges=ranges)
    _consistent(check, spec)
    _fits_the_sheets(check, spec)
    return (None if check.problems else spec), check.problems


def _units(check: Checker, value: Any) -> tuple[int, ...] | None:
    items = check.array(value, "spec.units", 1, MAX_LAYERS)
    if items is None:
        return None
    units = [check.integer(u, f"spec.units[{k}]", 1, MAX_COLS - 2) for k, u in enumerate(items)]
    return None if None in units else tuple(units)


def _activations(check: Checker, value: Any, units: tuple[int, ...] | None) -> tuple[Activation, ...] | None:
    items = check.array(value, "spec.activations", 1, MAX_LAYERS, length=None if units is None else len(units))
    if items is None:
        return None
    out = []
    for k, item in enumerate(items):
        where = f"spec.activations[{k}]"
        raw = check.obj(item, where, ("name",), ("steepness", "midpoint"))
        if raw is None:
            return None
        name = check.text(raw["name"], f"{where}.name", choices=NAMES)
        steepness = check.number(raw.get("steepness", 1.0), f"{where}.steepness", 0.0, 1e6, low_open=True)
        midpoint = check.number(raw.get("midpoint", 0.0), f"{where}.midpoint", -1e6, 1e6)
        if None in (name, steepness, midpoint):
            return None
        try:
            out.append(Activation(name, steepness, midpoint))
        except ModelFileError as exc:
            check.add(where, str(exc))
            return None
    return tuple(out)


def _sets(check: Checker, value: Any, n_cases: int | None) -> tuple[str, ...] | None:
    items = check.array(value, "spec.sets", length=n_cases)
    if items is None:
        return None
    bad = next((n for n, s in enumerate(items) if not isinstance(s, str) or s not in SETS), None)
    if bad is not None:
        check.add(f"spec.sets[{bad}]", f"expected one of 'training', 'holdout' or '', found {items[bad]!r:.40}")
        return None
    return tuple(items)


def _case_rows(check: Checker, value: Any, n_cases: int | None) -> tuple[int, ...] | None:
    """The data rows of a sampled Scoring sheet: absent, or one whole number per case, increasing."""
    items = check.array(value, "spec.case_rows")
    if items is None or n_cases is None:
        return None
    if items and len(items) != n_cases:
        check.add("spec.case_rows", f"expected {n_cases:,} rows (one per case) or none, found {len(items):,}")
        return None
    bad = next((n for n, r in enumerate(items) if not isinstance(r, int) or isinstance(r, bool)
                or not 1 <= r <= MAX_ROWS or (n and r <= items[n - 1])), None)
    if bad is not None:
        check.add(f"spec.case_rows[{bad}]", f"expected a whole number in 1..{MAX_ROWS:,} above the one before, "
                                            f"found {items[bad]!r:.40}")
        return None
    return tuple(items)


def _ranges(check: Checker, value: Any, n_inputs: int | None) -> tuple[tuple[float, float], ...] | None:
    """Each input's (min, max) over the training rows: absent, or one ordered pair of numbers per input."""
    if value is None:
        return ()
    items = check.array(value, "spec.input_ranges", length=n_inputs)
    if items is None:
        return None
    pairs = [check.numbers(item, f"spec.input_ranges[{i}]", 2) for i, item in enumerate(items)]
    if None in pairs:
        return None
    bad = next((i for i, (low, high) in enumerate(pairs) if low > high), None)
    if bad is not None:
        check.add(f"spec.input_ranges[{bad}]", "the minimum is above the maximum")
        return None
    return tuple((low, high) for low, high in pairs)


def _provenance(check: Checker, value: Any) -> tuple[tuple[str, str], ...] | None:
    items = check.array(value, "spec.provenance", 0, MAX_PROVENANCE)
    if items is None:
        return None
    out = []
    for n, item in enumerate(items):
        pair = check.texts(item, f"spec.provenance[{n}]", 2, 2, max_length=MAX_NOTE)
        if pair is None:
            return None
        out.append(pair)
    return tuple(out)


def _record(check: Checker, value: Any, n_cases: int | None) -> RecordSpec | None:
    raw = check.obj(value, "spec.record", ("steps", "epochs", "momentum", "l2"))
    if raw is None or n_cases is None:
        return None
    steps = check.array(raw["steps"], "spec.record.steps", 1, MAX_ROWS)
    epochs = check.array(raw["epochs"], "spec.record.epochs", length=None if steps is None else len(steps))
    momentum = check.flag(raw["momentum"], "spec.record.momentum")
    l2 = check.flag(raw["l2"], "spec.record.l2")
    if steps is None or epochs is None or momentum is None or l2 is None:
        return None
    rows = 0
    for s, step in enumerate(steps):
        cases = check.array(step, f"spec.record.steps[{s}]", 1, n_cases)
        if cases is None:
            return None
        if any(not isinstance(c, int) or isinstance(c, bool) or not 0 <= c < n_cases for c in cases):
            check.add(f"spec.record.steps[{s}]", f"every case must be a whole number in 0..{n_cases - 1:,}")
            return None
        rows += len(cases)
        if rows > MAX_ROWS:
            check.add("spec.record.steps", f"more than {MAX_ROWS:,} record rows in all")
            return None
    if not _epochs_in_order(epochs):
        check.add("spec.record.epochs", "epochs must be whole numbers that start at 1 and rise by at most 1 a step")
        return None
    return RecordSpec(steps=tuple(tuple(s) for s in steps), epochs=tuple(epochs), momentum=momentum, l2=l2)


def _epochs_in_order(epochs: list) -> bool:
    previous = 0
    for e in epochs:
        if not isinstance(e, int) or isinstance(e, bool) or not previous <= e <= previous + 1 or e < 1:
            return False
        previous = e
    return epochs[0] == 1


def _consistent(check: Checker, spec: BookSpec) -> None:
    """The parts of the spec agree with each other, as ``build`` makes them."""
    if spec.units[-1] != len(spec.outputs):
        check.add("spec.outputs", f"{len(spec.outputs)} outputs, but the last layer has {spec.units[-1]} units")
    if any(a.name == "softmax" for a in spec.activations[:-1]):
        check.add("spec.activations", "softmax is allowed on the output layer only")
    if spec.record is not None and any(a.name == "step" for a in spec.activations):
        check.add("spec.record", "a training record cannot train step units")
    want_classes = {"binary": (2,), "multiclass": (0, spec.units[-1])}.get(spec.task, (0,))
    if len(spec.classes) not in want_classes:
        check.add("spec.classes", f"a {spec.task} workbook has {want_classes[-1]} class labels, "
                                  f"found {len(spec.classes)}")
    if spec.task == "binary" and spec.units[-1] != 1:
        check.add("spec.units", "a binary workbook has one output unit")
    want_target = {"none": 0, "labels": 1, "probabilities": 1, "values": len(spec.outputs)}[spec.target_kind]
    if len(spec.target) != want_target:
        check.add("spec.target", f"target kind {spec.target_kind!r} needs {want_target} target column(s), "
                                 f"found {len(spec.target)}")
    allowed = {"labels": ("binary", "multiclass"), "probabilities": ("binary",),
               "values": ("regression", "multilabel")}.get(spec.target_kind, TASKS)
    if spec.task not in allowed:
        check.add("spec.target_kind", f"target kind {spec.target_kind!r} does not go with task {spec.task!r}")
    if spec.record is not None and not spec.has_targets:
        check.add("spec.record", "a training record needs targets (target kind is 'none')")


def _fits_the_sheets(check: Checker, spec: BookSpec) -> None:
    """Necessary conditions for every block to fit a sheet, checked arithmetically (before any
    layout list is made): the record has a column per parameter, the Scoring table one per input
    and two per unit, the Parameters sheet a title, a header and a row per unit of every layer."""
    rows = 9 + sum(3 + u for u in spec.units)
    if rows > MAX_ROWS:
        check.add("spec.units", f"the Parameters sheet would need {rows:,} rows; a sheet has {MAX_ROWS:,}")
    if spec.n_cases and 2 + 2 * len(spec.inputs) + 2 * sum(spec.units) > MAX_COLS:
        check.add("spec.units", f"the Scoring table would need more than {MAX_COLS:,} columns")
    parameters = sum(u * (spec.fan_in(k) + 1) for k, u in enumerate(spec.units))
    if spec.record is not None and parameters > MAX_COLS:
        check.add("spec.units", f"the training record would need a column for each of {parameters:,} parameters; "
                                f"a sheet has {MAX_COLS:,} columns")


def read_original_inputs(data: Any, spec: BookSpec) -> tuple[BookInputs | None, list[Problem]]:
    """The original inputs ``build`` stored, with every shape checked against the spec."""
    check = Checker("inputs")
    raw = check.obj(data, "inputs", _INPUT_KEYS)
    if raw is None:
        return None, check.problems
    n = len(spec.inputs)
    layers = _layers(check, raw["layers"], "inputs.layers", spec)
    initial = _layers(check, raw["initial"], "inputs.initial", spec) if spec.record is not None else \
        (() if check.array(raw["initial"], "inputs.initial", length=0) is not None else None)
    offset = check.numbers(raw["offset"], "inputs.offset", n)
    divisor = check.numbers(raw["divisor"], "inputs.divisor", n)
    if divisor is not None and 0.0 in divisor:
        check.add(f"inputs.divisor[{divisor.index(0.0)}]", "a scaling divisor of 0")
    calculator = check.numbers(raw["calculator"], "inputs.calculator", n)
    rows = _data(check, raw["data"], spec)
    threshold = check.number(raw["threshold"], "inputs.threshold", 0.0, 1.0)
    rate = check.number(raw["learning_rate"], "inputs.learning_rate", 0.0, low_open=True)
    momentum = check.number(raw["momentum"], "inputs.momentum", 0.0, 1.0, high_open=True)
    l2 = check.number(raw["l2"], "inputs.l2", 0.0)
    if check.problems:
        return None, check.problems
    _inputs_follow_the_spec(check, spec, rows, calculator, threshold, momentum, l2)
    if check.problems:
        return None, check.problems
    return BookInputs(layers=layers, offset=np.array(offset), divisor=np.array(divisor), data=rows,
                      threshold=threshold, calculator=np.array(calculator), learning_rate=rate, momentum=momentum,
                      l2=l2, initial=initial), []


def _inputs_follow_the_spec(check: Checker, spec: BookSpec, rows, calculator: list[float], threshold: float,
                            momentum: float, l2: float) -> None:
    """Values ``build`` derives from the spec: settings that are off are 0, a task without classes
    keeps the default threshold, and the calculator starts from the first case."""
    record = spec.record
    if (record is None or not record.momentum) and momentum != 0.0:
        check.add("inputs.momentum", f"{momentum!r}, but the training record uses no momentum")
    if (record is None or not record.l2) and l2 != 0.0:
        check.add("inputs.l2", f"{l2!r}, but the training record uses no L2 penalty")
    if not spec.is_classification and threshold != 0.5:
        check.add("inputs.threshold", f"{threshold!r}, but a {spec.task} workbook has no decision threshold")
    first = list(rows[0][: len(spec.inputs)]) if rows else [0.0] * len(spec.inputs)
    if calculator != first:
        check.add("inputs.calculator", "differs from the first case, which the calculator starts from")


def _layers(check: Checker, value: Any, where: str, spec: BookSpec) -> tuple[Layer, ...] | None:
    items = check.array(value, where, length=spec.n_layers)
    if items is None:
        return None
    layers = []
    for k, (item, act) in enumerate(zip(items, spec.activations, strict=True)):
        raw = check.obj(item, f"{where}[{k}]", ("weights", "bias"))
        if raw is None:
            return None
        rows = check.array(raw["weights"], f"{where}[{k}].weights", length=spec.units[k])
        weights = None if rows is None else [check.numbers(r, f"{where}[{k}].weights[{i}]", spec.fan_in(k))
                                             for i, r in enumerate(rows)]
        bias = check.numbers(raw["bias"], f"{where}[{k}].bias", spec.units[k])
        if weights is None or None in weights or bias is None:
            return None
        layers.append(Layer(np.array(weights, dtype=float), np.array(bias, dtype=float), act))
    return tuple(layers)


def _data(check: Checker, value: Any, spec: BookSpec) -> tuple[tuple[float | str, ...], ...] | None:
    items = check.array(value, "inputs.data", length=spec.n_cases)
    if items is None:
        return None
    n, width = len(spec.inputs), len(spec.inputs) + len(spec.target)
    rows = []
    for c, item in enumerate(items):
        row = check.array(item, f"inputs.data[{c}]", length=width)
        if row is None or check.numbers(row[:n], f"inputs.data[{c}]", n) is None:
            return None
        for t, target in enumerate(row[n:], start=n):
            if isinstance(target, str):
                if check.text(target, f"inputs.data[{c}][{t}]", MAX_NAME) is None:
                    return None
            elif check.number(target, f"inputs.data[{c}][{t}]") is None:
                return None
        rows.append(tuple(float(v) for v in row[:n]) + tuple(row[n:]))
    return tuple(rows)
