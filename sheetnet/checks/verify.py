"""Verification: recompute a workbook with one or more engines and compare every formula cell with
the reference trainer run on the inputs the file holds now, where the cells are now (re-aligned
after structural edits). The engines run in child processes while this one computes the reference;
checks.comparison compares, checks.stability handles records that amplify rounding.
"""

from __future__ import annotations

import datetime as dt
import tempfile
from dataclasses import dataclass, field, replace
from pathlib import Path

from sheetnet.book import plan
from sheetnet.book.expected import expected_numbers
from sheetnet.book.layout import BookLayout
from sheetnet.book.read import read_inputs, read_layout
from sheetnet.book.signing import SignatureCheck, check_signature
from sheetnet.book.untrusted import read_description, read_returned_workbook
from sheetnet.checks.align import alignment_for
from sheetnet.checks.alignment import Alignment
from sheetnet.checks.comparison import Comparison, Prepared, compare, prepare
from sheetnet.checks.stability import NUDGE, Unstable, check_one_at_a_time, unstable_cells
from sheetnet.checks.tolerance import DEFAULT_TOLERANCE
from sheetnet.engines.embedded import recalculate
from sheetnet.engines.formulaspkg import check_size
from sheetnet.engines.formulaspkg import recalculate as formulas_recalculate
from sheetnet.engines.libreoffice import recalculate as lo_recalculate
from sheetnet.errors import WorkbookFormatError
from sheetnet.files import file_sha256
from sheetnet.gcpause import paused_gc
from sheetnet.parallel import Background
from sheetnet.version import __version__
from sheetnet.xlsx.addresses import Cell
from sheetnet.xlsx.cells import Workbook
from sheetnet.xlsx.reader import read_workbook

ENGINES = ("embedded", "libreoffice", "formulas", "both", "all")
#: What each --engine choice runs ("both" predates the third engine and keeps its meaning).
ENGINE_SETS = {"both": ("embedded", "libreoffice"), "all": ("embedded", "libreoffice", "formulas")}
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
    numbers = expected_numbers(layout.spec, inputs)
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


def by_cell(book: Workbook, engine: str, values: dict) -> dict:
    """An engine's values per sheet and cell (the embedded engine sends them compactly, as lists in the
    order of the file's formula cells)."""
    if engine != "embedded":
        return values
    return {sheet: dict(zip(book.sheets[sheet].formulas, items, strict=True)) for sheet, items in values.items()}


def _embedded_values(book: Workbook) -> tuple[dict, list]:
    result = recalculate(book)
    return result.ordered, result.general


def _formulas_values(book: Workbook) -> tuple[dict, list]:
    return formulas_recalculate(book), []


def _libreoffice_values(book: Workbook) -> tuple[dict, list]:
    with tempfile.TemporaryDirectory(prefix="sheetnet-verify-") as tmp:
        recalculated = read_workbook(lo_recalculate(book.path, Path(tmp)))
    values = {name: {pos: cells.values.get(pos) for pos in cells.formulas}
              for name, cells in recalculated.sheets.items()}
    return values, []


#: Each engine: the workbook -> (values per sheet, general-path cells). A new engine is one entry here
#: (and its name in ENGINES).
ENGINE_RUNNERS = {"embedded": _embedded_values, "formulas": _formulas_values, "libreoffice": _libreoffice_values}


def engine_values(book: Workbook, engine: str) -> tuple[dict, list]:
    """Recalculated values of every formula cell, per sheet, and the general-path cells."""
    return ENGINE_RUNNERS[engine](book)


@dataclass
class VerifyReport:
    path: Path
    comparisons: list[Comparison]
    description_problems: list[str] = field(default_factory=list)  # in parts verify does not need
    signature: SignatureCheck | None = None  # with a key only
    realigned: list[str] = field(default_factory=list)  # structural changes followed (rows inserted...)
    unstable: Unstable | None = None  # record values rounding can move past the tolerance
    file_sha256: str = ""  # the bytes verified: a report names exactly which file it speaks for
    file_bytes: int = 0
    verified_at: str = ""  # UTC, ISO 8601

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
                  "signature": None if self.signature is None else self.signature.to_dict(),
                  "file_sha256": self.file_sha256, "file_bytes": self.file_bytes, "verified_at": self.verified_at,
                  "tool": f"sheetnet {__version__}"}
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
    started = dt.datetime.now(dt.UTC).isoformat(timespec="seconds")
    book = read_returned_workbook(path)  # refuses what is not a workbook (a folder, a zip bomb) first
    digest, size = file_sha256(path), path.stat().st_size
    progress(1)
    layout, description = read_layout(book)
    names = ENGINE_SETS.get(engine, (engine,))
    if "formulas" in names:
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
    return VerifyReport(path=Path(path), comparisons=comparisons, unstable=unstable, file_sha256=digest,
                        file_bytes=size, verified_at=started,
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
