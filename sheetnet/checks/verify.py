"""Verification: recompute a workbook with an engine and compare every formula cell with the
reference trainer run on the inputs the file holds now.

Three kinds of disagreement are told apart: cells whose formula is not what sheetnet writes there
(the causes of tampering), values that differ from the reference (causes and their consequences),
and cached values that differ from the recalculation (stale caches). Cells showing spreadsheet
errors are listed as well.
"""

from __future__ import annotations

import itertools
import tempfile
from dataclasses import dataclass, field, replace
from pathlib import Path

from sheetnet.book import plan
from sheetnet.book.addresses import Cell, a1, quote_sheet
from sheetnet.book.canonical import same_formula
from sheetnet.book.layout import BookLayout
from sheetnet.book.numbers import compute
from sheetnet.book.read import read_inputs, read_layout
from sheetnet.book.signing import SignatureCheck, check_signature
from sheetnet.book.untrusted import read_description, read_returned_workbook
from sheetnet.book.xlsxcells import CellError, Workbook
from sheetnet.book.xlsxread import read_workbook
from sheetnet.checks.align import alignment_for
from sheetnet.checks.alignment import Alignment
from sheetnet.checks.findings import LIST_LIMIT, plain
from sheetnet.checks.stability import NUDGE, Unstable, check_one_at_a_time, unstable_cells
from sheetnet.checks.tolerance import DEFAULT_TOLERANCE, agree
from sheetnet.errors import WorkbookFormatError
from sheetnet.gcpause import paused_gc
from sheetnet.parallel import Background

ENGINES = ("embedded", "libreoffice", "formulas", "both", "all")
#: What each --engine choice runs ("both" predates the third engine and keeps its meaning).
ENGINE_SETS = {"both": ("embedded", "libreoffice"), "all": ("embedded", "libreoffice", "formulas")}
def _cell(sheet: str, pos: tuple[int, int]) -> str:
    return f"{quote_sheet(sheet)}!{a1(*pos)}"


@dataclass
class Comparison:
    """The outcome for one engine."""

    engine: str
    tolerance: float
    cells_compared: int = 0
    per_sheet: dict[str, int] = field(default_factory=dict)
    max_abs_diff: float = 0.0
    max_abs_where: str = ""
    max_rel_diff: float = 0.0
    max_rel_where: str = ""
    mismatches: list[dict] = field(default_factory=list)
    mismatch_count: int = 0
    first_mismatch: dict | None = None
    formula_differences: list[dict] = field(default_factory=list)
    errors: list[dict] = field(default_factory=list)
    stale_cached: list[dict] = field(default_factory=list)
    stale_count: int = 0
    stale_per_sheet: dict[str, int] = field(default_factory=dict)
    general_path: list[str] = field(default_factory=list)
    unstable_count: int = 0  # values rounding can move past the tolerance: checked one at a time instead

    @property
    def reproduces(self) -> bool:
        """The formulas are sheetnet's and their values equal the reference (saved values aside)."""
        return not (self.mismatch_count or self.formula_differences or self.errors)

    @property
    def verdict(self) -> str:
        return "mismatch" if not self.reproduces else "stale" if self.stale_count else "ok"

    @property
    def ok(self) -> bool:
        return self.verdict == "ok"

    def to_dict(self) -> dict:
        return {
            "ok": self.ok, "verdict": self.verdict, "engine": self.engine, "tolerance": self.tolerance,
            "cells_compared": self.cells_compared, "cells_per_sheet": self.per_sheet,
            "max_abs_diff": self.max_abs_diff, "max_abs_diff_cell": self.max_abs_where,
            "max_rel_diff": self.max_rel_diff, "max_rel_diff_cell": self.max_rel_where,
            "mismatches": self.mismatches, "mismatch_count": self.mismatch_count,
            "first_mismatch": self.first_mismatch, "formula_differences": self.formula_differences,
            "errors": self.errors, "stale_cached": self.stale_cached, "stale_count": self.stale_count,
            "stale_per_sheet": self.stale_per_sheet, "unstable_count": self.unstable_count,
            "general_path_cells": self.general_path,
        }


def expected_formulas(book: Workbook, layout: BookLayout, alignment: Alignment | None = None, nudge: float = 0.0
                      ) -> list[tuple[str, int, int, str, object]]:
    """(sheet, row, col, formula, reference value) of every formula cell sheetnet writes, for the
    inputs the file holds now (the reference trainer and scorer run here), where ``alignment`` says
    each cell is now and with its references moved as the application moved them.

    ``nudge`` scales the training record's starting parameters by (1 + nudge): how far the reference
    moves then shows which of its values rounding can move (see checks.stability)."""
    moved = alignment is not None and not alignment.identity
    inputs = read_inputs(book, layout, locate=alignment.locate if moved else None)  # InvalidInputsError names a cell
    if nudge:
        inputs = replace(inputs, initial=tuple(replace(layer, weights=layer.weights * (1 + nudge),
                                                       bias=layer.bias * (1 + nudge)) for layer in inputs.initial))
    numbers = compute(layout.spec, inputs)
    as_float = float
    if not moved:
        return [(sheet, e.row, e.col, e.content, as_float(e.value) if isinstance(e.value, float) else e.value)
                for sheet, e in plan.all_entries(layout, numbers) if e.role == "formula"]
    items = []
    for sheet, e in plan.all_entries(layout, numbers):
        if e.role != "formula":
            continue
        here = Cell(sheet, e.row, e.col)
        where = alignment.locate(here)
        if where is not None:
            value = as_float(e.value) if isinstance(e.value, float) else e.value
            items.append((where.sheet, where.row, where.col, alignment.translate(e.content, here), value))
    return items


@dataclass
class Prepared:
    """What can be compared before the engine finishes: formula text, and cached values against the
    reference (a cached value that agrees with the reference is stale only if the engine disagrees)."""

    sheets: list[tuple[str, list, list, dict]] = field(default_factory=list)  # (sheet, items, positions, constants)
    differences: list[dict] = field(default_factory=list)
    stale_candidates: list[tuple[str, tuple[int, int], object]] = field(default_factory=list)
    unchecked_cache: set = field(default_factory=set)  # (sheet, pos) whose cached value agreed with the reference
    extra: list[dict] = field(default_factory=list)


def prepare(book: Workbook, expected: list[tuple[str, int, int, str, object]], tolerance: float) -> Prepared:
    prepared = Prepared()
    seen: set[tuple[str, tuple[int, int]]] = set()
    for sheet, group in itertools.groupby(expected, key=lambda item: item[0]):
        _prepare_sheet(prepared, book, sheet, list(group), tolerance, seen)
    prepared.extra = _extra_formulas(book, seen)
    return prepared


def _prepare_sheet(prepared: Prepared, book: Workbook, sheet: str, items: list, tolerance: float, seen: set) -> None:
    cells = book.sheets.get(sheet)
    formulas = cells.formulas if cells else {}
    cached = cells.values if cells else {}
    positions = [(row, col) for _, row, col, _, _ in items]
    seen.update((sheet, pos) for pos in positions)
    aligned = list(formulas) == positions
    found_formulas = formulas.values() if aligned else [formulas.get(pos) for pos in positions]
    constants = {}
    for (_, row, col, formula, reference), found in zip(items, found_formulas, strict=True):
        if found is None or found != formula[1:]:
            pos = (row, col)
            difference = _formula_difference(sheet, pos, formula, found, cells)
            if difference is not None:
                prepared.differences.append(difference)
            if found is None:
                constants[pos] = cached.get(pos)
                continue
        saved = cached.get((row, col))
        if saved is None:
            continue
        if type(saved) is float and type(reference) is float and \
                abs(saved - reference) <= tolerance * max(1.0, abs(reference)):
            continue
        prepared.stale_candidates.append((sheet, (row, col), saved))
    prepared.sheets.append((sheet, items, positions, constants))


def compare(book: Workbook, expected: list[tuple[str, int, int, str, object]], engine_values: dict, engine: str,
            tolerance: float, general: list | None = None, prepared: Prepared | None = None,
            unstable: frozenset = frozenset()) -> Comparison:
    """Every expected formula cell against the file's formula text and the engine's value; a value
    that differs in an ``unstable`` cell (sheet, row, col) is counted apart (checks.stability)."""
    prepared = prepared or prepare(book, expected, tolerance)
    report = Comparison(engine=engine, tolerance=tolerance)
    report.formula_differences = list(prepared.differences) + list(prepared.extra)
    for sheet, items, positions, constants in prepared.sheets:
        _compare_sheet(report, sheet, items, positions, constants, engine_values.get(sheet, {}), unstable)
    for sheet, pos, saved in prepared.stale_candidates:
        _check_stale(report, sheet, pos, saved, engine_values.get(sheet, {}).get(pos))
    report.general_path = [_cell(s, p) for s, p, _ in (general or [])][:LIST_LIMIT]
    return report


def _compare_sheet(report: Comparison, sheet: str, items: list, positions: list, constants: dict,
                   values: dict, unstable: frozenset) -> None:
    """The hot loop of a verification: one sheet's engine values against the reference."""
    tolerance = report.tolerance
    if not constants and list(values) == positions:  # the engine's values come in the expected order
        found_values = values.values()
    else:
        found_values = [constants[(r, c)] if (r, c) in constants else values.get((r, c)) for _, r, c, _, _ in items]
    for (_, row, col, _, reference), value in zip(items, found_values, strict=True):
        if type(value) is float and type(reference) is float:
            diff = value - reference if value > reference else reference - value
            scale = reference if reference > 0 else -reference
            if diff > tolerance * (scale if scale > 1.0 else 1.0):
                if unstable and (sheet, row, col) in unstable:
                    report.unstable_count += 1
                    continue
                _mismatch(report, sheet, (row, col), value, reference)
            if diff > report.max_abs_diff or (scale > 1.0 and diff / scale > report.max_rel_diff):
                _record_largest(report, sheet, (row, col), diff, scale)
        else:
            _check_value(report, sheet, (row, col), value, reference, unstable)
    report.cells_compared += len(items)
    report.per_sheet[sheet] = report.per_sheet.get(sheet, 0) + len(items)


def _record_largest(report: Comparison, sheet: str, pos, diff: float, scale: float) -> None:
    if diff > report.max_abs_diff:
        report.max_abs_diff, report.max_abs_where = diff, _cell(sheet, pos)
    if scale > 1.0 and diff / scale > report.max_rel_diff:  # below 1 the tolerance is absolute
        report.max_rel_diff, report.max_rel_where = diff / scale, _cell(sheet, pos)


def _mismatch(report: Comparison, sheet: str, pos, value, expected) -> None:
    report.mismatch_count += 1
    item = {"sheet": sheet, "cell": a1(*pos), "expected": plain(expected), "found": plain(value)}
    if report.first_mismatch is None:
        report.first_mismatch = item
    if len(report.mismatches) < LIST_LIMIT:
        report.mismatches.append(item)


def _formula_difference(sheet: str, pos, expected: str, found: str | None, cells) -> dict | None:
    if found is None:
        value = None if cells is None else cells.values.get(pos)
        note = "a constant where a formula belongs" if value is not None else "the formula is missing"
        return {"sheet": sheet, "cell": a1(*pos), "expected": expected, "found": plain(value), "note": note}
    if not same_formula(found, expected, sheet):
        return {"sheet": sheet, "cell": a1(*pos), "expected": expected, "found": "=" + found, "note": "formula changed"}
    return None  # written differently (spaces, case, number spelling, own sheet named), the same formula


def _check_value(report: Comparison, sheet: str, pos, value, expected, unstable: frozenset) -> None:
    """The slow path of the value check: anything but two floats."""
    if isinstance(value, CellError):
        report.errors.append({"sheet": sheet, "cell": a1(*pos), "error": value.code})
    if agree(value, expected, report.tolerance):
        return
    if unstable and (sheet, *pos) in unstable:
        report.unstable_count += 1
    else:
        _mismatch(report, sheet, pos, value, expected)


def _check_stale(report: Comparison, sheet: str, pos, cached, value) -> None:
    if cached is None or isinstance(value, CellError):
        return
    if type(cached) is float and type(value) is float:
        if abs(cached - value) <= report.tolerance * max(1.0, abs(value)):
            return
    elif agree(cached, plain(value), report.tolerance):
        return
    report.stale_count += 1
    report.stale_per_sheet[sheet] = report.stale_per_sheet.get(sheet, 0) + 1
    if len(report.stale_cached) < LIST_LIMIT:
        report.stale_cached.append({"sheet": sheet, "cell": a1(*pos), "cached": plain(cached),
                                    "recalculated": plain(value)})


def compare_engines(book: Workbook, layout: BookLayout, alignment: Alignment | None, expected: list,
                    results: list[tuple[str, dict, list]], tolerance: float, prepared: Prepared | None = None
                    ) -> tuple[list[Comparison], Unstable | None]:
    """Each engine's (name, values, general-path cells) against the reference. When values differ in a
    training record, the cells that rounding alone moves past the tolerance are found and checked one
    formula at a time instead (checks.stability), and the engines are compared again without them."""
    prepared = prepared or prepare(book, expected, tolerance)
    comparisons = [compare(book, expected, values, name, tolerance, general, prepared)
                   for name, values, general in results]
    if layout.record is None or not any(c.mismatch_count for c in comparisons):
        return comparisons, None
    nudged = [expected_formulas(book, layout, alignment, nudge=nudge) for nudge in (NUDGE, -NUDGE)]
    unstable = unstable_cells(expected, nudged, tolerance)
    if unstable is None:
        return comparisons, None
    check_one_at_a_time(book, expected, unstable, tolerance)
    return [compare(book, expected, values, name, tolerance, general, prepared, unstable.cells)
            for name, values, general in results], unstable


def _extra_formulas(book: Workbook, expected: set) -> list[dict]:
    from sheetnet.book.layout import LAYOUT

    return [{"sheet": sheet, "cell": a1(*pos), "expected": None, "found": "=" + formula,
             "note": "a formula sheetnet did not write"}
            for sheet, cells in book.sheets.items() if sheet != LAYOUT
            for pos, formula in cells.formulas.items() if (sheet, pos) not in expected]


def by_cell(book: Workbook, engine: str, values: dict) -> dict:
    """An engine's values per sheet and cell (the embedded engine sends them compactly, as lists in the
    order of the file's formula cells)."""
    if engine != "embedded":
        return values
    return {sheet: dict(zip(book.sheets[sheet].formulas, items, strict=True)) for sheet, items in values.items()}


def engine_values(book: Workbook, engine: str) -> tuple[dict, list]:
    """Recalculated values of every formula cell, per sheet, and the general-path cells."""
    if engine == "embedded":
        from sheetnet.engines.embedded import recalculate

        result = recalculate(book)
        return result.ordered, result.general
    if engine == "formulas":
        from sheetnet.engines.formulaspkg import recalculate as formulas_recalculate

        return formulas_recalculate(book), []
    from sheetnet.engines.libreoffice import recalculate as lo_recalculate

    with tempfile.TemporaryDirectory(prefix="sheetnet-verify-") as tmp:
        recalculated = read_workbook(lo_recalculate(book.path, Path(tmp)))
    values = {name: {pos: cells.values.get(pos) for pos in cells.formulas}
              for name, cells in recalculated.sheets.items()}
    return values, []


@dataclass
class VerifyReport:
    path: Path
    comparisons: list[Comparison]
    description_problems: list[str] = field(default_factory=list)  # in parts verify does not need
    signature: SignatureCheck | None = None  # with a key only
    realigned: list[str] = field(default_factory=list)  # structural changes followed (rows inserted...)
    unstable: Unstable | None = None  # record values rounding can move past the tolerance

    @property
    def verdict(self) -> str:
        """ok, stale (the formulas reproduce the reference but saved values are out of date) or
        mismatch, the worst over the engines and the one-at-a-time check of unstable cells."""
        verdicts = {c.verdict for c in self.comparisons}
        if self.unstable is not None and not self.unstable.holds:
            verdicts.add("mismatch")
        return next(v for v in ("mismatch", "stale", "ok") if v in verdicts or v == "ok")

    @property
    def ok(self) -> bool:
        return self.verdict == "ok" and (self.signature is None or self.signature.holds)

    def to_dict(self) -> dict:
        first = self.comparisons[0].to_dict()
        common = {"file": str(self.path), "verdict": self.verdict, "description_problems": self.description_problems,
                  "realigned": self.realigned, "unstable": None if self.unstable is None else self.unstable.to_dict(),
                  "signature": None if self.signature is None else self.signature.to_dict()}
        if len(self.comparisons) == 1:
            return {**first, **common, "ok": self.ok}
        merged = {"ok": self.ok, "engine": "both" if len(self.comparisons) == 2 else "all", **common,
                  "tolerance": first["tolerance"],
                  "engines": {c.engine: c.to_dict() for c in self.comparisons}}
        for key in ("cells_compared", "max_abs_diff", "mismatches", "errors", "stale_cached", "formula_differences"):
            values = [c.to_dict()[key] for c in self.comparisons]
            merged[key] = max(values) if key in ("cells_compared", "max_abs_diff") else \
                [dict(item, engine=c.engine) for c, items in zip(self.comparisons, values, strict=True)
                 for item in items]
        return merged


VERIFY_STAGES = 4


def signature_of(path: str | Path, key: bytes) -> SignatureCheck:
    """Whether a workbook's signature holds, without verifying its cells (for a workbook whose
    description cannot be trusted: the signature then says whether it was altered after signing)."""
    book = read_returned_workbook(path)
    try:
        data = read_description(book).data
    except WorkbookFormatError:
        data = None
    return check_signature(book, data, key)


def verify(path: str | Path, engine: str = "embedded", tolerance: float = DEFAULT_TOLERANCE,
           progress=None, key: bytes | None = None) -> VerifyReport:
    """Verify a workbook; raises WorkbookFormatError when it cannot be verified at all.

    ``progress`` (optional) is called with the number of finished stages out of VERIFY_STAGES; with
    ``key`` the report also says whether the workbook's signature holds."""
    if engine not in ENGINES:
        raise WorkbookFormatError(f"unknown engine {engine!r}; expected one of {', '.join(ENGINES)}")
    with paused_gc():
        return _verify(Path(path), engine, tolerance, progress or (lambda _done: None), key)


def _verify(path: Path, engine: str, tolerance: float, progress, key: bytes | None) -> VerifyReport:
    progress(0)
    book = read_returned_workbook(path)
    progress(1)
    layout, description = read_layout(book)
    names = ENGINE_SETS.get(engine, (engine,))
    if "formulas" in names:
        from sheetnet.engines.formulaspkg import check_size

        check_size(book)  # before anything runs: a clear refusal with an estimate
    # The engines recalculate in child processes while this one runs the reference: both need
    # only the file, and a 2-core machine does the two at once.
    running = [(name, Background(engine_values, book, name)) for name in names]
    try:
        alignment = _followable(alignment_for(book, layout, description.original))
        expected = expected_formulas(book, layout, alignment)
        prepared = prepare(book, expected, tolerance)  # while the engines still run
        progress(2)
        results = []
        for name, job in running:
            values, general = job.result()
            results.append((name, by_cell(book, name, values), general))
            progress(3)
        comparisons, unstable = compare_engines(book, layout, alignment, expected, results, tolerance, prepared)
    finally:
        for _, job in running:
            job.stop()
    progress(VERIFY_STAGES)
    signed = None if key is None else check_signature(book, description.data, key)
    return VerifyReport(path=Path(path), comparisons=comparisons, unstable=unstable,
                        description_problems=[str(p) for p in description.problems], signature=signed,
                        realigned=[] if alignment is None else [f"{c.sheet}!{c.cell}: {c.note}" if c.cell else c.note
                                                                for c in alignment.changes])


def _followable(alignment: Alignment | None) -> Alignment | None:
    """The alignment, when verify can compare through it; else why not, and where to look."""
    if alignment is not None and (alignment.missing or alignment.reordered):
        what = f"sheet(s) {', '.join(alignment.missing)} missing" if alignment.missing else \
            f"rows of {', '.join(alignment.reordered)} were reordered (sorted), and references from outside " \
            "the sorted rows still point at the old positions"
        raise WorkbookFormatError(f"{what}; run 'sheetnet audit' to see every change and what it did")
    return alignment
