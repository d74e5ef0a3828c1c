"""Extract: the (possibly edited) parameters of a workbook back as a model file.

Blocks are found where the application moved them (``align``: defined names, labels, renamed
sheets). Untouched means exact: a parameter that the file holds within the audit's round-trip
tolerance of what ``build`` wrote comes back as ``build`` wrote it (an application that saves 15
significant digits must not change a model); an edited one comes back as the file holds it.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import replace
from pathlib import Path

import numpy as np

from sheetnet.book import plan
from sheetnet.book.canonical import SAME_NUMBER, same_formula
from sheetnet.book.expected import expected_numbers
from sheetnet.book.layout import CALCULATOR, BookLayout
from sheetnet.book.read import read_inputs, read_layout
from sheetnet.book.spec import BookInputs
from sheetnet.book.untrusted import read_returned_workbook
from sheetnet.checks.align import alignment_for, light_entries
from sheetnet.checks.alignment import Alignment
from sheetnet.engines.embedded import recalculate
from sheetnet.errors import WorkbookFormatError
from sheetnet.files import file_sha256
from sheetnet.gcpause import paused_gc
from sheetnet.net.model import Layer, Model
from sheetnet.xlsx.addresses import Block, Cell, cell_name
from sheetnet.xlsx.cells import Workbook


def extract(path: str | Path, after_training: bool = False) -> tuple[Model, str]:
    """The workbook's model: from the Parameters sheet, or after the training record's last step."""
    with paused_gc():
        book = read_returned_workbook(path)
        layout, description = read_layout(book)
        alignment = alignment_for(book, layout, description.original)
        needed = ("parameters", "scaling", "training", "data") if after_training else ("parameters", "scaling")
        now = read_inputs(book, layout, locate=None if alignment is None else alignment.locate, groups=needed)
        inputs = as_built(now, description.original)
        _calculator_follows_the_description(book, layout, alignment, inputs)
        note = "parameters read from the parameter blocks" + (" (where they moved)" if alignment else "")
        layers = inputs.layers
        if after_training:
            layers, note = _final_layers(book, layout, inputs, description.original, alignment)
        model = inputs.model(layout.spec, layers=layers)
        training = {"extracted_from": Path(path).name, "extracted_from_sha256": file_sha256(Path(path)),
                    "after_training": after_training,
                    "threshold": inputs.threshold, "provenance": dict(layout.spec.provenance)}
        return replace(model, training=training), note


def _calculator_follows_the_description(book: Workbook, layout: BookLayout, alignment: Alignment | None,
                                        inputs: BookInputs) -> None:
    """The Calculator's formulas spell out the whole network (scaling, every layer, every activation):
    a model file is only what the workbook computes when they are what the description says."""
    calculator = [(sheet, entry) for sheet, entry in light_entries(layout, inputs) if sheet == CALCULATOR]
    differing = list(_differing_formulas(book, calculator, alignment))
    if differing:
        raise WorkbookFormatError(f"{book.path}: the Calculator's formulas do not compute what the layout description "
                                  f"says (first at {cell_name(differing[0])}, {len(differing)} in all): the "
                                  "description or the formulas were edited; 'sheetnet audit' shows which")


def _untouched(now: np.ndarray, built: np.ndarray) -> np.ndarray:
    """Build's values where the file holds them within the round-trip tolerance, else the file's."""
    if now.shape != built.shape:
        return now
    same = np.abs(now - built) <= SAME_NUMBER * np.maximum(np.abs(now), np.abs(built))
    return np.where(same, built, now)


def _layers_as_built(now: tuple[Layer, ...], built: tuple[Layer, ...]) -> tuple[Layer, ...]:
    if len(now) != len(built):
        return now
    return tuple(replace(a, weights=_untouched(a.weights, b.weights), bias=_untouched(a.bias, b.bias))
                 for a, b in zip(now, built, strict=True))


def as_built(now: BookInputs, built: BookInputs | None) -> BookInputs:
    """The file's parameters, scaling and training inputs, with every untouched number exactly as built."""
    if built is None:
        return now
    rates = [float(_untouched(np.array([a]), np.array([b]))[0]) for a, b in (
        (now.learning_rate, built.learning_rate), (now.momentum, built.momentum), (now.l2, built.l2))]
    return replace(now, layers=_layers_as_built(now.layers, built.layers), offset=_untouched(now.offset, built.offset),
                   divisor=_untouched(now.divisor, built.divisor), initial=_layers_as_built(now.initial, built.initial),
                   learning_rate=rates[0], momentum=rates[1], l2=rates[2])


def _final_layers(book: Workbook, layout: BookLayout, inputs: BookInputs, built: BookInputs | None,
                  alignment: Alignment | None) -> tuple[tuple[Layer, ...], str]:
    """The parameters after the record's last step: the reference trainer's exactly, when every input
    the record uses and every formula are as built; else recalculated from the file."""
    if layout.final is None:
        raise WorkbookFormatError(f"{book.path}: the workbook has no training record to take parameters from")
    sorted_rows = alignment is not None and alignment.reordered  # the record then reads other cases
    if built is not None and not sorted_rows and _record_inputs_as_built(inputs, built):
        numbers = expected_numbers(layout.spec, built)
        if _formulas_as_built(book, layout, numbers, alignment):
            note = "parameters after training: the reference trainer's (the record's inputs and formulas are as built)"
            return numbers.record.trace[-1].after, note

    found = recalculate(book).values(book)
    locate = (lambda cell: cell) if alignment is None else alignment.locate

    def read(block: Block) -> np.ndarray:
        out = np.empty((block.nrows, block.ncols))
        for i in range(block.nrows):
            for j in range(block.ncols):
                where = locate(block.cell(i, j))
                value = None if where is None else _value_now(book, found, where)
                if not isinstance(value, float) or not np.isfinite(value):
                    raise WorkbookFormatError(f"{book.path}: {cell_name(where or block.cell(i, j))} does not hold a "
                                              "number after recalculation")
                out[i, j] = value
        return out

    final = layout.final
    layers = tuple(Layer(read(w), read(b)[:, 0], act)
                   for w, b, act in zip(final.weights, final.bias, layout.spec.activations, strict=True))
    return layers, "parameters after training recalculated with the embedded engine (the workbook was edited)"


def _value_now(book: Workbook, recalculated: dict, cell: Cell):
    """A cell's recalculated value, or the number typed over its formula."""
    sheet = book.sheets.get(cell.sheet)
    if sheet is not None and (cell.row, cell.col) not in sheet.formulas:
        return sheet.values.get((cell.row, cell.col))
    return recalculated.get(cell.sheet, {}).get((cell.row, cell.col))


def _record_inputs_as_built(inputs: BookInputs, built: BookInputs) -> bool:
    def same(a, b) -> bool:
        return np.array_equal(np.asarray(a, dtype=float), np.asarray(b, dtype=float))

    layers = all(same(a.weights, b.weights) and same(a.bias, b.bias)
                 for a, b in zip(inputs.initial, built.initial, strict=True))
    return layers and same(inputs.offset, built.offset) and same(inputs.divisor, built.divisor) and \
        (inputs.learning_rate, inputs.momentum, inputs.l2) == (built.learning_rate, built.momentum, built.l2) and \
        _data_as_built(inputs.data, built.data)


def _data_as_built(now, built) -> bool:
    if len(now) != len(built):
        return False
    for a, b in zip(now, built, strict=True):
        for x, y in zip(a, b, strict=True):
            if x != y and not (isinstance(x, float) and isinstance(y, float)
                               and abs(x - y) <= SAME_NUMBER * max(abs(x), abs(y))):
                return False
    return True


def _formulas_as_built(book: Workbook, layout: BookLayout, numbers, alignment: Alignment | None) -> bool:
    """Every formula cell holds the formula build wrote (where the alignment puts it)."""
    return next(_differing_formulas(book, plan.all_entries(layout, numbers), alignment), None) is None


def _differing_formulas(book: Workbook, entries, alignment: Alignment | None) -> Iterator[Cell]:
    """The cells (where the alignment puts them) whose formula is not the one build wrote there."""
    for sheet, entry in entries:
        if entry.role != "formula":
            continue
        here = Cell(sheet, entry.row, entry.col)
        where = here if alignment is None else alignment.locate(here)
        expected = entry.content if alignment is None else alignment.translate(entry.content, here)
        found = None if where is None else book.sheets[where.sheet].formulas.get((where.row, where.col))
        if found is None or not same_formula(found, expected, where.sheet):
            yield where or here
