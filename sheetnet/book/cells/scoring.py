"""The cells of the Scoring sheet: every case scored, its loss and outcome, and the summary."""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from sheetnet.book import formula_text
from sheetnet.book.cells.calculator import predicted_entries, scaled_entry
from sheetnet.book.cells.entry import Entry, label_value
from sheetnet.book.cells.network import RowRefs, network_entries, param_refs, table_refs
from sheetnet.book.cells.notes import column_note
from sheetnet.book.expected import Numbers, Scored
from sheetnet.book.layout import (
    SCORING,
    BookLayout,
    SheetTable,
    target_key,
)
from sheetnet.book.spec import BookSpec
from sheetnet.xlsx.addresses import range_ref, ref


def _criterion(label: str) -> str:
    """A COUNTIFS criterion matching exactly this label (wildcards escaped)."""
    literal = formula_text.label_literal(label)
    if not literal.startswith('"'):
        return literal
    escaped = label.replace("~", "~~").replace("*", "~*").replace("?", "~?")
    return formula_text.text_literal("=" + escaped)


def scoring_entries(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    spec, table = layout.spec, layout.scoring
    title = "Batch scoring of a sample of the data (case = its row in the data file): the summary above is over " \
        "the sample only" if spec.case_rows else "Batch scoring: one formula row per case; the summary above is " \
        "over the cases on this sheet"
    yield Entry(0, 0, "title", title)
    yield from summary_entries(layout, numbers)
    for column in table.columns:
        yield Entry(table.header_row, table.col(column.key), "header", column.header,
                    note=column_note(spec, column.key, "scoring"))
    weights, bias = param_refs(layout.parameters, SCORING)
    for n in range(spec.n_cases):
        yield from _scoring_row(layout, numbers, n, table_refs(table, n, spec, weights, bias))


def _scoring_row(layout: BookLayout, numbers: Numbers, n: int, refs: RowRefs) -> Iterator[Entry]:
    spec, table, scored = layout.spec, layout.scoring, numbers.scoring
    here = SCORING
    cell = lambda key: table.cell(n, key)  # noqa: E731
    row = table.first_row + n
    data = numbers.inputs.data[n]
    yield Entry(row, table.col(("case",)), "label", spec.case_number(n))
    yield Entry(row, table.col(("set",)), "label", spec.sets[n])
    for i in range(len(spec.inputs)):
        yield Entry(row, table.col(("raw", i)), "input", data[i], style="data")
    for c in range(len(spec.target)):
        yield Entry(row, table.col(("target", c)), "input", data[len(spec.inputs) + c], style="data")
    if spec.encodes_targets:
        for k, label in enumerate(spec.positive_labels):
            yield Entry(row, table.col(("t", k)), "formula",
                        formula_text.encode_label(ref(cell(("target", 0)), here), spec.classes.index(label) + 1),
                        scored.t[n, k])
    for i in range(len(spec.inputs)):
        yield scaled_entry(layout, i, cell(("raw", i)), cell(("x", i)), scored.x[n, i])
    yield from network_entries(spec, refs, cell, scored, n)
    yield from _outcome_entries(spec, table, n, scored, refs, "threshold", numbers.inputs.threshold)


def _outcome_entries(spec: BookSpec, table: SheetTable, n: int, scored: Scored, refs: RowRefs, threshold: str,
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
                    formula_text.loss(spec.loss, spec.activations[-1], y_refs, t_refs, y_range, t_range),
                    scored.loss[n])
    if spec.task == "multilabel":
        pred_cells = [table.cell(n, ("pred", k)) for k in range(len(spec.outputs))]
    else:
        pred_cells = [table.cell(n, ("pred",))] if table.has(("pred",)) else []
    yield from predicted_entries(spec, scored.fwd.output[n], y_refs, y_range, threshold, threshold_value, pred_cells)
    if spec.has_targets and spec.is_classification:
        cell = table.cell(n, ("correct",))
        yield Entry(cell.row, cell.col, "formula",
                    formula_text.correct(spec.task, y_refs, t_refs, y_range, t_range, threshold), scored.correct[n])


def summary_entries(layout: BookLayout, numbers: Numbers) -> Iterator[Entry]:
    spec, table, summary, scored = layout.spec, layout.scoring, layout.summary, numbers.scoring
    col = lambda key: range_ref(table.column_block(key), SCORING, absolute=True)  # noqa: E731
    yield Entry(summary.count.row, 0, "label", "cases")
    yield Entry(summary.count.row, 1, "formula", formula_text.count(col(("case",))), float(spec.n_cases), style="count")
    if summary.mean_loss is not None:
        yield Entry(summary.mean_loss.row, 0, "label", "mean loss")
        yield Entry(summary.mean_loss.row, 1, "formula", formula_text.average(col(("loss",))),
                    float(np.mean(scored.loss)))
    sets = np.array(spec.sets)
    for name, cell in summary.accuracy.items():
        yield Entry(cell.row, 0, "label", f"accuracy ({name} cases{' in the sample' if spec.case_rows else ''})")
        if name == "all":
            yield Entry(cell.row, 1, "formula", formula_text.average(col(("correct",))), float(np.mean(scored.correct)),
                        style="ratio")
        else:
            yield Entry(cell.row, 1, "formula", formula_text.average_if(col(("correct",)), col(("set",)), name),
                        float(np.mean(scored.correct[sets == name])), style="ratio")
    last = spec.n_layers - 1
    for k, (rmse_cell, mae_cell) in enumerate(zip(summary.rmse, summary.mae, strict=True)):
        pred, target = col(("a", last, k)), col(("target", k))
        err = scored.fwd.output[:, k] - scored.t[:, k]
        yield Entry(rmse_cell.row, 0, "label", f"RMSE {spec.outputs[k]}")
        yield Entry(rmse_cell.row, 1, "formula", formula_text.rmse(pred, target), float(np.sqrt(np.mean(err**2))))
        yield Entry(mae_cell.row, 0, "label", f"MAE {spec.outputs[k]}")
        yield Entry(mae_cell.row, 1, "formula", formula_text.mae(pred, target), float(np.mean(np.abs(err))))
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
        cut = formula_text.text_literal(">=" if i else "<") + "&" + formula_text.CUT
        true_crit = _criterion(label) if spec.encodes_targets else cut
        for j, predicted in enumerate(spec.classes):
            formula = formula_text.count_pairs(col(("target", 0)), true_crit, col(("pred",)), _criterion(predicted))
            yield Entry(block.top + i, block.left + j, "formula", formula, float(np.sum((truth == i) & (pred == j))),
                        style="count")
