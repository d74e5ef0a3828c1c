"""The cells of the Calculator sheet: one case typed in, scaled, scored and labelled."""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from sheetnet.book import formula_text
from sheetnet.book.cells.entry import Entry, activation_text, label_value
from sheetnet.book.cells.network import RowRefs, network_entries, param_refs
from sheetnet.book.expected import Numbers
from sheetnet.book.layout import (
    CALCULATOR,
    BookLayout,
)
from sheetnet.book.spec import BookSpec
from sheetnet.xlsx.addresses import Cell, range_ref, ref


def scaled_entry(layout: BookLayout, i: int, raw: Cell, target: Cell, value: float) -> Entry:
    """scaled = (raw - offset) / divisor, with the constants of input ``i`` on the Parameters sheet."""
    here = target.sheet
    formula = formula_text.scaled_input(ref(raw, here), ref(layout.offset.cell(0, i), here, True),
                              ref(layout.divisor.cell(0, i), here, True))
    return Entry(target.row, target.col, "formula", formula, value)


def calculator_entries(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    spec, calc, inputs = layout.spec, layout.calculator, numbers.inputs
    yield Entry(0, 0, "title", "Calculator: type raw inputs in the yellow cells; everything below is formulas")
    yield Entry(2, 0, "header", "input", note="The network's input columns.")
    for i, name in enumerate(spec.inputs):
        yield Entry(2, 1 + i, "header", name)
    yield Entry(3, 0, "label", "raw input")
    yield Entry(4, 0, "label", "scaled input")
    for i in range(len(spec.inputs)):
        yield Entry(3, calc.raw.left + i, "input", float(inputs.calculator[i]))
    for i in range(len(spec.inputs)):
        yield scaled_entry(layout, i, calc.raw.cell(0, i), calc.scaled.cell(0, i), numbers.calculator.x[0, i])
    yield from _warning_entries(layout, numbers)
    yield from _calculator_network(layout, numbers)
    yield from _calculator_prediction(layout, numbers)


def _warning_entries(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    """Each input's training range, and a live sentence naming the inputs typed outside it."""
    spec, calc = layout.spec, layout.calculator
    if calc.warning is None:
        return
    for block, label, side in ((calc.training_min, "training min", 0), (calc.training_max, "training max", 1)):
        yield Entry(block.top, 0, "label", label)
        for i, pair in enumerate(spec.input_ranges):
            yield Entry(block.top, block.left + i, "label", float(pair[side]))
    items = [(name, ref(calc.raw.cell(0, i), CALCULATOR), ref(calc.training_min.cell(0, i), CALCULATOR),
              ref(calc.training_max.cell(0, i), CALCULATOR)) for i, name in enumerate(spec.inputs)]
    yield Entry(calc.warning.row, 0, "label", "warning")
    yield Entry(calc.warning.row, calc.warning.col, "formula",
                formula_text.input_warning(items, range_ref(calc.raw, CALCULATOR),
                                           range_ref(calc.training_min, CALCULATOR),
                                           range_ref(calc.training_max, CALCULATOR)),
                numbers.calculator_warning,
                note="Empty while every input is a number inside the range of the training rows; else it names "
                     "each input outside it: the model has not seen such cases, so its output there is a guess.")


def _calculator_network(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    spec, calc = layout.spec, layout.calculator
    weights, bias = param_refs(layout.parameters, CALCULATOR)
    positions = {}
    for k in range(spec.n_layers):
        title = calc.layer_titles[k]
        yield Entry(title.row, 0, "title", f"Layer {k + 1}: {activation_text(spec.activations[k])}")
        yield Entry(title.row + 1, 0, "header", "unit")
        for j, name in enumerate(spec.unit_names(k)):
            yield Entry(title.row + 1, 1 + j, "header", name)
            positions[("z", k, j)] = calc.z[k].cell(0, j)
            positions[("a", k, j)] = calc.a[k].cell(0, j)
        yield Entry(calc.z[k].top, 0, "label", "weighted sum z")
        yield Entry(calc.a[k].top, 0, "label", "activation a")
    if spec.softmax:
        positions[("smax",)], positions[("ssum",)] = calc.softmax_max, calc.softmax_sum
        yield Entry(calc.softmax_max.row, 0, "label", "softmax: max z")
        yield Entry(calc.softmax_sum.row, 0, "label", "softmax: sum exp(z - max)")
    refs = RowRefs(
        here=CALCULATOR, weights=weights, bias=bias,
        source=lambda k: range_ref(calc.scaled if k == 0 else calc.a[k - 1], CALCULATOR),
        z=lambda k, j: ref(calc.z[k].cell(0, j), CALCULATOR), a=lambda k, j: ref(calc.a[k].cell(0, j), CALCULATOR),
        a_range=lambda k: range_ref(calc.a[k], CALCULATOR), z_range=lambda k: range_ref(calc.z[k], CALCULATOR),
        smax=ref(calc.softmax_max, CALCULATOR) if spec.softmax else "",
        ssum=ref(calc.softmax_sum, CALCULATOR) if spec.softmax else "")
    cells = list(network_entries(spec, refs, positions.__getitem__, numbers.calculator, 0))
    yield from sorted(cells, key=lambda e: (e.row, e.col))


def predicted_entries(spec: BookSpec, y: np.ndarray, y_refs: list[str], y_range: str, threshold: str,
                      threshold_value: float, cells: list[Cell]) -> Iterator[Entry]:
    """Predicted label (binary, multiclass) or one 0/1 flag per output (multilabel)."""
    if spec.task == "binary":
        negative, positive = spec.classes
        label = positive if y[0] >= threshold_value else negative
        yield Entry(cells[0].row, cells[0].col, "formula",
                    formula_text.predicted_binary(y_refs[0], threshold), label_value(label))
    elif spec.task == "multiclass":
        yield Entry(cells[0].row, cells[0].col, "formula", formula_text.predicted_multiclass(y_range, "class_labels"),
                    label_value(spec.classes[int(np.argmax(y))]))
    elif spec.task == "multilabel":
        for k, cell in enumerate(cells):
            yield Entry(cell.row, cell.col, "formula", formula_text.predicted_flag(y_refs[k], threshold),
                        float(y[k] >= threshold_value))


def _calculator_prediction(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    spec, calc = layout.spec, layout.calculator
    if calc.predicted is None:
        return
    last = spec.n_layers - 1
    yield Entry(calc.predicted.top, 0, "label", "predicted" if spec.task != "multilabel" else "predicted flags")
    y_refs = [ref(calc.a[last].cell(0, k), CALCULATOR) for k in range(spec.units[last])]
    yield from predicted_entries(spec, numbers.calculator.fwd.output[0], y_refs, range_ref(calc.a[last], CALCULATOR),
                                 "threshold", numbers.inputs.threshold, calc.predicted.cells())
