"""The cells of the Parameters and Training setup sheets: the editable parameters, the
learning rate, and the parameters after the training record's last step."""

from __future__ import annotations

from collections.abc import Iterator

from sheetnet.book import formula_text
from sheetnet.book.cells.entry import Entry, activation_text, label_value
from sheetnet.book.expected import Numbers
from sheetnet.book.layout import (
    SETUP,
    BookLayout,
    ParamBlocks,
)
from sheetnet.book.spec import BookSpec
from sheetnet.net.activations import PROBABILITY_CLIP, TARGET_CUT
from sheetnet.xlsx.addresses import Block, Cell, range_ref, ref


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
    return Entry(cell.row, cell.col, "formula", formula_text.reference(formulas(key)), float(value))


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
    yield from _setting_entries(layout, inputs.threshold)
    yield from _matrix_entries(spec, layout.parameters, inputs.layers, "Layer", "input")


def _setting_entries(layout: BookLayout, threshold: float) -> Iterator[Entry]:
    """The model's settings that formulas read by name: the decision threshold (editable) and two
    constants of the loss and of the accuracy (written once here, never inside a formula)."""
    for cell, label, value, role in (
            (layout.threshold, "decision threshold", threshold, "input"),
            (layout.probability_clip, "probability clip", PROBABILITY_CLIP, "label"),
            (layout.target_cut, "target cut", TARGET_CUT, "label")):
        if cell is not None:
            yield Entry(cell.row, 0, "label", label)
            yield Entry(cell.row, cell.col, role, float(value))


#: Up to this many parameter rows, record_gap compares row by row (each reference stays whole when a row
#: is inserted inside a block, as every other formula's do); beyond, it compares the named blocks.
GAP_ROWS = 60


def _gap_pairs(layout: BookLayout) -> list[tuple[str, str]]:
    """Pairs of equally shaped ranges: after the record's last step, and in use."""
    spec, final, now = layout.spec, layout.final, layout.parameters
    if sum(spec.units) > GAP_ROWS:
        return [(f"final_{kind}_{k + 1}", f"{kind}_{k + 1}") for k in range(spec.n_layers) for kind in ("W", "b")]
    pairs = []
    for k in range(spec.n_layers):
        for j in range(spec.units[k]):
            for a, b in ((final.weights[k], now.weights[k]), (final.bias[k], now.bias[k])):
                pairs.append((range_ref(Block(a.sheet, a.top + j, a.left, 1, a.ncols), SETUP, absolute=True),
                              range_ref(Block(b.sheet, b.top + j, b.left, 1, b.ncols), SETUP, absolute=True)))
    return pairs


def _gap_entries(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    """record_gap: how far the record's end is from the parameters in use, and, when the record is not
    the whole run, a banner saying why it is not 0."""
    spec, cell = layout.spec, layout.record_gap
    yield Entry(cell.row, 0, "label", "record gap")
    yield Entry(cell.row, cell.col, "formula", formula_text.record_gap(_gap_pairs(layout)), numbers.record_gap,
                note="Largest |parameter after the record's last step - parameter in use (Parameters sheet)|: 0, up "
                     "to rounding, when the record replays the whole run that produced the Parameters.")
    if spec.record_note:
        yield Entry(1, 0, "title", spec.record_note)


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
    yield from _gap_entries(layout, numbers)
    yield Entry(layout.initial.titles[0].row - 1, 0, "text", "Initial parameters (where the training record starts)")
    yield from _matrix_entries(spec, layout.initial, inputs.initial, "Initial layer", "input")
    final_layers = numbers.record.trace[-1].after if numbers.record.trace else inputs.initial
    last = layout.record.nrows - 1
    yield Entry(layout.final.titles[0].row - 1, 0, "text", "Parameters after the last step of the training record")
    yield from _matrix_entries(spec, layout.final, final_layers, "Final layer", "formula",
                               formulas=lambda key: ref(layout.record.cell(last, key), SETUP, absolute=True))
