"""The reference value of every formula cell, from the numpy trainer and scorer.

A function of (:class:`BookSpec`, :class:`BookInputs`) only, so the writer (cached values) and
the verifier (expected values for a file's current inputs) use exactly the same numbers.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sheetnet.book.formula_text import WARNING_NAMES
from sheetnet.book.spec import BookInputs, BookSpec
from sheetnet.errors import WorkbookFormatError
from sheetnet.net import activations as act
from sheetnet.net.data import parse_number
from sheetnet.net.network import Pass, forward_pass
from sheetnet.net.train import TrainResult, TrainSettings, train


@dataclass(frozen=True)
class Scored:
    """Per-case values of the Scoring table (or the calculator, with one case)."""

    x: np.ndarray
    fwd: Pass
    smax: np.ndarray
    ssum: np.ndarray
    t: np.ndarray | None
    loss: np.ndarray | None
    correct: np.ndarray | None


@dataclass(frozen=True)
class Numbers:
    spec: BookSpec
    inputs: BookInputs
    scoring: Scored
    calculator: Scored
    record: TrainResult | None

    @property
    def calculator_warning(self) -> str:
        """What the calculator's warning formula says for the inputs typed there (see formula_text)."""
        ranges, x = self.spec.input_ranges, self.inputs.calculator
        outside = [(name, "below" if v < lo else "above") for name, v, (lo, hi) in
                   zip(self.spec.inputs, x, ranges, strict=True) if v < lo or v > hi]
        if len(ranges) > WARNING_NAMES:
            return f"{len(outside)} input(s) not numbers or outside the training range" if outside else ""
        return "".join(f"{name} is {side} its training range; " for name, side in outside)

    @property
    def record_gap(self) -> float:
        """The largest |parameter after the record's last step - parameter in use| (0 without a record)."""
        if self.record is None or not self.record.trace:
            return 0.0
        after = self.record.trace[-1].after
        return float(max(np.max(np.abs(np.concatenate([a.weights.ravel(), a.bias.ravel()])
                                       - np.concatenate([b.weights.ravel(), b.bias.ravel()])))
                         for a, b in zip(after, self.inputs.layers, strict=True)))


def _label_matches(cell: float | str, label: str) -> bool:
    """The spreadsheet's ``=`` on a label: numbers by value, text without regard to case."""
    a, b = parse_number(str(cell)), parse_number(label)
    if a is not None and b is not None:
        return a == b
    return str(cell).casefold() == label.casefold()


def raw_inputs(spec: BookSpec, inputs: BookInputs) -> np.ndarray:
    """The data's input cells as numbers (a text cell cannot be scored)."""
    n = len(spec.inputs)
    x = np.empty((spec.n_cases, n))
    for r, row in enumerate(inputs.data):
        for i in range(n):
            value = parse_number(str(row[i]))
            if value is None:
                raise WorkbookFormatError(f"case {r + 1}, input {spec.inputs[i]!r}: {row[i]!r} is not a number")
            x[r, i] = value
    return x


def encoded_targets(spec: BookSpec, inputs: BookInputs) -> np.ndarray | None:
    """Targets as 0/1 or numbers, one column per output, as the workbook's t cells compute them."""
    if not spec.has_targets:
        return None
    n_in = len(spec.inputs)
    cells = [row[n_in:] for row in inputs.data]
    if spec.encodes_targets:
        return np.array([[1.0 if _label_matches(row[0], c) else 0.0 for c in spec.positive_labels] for row in cells])
    values = np.empty((spec.n_cases, len(spec.target)))
    for r, row in enumerate(cells):
        for k, cell in enumerate(row):
            value = parse_number(str(cell))
            if value is None:
                raise WorkbookFormatError(f"case {r + 1}, target {spec.target[k]!r}: {cell!r} is not a number")
            values[r, k] = value
    return values


def correct_cases(task: str, y: np.ndarray, t: np.ndarray, threshold: float) -> np.ndarray:
    """1.0 where a case is classified right (same rule as the ``correct`` formula)."""
    if task == "multiclass":
        return (np.argmax(y, axis=1) == np.argmax(t, axis=1)).astype(float)
    return np.all((y >= threshold) == (t >= 0.5), axis=1).astype(float)


def scored_cases(spec: BookSpec, inputs: BookInputs, x_raw: np.ndarray, t: np.ndarray | None,
          threshold: float) -> Scored:
    """Forward pass, softmax helpers, loss and correctness for raw inputs."""
    x = (x_raw - inputs.offset) / inputs.divisor
    fwd = forward_pass(inputs.layers, x)
    z_out = fwd.z[-1]
    smax = z_out.max(axis=1)
    ssum = np.exp(z_out - smax[:, None]).sum(axis=1)
    loss = correct = None
    if t is not None:
        loss = act.sample_loss(spec.loss, spec.activations[-1], fwd.output, t)
        if spec.is_classification:
            correct = correct_cases(spec.task, fwd.output, t, threshold)
    return Scored(x=x, fwd=fwd, smax=smax, ssum=ssum, t=t, loss=loss, correct=correct)


def replay(spec: BookSpec, inputs: BookInputs, x_scaled: np.ndarray, t: np.ndarray) -> TrainResult:
    """Re-run the training record's schedule from the initial parameters with the trainer."""
    record = spec.record
    settings = TrainSettings(learning_rate=inputs.learning_rate, epochs=max(record.n_epochs, 1), batch_size=None,
                             shuffle=False, momentum=inputs.momentum, l2=inputs.l2)
    epochs: list[list[np.ndarray]] = [[] for _ in range(record.n_epochs)]
    for cases, epoch in zip(record.steps, record.epochs, strict=True):
        epochs[epoch - 1].append(np.array(cases, dtype=int))
    model = inputs.model(spec, layers=inputs.initial)
    return train(model, x_scaled, t, settings, trace_epochs=record.n_epochs, schedule=epochs)


def expected_numbers(spec: BookSpec, inputs: BookInputs) -> Numbers:
    """Every reference number the workbook's formulas should reproduce (an edited input may overflow
    them: the comparison reports the cells, numpy's warnings would only repeat it on stderr)."""
    with np.errstate(all="ignore"):
        return _expected_numbers(spec, inputs)


def _expected_numbers(spec: BookSpec, inputs: BookInputs) -> Numbers:
    t = encoded_targets(spec, inputs)
    scoring = scored_cases(spec, inputs, raw_inputs(spec, inputs), t, inputs.threshold)
    calculator = scored_cases(spec, inputs, inputs.calculator[None, :], None, inputs.threshold)
    record = None
    if spec.record is not None and t is not None:
        record = replay(spec, inputs, scoring.x, t)
    return Numbers(spec=spec, inputs=inputs, scoring=scoring, calculator=calculator, record=record)
