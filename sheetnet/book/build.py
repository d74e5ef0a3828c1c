"""Building a workbook: from a trained run or a given model (and data) to a checked, atomically
written .xlsx. Size limits are checked before anything is written."""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from sheetnet.book.addresses import MAX_COLS, MAX_ROWS
from sheetnet.book.describe import describe, description_text
from sheetnet.book.layout import BookLayout, build_layout
from sheetnet.book.numbers import compute
from sheetnet.book.signing import CellDigests, sign
from sheetnet.book.spec import BookInputs, BookSpec, RecordSpec
from sheetnet.book.write import write_book
from sheetnet.errors import UsageError, WorkbookFormatError
from sheetnet.files import write_atomic
from sheetnet.gcpause import paused_gc
from sheetnet.net import data as dataio
from sheetnet.net.fit import FitOutcome, fingerprint
from sheetnet.net.model import Layer, Model
from sheetnet.net.train import TrainSettings, epoch_batches
from sheetnet.version import __version__

#: Default cap on formula cells; ``--max-cells`` raises it (spreadsheet applications slow down
#: well before their hard limits).
DEFAULT_MAX_CELLS = 500_000


@dataclass(frozen=True)
class RecordOptions:
    """Which part of a training run the record replays: the first ``epochs`` epochs on the first
    ``rows`` training rows (None: all)."""

    epochs: int | None = None
    rows: int | None = None


@dataclass(frozen=True)
class BuildResult:
    path: Path
    formula_cells: int
    layout: BookLayout


def target_kind(model: Model, table: dataio.Table | None) -> str:
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


def _case_rows(model: Model, table: dataio.Table, kind: str) -> tuple[tuple[float | str, ...], ...]:
    x = dataio.feature_matrix(table, model.inputs)
    targets = [table.column(c) for c in model.target] if kind != "none" else []
    return tuple(tuple(float(v) for v in x[n]) + tuple(_cell(col[n]) for col in targets)
                 for n in range(len(table.rows)))


def record_schedule(train_rows: np.ndarray, settings: TrainSettings, options: RecordOptions
                    ) -> RecordSpec:
    """The steps of the record: the trainer's own batches for the chosen epochs and rows."""
    rows = train_rows if options.rows is None else train_rows[: options.rows]
    epochs = settings.epochs if options.epochs is None else options.epochs
    steps, epoch_of = [], []
    for e, batches in enumerate(epoch_batches(len(rows), settings, epochs), start=1):
        for batch in batches:
            steps.append(tuple(int(c) for c in rows[batch]))
            epoch_of.append(e)
    return RecordSpec(steps=tuple(steps), epochs=tuple(epoch_of), momentum=settings.momentum > 0,
                      l2=settings.l2 > 0)


def _check_options(options: RecordOptions) -> None:
    for name, value in (("--trace-epochs", options.epochs), ("--trace-rows", options.rows)):
        if value is not None and value < 1:
            raise UsageError(f"{name} must be >= 1, got {value}")


def make_spec(model: Model, table: dataio.Table | None, sets: tuple[str, ...], record: RecordSpec | None,
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


def make_inputs(model: Model, table: dataio.Table | None, kind: str, settings: TrainSettings | None,
                initial: tuple[Layer, ...], threshold: float = 0.5) -> BookInputs:
    n = len(model.inputs)
    offset = model.scaling.offset if model.scaling else np.zeros(n)
    divisor = model.scaling.scale if model.scaling else np.ones(n)
    data = _case_rows(model, table, kind) if table is not None else ()
    calculator = np.array(data[0][:n], dtype=float) if data else np.zeros(n)
    settings = settings or TrainSettings()
    return BookInputs(layers=model.layers, offset=np.asarray(offset, float), divisor=np.asarray(divisor, float),
                      data=data, threshold=threshold, calculator=calculator, learning_rate=settings.learning_rate,
                      momentum=settings.momentum, l2=settings.l2, initial=initial)


def provenance(model: Model, table: dataio.Table | None, settings: TrainSettings | None,
               options: RecordOptions, extra: list[tuple[str, str]]) -> list[tuple[str, str]]:
    lines = [("tool", f"sheetnet {__version__}")]
    if table is not None:
        lines += [("data file", Path(table.source).name), ("data SHA-256", fingerprint(table)),
                  ("data rows", str(len(table.rows)))]
        lines += [("data note", note) for note in table.notes]
    if settings is not None:
        lines += [("training settings", ", ".join(f"{k}={v}" for k, v in settings.to_dict().items()))]
        lines += [("record", f"epochs {options.epochs or settings.epochs}, rows "
                             f"{options.rows if options.rows is not None else 'all training rows'}")]
    trained = model.training.get("final_loss")
    if trained is not None:
        lines.append(("trained model", f"final training loss {trained!r}"))
    return lines + extra


def check_size(layout: BookLayout, max_cells: int) -> int:
    """Estimated formula cells; refuse what a spreadsheet application would truncate or choke on."""
    spec = layout.spec
    scoring = sum(c.role == "formula" for c in layout.scoring.columns) * spec.n_cases
    record = 0 if layout.record is None else sum(c.role == "formula" for c in layout.record.columns) * \
        layout.record.nrows
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
            "or raise the cap with --max-cells")
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
    numbers = compute(spec, inputs)
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


def from_fit(outcome: FitOutcome, table: dataio.Table, settings: TrainSettings, options: RecordOptions,
             extra: list[tuple[str, str]] = ()) -> tuple[BookSpec, BookInputs]:
    """Spec and inputs for a workbook of a training run: its model, data and replayed record."""
    _check_options(options)
    model = outcome.model
    sets = ["holdout"] * len(table.rows)
    for n in outcome.train_rows:
        sets[n] = "training"
    record = record_schedule(outcome.train_rows, settings, options)
    spec = make_spec(model, table, tuple(sets), record, provenance(model, table, settings, options, list(extra)))
    inputs = make_inputs(model, table, spec.target_kind, settings, outcome.result.initial.layers)
    return spec, inputs


def from_model(model: Model, table: dataio.Table | None, settings: TrainSettings | None, options: RecordOptions,
               extra: list[tuple[str, str]] = ()) -> tuple[BookSpec, BookInputs, list[str]]:
    """Spec and inputs for a given model; with targets in the data, a record starting from its weights."""
    _check_options(options)
    notes: list[str] = []
    record = None
    if table is not None and not model.target:
        others = [c for c in table.header if c not in model.inputs]
        if len(others) == 1:  # a hand-written model without "target": the one other column is it
            model = replace(model, target=(others[0],))
    kind = target_kind(model, table)
    if table is not None and kind != "none" and settings is not None:
        untrainable = [layer.activation.name for layer in model.layers if layer.activation.name == "step"]
        if untrainable:
            notes.append("no training record: step units cannot be trained by gradient descent")
        else:
            record = record_schedule(np.arange(len(table.rows)), settings, options)
    sets = ("training" if record is not None else "",) * (0 if table is None else len(table.rows))
    spec = make_spec(model, table, sets, record, provenance(model, table, settings if record else None, options,
                                                            list(extra)))
    inputs = make_inputs(model, table, spec.target_kind, settings, model.layers)
    return spec, inputs, notes
