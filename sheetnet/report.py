"""Human-readable summaries of verification (and, later, audit) results. No logic, only wording."""

from __future__ import annotations

from sheetnet.checks.comparison import Comparison
from sheetnet.checks.findings import KINDS
from sheetnet.checks.verify import VerifyReport

SHOWN = 5


def _cells(items: list[dict], total: int | None = None) -> str:
    """The first cells of a list, and how many more there are in all (lists are capped; totals are not)."""
    total = len(items) if total is None else total
    names = [f"{i['sheet']}!{i['cell']}" for i in items[:SHOWN]]
    more = f" and {total - len(names):,} more" if total > len(names) else ""
    return ", ".join(names) + more


def comparison_lines(c: Comparison) -> list[str]:
    lines = [f"engine: {c.engine}; {c.cells_compared:,} formula cells compared (tolerance {c.tolerance:g})"]
    lines += [f"  {sheet}: {count:,}" for sheet, count in c.per_sheet.items()]
    lines.append(f"largest absolute difference {c.max_abs_diff:.3g}" + (f" at {c.max_abs_where}" if c.max_abs_where
                                                                        else ""))
    where = f" at {c.max_rel_where}" if c.max_rel_where else ""
    lines.append(f"largest relative difference (values above 1) {c.max_rel_diff:.3g}{where}")
    if c.formula_differences:
        lines.append(f"{len(c.formula_differences)} cell(s) differ from what sheetnet writes: "
                     + _cells(c.formula_differences))
        for item in c.formula_differences[:SHOWN]:
            lines.append(f"  {item['sheet']}!{item['cell']}: {item['note']}: expected {item['expected']}, "
                         f"found {item['found']}")
    if c.mismatch_count:
        first = c.first_mismatch
        lines.append(f"{c.mismatch_count:,} value(s) differ from the reference trainer; first at "
                     f"{first['sheet']}!{first['cell']} (expected {first['expected']}, found {first['found']})")
    if c.errors:
        lines.append(f"{len(c.errors)} cell(s) show spreadsheet errors: " + _cells(c.errors))
    if c.stale_count:
        lines.append(f"{c.stale_count:,} cached value(s) are stale (saved value differs from the recalculation): "
                     + _cells(c.stale_cached, c.stale_count))
    if c.general_path:
        lines.append(f"{len(c.general_path)} cell(s) used the formulas package's general path: "
                     + ", ".join(c.general_path[:SHOWN]))
    return lines


def verify_lines(report: VerifyReport) -> list[str]:
    lines = [f"verifying {report.path}"]
    if report.realigned:
        lines.append(f"re-aligned to {len(report.realigned)} structural change(s) (cells compared where they moved):")
        lines += [f"  {change}" for change in report.realigned[:SHOWN]]
    for comparison in report.comparisons:
        lines += comparison_lines(comparison)
    if report.unstable is not None:
        lines += unstable_lines(report.unstable, report.comparisons[0].tolerance)
    if report.description_problems:
        lines.append(f"note: the layout description has {len(report.description_problems)} problem(s) in parts "
                     f"verification does not use (first: {report.description_problems[0]}); 'sheetnet audit' "
                     "lists them")
    if report.signature is not None:
        lines.append(f"signature: {report.signature.status.upper()} (key id {report.signature.key_id}): "
                     f"{report.signature.detail}")
    signature = "" if report.signature is None or report.signature.holds else "; but the signature does not hold"
    if report.verdict == "ok":
        cells = report.comparisons[0].cells_compared
        apart = "" if report.unstable is None else \
            f" ({len(report.unstable.cells):,} of them checked one formula at a time, see the note)"
        lines.append(f"verdict: OK: all {cells:,} formula cells agree with the reference trainer{apart}{signature}")
    elif report.verdict == "stale":
        stale = max(report.comparisons, key=lambda c: c.stale_count)
        sheets = ", ".join(f"{sheet} {count:,}" for sheet, count in stale.stale_per_sheet.items())
        lines.append(f"verdict: STALE: the formulas reproduce the reference trainer, but {stale.stale_count:,} saved "
                     f"value(s) are out of date ({sheets}); opening and saving the file in a spreadsheet application "
                     f"refreshes them{signature}")
    else:
        lines.append("verdict: FAILED: the workbook does not reproduce the reference trainer (see above)")
    return lines


def unstable_lines(unstable, tolerance: float) -> list[str]:
    """Why some record values were not compared end to end, and what was checked instead."""
    return [f"note: {unstable.summary(tolerance)}:",
            f"  {unstable.outcome()}"]


AUDIT_TITLES = {"description": "Layout description", "signature": "Signature", "structural": "Structure",
                "formula_edits": "Formula edits", "value_mismatches": "Value mismatches",
                "input_edits": "Input edits", "risks": "Risks"}


def audit_lines(report) -> list[str]:
    """Findings grouped by kind, most consequential first, and a one-line verdict."""

    lines = [f"auditing {report.path} against the {report.reference}"]
    for kind in KINDS:
        count = report.counts.get(kind, 0)
        if not count:
            continue
        lines.append(f"{AUDIT_TITLES[kind]} ({count}):")
        shown = report.of(kind)
        for finding in shown[:20]:
            where = f"{finding.sheet}!{finding.cell}" if finding.sheet and finding.cell else \
                finding.sheet or finding.cell
            detail = ""
            if finding.expected is not None or finding.found is not None:
                detail = f" (expected {finding.expected!r}, found {finding.found!r})"
            lines.append(f"  {where}: {finding.note}{detail}" if where else f"  {finding.note}{detail}")
        if count > 20:
            listed = len(shown)
            lines.append(f"  ... and {count - 20:,} more (--json lists " +
                         ("all of them)" if listed == count else f"the first {listed:,})"))
    lines += [f"note: {note}" for note in report.notes]
    if report.first_diverging_step is not None:
        lines.append(f"the training record first diverges from the reference at step {report.first_diverging_step}")
    if report.total:
        summary = ", ".join(f"{report.counts[k]} {AUDIT_TITLES[k].lower()}" for k in KINDS if report.counts.get(k))
        lines.append(f"verdict: CHANGED: {summary}")
    else:
        lines.append("verdict: UNCHANGED: no edits, structural changes or risks found")
    return lines
