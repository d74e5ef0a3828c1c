"""The cells of the Epochs sheet: loss and accuracy per recorded epoch."""

from __future__ import annotations

from collections.abc import Iterator

from sheetnet.book import formula_text
from sheetnet.book.cells.entry import Entry
from sheetnet.book.cells.notes import column_note
from sheetnet.book.expected import Numbers
from sheetnet.book.layout import (
    EPOCHS,
    BookLayout,
)
from sheetnet.xlsx.addresses import range_ref


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
        yield Entry(row, table.col(("loss",)), "formula", formula_text.average(loss_range), result.epoch_loss[e])
        if spec.is_classification:
            acc_range = range_ref(record.column_block(("correct",), first, count), EPOCHS)
            yield Entry(row, table.col(("accuracy",)), "formula", formula_text.average(acc_range),
                        result.epoch_accuracy[e], style="ratio")


def _epoch_rows(layout: BookLayout) -> list[tuple[int, int]]:
    """(first record row, number of rows) of every epoch."""
    bounds: dict[int, list[int]] = {}
    for (first, count), epoch in zip(layout.step_rows, layout.spec.record.epochs, strict=True):
        span = bounds.setdefault(epoch, [first, 0])
        span[1] += count
    return [tuple(bounds[e]) for e in sorted(bounds)]
