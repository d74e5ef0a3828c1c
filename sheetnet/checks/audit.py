"""Audit: exactly what changed in a workbook that came back edited, and what it did to the results.

The reference is the layout description and the original inputs that ``build`` stored in the file,
or, with ``against``, the original file. Every difference becomes a :class:`Finding` of one kind:
structural, risks, input_edits, formula_edits, value_mismatches. Regions whose rows moved
(inserted or deleted rows) are reported as structural and left out of the cell-by-cell comparison,
so a shifted layout never crashes the audit or floods it.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

from sheetnet.book import layout as L
from sheetnet.book.addresses import Block, a1, column_letters, defined_name_target, parse_a1
from sheetnet.book.canonical import normalize_formula, target_text
from sheetnet.book.jsoncheck import Problem, json_differences
from sheetnet.book.layout import BookLayout, Table
from sheetnet.book.read import read_inputs, read_layout
from sheetnet.book.signing import check_signature
from sheetnet.book.spec import BookInputs
from sheetnet.book.untrusted import Description, read_description
from sheetnet.book.xlsxread import CellError, SheetCells, Workbook, read_workbook
from sheetnet.checks.verify import _plain, compare, engine_values, expected_entries
from sheetnet.errors import WorkbookFormatError
from sheetnet.gcpause import paused_gc
from sheetnet.parallel import Background

KINDS = ("description", "signature", "structural", "formula_edits", "value_mismatches", "input_edits", "risks")
VOLATILE = ("NOW", "TODAY", "RAND", "RANDBETWEEN", "OFFSET", "INDIRECT", "INFO", "CELL", "RANDARRAY")
_VOLATILE = re.compile(r'"(?:[^"]|"")*"|\b(' + "|".join(VOLATILE) + r")\s*\(", re.I)
#: Relative change below which a number counts as unchanged (a round trip through an application
#: that stores 15 significant digits must not read as an edit).
SAME_NUMBER = 1e-13
VALUE_LIMIT = 200
SELF_ASSERTED = ("the layout description stored in the file is self-asserted: whoever can edit the file can edit "
                 "it; --against ORIGINAL or a signature key (--key) gives independent assurance")


@dataclass(frozen=True)
class Finding:
    sheet: str
    cell: str
    kind: str
    expected: object
    found: object
    note: str

    def to_dict(self) -> dict:
        return {"sheet": self.sheet, "cell": self.cell, "kind": self.kind, "expected": _plain(self.expected),
                "found": _plain(self.found), "note": self.note}


@dataclass
class AuditReport:
    path: Path
    reference: str
    findings: list[Finding] = field(default_factory=list)
    counts: dict[str, int] = field(default_factory=dict)
    first_diverging_step: int | None = None
    sheet_map: dict[str, str] = field(default_factory=dict)
    reference_sheets: dict[str, set] = field(default_factory=dict, repr=False)
    notes: list[str] = field(default_factory=list)

    def add(self, finding: Finding) -> None:
        self.counts[finding.kind] = self.counts.get(finding.kind, 0) + 1
        if finding.kind != "value_mismatches" or self.counts[finding.kind] <= VALUE_LIMIT:
            self.findings.append(finding)

    def count_unlisted(self, kind: str, count: int) -> None:
        """Findings counted but not listed (a report lists at most a few thousand of one kind)."""
        if count > 0:
            self.counts[kind] = self.counts.get(kind, 0) + count

    def of(self, kind: str) -> list[Finding]:
        return [f for f in self.findings if f.kind == kind]

    @property
    def total(self) -> int:
        return sum(self.counts.values())

    def to_dict(self) -> dict:
        out = {"file": str(self.path), "reference": self.reference, "finding_count": self.total, "notes": self.notes,
               "counts": {k: self.counts.get(k, 0) for k in KINDS}, "first_diverging_step": self.first_diverging_step}
        out.update({kind: [f.to_dict() for f in self.of(kind)] for kind in KINDS})
        return out


# ---------------------------------------------------------------- sheets, names, structure


def _sheet_signature(cells: SheetCells) -> set:
    """Text constants of a sheet (headers and labels): enough to recognise it under another name."""
    return {v for v in cells.values.values() if isinstance(v, str)}


def map_sheets(report: AuditReport, book: Workbook, expected: list[str]) -> dict[str, str]:
    """Expected sheet name -> name in the file; renamed, missing and added sheets are reported."""
    mapping = {name: name for name in expected if name in book.sheets}
    extra = [name for name in book.sheets if name not in expected]
    for name in expected:
        if name in mapping:
            continue
        match = _best_match(book, extra, report.reference_sheets.get(name))
        if match is not None:
            mapping[name] = match
            extra.remove(match)
            report.add(Finding(match, "A1", "structural", name, match, f"sheet {name!r} was renamed to {match!r}"))
        else:
            report.add(Finding(name, "", "structural", name, None, f"sheet {name!r} is missing"))
    for name in extra:
        report.add(Finding(name, "", "structural", None, name, f"sheet {name!r} was added"))
    for name, where in mapping.items():
        if name != L.LAYOUT and book.sheets[where].state != "visible":
            report.add(Finding(where, "", "structural", "visible", book.sheets[where].state,
                               f"sheet {where!r} was made {book.sheets[where].state}"))
    return mapping


def _best_match(book: Workbook, candidates: list[str], reference: set | None) -> str | None:
    if not reference:
        return None
    best, score = None, 0.0
    for name in candidates:
        signature = _sheet_signature(book.sheets[name])
        overlap = len(signature & reference) / max(1, len(reference))
        if overlap > score:
            best, score = name, overlap
    return best if score >= 0.6 else None


def check_names(report: AuditReport, book: Workbook, layout: BookLayout, mapping: dict[str, str]) -> None:
    expected = {name: defined_name_target(_moved(block, mapping))[1:] for name, block in
                layout.defined_names().items()}
    found = {name: target for name, target in book.names.items() if not name.startswith("_xlnm")}
    for name, target in expected.items():
        if name not in found:
            report.add(Finding("", name, "structural", target, None, f"defined name {name} is missing"))
        elif target_text(found[name]) != target_text(target):
            report.add(Finding("", name, "structural", target, found[name],
                               f"defined name {name} now refers elsewhere"))
    for name, target in found.items():
        if name not in expected:
            report.add(Finding("", name, "structural", None, target, f"defined name {name} was added"))
    for sheet, name, target in book.local_names:
        if not name.startswith("_xlnm"):
            report.add(Finding(sheet, name, "structural", None, target, f"sheet-scoped name {name} was added"))


def _moved(block: Block, mapping: dict[str, str]) -> Block:
    return Block(mapping.get(block.sheet, block.sheet), block.top, block.left, block.nrows, block.ncols)


def _tables(layout: BookLayout) -> list[tuple[Table, tuple]]:
    """Tables and the label column that numbers their rows."""
    out = [(layout.scoring, ("case",))] if layout.spec.n_cases else []
    if layout.record is not None:
        out += [(layout.record, ("step",)), (layout.epochs, ("epoch",))]
    return out


def find_shifts(report: AuditReport, book: Workbook, layout: BookLayout, mapping: dict[str, str]) -> dict[str, int]:
    """Inserted or deleted rows and columns in the tables: {expected sheet name: first 0-based row that moved}."""
    shifted: dict[str, int] = {}
    for table, key in _tables(layout):
        sheet = mapping.get(table.sheet)
        if sheet is None:
            continue
        cells = book.sheets[sheet].values
        moved = _header_shift(report, sheet, table, cells)
        if moved is not None:
            shifted[table.sheet] = moved
            continue
        moved = _row_shift(report, sheet, table, key, cells, layout)
        if moved is not None:
            shifted[table.sheet] = moved
    return shifted


def find_block_shifts(report: AuditReport, book: Workbook, layout: BookLayout, numbers,
                      mapping: dict[str, str]) -> dict[str, int]:
    """Inserted or deleted rows or columns on the sheets of labelled blocks (Parameters, Calculator,
    Training setup), found from where the labels sheetnet wrote have moved to."""
    texts: dict[str, list[tuple[tuple[int, int], str]]] = {}
    for sheet, entry in expected_entries(layout, numbers):
        if sheet in (L.PARAMETERS, L.CALCULATOR, L.SETUP) and entry.role in ("title", "header", "label") \
                and isinstance(entry.content, str):
            texts.setdefault(sheet, []).append(((entry.row, entry.col), entry.content))
    shifted = {}
    for sheet, labels in texts.items():
        where = mapping.get(sheet)
        if where is None:
            continue
        moved = _label_shift(report, where, book.sheets[where].values, sorted(labels))
        if moved is not None:
            shifted[sheet] = moved
    return shifted


def _label_shift(report: AuditReport, sheet: str, values: dict, labels: list) -> int | None:
    """The first label out of place, and the row or column move that puts the labels after it back."""
    for n, ((row, col), text) in enumerate(labels):
        if values.get((row, col)) == text:
            continue
        for dr, dc in ((1, 0), (-1, 0), (0, 1), (0, -1), (2, 0), (0, 2)):
            # a row move shifts every label below; a column move every label to the right
            rest = labels[n:] if dr else [((r, c), t) for (r, c), t in labels if c >= col]
            hits = sum(values.get((r + dr, c + dc)) == t for (r, c), t in rest)
            if hits >= 0.6 * len(rest):
                if dr:
                    what = f"{abs(dr)} row(s) {'inserted' if dr > 0 else 'deleted'} at row {row + 1}"
                    cell = a1(row, 0)
                else:
                    what = f"{abs(dc)} column(s) {'inserted' if dc > 0 else 'deleted'} at column " \
                           f"{column_letters(col)}"
                    cell = a1(0, col)
                report.add(Finding(sheet, cell, "structural", text, values.get((row, col)), f"{what} of {sheet}"))
                return row if dr else 0
        return None
    return None


def _header_shift(report: AuditReport, sheet: str, table: Table, cells: dict) -> int | None:
    headers = [(table.col(c.key), c.header) for c in table.columns]
    row = table.header_row
    if sum(cells.get((row, col)) == text for col, text in headers) >= 0.8 * len(headers):
        return None
    for dr, dc in ((dr, dc) for dr in range(-20, 21) for dc in range(-5, 6) if dr or dc):
        if sum(cells.get((row + dr, col + dc)) == text for col, text in headers) >= 0.8 * len(headers):
            what = []
            if dr:
                what.append(f"{abs(dr)} row(s) {'inserted' if dr > 0 else 'deleted'} above row {row + 1}")
            if dc:
                what.append(f"{abs(dc)} column(s) {'inserted' if dc > 0 else 'deleted'} before column "
                            f"{column_letters(table.left)}")
            report.add(Finding(sheet, a1(row, table.left), "structural", a1(row, table.left),
                               a1(row + dr, table.left + dc), f"the {sheet} table moved: " + "; ".join(what)))
            return min(row, row + dr)
    report.add(Finding(sheet, a1(row, table.left), "structural", "table headers", None,
                       f"the {sheet} table's headers are not where sheetnet wrote them, nor nearby"))
    return row


def _expected_labels(table: Table, key: tuple, layout: BookLayout) -> list:
    spec = layout.spec
    if table.sheet == L.SCORING:
        return [float(n + 1) for n in range(spec.n_cases)]
    if table.sheet == L.EPOCHS:
        return [float(e + 1) for e in range(spec.record.n_epochs)]
    return [float(s + 1) for s, (_, count) in enumerate(layout.step_rows) for _ in range(count)]


def _row_shift(report: AuditReport, sheet: str, table: Table, key: tuple, cells: dict,
               layout: BookLayout) -> int | None:
    col = table.col(key)
    labels = _expected_labels(table, key, layout)
    for i, label in enumerate(labels):
        row = table.first_row + i
        found = cells.get((row, col))
        if _same(found, label):
            continue
        below = cells.get((row + 1, col))
        if _same(below, label):
            note = f"a row was inserted at row {row + 1}"
        elif i + 1 < len(labels) and _same(found, labels[i + 1]):
            note = f"row {row + 1} was deleted (the rows below moved up)"
        else:
            note = f"row {row + 1} does not hold what sheetnet wrote there (label {label:g} expected)"
        report.add(Finding(sheet, a1(row, col), "structural", label, _plain(found), note))
        return row
    extra = cells.get((table.first_row + len(labels), col))
    if extra is not None and isinstance(extra, float):
        report.add(Finding(sheet, a1(table.first_row + len(labels), col), "structural", None, extra,
                           "a row was added below the table"))
    return None


def check_merges(report: AuditReport, book: Workbook, layout: BookLayout, mapping: dict[str, str]) -> None:
    blocks = [t.block for t, _ in _tables(layout)] + list(layout.parameters.weights) + list(layout.parameters.bias)
    for block in blocks:
        sheet = mapping.get(block.sheet)
        if sheet is None:
            continue
        for merged in book.sheets[sheet].merged:
            first, _, last = merged.partition(":")
            (r0, c0), (r1, c1) = parse_a1(first), parse_a1(last or first)
            if r0 <= block.bottom and r1 >= block.top and c0 <= block.right and c1 >= block.left:
                report.add(Finding(sheet, first, "structural", None, merged, f"merged cells {merged} cover a block"))


# ---------------------------------------------------------------- risks


def check_risks(report: AuditReport, book: Workbook) -> None:
    parts = book.parts
    if book.path.suffix.lower() in (".xlsm", ".xltm", ".xlam"):
        report.add(Finding("", book.path.name, "risks", ".xlsx", book.path.suffix,
                           "a macro-enabled file type; sheetnet never runs macros"))
    for part in parts:
        low = part.lower()
        if "vbaproject" in low or (low.endswith(".bin") and "vba" in low):
            report.add(Finding("", part, "risks", None, part, "the file carries macros (a VBA project); they are "
                                                                "never run by sheetnet"))
        elif "externallink" in low:
            report.add(Finding("", part, "risks", None, part, "external link to another workbook (not followed)"))
        elif low.endswith("connections.xml") or "querytable" in low:
            report.add(Finding("", part, "risks", None, part, "data connection (not followed)"))
    for target in book.external_targets:
        report.add(Finding("", target, "risks", None, target, "a relationship points outside the file (not followed)"))
    for name, cells in book.sheets.items():
        _sheet_risks(report, name, cells)


def _sheet_risks(report: AuditReport, name: str, cells: SheetCells) -> None:
    if cells.state != "visible" and name != L.LAYOUT and (cells.values or cells.formulas):
        report.add(Finding(name, "", "risks", "visible", cells.state, f"sheet {name!r} is {cells.state} and holds "
                                                                       "content"))
    for pos, formula in cells.formulas.items():
        if any(m.group(1) for m in _VOLATILE.finditer(formula)):
            report.add(Finding(name, a1(*pos), "risks", None, "=" + formula, "volatile function"))
        if "[" in formula and re.search(r"\[[^\]]+\]", formula.split('"')[0]):
            report.add(Finding(name, a1(*pos), "risks", None, "=" + formula, "reference to another workbook"))
    for pos, value in cells.values.items():
        if isinstance(value, CellError):
            report.add(Finding(name, a1(*pos), "risks", None, value.code, "the cell shows a spreadsheet error"))
        if value is not None and (pos[0] in cells.hidden_rows or pos[1] in cells.hidden_cols):
            report.add(Finding(name, a1(*pos), "risks", None, _plain(value), "content in a hidden row or column"))


# ---------------------------------------------------------------- inputs and formulas


def _same(a, b) -> bool:
    numbers = (float, int)
    if type(a) in numbers and type(b) in numbers:
        return a == b or abs(a - b) <= SAME_NUMBER * max(abs(a), abs(b))
    if a in (None, "") and b in (None, ""):
        return True
    return type(a) is type(b) and a == b


def input_cells(layout: BookLayout, inputs: BookInputs) -> list[tuple[str, tuple[int, int], object, str]]:
    """(sheet, position, value, description) of every editable input."""
    spec = layout.spec
    out = []

    def block(b: Block, values, what) -> None:
        for i in range(b.nrows):
            for j in range(b.ncols):
                out.append((b.sheet, (b.top + i, b.left + j), float(values[i][j]), what(i, j)))

    block(layout.offset, [inputs.offset], lambda i, j: f"scaling offset of {spec.inputs[j]}")
    block(layout.divisor, [inputs.divisor], lambda i, j: f"scaling divisor of {spec.inputs[j]}")
    _layer_inputs(block, layout.parameters, inputs.layers, spec, "")
    if layout.initial is not None and inputs.initial:
        _layer_inputs(block, layout.initial, inputs.initial, spec, "initial ")
    block(layout.calculator.raw, [inputs.calculator], lambda i, j: f"calculator input {spec.inputs[j]}")
    for cell, value, what in ((layout.threshold, inputs.threshold, "decision threshold"),
                              (layout.learning_rate, inputs.learning_rate, "learning rate"),
                              (layout.momentum, inputs.momentum, "momentum"), (layout.l2, inputs.l2, "L2 penalty")):
        if cell is not None:
            out.append((cell.sheet, (cell.row, cell.col), float(value), what))
    names = (*spec.inputs, *spec.target)
    for n, row in enumerate(inputs.data):
        for c, value in enumerate(row):
            key = ("raw", c) if c < len(spec.inputs) else ("target", c - len(spec.inputs))
            cell = layout.scoring.cell(n, key)
            out.append((cell.sheet, (cell.row, cell.col), value, f"data, case {n + 1}, column {names[c]!r}"))
    return out


def _layer_inputs(block, blocks, layers, spec, prefix: str) -> None:
    for k, layer in enumerate(layers):
        units, sources = spec.unit_names(k), spec.source_names(k)
        block(blocks.weights[k], layer.weights, lambda i, j, k=k, u=units, s=sources:
              f"{prefix}weight W_{k + 1}({u[i]},{s[j]})")
        block(blocks.bias[k], layer.bias[:, None], lambda i, j, k=k, u=units: f"{prefix}bias b_{k + 1}({u[i]})")


def _in_shift(sheet: str, row: int, shifted: dict[str, int]) -> bool:
    return sheet in shifted and row >= shifted[sheet]


def check_inputs(report: AuditReport, book: Workbook, layout: BookLayout, original: BookInputs,
                 mapping: dict[str, str], shifted: dict[str, int]) -> None:
    for sheet, pos, old, what in input_cells(layout, original):
        where = mapping.get(sheet)
        if where is None or _in_shift(sheet, pos[0], shifted):
            continue
        cells = book.sheets[where]
        if pos in cells.formulas:
            report.add(Finding(where, a1(*pos), "formula_edits", old, "=" + cells.formulas[pos],
                               f"a formula typed over an input ({what})"))
            continue
        new = cells.values.get(pos)
        if not _same(new, old):
            report.add(Finding(where, a1(*pos), "input_edits", old, _plain(new), f"{what} changed"))


def check_formulas(report: AuditReport, book: Workbook, layout: BookLayout, numbers, mapping: dict[str, str],
                   shifted: dict[str, int], reference_formulas: dict | None) -> set:
    """Expected formula cells against the file; returns the expected (sheet, position) set."""
    expected_cells = set()
    for sheet, entry in expected_entries(layout, numbers):
        pos = (entry.row, entry.col)
        where = mapping.get(sheet)
        expected_cells.add((sheet, pos))
        if where is None or _in_shift(sheet, entry.row, shifted):
            continue
        if entry.role in ("title", "text", "header", "label"):
            _check_label(report, book.sheets[where], where, pos, entry.content)
            continue
        if entry.role != "formula":
            continue
        expected_cells.add((sheet, pos))
        expected = entry.content
        if reference_formulas is not None:
            expected = reference_formulas.get((sheet, pos), expected)
        cells = book.sheets[where]
        found = cells.formulas.get(pos)
        if found is None:
            value = cells.values.get(pos)
            note = "a constant pasted over a formula" if value is not None else "a formula was deleted"
            report.add(Finding(where, a1(*pos), "formula_edits", expected, _plain(value), note))
        elif found != expected[1:] and normalize_formula(found) != normalize_formula(expected):
            note = "#REF! in a formula (a referenced cell was deleted)" if "#REF!" in found.upper() else \
                "the formula is not what sheetnet writes here"
            kind = "structural" if "#REF!" in found.upper() else "formula_edits"
            report.add(Finding(where, a1(*pos), kind, expected, "=" + found, note))
    for sheet, where in mapping.items():
        if sheet in (L.LAYOUT, L.GUIDE):
            continue
        cells = book.sheets[where]
        for pos in sorted(set(cells.formulas) | set(cells.values)):
            if (sheet, pos) in expected_cells or _in_shift(sheet, pos[0], shifted):
                continue
            if pos in cells.formulas:
                report.add(Finding(where, a1(*pos), "formula_edits", None, "=" + cells.formulas[pos],
                                   "a formula where sheetnet wrote none"))
            elif cells.values[pos] not in (None, ""):
                report.add(Finding(where, a1(*pos), "structural", None, _plain(cells.values[pos]),
                                   "content added where sheetnet wrote nothing"))
    return expected_cells


def _check_label(report: AuditReport, cells: SheetCells, where: str, pos, text) -> None:
    """Headers, labels and titles: changed wording is reported (it can mislead a reader)."""
    found = cells.values.get(pos)
    if pos in cells.formulas:
        report.add(Finding(where, a1(*pos), "formula_edits", text, "=" + cells.formulas[pos],
                           "a formula typed over a label"))
    elif not _same(found, float(text) if isinstance(text, int) else text):
        report.add(Finding(where, a1(*pos), "structural", text, _plain(found), "a label or header was changed"))


# ---------------------------------------------------------------- values


def check_values(report: AuditReport, book: Workbook, layout: BookLayout, mapping: dict[str, str],
                 shifted: dict[str, int], values: dict) -> None:
    """Recalculated values against the reference trainer on the edited inputs."""
    from sheetnet.book.numbers import compute

    numbers = compute(layout.spec, read_inputs(_renamed_view(book, mapping), layout))
    expected = [(sheet, e.row, e.col, e.content, e.value) for sheet, e in expected_entries(layout, numbers)
                if e.role == "formula" and sheet in mapping and not _in_shift(sheet, e.row, shifted)]
    view = _renamed_view(book, mapping)
    renamed_values = {sheet: values.get(where, {}) for sheet, where in mapping.items()}
    comparison = compare(view, expected, renamed_values, "embedded", 1e-9)
    record_rows = {}
    if layout.record is not None:
        for s, (first, count) in enumerate(layout.step_rows):
            for i in range(count):
                record_rows[layout.record.first_row + first + i] = s + 1
    for item in comparison.mismatches:
        report.add(Finding(mapping[item["sheet"]], item["cell"], "value_mismatches", item["expected"], item["found"],
                           "recalculated value differs from the reference trainer on the file's inputs"))
    report.count_unlisted("value_mismatches", comparison.mismatch_count - len(comparison.mismatches))
    steps = [record_rows[_row_of(m["cell"])] for m in comparison.mismatches
             if m["sheet"] == L.RECORD and _row_of(m["cell"]) in record_rows]
    report.first_diverging_step = min(steps) if steps else None
    for item in comparison.stale_cached:
        report.add(Finding(mapping[item["sheet"]], item["cell"], "risks", item["recalculated"], item["cached"],
                           "stale cached value: viewers that do not recalculate show the wrong number"))
    report.count_unlisted("risks", comparison.stale_count - len(comparison.stale_cached))
    for item in comparison.errors:
        report.add(Finding(mapping[item["sheet"]], item["cell"], "risks", None, item["error"],
                           "the recalculated cell is a spreadsheet error"))


def _row_of(cell: str) -> int:
    return parse_a1(cell)[0]


def _renamed_view(book: Workbook, mapping: dict[str, str]) -> Workbook:
    """The workbook with its sheets under the names the layout expects."""
    sheets = {expected: book.sheets[found] for expected, found in mapping.items()}
    return Workbook(path=book.path, sheets=sheets, names=book.names, local_names=book.local_names, parts=book.parts,
                    external_targets=book.external_targets)


# ---------------------------------------------------------------- the audit


@dataclass
class Reference:
    """What the audit compares with: the layout, the original inputs (None when the stored ones cannot
    be trusted), the original formulas (with --against), sheet names and their signatures."""

    layout: BookLayout
    original: BookInputs | None
    formulas: dict | None
    sheets: list[str]
    signatures: dict | None


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
        return Reference(own.layout, own.original, None, own.layout.sheet_names(), None)
    reference = read_workbook(against)
    layout, trusted = read_layout(reference)
    edited = None if own is None else own.data
    _description_findings(report, [Problem("format", path, f"differs from the original's description: {what}")
                                   for path, what in json_differences(trusted.data, edited)])
    formulas = {(sheet, pos): "=" + text for sheet, cells in reference.sheets.items()
                for pos, text in cells.formulas.items()}
    signatures = {name: _sheet_signature(cells) for name, cells in reference.sheets.items()}
    return Reference(layout, read_inputs(reference, layout), formulas, list(reference.sheets), signatures)


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


def audit(path: str | Path, against: str | Path | None = None, key: bytes | None = None) -> AuditReport:
    """Every difference between an edited workbook and its reference, classified; with ``key``, whether
    the workbook's signature holds."""
    with paused_gc():
        return _audit(Path(path), None if against is None else Path(against), key)


def _audit(path: Path, against: Path | None, key: bytes | None) -> AuditReport:
    from sheetnet.book.numbers import compute

    book = read_workbook(path, allow_macros=True)
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
    original = reference.original if reference.original is not None else read_inputs(book, layout)
    numbers = compute(layout.spec, original)
    report.reference_sheets = reference.signatures or _signatures(layout, numbers)
    engine = Background(engine_values, book, "embedded")
    try:
        mapping = map_sheets(report, book, reference.sheets)
        report.sheet_map = mapping
        check_names(report, book, layout, mapping)
        shifted = find_shifts(report, book, layout, mapping)
        shifted.update(find_block_shifts(report, book, layout, numbers, mapping))
        check_merges(report, book, layout, mapping)
        check_risks(report, book)
        if reference.original is not None:
            check_inputs(report, book, layout, reference.original, mapping, shifted)
        else:
            report.notes.append("input edits were not listed: the original inputs stored in the description "
                                "cannot be trusted")
        check_formulas(report, book, layout, numbers, mapping, shifted, reference.formulas)
        _values_if_possible(report, book, layout, mapping, shifted, engine)
    finally:
        engine.stop()
    return report


def _values_if_possible(report: AuditReport, book: Workbook, layout: BookLayout, mapping: dict[str, str],
                        shifted: dict[str, int], engine: Background) -> None:
    needed = [L.PARAMETERS, L.CALCULATOR] + ([L.SCORING] if layout.spec.n_cases else [])
    needed += [L.SETUP, L.RECORD] if layout.record is not None else []
    missing = [sheet for sheet in needed if sheet not in mapping]
    if missing or shifted:
        why = f"sheet(s) missing: {', '.join(missing)}" if missing else f"rows moved on {', '.join(shifted)}"
        report.notes.append(f"recalculated values were not compared with the reference: {why}")
        return
    ordered, _ = engine.result()
    values = {sheet: dict(zip(book.sheets[sheet].formulas, items, strict=True)) for sheet, items in ordered.items()}
    try:
        check_values(report, book, layout, mapping, shifted, values)
    except WorkbookFormatError as exc:
        report.notes.append(f"recalculated values were not compared with the reference: {exc}")


def _signatures(layout: BookLayout, numbers) -> dict[str, set]:
    """The texts sheetnet writes on each sheet (headers, labels): to recognise a renamed sheet."""
    out: dict[str, set] = {}
    for sheet, entry in expected_entries(layout, numbers):
        if entry.role != "formula" and isinstance(entry.content, str):
            out.setdefault(sheet, set()).add(entry.content)
    return out
