"""Every cell of the workbook as data: position, role, content (constant or formula text) and
reference value, generated sheet by sheet and row by row from the layout.

The writer writes these entries; the verifier compares engine results with their values; the
auditor compares the file's formulas with their formula text. Nothing here knows a file format.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from sheetnet.book import xlformulas as fx
from sheetnet.book.addresses import Cell, range_ref, ref
from sheetnet.book.layout import (
    CALCULATOR,
    EPOCHS,
    PARAMETERS,
    RECORD,
    SCORING,
    SETUP,
    BookLayout,
    ParamBlocks,
    Table,
    target_key,
)
from sheetnet.book.numbers import Numbers, Scored, correct_cases
from sheetnet.book.spec import BookSpec
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


# ---------------------------------------------------------------- Parameters and Training setup


def _matrix_entries(spec: BookSpec, blocks: ParamBlocks, layers, title: str, role: str,
                    formulas: ParamBlocks | None = None) -> Iterator[Entry]:
    """Title, header (sources and "bias"), then one row per unit: weights and bias."""
    for k, (wb, bb, head) in enumerate(zip(blocks.weights, blocks.bias, blocks.titles, strict=True)):
        layer = layers[k]
        yield Entry(head.row, 0, "title", f"{title} {k + 1}: {activation_text(spec.activations[k])}")
        yield Entry(head.row + 1, 0, "header", "unit \\ from", note="Rows: units of this layer. "
                    "Columns: what feeds them (inputs or the previous layer's units), then the bias.")
        for i, source in enumerate(spec.source_names(k)):
            yield Entry(head.row + 1, wb.left + i, "header", source)
        yield Entry(head.row + 1, bb.left, "header", "bias")
        for j, unit in enumerate(spec.unit_names(k)):
            yield Entry(wb.top + j, 0, "label", unit)
            for i in range(wb.ncols):
                yield _param_cell(wb.cell(j, i), layer.weights[j, i], role, formulas, ("w", k, j, i))
            yield _param_cell(bb.cell(j, 0), layer.bias[j], role, formulas, ("wb", k, j))


def _param_cell(cell: Cell, value: float, role: str, formulas, key) -> Entry:
    if formulas is None:
        return Entry(cell.row, cell.col, role, float(value))
    return Entry(cell.row, cell.col, "formula", fx.reference(formulas(key)), float(value))


def parameter_entries(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    spec, inputs = layout.spec, numbers.inputs
    yield Entry(0, 0, "title", "Model parameters (editable inputs: the calculator and the scoring use them)")
    yield Entry(2, 0, "text", "Input scaling: scaled = (raw - offset) / divisor")
    yield Entry(3, 0, "header", "input", note="Input columns of the data, in the order the network reads them.")
    for i, name in enumerate(spec.inputs):
        yield Entry(3, 1 + i, "header", name)
    for row, label, values in ((4, "offset", inputs.offset), (5, "divisor", inputs.divisor)):
        yield Entry(row, 0, "label", label)
        for i, value in enumerate(values):
            yield Entry(row, 1 + i, "input", float(value))
    if layout.class_labels is not None:
        yield Entry(7, 0, "label", "class labels")
        for k, label in enumerate(spec.classes):
            yield Entry(7, 1 + k, "label", label_value(label))
    yield from _matrix_entries(spec, layout.parameters, inputs.layers, "Layer", "input")


def setup_entries(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    inputs, spec = numbers.inputs, layout.spec
    yield Entry(0, 0, "title", "Training record inputs: learning rate, initial parameters; "
                "and the parameters after the record's last step")
    for cell, label, value in ((layout.learning_rate, "learning rate", inputs.learning_rate),
                               (layout.momentum, "momentum", inputs.momentum),
                               (layout.l2, "L2 penalty (weights only)", inputs.l2)):
        if cell is not None:
            yield Entry(cell.row, 0, "label", label)
            yield Entry(cell.row, cell.col, "input", float(value))
    yield Entry(layout.initial.titles[0].row - 1, 0, "text", "Initial parameters (where the training record starts)")
    yield from _matrix_entries(spec, layout.initial, inputs.initial, "Initial layer", "input")
    final_layers = numbers.record.trace[-1].after if numbers.record.trace else inputs.initial
    last = layout.record.nrows - 1
    yield Entry(layout.final.titles[0].row - 1, 0, "text", "Parameters after the last step of the training record")
    yield from _matrix_entries(spec, layout.final, final_layers, "Final layer", "formula",
                               formulas=lambda key: ref(layout.record.cell(last, key), SETUP, absolute=True))


# ---------------------------------------------------------------- the network, shared by three sheets


@dataclass(frozen=True)
class RowRefs:
    """How one row of a sheet reaches its parameters and its own cells (as reference text)."""

    here: str
    weights: callable  # (k, j) -> reference text of W_k row j
    bias: callable     # (k, j) -> reference text of b_k[j]
    source: callable   # k -> reference text of the row's inputs to layer k
    z: callable        # (k, j) -> text
    a: callable        # (k, j) -> text
    a_range: callable  # k -> text
    z_range: callable  # k -> text
    smax: str
    ssum: str


def network_entries(spec: BookSpec, refs: RowRefs, cell_of, scored: Scored, n: int) -> Iterator[Entry]:
    """z and activation cells of every layer for case ``n`` of ``scored``."""
    last = spec.n_layers - 1
    for k in range(spec.n_layers):
        act = spec.activations[k]
        for j in range(spec.units[k]):
            cell = cell_of(("z", k, j))
            yield Entry(cell.row, cell.col, "formula",
                        fx.weighted_sum(refs.weights(k, j), refs.source(k), refs.bias(k, j)), scored.fwd.z[k][n, j])
        if k == last and spec.softmax:
            cell = cell_of(("smax",))
            yield Entry(cell.row, cell.col, "formula", fx.softmax_max(refs.z_range(k)), scored.smax[n])
            cell = cell_of(("ssum",))
            yield Entry(cell.row, cell.col, "formula", fx.softmax_sum(refs.z_range(k), refs.smax), scored.ssum[n])
        for j in range(spec.units[k]):
            cell = cell_of(("a", k, j))
            yield Entry(cell.row, cell.col, "formula", fx.activation(act, refs.z(k, j), refs.smax, refs.ssum),
                        scored.fwd.a[k][n, j])


def _param_refs(blocks: ParamBlocks, here: str):
    weights = lambda k, j: range_ref(blocks.weights[k].row(j), here, absolute=True)  # noqa: E731
    bias = lambda k, j: ref(blocks.bias[k].cell(j, 0), here, absolute=True)  # noqa: E731
    return weights, bias


def table_refs(table: Table, i: int, spec: BookSpec, weights, bias, x_key: tuple = ("x", 0)) -> RowRefs:
    """References within row ``i`` of a table whose network columns follow ``network_columns``."""
    here = table.sheet
    units = spec.units

    def source(k: int) -> str:
        block = table.span(i, x_key, len(spec.inputs)) if k == 0 else table.span(i, ("a", k - 1, 0), units[k - 1])
        return range_ref(block, here)

    return RowRefs(
        here=here, weights=weights, bias=bias, source=source,
        z=lambda k, j: ref(table.cell(i, ("z", k, j)), here),
        a=lambda k, j: ref(table.cell(i, ("a", k, j)), here),
        a_range=lambda k: range_ref(table.span(i, ("a", k, 0), units[k]), here),
        z_range=lambda k: range_ref(table.span(i, ("z", k, 0), units[k]), here),
        smax=ref(table.cell(i, ("smax",)), here) if spec.softmax else "",
        ssum=ref(table.cell(i, ("ssum",)), here) if spec.softmax else "",
    )


# ---------------------------------------------------------------- Calculator


def scaled_entry(layout: BookLayout, i: int, raw: Cell, target: Cell, value: float) -> Entry:
    """scaled = (raw - offset) / divisor, with the constants of input ``i`` on the Parameters sheet."""
    here = target.sheet
    formula = fx.scaled_input(ref(raw, here), ref(layout.offset.cell(0, i), here, True),
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
    if layout.threshold is not None:
        yield Entry(layout.threshold.row, 0, "label", "decision threshold")
        yield Entry(layout.threshold.row, layout.threshold.col, "input", float(inputs.threshold))
    yield from _calculator_network(layout, numbers)
    yield from _calculator_prediction(layout, numbers)


def _calculator_network(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    spec, calc = layout.spec, layout.calculator
    weights, bias = _param_refs(layout.parameters, CALCULATOR)
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
                    fx.predicted_binary(y_refs[0], threshold, negative, positive), label_value(label))
    elif spec.task == "multiclass":
        yield Entry(cells[0].row, cells[0].col, "formula", fx.predicted_multiclass(y_range, "class_labels"),
                    label_value(spec.classes[int(np.argmax(y))]))
    elif spec.task == "multilabel":
        for k, cell in enumerate(cells):
            yield Entry(cell.row, cell.col, "formula", fx.predicted_flag(y_refs[k], threshold),
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


# ---------------------------------------------------------------- Scoring


def _criterion(label: str) -> str:
    """A COUNTIFS criterion matching exactly this label (wildcards escaped)."""
    literal = fx.label_literal(label)
    if not literal.startswith('"'):
        return literal
    escaped = label.replace("~", "~~").replace("*", "~*").replace("?", "~?")
    return fx.text_literal("=" + escaped)


def scoring_entries(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    spec, table = layout.spec, layout.scoring
    yield Entry(0, 0, "title", "Batch scoring: one formula row per case; summary above")
    yield from summary_entries(layout, numbers)
    for column in table.columns:
        yield Entry(table.header_row, table.col(column.key), "header", column.header,
                    note=column_note(spec, column.key, "scoring"))
    weights, bias = _param_refs(layout.parameters, SCORING)
    for n in range(spec.n_cases):
        yield from _scoring_row(layout, numbers, n, table_refs(table, n, spec, weights, bias))


def _scoring_row(layout: BookLayout, numbers: Numbers, n: int, refs: RowRefs) -> Iterator[Entry]:
    spec, table, scored = layout.spec, layout.scoring, numbers.scoring
    here = SCORING
    cell = lambda key: table.cell(n, key)  # noqa: E731
    row = table.first_row + n
    data = numbers.inputs.data[n]
    yield Entry(row, table.col(("case",)), "label", n + 1)
    yield Entry(row, table.col(("set",)), "label", spec.sets[n])
    for i in range(len(spec.inputs)):
        yield Entry(row, table.col(("raw", i)), "input", data[i], style="data")
    for c in range(len(spec.target)):
        yield Entry(row, table.col(("target", c)), "input", data[len(spec.inputs) + c], style="data")
    if spec.encodes_targets:
        for k, label in enumerate(spec.positive_labels):
            yield Entry(row, table.col(("t", k)), "formula", fx.encode_label(ref(cell(("target", 0)), here), label),
                        scored.t[n, k])
    for i in range(len(spec.inputs)):
        yield scaled_entry(layout, i, cell(("raw", i)), cell(("x", i)), scored.x[n, i])
    yield from network_entries(spec, refs, cell, scored, n)
    yield from _outcome_entries(spec, table, n, scored, refs, "threshold", numbers.inputs.threshold)


def _outcome_entries(spec: BookSpec, table: Table, n: int, scored: Scored, refs: RowRefs, threshold: str,
                     threshold_value: float) -> Iterator[Entry]:
    """Loss, prediction and correctness cells of one Scoring row."""
    here, last = table.sheet, spec.n_layers - 1
    y_refs = [refs.a(last, k) for k in range(spec.units[last])]
    y_range = refs.a_range(last)
    if spec.has_targets:
        t_refs = [ref(table.cell(n, target_key(spec, k)), here) for k in range(spec.units[last])]
        t_range = range_ref(table.span(n, target_key(spec, 0), spec.units[last]), here)
        cell = table.cell(n, ("loss",))
        yield Entry(cell.row, cell.col, "formula",
                    fx.loss(spec.loss, spec.activations[-1], y_refs, t_refs, y_range, t_range), scored.loss[n])
    if spec.task == "multilabel":
        pred_cells = [table.cell(n, ("pred", k)) for k in range(len(spec.outputs))]
    else:
        pred_cells = [table.cell(n, ("pred",))] if table.has(("pred",)) else []
    yield from predicted_entries(spec, scored.fwd.output[n], y_refs, y_range, threshold, threshold_value, pred_cells)
    if spec.has_targets and spec.is_classification:
        cell = table.cell(n, ("correct",))
        yield Entry(cell.row, cell.col, "formula", fx.correct(spec.task, y_refs, t_refs, y_range, t_range, threshold),
                    scored.correct[n])


def summary_entries(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    spec, table, summary, scored = layout.spec, layout.scoring, layout.summary, numbers.scoring
    col = lambda key: range_ref(table.column_block(key), SCORING, absolute=True)  # noqa: E731
    yield Entry(summary.count.row, 0, "label", "cases")
    yield Entry(summary.count.row, 1, "formula", fx.count(col(("case",))), float(spec.n_cases), style="count")
    if summary.mean_loss is not None:
        yield Entry(summary.mean_loss.row, 0, "label", "mean loss")
        yield Entry(summary.mean_loss.row, 1, "formula", fx.average(col(("loss",))), float(np.mean(scored.loss)))
    sets = np.array(spec.sets)
    for name, cell in summary.accuracy.items():
        yield Entry(cell.row, 0, "label", f"accuracy ({name} cases)")
        if name == "all":
            yield Entry(cell.row, 1, "formula", fx.average(col(("correct",))), float(np.mean(scored.correct)),
                        style="ratio")
        else:
            yield Entry(cell.row, 1, "formula", fx.average_if(col(("correct",)), col(("set",)), name),
                        float(np.mean(scored.correct[sets == name])), style="ratio")
    last = spec.n_layers - 1
    for k, (rmse_cell, mae_cell) in enumerate(zip(summary.rmse, summary.mae, strict=True)):
        pred, target = col(("a", last, k)), col(("target", k))
        err = scored.fwd.output[:, k] - scored.t[:, k]
        yield Entry(rmse_cell.row, 0, "label", f"RMSE {spec.outputs[k]}")
        yield Entry(rmse_cell.row, 1, "formula", fx.rmse(pred, target), float(np.sqrt(np.mean(err**2))))
        yield Entry(mae_cell.row, 0, "label", f"MAE {spec.outputs[k]}")
        yield Entry(mae_cell.row, 1, "formula", fx.mae(pred, target), float(np.mean(np.abs(err))))
    if summary.confusion is not None:
        yield from _confusion_entries(layout, numbers, col)


def _confusion_entries(layout: BookLayout, numbers: Numbers, col) -> Iterator[Entry]:
    spec, block, scored = layout.spec, layout.summary.confusion, numbers.scoring
    title = layout.summary.confusion_title
    yield Entry(title.row, 0, "title", "Confusion matrix (rows: true class, columns: predicted class)")
    truth = np.argmax(scored.t, axis=1) if spec.task == "multiclass" else (scored.t[:, 0] >= 0.5).astype(int)
    if spec.task == "multiclass":
        pred = np.argmax(scored.fwd.output, axis=1)
    else:
        pred = (scored.fwd.output[:, 0] >= numbers.inputs.threshold).astype(int)
    yield Entry(block.top - 1, 0, "header", "true \\ predicted")
    for j, label in enumerate(spec.classes):
        yield Entry(block.top - 1, block.left + j, "header", label_value(label))
    for i, label in enumerate(spec.classes):
        yield Entry(block.top + i, 0, "label", label_value(label))
        true_crit = _criterion(label) if spec.encodes_targets else (fx.text_literal(">=0.5") if i else
                                                                     fx.text_literal("<0.5"))
        for j, predicted in enumerate(spec.classes):
            formula = fx.count_pairs(col(("target", 0)), true_crit, col(("pred",)), _criterion(predicted))
            yield Entry(block.top + i, block.left + j, "formula", formula, float(np.sum((truth == i) & (pred == j))),
                        style="count")


# ---------------------------------------------------------------- Training record


#: Reuse the formula text of a record row for every later row of the same shape (see ``_RowShapes``).
SHAPED_RECORD_ROWS = True


def record_entries(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    """Header rows, then one row per case of every step, in row order."""
    spec, table = layout.spec, layout.record
    yield Entry(0, 0, "title", "Training record: every step replayed as formulas from the initial parameters "
                "(Training setup) with the learning rate there; one row per case of a step, the step's gradients "
                "and updated parameters on its last row")
    for column in table.columns:
        yield Entry(table.header_row, table.col(column.key), "header", column.header,
                    note=column_note(spec, column.key, "record"))
    shapes = _RowShapes(layout)
    for s, (first, count) in enumerate(layout.step_rows):
        for p in range(count):
            yield from _record_links(layout, numbers, s, first, p)
            yield from shapes.row(numbers, s, first, count, p)


class _RowShapes:
    """Record rows of the same shape (position in the batch, batch size, first step or not) differ only
    in their own row numbers: the formula text of the first such row becomes a template with the row
    numbers as fields, and later rows fill it in (values always come from the trace)."""

    _REF = re.compile(r"(?<![A-Za-z_!$'0-9])([A-Z]{1,3})([0-9]+)(?![0-9(!])")

    def __init__(self, layout: BookLayout) -> None:
        self.layout = layout
        self.templates: dict[tuple, list[tuple[int, str, tuple]]] = {}

    def row(self, numbers: Numbers, s: int, first: int, count: int, p: int) -> Iterator[Entry]:
        table = self.layout.record
        row = table.first_row + first + p
        key = (p, count, s == 0)
        template = self.templates.get(key) if SHAPED_RECORD_ROWS else None
        if template is None:
            entries = list(_record_row(self.layout, numbers, s, first, count, p))
            if SHAPED_RECORD_ROWS:
                self.templates[key] = self._template(entries, row, row - p, row - p - 1)
            yield from entries
            return
        step = numbers.record.trace[s]
        fields = {"r": row + 1, "f": row - p + 1, "p": row - p}
        for col, text, column_key in template:
            yield Entry(row, col, "formula", text.format_map(fields), _record_value(self.layout.spec, column_key,
                                                                                    step, p))

    def _template(self, entries: list[Entry], row: int, first: int, previous: int) -> list[tuple[int, str, tuple]]:
        names = {str(row + 1): "{r}", str(first + 1): "{f}", str(previous + 1): "{p}"}
        table = self.layout.record

        def field(match: re.Match) -> str:
            return match.group(1) + names.get(match.group(2), match.group(2))

        return [(e.col, self._REF.sub(field, e.content.replace("{", "{{").replace("}", "}}")),
                 table.columns[e.col - table.left].key) for e in entries]


def _record_value(spec: BookSpec, key: tuple, step, p: int):
    """The trainer's value behind a record cell, by its column key."""
    kind = key[0]
    if kind in ("z", "a", "d"):
        source = {"z": step.z, "a": step.a, "d": step.delta}[kind]
        return source[key[1]][p, key[2]]
    if kind == "c":
        _, k, j, n = key
        return step.delta[k][p, j] * _source_values(step, k)[p, n]
    if kind in ("g", "v", "w"):
        _, k, j, n = key
        return {"g": lambda: step.grad_w[k], "v": lambda: step.velocity[k][0],
                "w": lambda: step.after[k].weights}[kind]()[j, n]
    if kind in ("gb", "vb", "wb"):
        _, k, j = key
        return {"gb": lambda: step.grad_b[k], "vb": lambda: step.velocity[k][1],
                "wb": lambda: step.after[k].bias}[kind]()[j]
    if kind == "loss":
        return step.loss[p]
    if kind == "correct":
        return correct_cases(spec.task, step.a[-1][p:p + 1], step.targets[p:p + 1], 0.5)[0]
    z = step.z[-1][p]
    return z.max() if kind == "smax" else np.exp(z - z.max()).sum()


def _record_links(layout: BookLayout, numbers: Numbers, s: int, first: int, p: int) -> Iterator[Entry]:
    """Step, epoch and case labels, and the links to the case's scaled inputs and targets."""
    spec, table, scoring = layout.spec, layout.record, layout.scoring
    step = numbers.record.trace[s]
    row = table.first_row + first + p
    case = spec.record.steps[s][p]
    yield Entry(row, table.col(("step",)), "label", s + 1)
    yield Entry(row, table.col(("epoch",)), "label", spec.record.epochs[s])
    yield Entry(row, table.col(("case",)), "label", case + 1)
    for n in range(len(spec.inputs)):
        yield Entry(row, table.col(("x", n)), "formula", fx.reference(ref(scoring.cell(case, ("x", n)), RECORD)),
                    step.inputs[p, n])
    for k in range(len(spec.outputs)):
        yield Entry(row, table.col(("t", k)), "formula",
                    fx.reference(ref(scoring.cell(case, target_key(spec, k)), RECORD)), step.targets[p, k])


def _in_force(layout: BookLayout, s: int):
    """Reference makers for the parameters in force at step ``s`` (previous step's last row)."""
    table, spec = layout.record, layout.spec
    if s == 0:
        blocks = layout.initial
        return (lambda k, j: range_ref(blocks.weights[k].row(j), RECORD, True),
                lambda k, j: ref(blocks.bias[k].cell(j, 0), RECORD, True),
                lambda k, j, i: ref(blocks.weights[k].cell(j, i), RECORD, True))
    prev_first, prev_count = layout.step_rows[s - 1]
    last = prev_first + prev_count - 1
    return (lambda k, j: range_ref(table.span(last, ("w", k, j, 0), spec.fan_in(k)), RECORD),
            lambda k, j: ref(table.cell(last, ("wb", k, j)), RECORD),
            lambda k, j, i: ref(table.cell(last, ("w", k, j, i)), RECORD))


def _record_row(layout: BookLayout, numbers: Numbers, s: int, first: int, count: int, p: int) -> Iterator[Entry]:
    """The network, loss, delta, gradient and update cells of one record row (labels and links aside)."""
    spec, table = layout.spec, layout.record
    step = numbers.record.trace[s]
    i = first + p
    weights, bias, weight = _in_force(layout, s)
    refs = table_refs(table, i, spec, weights, bias)
    as_scored = Scored(x=step.inputs, fwd=_pass(step), smax=step.z[-1].max(axis=1),
                       ssum=np.exp(step.z[-1] - step.z[-1].max(axis=1, keepdims=True)).sum(axis=1),
                       t=step.targets, loss=step.loss,
                       correct=correct_cases(spec.task, step.a[-1], step.targets, 0.5))
    entries = list(network_entries(spec, refs, lambda key: table.cell(i, key), as_scored, p))
    entries += _record_outcome(spec, table, i, p, as_scored, refs)
    entries += _delta_entries(spec, table, i, p, step, refs, weight)
    if spec.record.max_batch > 1:
        entries += _contribution_entries(spec, table, i, p, step, refs)
    if p == count - 1:
        entries += _step_entries(layout, s, first, count, step, weight)
    entries.sort(key=lambda e: e.col)  # column order: the fingerprints hash cells in (row, column) order
    yield from entries


def _pass(step):
    from sheetnet.net.network import Pass

    return Pass(z=step.z, a=step.a)


def _record_outcome(spec: BookSpec, table: Table, i: int, p: int, scored: Scored, refs: RowRefs) -> list[Entry]:
    last = spec.n_layers - 1
    y_refs = [refs.a(last, k) for k in range(spec.units[last])]
    t_refs = [ref(table.cell(i, ("t", k)), RECORD) for k in range(spec.units[last])]
    y_range = refs.a_range(last)
    t_range = range_ref(table.span(i, ("t", 0), spec.units[last]), RECORD)
    cell = table.cell(i, ("loss",))
    out = [Entry(cell.row, cell.col, "formula", fx.loss(spec.loss, spec.activations[-1], y_refs, t_refs, y_range,
                                                         t_range), scored.loss[p])]
    if spec.is_classification:
        cell = table.cell(i, ("correct",))
        out.append(Entry(cell.row, cell.col, "formula", fx.correct(spec.task, y_refs, t_refs, y_range, t_range),
                         scored.correct[p]))
    return out


def _delta_entries(spec: BookSpec, table: Table, i: int, p: int, step, refs: RowRefs, weight) -> list[Entry]:
    out = []
    last = spec.n_layers - 1
    out_act = spec.activations[last]
    y_range = refs.a_range(last)
    t_range = range_ref(table.span(i, ("t", 0), spec.units[last]), RECORD)
    for k in range(spec.units[last]):
        cell = table.cell(i, ("d", last, k))
        t = ref(table.cell(i, ("t", k)), RECORD)
        out.append(Entry(cell.row, cell.col, "formula",
                         fx.output_delta(spec.loss, out_act, refs.z(last, k), refs.a(last, k), t, y_range, t_range),
                         step.delta[last][p, k]))
    for layer in range(last - 1, -1, -1):
        for j in range(spec.units[layer]):
            terms = [(weight(layer + 1, m, j), ref(table.cell(i, ("d", layer + 1, m)), RECORD))
                     for m in range(spec.units[layer + 1])]
            cell = table.cell(i, ("d", layer, j))
            out.append(Entry(cell.row, cell.col, "formula",
                             fx.hidden_delta(spec.activations[layer], refs.z(layer, j), refs.a(layer, j), terms),
                             step.delta[layer][p, j]))
    return out


def _source_ref(spec: BookSpec, table: Table, i: int, k: int, n: int) -> str:
    key = ("x", n) if k == 0 else ("a", k - 1, n)
    return ref(table.cell(i, key), RECORD)


def _source_values(step, k: int) -> np.ndarray:
    return step.inputs if k == 0 else step.a[k - 1]


def _contribution_entries(spec: BookSpec, table: Table, i: int, p: int, step, refs: RowRefs) -> list[Entry]:
    out = []
    for k in range(spec.n_layers):
        sources = _source_values(step, k)
        for j in range(spec.units[k]):
            delta = ref(table.cell(i, ("d", k, j)), RECORD)
            for n in range(spec.fan_in(k)):
                cell = table.cell(i, ("c", k, j, n))
                out.append(Entry(cell.row, cell.col, "formula",
                                 fx.contribution(delta, _source_ref(spec, table, i, k, n)),
                                 step.delta[k][p, j] * sources[p, n]))
    return out


def _step_entries(layout: BookLayout, s: int, first: int, count: int, step, weight) -> list[Entry]:
    """Gradients, velocities and updated parameters on the step's last row."""
    spec, table = layout.spec, layout.record
    i = first + count - 1
    batched = spec.record.max_batch > 1
    l2 = "l2_penalty" if spec.record.l2 else ""
    out = []
    for k in range(spec.n_layers):
        _, bias, _ = _in_force(layout, s)
        for j in range(spec.units[k]):
            for n in range(spec.fan_in(k)):
                if batched:
                    mean_of = f"AVERAGE({range_ref(table.column_block(('c', k, j, n), first, count), RECORD)})"
                else:
                    mean_of = f"{ref(table.cell(i, ('d', k, j)), RECORD)}*{_source_ref(spec, table, i, k, n)}"
                out += _param_update(layout, s, i, ("g", k, j, n), ("v", k, j, n), ("w", k, j, n),
                                     fx.gradient(mean_of, weight(k, j, n), l2), weight(k, j, n),
                                     step.grad_w[k][j, n], step.velocity[k][0][j, n], step.after[k].weights[j, n])
            d_col = table.column_block(("d", k, j), first, count)
            mean_b = f"AVERAGE({range_ref(d_col, RECORD)})" if batched else ref(table.cell(i, ("d", k, j)), RECORD)
            out += _param_update(layout, s, i, ("gb", k, j), ("vb", k, j), ("wb", k, j), fx.gradient(mean_b),
                                 bias(k, j), step.grad_b[k][j], step.velocity[k][1][j], step.after[k].bias[j])
    return out


def _param_update(layout: BookLayout, s: int, i: int, gkey, vkey, wkey, grad_formula: str, previous: str,
                  grad: float, vel: float, new: float) -> list[Entry]:
    table = layout.record
    g_ref = ref(table.cell(i, gkey), RECORD)
    cell = table.cell(i, gkey)
    out = [Entry(cell.row, cell.col, "formula", grad_formula, grad)]
    if layout.spec.record.momentum:
        prev_v = ""
        if s > 0:
            prev_first, prev_count = layout.step_rows[s - 1]
            prev_v = ref(table.cell(prev_first + prev_count - 1, vkey), RECORD)
        cell = table.cell(i, vkey)
        out.append(Entry(cell.row, cell.col, "formula", fx.velocity(prev_v, g_ref, "learning_rate", "momentum"), vel))
        new_formula = fx.update_with_velocity(previous, ref(cell, RECORD))
    else:
        new_formula = fx.update(previous, g_ref, "learning_rate")
    cell = table.cell(i, wkey)
    out.append(Entry(cell.row, cell.col, "formula", new_formula, new))
    return out


# ---------------------------------------------------------------- Epochs


def epoch_entries(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    spec, table, record = layout.spec, layout.epochs, layout.record
    yield Entry(0, 0, "title", "Per-epoch summary of the training record")
    for column in table.columns:
        yield Entry(table.header_row, table.col(column.key), "header", column.header,
                    note=column_note(spec, column.key, "epochs"))
    bounds = _epoch_rows(layout)
    result = numbers.record
    for e, (first, count) in enumerate(bounds):
        row = table.first_row + e
        yield Entry(row, table.col(("epoch",)), "label", e + 1)
        loss_range = range_ref(record.column_block(("loss",), first, count), EPOCHS)
        yield Entry(row, table.col(("loss",)), "formula", fx.average(loss_range), result.epoch_loss[e])
        if spec.is_classification:
            acc_range = range_ref(record.column_block(("correct",), first, count), EPOCHS)
            yield Entry(row, table.col(("accuracy",)), "formula", fx.average(acc_range), result.epoch_accuracy[e],
                        style="ratio")


def _epoch_rows(layout: BookLayout) -> list[tuple[int, int]]:
    """(first record row, number of rows) of every epoch."""
    bounds: dict[int, list[int]] = {}
    for (first, count), epoch in zip(layout.step_rows, layout.spec.record.epochs, strict=True):
        span = bounds.setdefault(epoch, [first, 0])
        span[1] += count
    return [tuple(bounds[e]) for e in sorted(bounds)]


# ---------------------------------------------------------------- header notes


def column_note(spec: BookSpec, key: tuple, where: str) -> str:
    """In words, what the formulas below a header compute."""
    kind = key[0]
    notes = {
        "case": "Case number: the row of the data this line uses (1 = first data row).",
        "set": "Whether the case was used for training or held out to check the model.",
        "raw": "Raw input value as in the data file (editable).",
        "target": "Target as in the data file (editable).",
        "t": "Target as a number for the loss: 1 when the case's label is this class, else 0."
        if where == "scoring" else "Target of this case, linked from the Scoring sheet.",
        "x": "Scaled input = (raw - offset) / divisor, with the constants on the Parameters sheet."
        if where == "scoring" else "Scaled input of this case, linked from the Scoring sheet.",
        "z": "Weighted sum: SUMPRODUCT of this unit's weight row and the layer's inputs, plus its bias"
        + (" (parameters in force: the previous step's updated values)." if where == "record" else "."),
        "a": "Activation of the weighted sum (the layer's activation function).",
        "smax": "Largest output weighted sum of the case, subtracted before EXP so softmax never overflows.",
        "ssum": "Sum of EXP(z - max) over the outputs: the softmax denominator.",
        "loss": _loss_note(spec),
        "pred": "Predicted class: probability against the decision threshold (binary) or the most probable class.",
        "correct": "1 when the prediction matches the target, else 0.",
        "d": "Delta = dE/dz. Output units: from the loss and the output activation. Hidden units: "
             "f'(z) times the sum of next-layer weights times their deltas.",
        "c": "This case's share of the weight gradient: delta of the unit times the input it receives.",
        "g": "Gradient of the step: mean over the step's cases of delta times input"
             + (", plus L2 penalty times the weight." if spec.record and spec.record.l2 else "."),
        "gb": "Bias gradient of the step: mean of the unit's deltas over the step's cases.",
        "v": "Velocity = momentum * previous velocity - learning_rate * gradient.",
        "vb": "Velocity = momentum * previous velocity - learning_rate * gradient.",
        "w": "Updated weight = weight in force - learning_rate * gradient"
             + (" (with momentum: + velocity)." if spec.record and spec.record.momentum else "."),
        "wb": "Updated bias = bias in force - learning_rate * gradient.",
        "step": "Update number: one update per batch of cases.",
        "epoch": "Pass over the training cases this line belongs to.",
        "accuracy": "Share of the epoch's cases classified right (outputs at 0.5) before each step's update.",
    }
    if where == "epochs" and kind == "loss":
        return "Mean of the training record's per-case loss over the epoch (before each step's update)."
    return notes.get(kind, "")


def _loss_note(spec: BookSpec) -> str:
    if spec.loss == "squared":
        return "Loss of the case: 1/2 * sum over outputs of (target - output)^2."
    if spec.softmax:
        return "Cross-entropy: -sum over classes of target * LN(MAX(output, 1E-12))."
    return "Cross-entropy: -sum over outputs of t*LN(MAX(y,1E-12)) + (1-t)*LN(MAX(1-y,1E-12))."



#: The cells of each sheet that has any (the Guide is prose; the layout sheet is the description).
SHEET_ENTRIES = {PARAMETERS: parameter_entries, CALCULATOR: calculator_entries, SCORING: scoring_entries,
                 SETUP: setup_entries, RECORD: record_entries, EPOCHS: epoch_entries}


def all_entries(layout: BookLayout, numbers: Numbers) -> Iterator[tuple[str, Entry]]:
    """(sheet name, entry) for every cell sheetnet writes, sheet by sheet in the workbook's order."""
    for sheet in layout.sheet_names():
        entries = SHEET_ENTRIES.get(sheet)
        if entries is not None:
            for entry in entries(layout, numbers):
                yield sheet, entry
