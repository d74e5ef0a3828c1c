"""Building a workbook: from a trained run or a given model (and data) to a checked, atomically
written .xlsx. Size limits are checked before anything is written."""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from sheetnet.book.describe import describe, description_text
from sheetnet.book.expected import expected_numbers
from sheetnet.book.layout import BookLayout, build_layout
from sheetnet.book.signing import CellDigests, sign
from sheetnet.book.sizing import Costs, Extent, Requested, choose, describe_extent, record_words, scoring_sample
from sheetnet.book.spec import BookInputs, BookSpec, RecordSpec
from sheetnet.book.write import write_book
from sheetnet.errors import SheetNetError, WorkbookFormatError
from sheetnet.files import write_atomic
from sheetnet.gcpause import paused_gc
from sheetnet.net import data as dataio
from sheetnet.net.fit import FitOutcome, fingerprint
from sheetnet.net.metrics import Metrics, evaluate
from sheetnet.net.model import Layer, Model
from sheetnet.net.train import TrainSettings, epoch_batches
from sheetnet.version import __version__
from sheetnet.xlsx.addresses import MAX_COLS, MAX_ROWS

#: Default cap on formula cells; ``--max-cells`` raises it (spreadsheet applications slow down
#: well before their hard limits).
DEFAULT_MAX_CELLS = 500_000


@dataclass(frozen=True)
class BuildResult:
    path: Path
    formula_cells: int
    layout: BookLayout


def target_kind(model: Model, table: dataio.DataTable | None) -> str:
    """How the data's target columns become the numbers the loss uses."""
    if table is None or not model.target or not all(c in table.header for c in model.target):
        return "none"
    if model.task in ("regression", "multilabel"):
        return "values"
    if model.task == "binary" and dataio.binary_probabilities(table.column(model.target[0])) is not None:
        return "probabilities"
    return "labels"


def _cell(text: str) -> float | str:
    value = dataio.parse_number(text)
    return text if value is None else value


def _case_rows(model: Model, table: dataio.DataTable, kind: str) -> tuple[tuple[float | str, ...], ...]:
    x = dataio.feature_matrix(table, model.inputs)
    targets = [table.column(c) for c in model.target] if kind != "none" else []
    return tuple(tuple(float(v) for v in x[n]) + tuple(_cell(col[n]) for col in targets)
                 for n in range(len(table.rows)))


def record_schedule(train_rows: np.ndarray, settings: TrainSettings, epochs: int, rows: int) -> RecordSpec:
    """The steps of the record: the trainer's own batches, from the run's start. All of the first
    ``epochs`` epochs when ``rows`` covers every training row; else only the run's first steps, as many
    as ``epochs * rows`` cases allow (at least one), so the record is always the start of the real run."""
    budget = len(train_rows) * epochs if rows >= len(train_rows) else max(1, epochs * rows)
    steps, epoch_of, used = [], [], 0
    for e, batches in enumerate(epoch_batches(len(train_rows), settings, epochs), start=1):
        for batch in batches:
            cases = tuple(int(c) for c in train_rows[batch])
            if steps and used + len(cases) > budget:
                break
            steps.append(cases)
            epoch_of.append(e)
            used += len(cases)
        if used >= budget:
            break
    return RecordSpec(steps=tuple(steps), epochs=tuple(epoch_of), momentum=settings.momentum > 0,
                      l2=settings.l2 > 0)


def make_spec(model: Model, table: dataio.DataTable | None, sets: tuple[str, ...], record: RecordSpec | None,
              provenance: list[tuple[str, str]]) -> BookSpec:
    kind = target_kind(model, table)
    classes = model.classes if model.task in ("binary", "multiclass") else ()
    if kind != "none" and model.task in ("binary", "multiclass"):
        classes = dataio.encode_targets(table, model.target, model.task, classes).classes
    if model.task == "binary" and not classes:
        classes = ("0", "1")
    return BookSpec(
        inputs=model.inputs, outputs=model.outputs, units=tuple(layer.units for layer in model.layers),
        activations=tuple(layer.activation for layer in model.layers), loss=model.loss, task=model.task,
        classes=classes, target=model.target if kind != "none" else (), target_kind=kind,
        n_cases=0 if table is None else len(table.rows), sets=sets, record=record if kind != "none" else None,
        scaling_method=model.scaling.method if model.scaling else "none", provenance=tuple(provenance))


def make_inputs(model: Model, table: dataio.DataTable | None, kind: str, settings: TrainSettings | None,
                initial: tuple[Layer, ...], record: RecordSpec | None, threshold: float = 0.5) -> BookInputs:
    """The editable values. Without a ``record`` there are no initial parameters, momentum or L2 (the
    description must say what the workbook holds)."""
    n = len(model.inputs)
    offset = model.scaling.offset if model.scaling else np.zeros(n)
    divisor = model.scaling.scale if model.scaling else np.ones(n)
    data = _case_rows(model, table, kind) if table is not None else ()
    calculator = np.array(data[0][:n], dtype=float) if data else np.zeros(n)
    settings = settings or TrainSettings()
    momentum, l2 = (settings.momentum, settings.l2) if record is not None else (0.0, 0.0)
    return BookInputs(layers=model.layers, offset=np.asarray(offset, float), divisor=np.asarray(divisor, float),
                      data=data, threshold=threshold, calculator=calculator, learning_rate=settings.learning_rate,
                      momentum=momentum, l2=l2, initial=initial if record is not None else ())


def provenance(model: Model, table: dataio.DataTable | None, settings: TrainSettings | None, extent: Extent | None,
               metrics: list[tuple[str, Metrics]], extra: list[tuple[str, str]], record_words: str = ""
               ) -> list[tuple[str, str]]:
    lines = [("tool", f"sheetnet {__version__}")]
    if table is not None:
        lines += [("data file", Path(table.source).name), ("data SHA-256", fingerprint(table)),
                  ("data rows", str(len(table.rows)))]
        lines += [("data note", note) for note in table.notes]
    if settings is not None and extent is not None and extent.epochs:
        lines += [("training settings", ", ".join(f"{k}={v}" for k, v in settings.to_dict().items()))]
        lines += [("record", record_words)]
    if extent is not None and extent.scoring is not None:
        lines.append(("scoring", f"{extent.scoring:,} of {len(table.rows):,} cases (the record's and evenly spaced "
                                 "others)"))
    lines += [(f"metrics over all data ({what})", metrics_text(m)) for what, m in metrics]
    if isinstance(model.training.get("source"), str):
        lines.append(("model source", model.training["source"]))
    if model.training.get("float32") is True:
        lines.append(("precision", "the model's float32 weights are computed in float64 here, so its outputs agree "
                                   "with a float32 runtime's to float32 rounding (about 1e-6 relative)"))
    trained = model.training.get("final_loss")
    if trained is not None:
        lines.append(("trained model", f"last epoch's mean training loss {trained!r} (over the epoch's cases as it "
                                       "ran, before each step's update)"))
    return lines + extra


def metrics_text(metrics: Metrics) -> str:
    if metrics.accuracy is not None:
        return f"accuracy {metrics.accuracy:.4f} over {metrics.rows:,} rows"
    return "; ".join(f"{name}: RMSE {r:.6g}, MAE {m:.6g}" for name, r, m in
                     zip(metrics.labels, metrics.rmse, metrics.mae, strict=True)) + f" over {metrics.rows:,} rows"


def check_size(layout: BookLayout, max_cells: int) -> int:
    """Estimated formula cells; refuse what a spreadsheet application would truncate or choke on."""
    spec = layout.spec
    scoring = sum(c.role == "formula" for c in layout.scoring.columns) * spec.n_cases
    record = 0
    if layout.record is not None:
        per_row, per_step = record_columns(layout)
        record = per_row * layout.record.nrows + per_step * len(layout.step_rows)
    for table in (layout.scoring, layout.record):
        if table is None:
            continue
        if table.first_row + table.nrows > MAX_ROWS or table.left + len(table.columns) > MAX_COLS:
            raise WorkbookFormatError(
                f"the {table.sheet} sheet would need {table.first_row + table.nrows:,} rows and "
                f"{len(table.columns):,} columns; the limit is {MAX_ROWS:,} x {MAX_COLS:,}: "
                "use --trace-epochs / --trace-rows or a smaller network")
    estimate = scoring + record
    if estimate > max_cells:
        raise WorkbookFormatError(
            f"the workbook would hold about {estimate:,} formula cells ({record:,} in the training record), "
            f"more than the cap of {max_cells:,}: record fewer epochs or rows with --trace-epochs / --trace-rows, "
            "hold fewer cases with --scoring-rows, or raise the cap with --max-cells")
    return estimate


def write_workbook(spec: BookSpec, inputs: BookInputs, path: Path, force: bool = False,
                   max_cells: int = DEFAULT_MAX_CELLS, progress=None, sign_key: bytes | None = None) -> BuildResult:
    """Lay out, compute the reference numbers, check the size, write atomically.

    ``progress`` (optional, e.g. a :class:`sheetnet.progress.Progress`) gets a ``total`` (the estimated
    formula cells) and is called with the number written so far. With ``sign_key`` the description
    carries an HMAC-SHA256 signature over itself and every cell (``sheetnet.book.signing``)."""
    layout = build_layout(spec)
    estimate = check_size(layout, max_cells)
    if progress is not None:
        progress.total = max(estimate, 1)
    numbers = expected_numbers(spec, inputs)
    counted: list[int] = []
    digests = CellDigests() if sign_key is not None else None

    def describe_with(fingerprints, sheets) -> str:
        data = describe(layout, inputs, sheets, fingerprints)
        if sign_key is not None:
            sign(data, layout, digests, sign_key)
        return description_text(data)

    def write(tmp: Path) -> None:
        with paused_gc():
            counted.append(write_book(tmp, layout, numbers, describe_with, progress, digests))

    write_atomic(Path(path), write, force=force)
    return BuildResult(path=Path(path), formula_cells=counted[0], layout=layout)


@dataclass(frozen=True)
class Plan:
    """What ``build`` writes: the spec and inputs, and one line for each thing it left out."""

    spec: BookSpec
    inputs: BookInputs
    notes: tuple[str, ...] = ()


#: Record columns filled on a step's last row only (gradients, velocities, new parameters).
STEP_COLUMNS = ("g", "gb", "v", "vb", "w", "wb")


def record_columns(layout: BookLayout) -> tuple[int, int]:
    """Formula columns of the record filled on every row, and those filled on a step's last row only."""
    formulas = [c for c in layout.record.columns if c.role == "formula"]
    per_step = sum(c.key[0] in STEP_COLUMNS for c in formulas)
    return len(formulas) - per_step, per_step


def costs(model: Model, table: dataio.DataTable, settings: TrainSettings, n_train: int, max_cells: int) -> Costs:
    """Formula cells per Scoring case and per record row, from the columns the layout gives them."""
    batch = n_train if settings.batch_size is None else min(settings.batch_size, max(n_train, 1))
    probe = RecordSpec(steps=((0,) * max(batch, 1),), epochs=(1,), momentum=settings.momentum > 0, l2=settings.l2 > 0)
    spec = make_spec(model, table, ("",) * len(table.rows), probe, [])
    layout = build_layout(spec)
    per_row, per_step = record_columns(layout) if layout.record is not None else (0, 0)
    parameters = sum(u * (spec.fan_in(k) + 1) for k, u in enumerate(spec.units))
    fixed = len(spec.inputs) + 2 * sum(spec.units) + 4 * len(spec.outputs) + 16 + len(spec.classes) ** 2 + parameters
    return Costs(per_case=sum(c.role == "formula" for c in layout.scoring.columns), per_record_row=per_row,
                 per_step=per_step,
                 n_cases=len(table.rows), n_train=n_train, epochs=settings.epochs, batch=max(batch, 1), cap=max_cells,
                 fixed=fixed)


def _subset(table: dataio.DataTable, cases: np.ndarray) -> dataio.DataTable:
    if len(cases) == len(table.rows):
        return table
    return replace(table, rows=tuple(table.rows[i] for i in cases), lines=tuple(table.lines[i] for i in cases))


def _ranges(model: Model, table: dataio.DataTable, rows: np.ndarray) -> tuple[tuple[float, float], ...]:
    """Each input's (min, max) over the training rows (all rows for a given model's data), when the
    data's inputs are all numbers."""
    if not len(rows):
        return ()
    try:
        x = dataio.feature_matrix(table, model.inputs)[rows]
    except SheetNetError:
        return ()
    return tuple((float(low), float(high)) for low, high in zip(x.min(axis=0), x.max(axis=0), strict=True))


def _record_note(record, extent: Extent, run: TrainSettings, n_train: int, words: str, continues: bool) -> str:
    """The banner of a record that is not the whole run behind the Parameters (empty when it is)."""
    if record is None:
        return ""
    if continues:
        return (f"The training record continues training from the model's weights (the Parameters sheet): {words}; "
                "record_gap is how far those steps moved them.")
    if extent.epochs >= run.epochs and extent.rows >= n_train:
        return ""
    return (f"The training record replays {words}, not the whole run: the Parameters sheet holds the end of the "
            "full run, so record_gap is not 0.")


def _renumbered(record: RecordSpec | None, cases: np.ndarray) -> RecordSpec | None:
    """The record's steps with case numbers of the Scoring sample."""
    if record is None:
        return None
    position = {int(c): n for n, c in enumerate(cases)}
    return replace(record, steps=tuple(tuple(position[c] for c in step) for step in record.steps))


def plan_workbook(model: Model, table: dataio.DataTable, settings: TrainSettings | None, train_rows: np.ndarray,
                  initial: tuple[Layer, ...], requested: Requested, max_cells: int,
                  metrics: list[tuple[str, Metrics]], sets: list[str], extra: list[tuple[str, str]],
                  continues: bool = False) -> Plan:
    """The spec and inputs of a workbook of ``model`` and ``table``, sized to fit ``max_cells``: a record
    of the run from ``initial`` on ``train_rows`` (when targets and ``settings`` allow one)."""
    kind = target_kind(model, table)
    record_possible = kind != "none" and settings is not None and len(train_rows) > 0 and \
        not any(layer.activation.name == "step" for layer in model.layers)
    run = settings or TrainSettings()
    size = costs(model, table, run, len(train_rows), max_cells)
    extent = choose(size, requested, record_possible)
    record = record_schedule(train_rows, run, extent.epochs, extent.rows) if extent.epochs else None
    needed = np.array([c for step in record.steps for c in step] if record else [], dtype=int)
    cases = scoring_sample(len(table.rows), extent.scoring, needed)
    sample = _subset(table, cases)
    words = record_words(record, len(train_rows), run.epochs) if record else ""
    notes = describe_extent(extent, size, len(cases), len(table.rows), requested, words, bool(metrics), continues)
    lines = provenance(model, table, run if record else None, extent, metrics, extra, words)
    spec = make_spec(model, sample, tuple(sets[i] for i in cases), _renumbered(record, cases), lines)
    spec = replace(spec, record_note=_record_note(record, extent, run, len(train_rows), words, continues),
                   input_ranges=_ranges(model, table, train_rows))
    if len(cases) < len(table.rows):
        spec = replace(spec, case_rows=tuple(int(c) + 1 for c in cases))
    return Plan(spec, make_inputs(model, sample, spec.target_kind, run, initial, spec.record), tuple(notes))


def without_record(plan: Plan, why: str) -> Plan:
    """The plan with no training record (and so no initial parameters, momentum or L2)."""
    inputs = replace(plan.inputs, initial=(), momentum=0.0, l2=0.0)
    return Plan(replace(plan.spec, record=None), inputs, (*plan.notes, f"no training record: {why}"))


def from_fit(outcome: FitOutcome, table: dataio.DataTable, settings: TrainSettings, requested: Requested,
             max_cells: int = DEFAULT_MAX_CELLS, extra: list[tuple[str, str]] = ()) -> Plan:
    """The workbook of a training run: its model, data and replayed record."""
    sets = ["holdout"] * len(table.rows)
    for n in outcome.train_rows:
        sets[n] = "training"
    metrics = [("the trainer, training rows", outcome.train_metrics)]
    if outcome.holdout_metrics is not None:
        metrics.append(("the trainer, holdout rows", outcome.holdout_metrics))
    return plan_workbook(outcome.model, table, settings, outcome.train_rows, outcome.result.initial.layers,
                         requested, max_cells, metrics, sets, list(extra))


def from_model(model: Model, table: dataio.DataTable | None, settings: TrainSettings | None, requested: Requested,
               max_cells: int = DEFAULT_MAX_CELLS, extra: list[tuple[str, str]] = ()) -> Plan:
    """The workbook of a given model: parameters and calculator; with data, scoring; with targets in the
    data, a record that continues training from the model's weights with ``settings``."""
    if table is not None and not model.target:
        others = [c for c in table.header if c not in model.inputs]
        if len(others) == 1 and (len(model.outputs) == 1 or model.task in ("binary", "multiclass")):
            # a hand-written model without "target": the one other column is it
            model = replace(model, target=(others[0],))
    if table is None:
        spec = make_spec(model, None, (), None, provenance(model, None, None, None, [], list(extra)))
        return Plan(spec, make_inputs(model, None, "none", settings, model.layers, None))
    notes = []
    kind = target_kind(model, table)
    if kind == "none" and model.target:
        notes.append(f"the data has no target column {', '.join(model.target)!r}: the workbook scores the cases "
                     "(no loss, accuracy or training record); name the data's target column with --target")
    if kind != "none" and any(layer.activation.name == "step" for layer in model.layers):
        notes.append("no training record: step units cannot be trained by gradient descent")
    metrics = []
    if kind != "none":
        targets = dataio.encode_targets(table, model.target, model.task, model.classes).values
        metrics.append(("the model", evaluate(model, dataio.feature_matrix(table, model.inputs), targets)))
    rows = np.arange(len(table.rows))
    plan = plan_workbook(model, table, settings, rows, model.layers, requested, max_cells, metrics,
                         ["training" if kind != "none" else ""] * len(table.rows), list(extra), continues=True)
    return replace(plan, notes=tuple(notes) + plan.notes)
