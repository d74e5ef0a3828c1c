"""How much of a training run and of the data a workbook holds, so that it fits the cap on formula
cells by default.

A workbook of every case and every step of a long run would hold millions of formulas, more than
a spreadsheet application can use. Without size flags, ``build`` therefore chooses:

* the Scoring sheet holds every case when they take at most half the cap (all of it when there is
  no training record), else a stated sample (the training record's cases, and evenly spaced others);
* the training record replays as many whole epochs, from the start, as the rest of the cap allows;
  when not even one epoch of every training row fits, it replays the first epoch on the first
  training rows that fit.

Flags given by the user (``--trace-epochs``, ``--trace-rows``, ``--scoring-rows``) are kept; when they
cannot fit, the error names values of each flag that would.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sheetnet.errors import WorkbookFormatError


@dataclass(frozen=True)
class Requested:
    """What the user asked for: None where a flag was not given (then sheetnet chooses)."""

    epochs: int | None = None  # 0: no training record
    rows: int | None = None
    scoring_rows: int | None = None


@dataclass(frozen=True)
class Extent:
    """What the workbook holds: ``epochs`` of the run on the first ``rows`` training rows (0 epochs:
    no record), and ``scoring`` cases (None: all)."""

    epochs: int
    rows: int
    scoring: int | None
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Costs:
    """Formula cells per Scoring case, per record row and per step (its last row's gradients and new
    parameters); the run's size; the cap."""

    per_case: int
    per_record_row: int
    per_step: int
    n_cases: int
    n_train: int
    epochs: int
    batch: int
    cap: int
    fixed: int = 0  # the other sheets' formulas (calculator, summary, final parameters), at most
    per_epoch: int = 3  # a row of the Epochs sheet

    def epoch(self, rows: int) -> int:
        """Formula cells of one epoch of the record on ``rows`` training rows."""
        return rows * self.per_record_row + -(-rows // self.batch) * self.per_step + self.per_epoch

    def cells(self, epochs: int, rows: int, scoring: int) -> int:
        return self.fixed + scoring * self.per_case + epochs * self.epoch(rows)

    @property
    def room(self) -> int:
        """The cap less the other sheets' formulas: what Scoring and the record share."""
        return max(self.cap - self.fixed, 0)


def choose(costs: Costs, requested: Requested, record_possible: bool) -> Extent:
    """The extent of the workbook: the user's flags where given, the most that fits elsewhere."""
    wanted_epochs = 0 if not record_possible else requested.epochs
    scoring = _scoring(costs, requested, shared=wanted_epochs != 0)
    room = costs.room - scoring * costs.per_case
    if wanted_epochs == 0:
        return _checked(costs, Extent(0, 0, scoring), requested)
    rows = min(costs.n_train, requested.rows) if requested.rows is not None else costs.n_train
    if wanted_epochs is not None:
        return _checked(costs, Extent(min(wanted_epochs, costs.epochs), rows, scoring, _capped(costs, requested)),
                        requested)
    per_epoch = costs.epoch(rows)
    epochs = min(costs.epochs, room // per_epoch) if per_epoch else costs.epochs
    if epochs >= 1:
        return _checked(costs, Extent(int(epochs), rows, scoring), requested)
    if requested.rows is None:
        per_batch = costs.batch * costs.per_record_row + costs.per_step
        fit = max(room - costs.per_epoch, 0) // per_batch * costs.batch
        rows = int(fit) if fit else max(0, (room - costs.per_epoch - costs.per_step) // costs.per_record_row)
    return _checked(costs, Extent(1, max(int(rows), 0), scoring), requested)


def _scoring(costs: Costs, requested: Requested, shared: bool) -> int:
    """Cases on the Scoring sheet: as asked, else all that fit in half the room (the whole room when
    there is no training record to share it with)."""
    if requested.scoring_rows is not None:
        return min(costs.n_cases, requested.scoring_rows)
    room = costs.room // 2 if shared else costs.room
    if costs.n_cases * costs.per_case <= room:
        return costs.n_cases
    return max(1, room // costs.per_case)


def _capped(costs: Costs, requested: Requested) -> tuple[str, ...]:
    """Notes for size flags larger than the run itself."""
    notes = []
    if requested.epochs is not None and requested.epochs > costs.epochs:
        notes.append(f"--trace-epochs {requested.epochs:,} is more than the run's {costs.epochs:,} epochs: the "
                     "record replays all of them")
    if requested.rows is not None and requested.rows > costs.n_train:
        notes.append(f"--trace-rows {requested.rows:,} is more than the {costs.n_train:,} training rows: the record "
                     "uses all of them")
    return tuple(notes)


def _checked(costs: Costs, extent: Extent, requested: Requested) -> Extent:
    """The extent, if it fits (an explicit request may not): else an error naming flags that fit."""
    scoring = extent.scoring
    total = costs.cells(extent.epochs, extent.rows, scoring)
    if total <= costs.cap and (extent.epochs == 0 or extent.rows >= 1):
        return Extent(extent.epochs, extent.rows, None if scoring == costs.n_cases else scoring, extent.notes)
    rows = max(extent.rows, 1) if extent.epochs else 0
    needed = costs.cells(extent.epochs, rows, scoring)
    if requested.scoring_rows is None and scoring < costs.n_cases:  # a larger cap also widens the sample
        needed = max(needed, costs.fixed + 2 * (costs.cells(extent.epochs, rows, 0) - costs.fixed))
    advice = [*_advice(costs, Extent(extent.epochs, rows, scoring)), f"--max-cells {needed + needed // 10:,}"]
    record = costs.cells(extent.epochs, rows, 0) - costs.fixed
    raise WorkbookFormatError(
        f"the workbook would hold about {costs.cells(extent.epochs, rows, scoring):,} formula cells "
        f"({scoring * costs.per_case:,} in Scoring, "
        f"{record:,} in the training record, up to {costs.fixed:,} on the other sheets), more than the cap of "
        f"{costs.cap:,}: try {' or '.join(advice)}")


def _advice(costs: Costs, wanted: Extent) -> list[str]:
    """Flags that make ``wanted`` fit the cap, each keeping the rest as asked (only those that work)."""
    advice = []
    scoring_cells = wanted.scoring * costs.per_case
    record_cells = costs.cells(wanted.epochs, wanted.rows, 0) - costs.fixed
    spare = costs.room - record_cells
    if spare >= costs.per_case and scoring_cells > spare:
        advice.append(f"--scoring-rows {min(costs.n_cases, spare // costs.per_case):,}")
    spare = costs.room - scoring_cells
    if wanted.epochs and spare > 0:
        epochs = spare // max(1, costs.epoch(wanted.rows))
        per_row = costs.per_record_row + costs.per_step
        rows = (spare - costs.per_epoch) // per_row
        if 1 <= epochs < wanted.epochs:
            advice.append(f"--trace-epochs {epochs:,}")
        elif epochs < 1 and rows >= 1:
            advice.append(f"--trace-epochs 1 --trace-rows {rows:,}")
    if wanted.epochs and scoring_cells <= costs.room:
        advice.append("--trace-epochs 0 (no training record)")
    return advice


def scoring_sample(n_cases: int, size: int | None, needed: np.ndarray) -> np.ndarray:
    """The cases the Scoring sheet holds, in data order: the ``needed`` ones (the record's) and evenly
    spaced others up to ``size`` (all when ``size`` is None)."""
    if size is None or size >= n_cases:
        return np.arange(n_cases)
    chosen = set(np.unique(needed).tolist())
    others = np.setdiff1d(np.arange(n_cases), needed)
    room = max(0, size - len(chosen))
    if room and others.size:
        picks = np.linspace(0, others.size - 1, num=min(room, others.size)).round().astype(int)
        chosen.update(others[np.unique(picks)].tolist())
    return np.array(sorted(chosen), dtype=int)


def _plural(count: int, word: str) -> str:
    return f"{count:,} {word}" + ("" if count == 1 else "s")


def record_words(record, n_train: int, total_epochs: int) -> str:
    """What the training record replays, in words: whole epochs from the start, or the run's first steps."""
    epochs = record.epochs[-1]
    cases = sum(len(step) for step in record.steps)
    span = "epoch 1" if epochs == 1 else f"epochs 1-{epochs}"
    if cases == epochs * n_train:
        return f"{span} of {total_epochs:,} on all {_plural(n_train, 'training row')}"
    return (f"the run's first {_plural(len(record.steps), 'step')} ({_plural(cases, 'case')}, "
            f"{'within epoch 1' if epochs == 1 else f'into epoch {epochs}'} of {total_epochs:,}; "
            f"{_plural(n_train, 'training row')})")


def describe_extent(extent: Extent, costs: Costs, sample: int, all_cases: int, requested: Requested = Requested(),
                    replayed: str = "", metrics_in_guide: bool = False, continues: bool = False) -> list[str]:
    """One line each for what was left out (and whether the flags or the cap chose it), and how to
    record more; ``replayed``: the record in words (see :func:`record_words`)."""
    lines = list(extent.notes)
    if extent.epochs and (extent.epochs < costs.epochs or extent.rows < costs.n_train):
        asked = requested.epochs is not None and (requested.rows is not None or extent.rows >= costs.n_train)
        why = "as the flags asked" if asked else f"to fit {costs.cap:,} formula cells"
        held = "the model as given" if continues else "the end of the full run"
        lines.append(f"the training record replays {replayed} ({why}); the Parameters hold {held}; "
                     "record more with --trace-epochs / --trace-rows and --max-cells")
    if sample < all_cases:
        cases = "the record's cases and evenly spaced others" if extent.epochs else "evenly spaced cases"
        lines.append(f"the Scoring sheet holds a sample: {sample:,} of the {all_cases:,} cases ({cases}, numbered "
                     "by their row in the data file); its summary is over those"
                     + ("; metrics over every case are in the Guide" if metrics_in_guide else "")
                     + "; set --scoring-rows and --max-cells for more")
    if requested.scoring_rows is not None and sample > requested.scoring_rows:
        lines.append(f"--scoring-rows {requested.scoring_rows:,} is fewer than the {sample:,} cases the Scoring "
                     "sheet holds: it always holds the cases the training record uses")
    return lines
