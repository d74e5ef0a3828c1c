"""What a workbook holds, split in two plain records.

* :class:`BookSpec` is the structure: the network's shape and activations, the loss, the data's
  columns and number of cases, and the training record's schedule (which cases each step uses).
  It fixes every cell's position and every formula's text; it is stored inside the workbook.
* :class:`BookInputs` holds the values a user may edit: parameters, scaling constants, data,
  the decision threshold, the learning rate and the initial parameters.

The reference numbers of every formula cell are a function of both (``sheetnet.book.expected``).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from sheetnet.net.activations import Activation
from sheetnet.net.model import Layer, Model, Scaling


@dataclass(frozen=True)
class RecordSpec:
    """The training record's schedule: ``steps[s]`` lists the cases (0-based indices into the data)
    of step s, ``epochs[s]`` its 1-based epoch. Momentum and L2 columns exist only when used."""

    steps: tuple[tuple[int, ...], ...]
    epochs: tuple[int, ...]
    momentum: bool
    l2: bool

    @property
    def n_epochs(self) -> int:
        return self.epochs[-1] if self.epochs else 0

    @cached_property
    def n_rows(self) -> int:
        return sum(len(s) for s in self.steps)

    @cached_property
    def max_batch(self) -> int:
        return max((len(s) for s in self.steps), default=0)


@dataclass(frozen=True)
class BookSpec:
    """The workbook's structure.

    ``target_kind``: "labels" (class labels to encode), "probabilities" (binary targets used as
    they are), "values" (regression or multilabel columns used as they are), or "none" (no
    targets: scoring without loss). ``sets[n]`` is "training", "holdout" or "" per case.
    ``case_rows[n]`` is the data file's row (1 = its first data row) of the n-th case when the Scoring
    sheet holds a sample; empty when it holds every case in order.
    """

    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    units: tuple[int, ...]
    activations: tuple[Activation, ...]
    loss: str
    task: str
    classes: tuple[str, ...]
    target: tuple[str, ...]
    target_kind: str
    n_cases: int
    sets: tuple[str, ...]
    record: RecordSpec | None
    scaling_method: str = "none"
    provenance: tuple[tuple[str, str], ...] = ()
    case_rows: tuple[int, ...] = ()
    record_note: str = ""  # what the record replays when it is not the whole run (a banner on Training setup)
    input_ranges: tuple[tuple[float, float], ...] = ()  # each input's (min, max) over the training rows

    def case_number(self, n: int) -> int:
        """The number a reader sees for the n-th case: its row in the data file."""
        return self.case_rows[n] if self.case_rows else n + 1

    @property
    def n_layers(self) -> int:
        return len(self.units)

    def fan_in(self, k: int) -> int:
        return len(self.inputs) if k == 0 else self.units[k - 1]

    def unit_names(self, k: int) -> tuple[str, ...]:
        if k == self.n_layers - 1:
            return self.outputs
        return tuple(f"h{k + 1}_{j + 1}" for j in range(self.units[k]))

    def source_names(self, k: int) -> tuple[str, ...]:
        return self.inputs if k == 0 else self.unit_names(k - 1)

    @property
    def has_targets(self) -> bool:
        return self.target_kind != "none"

    @property
    def is_classification(self) -> bool:
        return self.task in ("binary", "multiclass", "multilabel")

    @property
    def encodes_targets(self) -> bool:
        """Class labels get one formula column per output that turns the label into 0/1."""
        return self.target_kind == "labels"

    @property
    def positive_labels(self) -> tuple[str, ...]:
        """The class label each output unit stands for (binary: the positive class only)."""
        return self.classes[1:] if self.task == "binary" else self.classes

    @property
    def softmax(self) -> bool:
        return self.activations[-1].name == "softmax"


@dataclass(frozen=True)
class BookInputs:
    """Editable values. ``data`` holds each case's cells as typed (numbers or text):
    inputs then targets. ``calculator`` is the raw input row of the one-case calculator."""

    layers: tuple[Layer, ...]
    offset: np.ndarray
    divisor: np.ndarray
    data: tuple[tuple[float | str, ...], ...]
    threshold: float
    calculator: np.ndarray
    learning_rate: float = 0.1
    momentum: float = 0.0
    l2: float = 0.0
    initial: tuple[Layer, ...] = ()

    def model(self, spec: BookSpec, layers: tuple[Layer, ...] | None = None) -> Model:
        """The network these inputs describe (``layers`` overrides the parameters)."""
        identity = not self.offset.any() and (self.divisor == 1).all()
        scaling = None if identity and spec.scaling_method == "none" else Scaling(
            spec.scaling_method if spec.scaling_method != "none" else "standard", self.offset, self.divisor)
        return Model(inputs=spec.inputs, outputs=spec.outputs, task=spec.task,
                     layers=layers if layers is not None else self.layers, loss=spec.loss,
                     scaling=scaling, target=spec.target, classes=spec.classes)
