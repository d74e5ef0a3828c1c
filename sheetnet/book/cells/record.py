"""The cells of the Training record: every step's forward pass, deltas, gradients and updates."""

from __future__ import annotations

import re
from collections.abc import Iterator

import numpy as np

from sheetnet.book import formula_text
from sheetnet.book.cells.entry import Entry
from sheetnet.book.cells.network import RowRefs, network_entries, table_refs
from sheetnet.book.cells.notes import column_note
from sheetnet.book.expected import Numbers, Scored, correct_cases
from sheetnet.book.layout import (
    RECORD,
    BookLayout,
    SheetTable,
    target_key,
)
from sheetnet.book.spec import BookSpec
from sheetnet.net.network import Pass
from sheetnet.xlsx.addresses import range_ref, ref

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
    yield Entry(row, table.col(("case",)), "label", spec.case_number(case))
    for n in range(len(spec.inputs)):
        yield Entry(row, table.col(("x", n)), "formula",
                    formula_text.reference(ref(scoring.cell(case, ("x", n)), RECORD)), step.inputs[p, n])
    for k in range(len(spec.outputs)):
        yield Entry(row, table.col(("t", k)), "formula",
                    formula_text.reference(ref(scoring.cell(case, target_key(spec, k)), RECORD)), step.targets[p, k])


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

    return Pass(z=step.z, a=step.a)


def _record_outcome(spec: BookSpec, table: SheetTable, i: int, p: int, scored: Scored, refs: RowRefs) -> list[Entry]:
    last = spec.n_layers - 1
    y_refs = [refs.a(last, k) for k in range(spec.units[last])]
    t_refs = [ref(table.cell(i, ("t", k)), RECORD) for k in range(spec.units[last])]
    y_range = refs.a_range(last)
    t_range = range_ref(table.span(i, ("t", 0), spec.units[last]), RECORD)
    cell = table.cell(i, ("loss",))
    out = [Entry(cell.row, cell.col, "formula",
                 formula_text.loss(spec.loss, spec.activations[-1], y_refs, t_refs, y_range, t_range), scored.loss[p])]
    if spec.is_classification:
        cell = table.cell(i, ("correct",))
        out.append(Entry(cell.row, cell.col, "formula",
                         formula_text.correct(spec.task, y_refs, t_refs, y_range, t_range), scored.correct[p]))
    return out


def _delta_entries(spec: BookSpec, table: SheetTable, i: int, p: int, step, refs: RowRefs, weight) -> list[Entry]:
    out = []
    last = spec.n_layers - 1
    out_act = spec.activations[last]
    y_range = refs.a_range(last)
    t_range = range_ref(table.span(i, ("t", 0), spec.units[last]), RECORD)
    for k in range(spec.units[last]):
        cell = table.cell(i, ("d", last, k))
        t = ref(table.cell(i, ("t", k)), RECORD)
        out.append(Entry(cell.row, cell.col, "formula",
                         formula_text.output_delta(spec.loss, out_act, refs.z(last, k), refs.a(last, k), t,
                                                   y_range, t_range),
                         step.delta[last][p, k]))
    for layer in range(last - 1, -1, -1):
        for j in range(spec.units[layer]):
            terms = [(weight(layer + 1, m, j), ref(table.cell(i, ("d", layer + 1, m)), RECORD))
                     for m in range(spec.units[layer + 1])]
            cell = table.cell(i, ("d", layer, j))
            out.append(Entry(cell.row, cell.col, "formula",
                             formula_text.hidden_delta(spec.activations[layer], refs.z(layer, j), refs.a(layer, j),
                                                       terms),
                             step.delta[layer][p, j]))
    return out


def _source_ref(spec: BookSpec, table: SheetTable, i: int, k: int, n: int) -> str:
    key = ("x", n) if k == 0 else ("a", k - 1, n)
    return ref(table.cell(i, key), RECORD)


def _source_values(step, k: int) -> np.ndarray:
    return step.inputs if k == 0 else step.a[k - 1]


def _contribution_entries(spec: BookSpec, table: SheetTable, i: int, p: int, step, refs: RowRefs) -> list[Entry]:
    out = []
    for k in range(spec.n_layers):
        sources = _source_values(step, k)
        for j in range(spec.units[k]):
            delta = ref(table.cell(i, ("d", k, j)), RECORD)
            for n in range(spec.fan_in(k)):
                cell = table.cell(i, ("c", k, j, n))
                out.append(Entry(cell.row, cell.col, "formula",
                                 formula_text.contribution(delta, _source_ref(spec, table, i, k, n)),
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
                                     formula_text.gradient(mean_of, weight(k, j, n), l2), weight(k, j, n),
                                     step.grad_w[k][j, n], step.velocity[k][0][j, n], step.after[k].weights[j, n])
            d_col = table.column_block(("d", k, j), first, count)
            mean_b = f"AVERAGE({range_ref(d_col, RECORD)})" if batched else ref(table.cell(i, ("d", k, j)), RECORD)
            out += _param_update(layout, s, i, ("gb", k, j), ("vb", k, j), ("wb", k, j), formula_text.gradient(mean_b),
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
        out.append(Entry(cell.row, cell.col, "formula",
                         formula_text.velocity(prev_v, g_ref, "learning_rate", "momentum"), vel))
        new_formula = formula_text.update_with_velocity(previous, ref(cell, RECORD))
    else:
        new_formula = formula_text.update(previous, g_ref, "learning_rate")
    cell = table.cell(i, wkey)
    out.append(Entry(cell.row, cell.col, "formula", new_formula, new))
    return out
