"""One engine's values and the file's formula text against the reference, cell by cell.

Three kinds of disagreement are told apart: cells whose formula is not what sheetnet writes there
(the causes of tampering), values that differ from the reference (causes and their consequences),
and cached values that differ from the recalculation (stale caches). Cells showing spreadsheet
errors are listed as well."""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field

from sheetnet.book.canonical import same_formula
from sheetnet.book.layout import LAYOUT
from sheetnet.checks.findings import LIST_LIMIT, plain
from sheetnet.checks.tolerance import agree
from sheetnet.xlsx.addresses import a1, quote_sheet
from sheetnet.xlsx.cells import CellError, Workbook


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


def _extra_formulas(book: Workbook, expected: set) -> list[dict]:

    return [{"sheet": sheet, "cell": a1(*pos), "expected": None, "found": "=" + formula,
             "note": "a formula sheetnet did not write"}
            for sheet, cells in book.sheets.items() if sheet != LAYOUT
            for pos, formula in cells.formulas.items() if (sheet, pos) not in expected]
