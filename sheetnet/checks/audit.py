"""Audit: exactly what changed in a workbook that came back edited, and what it did to the results.

The reference is the layout description and the original inputs that ``build`` stored in the file,
or, with ``against``, the original file. The workbook is aligned to its layout first (``align``:
inserted or deleted rows and columns, renamed sheets, sorted rows are followed), then every
difference becomes a :class:`Finding` of one kind (``findings.KINDS``), each structural change once.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from pathlib import Path

from sheetnet.book import layout as L
from sheetnet.book import plan
from sheetnet.book.describe import Fingerprints
from sheetnet.book.expected import expected_numbers
from sheetnet.book.jsoncheck import Problem, json_differences
from sheetnet.book.layout import BookLayout
from sheetnet.book.read import read_inputs, read_inputs_checked, read_layout
from sheetnet.book.signing import check_signature
from sheetnet.book.spec import BookInputs
from sheetnet.book.untrusted import Description, read_description, read_returned_workbook
from sheetnet.checks.align import align
from sheetnet.checks.alignment import Alignment
from sheetnet.checks.audit_cells import check_formulas, check_guide, check_inputs, check_risks, check_structure
from sheetnet.checks.findings import KINDS, AuditReport, Finding
from sheetnet.checks.tolerance import DEFAULT_TOLERANCE
from sheetnet.checks.verify import by_cell, compare_engines, engine_values, expected_formulas
from sheetnet.engines.formulaspkg import check_size
from sheetnet.errors import SheetNetError, WorkbookFormatError
from sheetnet.gcpause import paused_gc
from sheetnet.parallel import Background
from sheetnet.xlsx.addresses import parse_a1
from sheetnet.xlsx.cells import Workbook

__all__ = ["KINDS", "AuditReport", "Finding", "audit"]
SELF_ASSERTED = ("the layout description stored in the file is self-asserted: whoever can edit the file can edit "
                 "it; --against ORIGINAL or a signature key (--key) gives independent assurance")


@dataclass
class Reference:
    """What the audit compares with: the layout, the original inputs (None when the stored ones cannot
    be trusted) and the original formulas (with --against)."""

    layout: BookLayout
    original: BookInputs | None
    formulas: dict | None


def _own_description(book: Workbook, against: Path | None) -> Description | None:
    """The edited file's description; None when it has none (only an audit --against can go on)."""
    try:
        return read_description(book)
    except WorkbookFormatError as exc:
        if against is None:
            raise WorkbookFormatError(f"{exc} (without its layout description the file cannot be audited; "
                                      "give the original with --against)") from None
        return None


def _reference(report: AuditReport, own: Description | None, against: Path | None) -> Reference | None:
    """The reference, with every problem of the description(s) added as a finding; None when the
    description cannot give a layout to compare with."""
    if against is None:
        _description_findings(report, own.problems)
        if own.layout is None:
            return None
        return Reference(own.layout, own.original, None)
    reference = read_returned_workbook(against)
    layout, trusted = read_layout(reference)
    edited = None if own is None else own.data
    _description_findings(report, [Problem("format", path, f"differs from the original's description: {what}")
                                   for path, what in json_differences(trusted.data, edited)])
    formulas = {(sheet, pos): "=" + text for sheet, cells in reference.sheets.items()
                for pos, text in cells.formulas.items()}
    return Reference(layout, read_inputs(reference, layout), formulas)


def _signature_findings(report: AuditReport, book: Workbook, own: Description | None, key: bytes | None) -> bool:
    """Check the signature with ``key``; True when it holds (the description is then not self-asserted)."""
    stored = None if own is None else own.signature
    if key is None:
        if isinstance(stored, dict):
            report.notes.append(f"the file carries a signature (key id {stored.get('key_id')!s:.16}); give --key "
                                "KEYFILE to check it")
        return False
    check = check_signature(book, None if own is None else own.data, key)
    if check.holds:
        report.notes.append(f"signature valid (key id {check.key_id}): {check.detail}")
    else:
        report.add(Finding("", "signature", "signature", "valid", check.status, f"signature {check.status}: "
                                                                                  f"{check.detail}"))
    return check.holds


def _description_findings(report: AuditReport, problems: list[Problem]) -> None:
    for problem in problems:
        report.add(Finding("", problem.where, "description", None, None, problem.what))


def audit(path: str | Path, against: str | Path | None = None, key: bytes | None = None,
          engine: str = "embedded") -> AuditReport:
    """Every difference between an edited workbook and its reference, classified; with ``key``, whether
    the workbook's signature holds. ``engine`` recalculates the values compared with the reference."""
    with paused_gc():
        return _audit(Path(path), None if against is None else Path(against), key, engine)


def _audit(path: Path, against: Path | None, key: bytes | None, engine_name: str) -> AuditReport:
    book = read_returned_workbook(path, allow_macros=True)
    report = AuditReport(path=path, reference=str(against) if against else "layout description stored in the file")
    own = _own_description(book, against)
    signed = _signature_findings(report, book, own, key)
    reference = _reference(report, own, against)
    if reference is None:
        check_risks(report, book)
        report.notes.append("the layout description cannot be trusted, so the cells were not compared with it; "
                            "give the original workbook with --against to compare them")
        return report
    if against is None and not signed:
        report.notes.append(SELF_ASSERTED)
    layout = reference.layout
    entries = _entries(report, book, layout, reference.original)
    if entries is None:
        check_risks(report, book)
        return report
    if against is None and reference.original is not None:
        _check_fingerprints(report, own, entries)
    if engine_name == "formulas":
        check_size(book)
    engine = Background(engine_values, book, engine_name)
    try:
        alignment = align(book, layout, entries)
        check_structure(report, book, layout, alignment)
        check_risks(report, book)
        invalid = read_inputs_checked(book, layout, alignment.locate)[1]
        if reference.original is not None:
            check_inputs(report, book, layout, reference.original, alignment, invalid)
        else:
            report.notes.append("input edits were not listed: the original inputs stored in the description "
                                "cannot be trusted")
        check_formulas(report, book, entries, alignment, reference.formulas)
        check_guide(report, book, layout, alignment)
        _check_values(report, book, layout, alignment, engine, engine_name)
    finally:
        engine.stop()
    return report


def _entries(report: AuditReport, book: Workbook, layout: BookLayout, original: BookInputs | None) -> list | None:
    """Every cell build wrote, from the original inputs (or, when those cannot be replayed, the file's);
    None, with a note, when neither can."""
    tried = [("the stored original inputs", original)] if original is not None else []
    tried.append(("the inputs the file holds", read_inputs_checked(book, layout)[0]))
    for what, inputs in tried:
        try:
            return list(plan.all_entries(layout, expected_numbers(layout.spec, inputs)))
        except SheetNetError as exc:
            report.add(Finding("", "inputs", "description" if inputs is original else "input_edits", None, None,
                               f"the reference trainer cannot replay {what} ({exc})"))
    report.notes.append("the cells were not compared: the reference trainer cannot replay the inputs")
    return None


def _mapping(value) -> dict:
    return value if isinstance(value, dict) else {}


def _check_fingerprints(report: AuditReport, own: Description, entries: list) -> None:
    """The stored fingerprints are hashes of what build wrote from the stored spec and inputs: one that
    disagrees with them was altered (the sheets themselves are compared cell by cell)."""
    prints = Fingerprints()
    for sheet, group in itertools.groupby(entries, key=lambda item: item[0]):
        prints.add_all(sheet, [entry for _, entry in group])
    stored = _mapping(own.data.get("fingerprints"))  # a damaged one is a description finding already
    for kind, digests in prints.to_dict().items():
        found = _mapping(stored.get(kind))
        for sheet in sorted(set(digests) | set(found)):
            if digests.get(sheet) != found.get(sheet):
                report.add(Finding("", f"fingerprints.{kind}.{sheet}", "description", None, None,
                                   "does not match what the description's spec and inputs give"))


def _check_values(report: AuditReport, book: Workbook, layout: BookLayout, alignment: Alignment,
                  engine: Background, engine_name: str) -> None:
    """Recalculated values against the reference trainer run on the inputs the file holds now."""
    if alignment.missing:
        report.notes.append(f"recalculated values were not compared with the reference: sheet(s) missing: "
                            f"{', '.join(alignment.missing)}")
        return
    try:
        expected = expected_formulas(book, layout, alignment)
    except SheetNetError as exc:
        report.notes.append(f"recalculated values were not compared with the reference: {exc}")
        return
    values, general = engine.result()
    results = [(engine_name, by_cell(book, engine_name, values), general)]
    (comparison,), unstable = compare_engines(book, layout, alignment, expected, results, DEFAULT_TOLERANCE)
    if unstable is not None:
        report.notes.append(f"{unstable.summary(DEFAULT_TOLERANCE)}: {unstable.outcome()}")
        for item in unstable.differing:
            report.add(Finding(item["sheet"], item["cell"], "value_mismatches", item["expected"], item["found"],
                               "differs from the reference trainer computed from the reference values it reads"))
        report.count_unlisted("value_mismatches", unstable.differing_count - len(unstable.differing))
    for item in comparison.mismatches:
        report.add(Finding(item["sheet"], item["cell"], "value_mismatches", item["expected"], item["found"],
                           "recalculated value differs from the reference trainer on the file's inputs"))
    report.count_unlisted("value_mismatches", comparison.mismatch_count - len(comparison.mismatches))
    report.first_diverging_step = _first_step(layout, alignment, comparison.mismatches)
    for item in comparison.stale_cached:
        report.add(Finding(item["sheet"], item["cell"], "risks", item["recalculated"], item["cached"],
                           "stale cached value: viewers that do not recalculate show the wrong number"))
    report.count_unlisted("risks", comparison.stale_count - len(comparison.stale_cached))


def _first_step(layout: BookLayout, alignment: Alignment, mismatches: list[dict]) -> int | None:
    """The first step of the training record whose cells differ from the reference."""
    m = alignment.sheets.get(L.RECORD)
    if layout.record is None or m is None:
        return None
    step_of = {}
    for s, (first, count) in enumerate(layout.step_rows):
        for i in range(count):
            step_of[m.row(layout.record.first_row + first + i)] = s + 1
    steps = [step_of[parse_a1(item["cell"])[0]] for item in mismatches
             if item["sheet"] == m.found and parse_a1(item["cell"])[0] in step_of]
    return min(steps) if steps else None
