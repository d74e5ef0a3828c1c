"""The forward pass as cells: one row's weighted sums and activations, shared by the Calculator,
the Scoring table and the training record."""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

from sheetnet.book import formula_text
from sheetnet.book.cells.entry import Entry
from sheetnet.book.expected import Scored
from sheetnet.book.layout import (
    ParamBlocks,
    SheetTable,
)
from sheetnet.book.spec import BookSpec
from sheetnet.xlsx.addresses import range_ref, ref


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
                        formula_text.weighted_sum(refs.weights(k, j), refs.source(k), refs.bias(k, j)),
                        scored.fwd.z[k][n, j])
        if k == last and spec.softmax:
            cell = cell_of(("smax",))
            yield Entry(cell.row, cell.col, "formula", formula_text.softmax_max(refs.z_range(k)), scored.smax[n])
            cell = cell_of(("ssum",))
            yield Entry(cell.row, cell.col, "formula", formula_text.softmax_sum(refs.z_range(k), refs.smax),
                        scored.ssum[n])
        for j in range(spec.units[k]):
            cell = cell_of(("a", k, j))
            yield Entry(cell.row, cell.col, "formula", formula_text.activation(act, refs.z(k, j), refs.smax, refs.ssum),
                        scored.fwd.a[k][n, j])


def param_refs(blocks: ParamBlocks, here: str):
    """Functions giving the absolute reference, from sheet ``here``, to a unit's weight row and its bias."""
    weights = lambda k, j: range_ref(blocks.weights[k].row(j), here, absolute=True)  # noqa: E731
    bias = lambda k, j: ref(blocks.bias[k].cell(j, 0), here, absolute=True)  # noqa: E731
    return weights, bias


def table_refs(table: SheetTable, i: int, spec: BookSpec, weights, bias, x_key: tuple = ("x", 0)) -> RowRefs:
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
