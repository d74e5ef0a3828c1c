"""Extract: the (possibly edited) parameters of a workbook back as a model file."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np

from sheetnet.book.describe import Fingerprints
from sheetnet.book.layout import BookLayout
from sheetnet.book.read import input_cells, read_inputs, read_inputs_checked, read_layout
from sheetnet.book.untrusted import Description
from sheetnet.book.xlsxread import Workbook, read_workbook
from sheetnet.errors import WorkbookFormatError
from sheetnet.gcpause import paused_gc
from sheetnet.net.model import Layer, Model


def formula_fingerprints(book: Workbook) -> dict[str, str]:
    """The formula fingerprints of the file as it is now, computed as ``build`` computes them."""
    from sheetnet.book.plan import Entry

    prints = Fingerprints()
    for name, cells in book.sheets.items():
        prints.add_all(name, [Entry(r, c, "formula", "=" + cells.formulas[r, c]) for r, c in sorted(cells.formulas)])
    return prints.to_dict()["formulas"]


def unchanged_since_build(book: Workbook, layout: BookLayout, description: Description) -> bool:
    """No formula and no input differs from what build wrote (so build's cached values are current)."""
    if description.original is None or description.problems_in("fingerprints") or \
            formula_fingerprints(book) != description.data["fingerprints"]["formulas"]:
        return False
    original = input_cells(layout, description.original)
    now = input_cells(layout, read_inputs_checked(book, layout)[0])
    return all(a[2] == b[2] for a, b in zip(original, now, strict=True))


def _final_layers(book: Workbook, layout: BookLayout, description: Description) -> tuple[tuple[Layer, ...], str]:
    blocks = layout.final
    if blocks is None:
        raise WorkbookFormatError(f"{book.path}: the workbook has no training record to take parameters from")
    cells = [(b.sheet, b.top + i, b.left + j) for b in (*blocks.weights, *blocks.bias)
             for i in range(b.nrows) for j in range(b.ncols)]
    cached = {key: book.sheets[key[0]].values.get(key[1:]) for key in cells}
    if all(isinstance(v, float) for v in cached.values()) and unchanged_since_build(book, layout, description):
        values, note = cached, "parameters after training read from the cached values (current)"
    else:
        from sheetnet.engines.embedded import recalculate

        result = recalculate(book)
        found = result.values(book)
        values = {key: found.get(key[0], {}).get(key[1:]) for key in cells}
        note = "parameters after training recalculated with the embedded engine (cached values missing or stale)"
    bad = [k for k, v in values.items() if not isinstance(v, float) or not np.isfinite(v)]
    if bad:
        sheet, row, col = bad[0]
        from sheetnet.book.addresses import a1

        raise WorkbookFormatError(f"{book.path}: {sheet}!{a1(row, col)} does not hold a number after recalculation")
    layers = tuple(Layer(weights=np.array([[values[(w.sheet, w.top + i, w.left + j)] for j in range(w.ncols)]
                                           for i in range(w.nrows)]),
                         bias=np.array([values[(b.sheet, b.top + i, b.left)] for i in range(b.nrows)]),
                         activation=act)
                   for w, b, act in zip(blocks.weights, blocks.bias, layout.spec.activations, strict=True))
    return layers, note


def extract(path: str | Path, after_training: bool = False) -> tuple[Model, str]:
    """The workbook's model: from the Parameters sheet, or after the training record's last step."""
    with paused_gc():
        book = read_workbook(path)
        layout, description = read_layout(book)
        needed = ("parameters", "scaling", "training", "data") if after_training else ("parameters", "scaling")
        inputs = read_inputs(book, layout, groups=needed)
        spec = layout.spec
        note = "parameters read from the Parameters sheet"
        layers = inputs.layers
        if after_training:
            layers, note = _final_layers(book, layout, description)
        model = inputs.model(spec, layers=layers)
        training = {"extracted_from": Path(path).name, "after_training": after_training,
                    "provenance": dict(spec.provenance)}
        return replace(model, training=training), note
