"""What an audit reports: classified findings and their counts (plain data, no checking here)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from sheetnet.xlsx.cells import CellError

KINDS = ("description", "signature", "structural", "formula_edits", "value_mismatches", "input_edits", "risks")
#: At most this many findings of one kind are listed (all are counted).
LIST_LIMIT = 1000


def plain(value):
    """A value as JSON can hold it: error codes as text, numpy scalars as Python numbers."""
    if isinstance(value, CellError):
        return value.code
    if isinstance(value, np.floating | np.integer):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return str(value)
    return value


@dataclass(frozen=True)
class Finding:
    sheet: str
    cell: str
    kind: str
    expected: object
    found: object
    note: str

    def to_dict(self) -> dict:
        return {"sheet": self.sheet, "cell": self.cell, "kind": self.kind, "expected": plain(self.expected),
                "found": plain(self.found), "note": self.note}


@dataclass
class AuditReport:
    path: Path
    reference: str
    findings: list[Finding] = field(default_factory=list)
    counts: dict[str, int] = field(default_factory=dict)
    first_diverging_step: int | None = None
    notes: list[str] = field(default_factory=list)

    def add(self, finding: Finding) -> None:
        self.counts[finding.kind] = self.counts.get(finding.kind, 0) + 1
        if self.counts[finding.kind] <= LIST_LIMIT:
            self.findings.append(finding)

    def count_unlisted(self, kind: str, count: int) -> None:
        """Findings counted but not listed (an engine's comparison lists only the first ones)."""
        if count > 0:
            self.counts[kind] = self.counts.get(kind, 0) + count

    def of(self, kind: str) -> list[Finding]:
        return [f for f in self.findings if f.kind == kind]

    @property
    def total(self) -> int:
        return sum(self.counts.values())

    def to_dict(self) -> dict:
        out = {"file": str(self.path), "reference": self.reference, "finding_count": self.total, "notes": self.notes,
               "listed_at_most": LIST_LIMIT,
               "counts": {k: self.counts.get(k, 0) for k in KINDS}, "first_diverging_step": self.first_diverging_step}
        out.update({kind: [f.to_dict() for f in self.of(kind)] for kind in KINDS})
        return out
