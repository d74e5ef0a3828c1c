"""The Python API: everything the command line does, for notebooks and scripts, and the one place
that puts the stages together (the command line, the estimators and the learning-rate comparison
call these functions).

Data may be a CSV path, a pandas DataFrame, a numpy array (columns named ``x1``, ``x2``, ...; with
``target`` naming the target column(s) among them), or a table already read. Functions raise
:class:`SheetNetError` subclasses with the same messages the command line prints.

>>> import numpy as np, sheetnet
>>> x = np.array([[0, 0, 0], [0, 1, 1], [1, 0, 1], [1, 1, 0]] * 5, dtype=float)
>>> outcome = sheetnet.train(x, target="x3", hidden=(3,), learning_rate=1.0, epochs=5, batch_size="full")
>>> outcome.model.task
'binary'
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from sheetnet.book.build import (
    DEFAULT_MAX_CELLS,
    BuildResult,
    Plan,
    from_fit,
    from_model,
    plan_workbook,
    without_record,
    write_workbook,
)
from sheetnet.book.signing import SignatureCheck, key_id, key_readable_by_others, new_key_text, read_key
from sheetnet.book.sizing import Requested
from sheetnet.book.write import write_rate_book
from sheetnet.checks.annotate import annotate
from sheetnet.checks.audit import AuditReport, audit
from sheetnet.checks.extract import extract
from sheetnet.checks.verify import VERIFY_STAGES, VerifyReport, signature_of, verify
from sheetnet.errors import TrainingError, UsageError
from sheetnet.files import file_sha256, write_atomic
from sheetnet.htmlreport import Section, loss_plot, page, write_html, write_report
from sheetnet.net import data as dataio
from sheetnet.net.activations import Activation
from sheetnet.net.fit import Architecture, FitOutcome, fit
from sheetnet.net.metrics import Metrics, evaluate
from sheetnet.net.model import Model, load_model
from sheetnet.net.predict import score_table
from sheetnet.net.train import TrainSettings, stored_settings
from sheetnet.onnxio.convert import from_onnx
from sheetnet.rates import RateRun, best, compare_rates, summary_rows

if TYPE_CHECKING:
    import pandas as pd

#: The API; the command line reaches the stages only through these names.
__all__ = [
    "ARCHITECTURE",
    "MODEL_SUFFIXES",
    "RATES_NOTE",
    "SETTINGS",
    "SETTING_WORDS",
    "SIZED_TO_FIT",
    "VERIFY_STAGES",
    "Plan",
    "Requested",
    "annotate_workbook",
    "architecture",
    "as_model",
    "as_table",
    "audit_workbook",
    "build_workbook",
    "compare_learning_rates",
    "export_onnx",
    "extract_model",
    "extract_with_note",
    "key_id",
    "key_readable_by_others",
    "new_signing_key",
    "plan_from_data",
    "plan_from_model",
    "plan_from_run",
    "rates_verdict",
    "read_signing_key",
    "report_html",
    "score",
    "score_metrics",
    "settings",
    "signature_check",
    "summary_rows",
    "train",
    "verify_workbook",
    "write_plan",
    "write_rates_report",
]

Progress = Callable[[int], None] | None
SIZED_TO_FIT = Requested()  # no size asked for: the workbook is sized to fit the cap


def as_table(data, source: str = "data") -> dataio.DataTable:
    """A CSV path, a DataFrame, a 2-D numpy array or a table already read, as a data table."""
    if isinstance(data, dataio.DataTable):
        return data
    if isinstance(data, str | Path):
        return dataio.read_csv(data)
    if isinstance(data, np.ndarray):
        import pandas as pd  # lazy: pandas costs about half a second to import and only this path needs it

        data = pd.DataFrame(np.atleast_2d(data), columns=[f"x{i + 1}" for i in range(np.atleast_2d(data).shape[1])])
    return dataio.table_from_frame(data, source)


def as_model(model: Model | str | Path, data=None, inputs=None, classes=None, target=None) -> Model:
    """A model, a model file (.json) or an ONNX graph (.onnx; ``inputs``, ``classes`` and ``target`` name
    what the graph does not, else the data's numeric columns are its inputs)."""
    if isinstance(model, str | Path) and Path(model).suffix.lower() == ".onnx":
        return from_onnx(model, inputs, classes, target, None if data is None else as_table(data))
    return load_model(model) if isinstance(model, str | Path) else model


#: The training settings in words (notes name the ones given).
SETTING_WORDS = {"learning_rate": "learning rate", "epochs": "epochs", "batch_size": "batch size",
                 "shuffle": "shuffle", "seed": "seed", "momentum": "momentum", "l2": "L2 penalty"}
SETTINGS = tuple(SETTING_WORDS)
ARCHITECTURE = ("hidden", "activation", "output", "loss", "task", "scale")


def settings(learning_rate: float = 0.1, epochs: int = 100, batch_size: int | str | None = 1, shuffle: bool = True,
             seed: int = 0, momentum: float = 0.0, l2: float = 0.0) -> TrainSettings:
    """Gradient-descent settings; ``batch_size="full"`` uses every training row per step."""
    return _over(TrainSettings(), dict(learning_rate=learning_rate, epochs=epochs, batch_size=batch_size,
                                       shuffle=shuffle, seed=seed, momentum=momentum, l2=l2))


def _over(base: TrainSettings, given: dict) -> TrainSettings:
    """``base`` with the settings in ``given`` (batch size "full" is every row), validated."""
    values = {k: None if k == "batch_size" and v == "full" else v for k, v in given.items()}
    if isinstance(values.get("batch_size"), float) and values["batch_size"].is_integer():
        values["batch_size"] = int(values["batch_size"])
    run = replace(base, **values)
    run.validate()
    return run


def architecture(hidden=(4,), activation: str | Activation = "sigmoid", output: str | None = None,
                 loss: str | None = None, task: str | None = None, scale: str = "standard") -> Architecture:
    """What to build when no starting model is given (``None``: inferred from the targets)."""
    unit = activation if isinstance(activation, Activation) else Activation(activation)
    return Architecture(hidden=tuple(hidden), activation=unit, output=output, loss=loss, task=task, scale=scale)


def _options(options: dict, allowed: tuple[str, ...]) -> dict:
    unknown = sorted(set(options) - set(SETTINGS) - set(ARCHITECTURE))
    if unknown:
        raise UsageError(f"unknown training option(s): {', '.join(unknown)}")
    return {k: v for k, v in options.items() if k in allowed}


def train(data, target=None, holdout: float | str = "auto", init: Model | str | Path | None = None,
          inputs=None, progress: Progress = None, **options) -> FitOutcome:
    """Train like ``sheetnet train``; the result's ``model`` saves with ``.save(path)``. ``options``:
    the arguments of :func:`settings` and :func:`architecture`."""
    run = settings(**_options(options, SETTINGS))
    arch = architecture(**_options(options, ARCHITECTURE))
    start = None if init is None else as_model(init)
    return fit(as_table(data), dataio.column_names(target), run, arch, start=start, holdout=holdout,
               inputs=dataio.column_names(inputs) or None, progress=progress)


def score(model: Model | str | Path, data, threshold: float = 0.5, keep_other_columns: bool = True) -> pd.DataFrame:
    """Scores like ``sheetnet score``: the data's columns, probabilities (or values) and ``predicted``."""
    return score_table(as_model(model), as_table(data), threshold, keep_other_columns)


def score_metrics(model: Model | str | Path, data, threshold: float = 0.5) -> Metrics | None:
    """The model's metrics on data that holds its target column(s) (None when it does not)."""
    model, table = as_model(model), as_table(data)
    if not model.target or not all(name in table.header for name in model.target):
        return None
    targets = dataio.encode_targets(table, model.target, model.task, model.classes)
    return evaluate(model, dataio.feature_matrix(table, model.inputs), targets.values, threshold)


def plan_from_data(data, target=None, requested: Requested = SIZED_TO_FIT, max_cells: int = DEFAULT_MAX_CELLS,
                   holdout: float | str = "auto", init=None, inputs=None, progress: Progress = None,
                   **options) -> tuple[Plan, FitOutcome]:
    """The workbook of a training run on ``data`` (and the run, for its summary)."""
    table = as_table(data)
    outcome = train(table, target, holdout=holdout, init=init, inputs=inputs, progress=progress, **options)
    run = settings(**_options(options, SETTINGS))
    return from_fit(outcome, table, run, requested, max_cells), outcome


def plan_from_model(model: Model | str | Path, data=None, target=None, requested: Requested = SIZED_TO_FIT,
                    max_cells: int = DEFAULT_MAX_CELLS, inputs=None, classes=None, **setting_overrides) -> Plan:
    """The workbook of a given model: with data, scoring; with the data's targets, a record that
    continues training from the model's weights with its stored settings, except those given.
    ``inputs`` and ``classes`` name what an ONNX graph does not (see :func:`as_model`)."""
    source = str(model) if isinstance(model, str | Path) else "the model"
    table = None if data is None else as_table(data)
    model = as_model(model, table, inputs, classes, target)
    if target is not None:
        _check_target(model, table, dataio.column_names(target), source)
        model = replace(model, target=dataio.column_names(target))
    stored = stored_settings(model, source)
    run = _over(stored or TrainSettings(), _options(setting_overrides, SETTINGS)) if table is not None else None
    plan = from_model(model, table, run, requested, max_cells)
    if plan.spec.record is None:
        return plan
    origin = "the model's stored settings" if stored is not None else \
        "the defaults (the model file stores no training settings)"
    given = [SETTING_WORDS[name] for name in _options(setting_overrides, SETTINGS)]
    note = f"the training record continues from the model's weights with {origin}" + \
        (f", except the {', '.join(given)} given" if given else "")
    return replace(plan, notes=(*plan.notes, note))


def plan_from_run(model: Model, initial: Model, data, run: TrainSettings, requested: Requested = SIZED_TO_FIT,
                  max_cells: int = DEFAULT_MAX_CELLS) -> Plan:
    """The workbook of a run made outside :func:`train` (the estimators) on every row of ``data``: its
    record replays the run from ``initial`` with ``run``."""
    table = as_table(data)
    rows = np.arange(len(table.rows))
    return plan_workbook(model, table, run, rows, initial.layers, requested, max_cells, [], ["training"] * len(rows),
                         [])


def _check_target(model: Model, table: dataio.DataTable | None, target: tuple[str, ...], source: str) -> None:
    """A target given with a model names the data's column(s) holding the model's target(s): as many
    as the model has, and present in the data."""
    if len(target) != max(1, len(model.target)):
        raise UsageError(f"--target names {len(target)} column(s), and the model in {source} has "
                         f"{max(1, len(model.target))} target(s)")
    missing = [name for name in target if table is not None and name not in table.header]
    if missing:
        raise UsageError(f"--target {missing[0]!r}: no such column in {table.source}")


def write_plan(plan: Plan, path, force: bool = False, max_cells: int = DEFAULT_MAX_CELLS, progress: Progress = None,
               sign_key: bytes | None = None, keep_scores: bool = False) -> tuple[BuildResult, Plan]:
    """Write the workbook atomically (and the plan written). ``keep_scores``: a given model's scores
    still belong in a workbook when continuing training from it diverges, so the record is dropped
    with a note instead of failing."""
    try:
        return write_workbook(plan.spec, plan.inputs, Path(path), force=force, max_cells=max_cells,
                              progress=progress, sign_key=sign_key), plan
    except TrainingError as exc:
        if not keep_scores or plan.spec.record is None:
            raise
        plan = without_record(plan, f"{exc} (from the model's weights at learning rate "
                                    f"{plan.inputs.learning_rate:g})")
        return write_workbook(plan.spec, plan.inputs, Path(path), force=force, max_cells=max_cells,
                              progress=progress, sign_key=sign_key), plan


def build_workbook(path, data=None, target=None, model: Model | str | Path | None = None, trace_epochs=None,
                   trace_rows=None, scoring_rows=None, max_cells: int = DEFAULT_MAX_CELLS, force: bool = False,
                   **train_options) -> Path:
    """Write the workbook like ``sheetnet build``: train on ``data`` (``train_options`` as for :func:`train`), or
    write it for ``model`` (with ``data``: scoring, and a record continuing from the model's weights with its
    stored settings, or those given). Without size arguments the workbook fits ``max_cells``."""
    requested = Requested(epochs=trace_epochs, rows=trace_rows, scoring_rows=scoring_rows)
    if model is None:
        plan, _ = plan_from_data(data, target, requested, max_cells, **train_options)
    else:
        plan = plan_from_model(model, data, target, requested, max_cells, **_options(train_options, SETTINGS))
    return write_plan(plan, path, force=force, max_cells=max_cells, keep_scores=model is not None)[0].path


def verify_workbook(path, engine: str = "embedded", tolerance: float = 1e-9, key: bytes | None = None,
                    progress: Progress = None) -> VerifyReport:
    """Recalculate and compare like ``sheetnet verify``; the report's ``ok`` and ``to_dict()`` say the rest."""
    return verify(path, engine=engine, tolerance=tolerance, progress=progress, key=key)


def audit_workbook(path, against=None, key: bytes | None = None, engine: str = "embedded") -> AuditReport:
    """Classified findings like ``sheetnet audit`` (``report.to_dict()`` is the JSON report)."""
    return audit(path, against=against, key=key, engine=engine)


def extract_model(path, after_training: bool = False) -> Model:
    """The workbook's (possibly edited) model like ``sheetnet extract``."""
    return extract_with_note(path, after_training)[0]


def extract_with_note(path, after_training: bool = False) -> tuple[Model, str]:
    """The workbook's model and a line saying which parameters it holds."""
    return extract(path, after_training=after_training)


def report_html(source, out, force: bool = False, data=None, inputs=None, classes=None, target=None) -> Path:
    """The HTML report of a model file or ONNX graph (``data``: a CSV whose points the plots show) or a
    workbook, like ``sheetnet report``."""
    model = as_model(source, data, inputs, classes, target) if Path(source).suffix.lower() in MODEL_SUFFIXES else None
    return write_report(source, out, force=force, data=data, model=model)


#: Files that hold a model (anything else given to report or export is read as a workbook).
MODEL_SUFFIXES = (".json", ".onnx")


def export_onnx(source, out, after_training: bool = False, dtype: str = "float64", threshold: float | None = None,
                force: bool = False, inputs=None, classes=None) -> str:
    """Write a workbook's model (the parameters it holds now, or after the record's last step), a model
    file's or a graph's as an ONNX graph, like ``sheetnet export``; a line saying what was written. The
    label's threshold is ``threshold``, else the workbook's (or the one stored when it was extracted)."""
    source = Path(source)
    if source.suffix.lower() in MODEL_SUFFIXES:
        if after_training:
            raise UsageError("--after-training goes with a workbook (its training record); a model file holds "
                             "one set of parameters")
        model, note = as_model(source, None, inputs, classes), f"model read from {source.name}"
    else:
        model, note = extract(source, after_training=after_training)
    chosen = threshold if threshold is not None else model.training.get("threshold", 0.5)
    proto = model.to_onnx(dtype, float(chosen), source=source.name, source_sha256=file_sha256(source))
    write_atomic(Path(out), lambda tmp: tmp.write_bytes(proto.SerializeToString()), force=force)
    return f"{note}; {dtype} graph with threshold {float(chosen):g}"


def compare_learning_rates(data, target, rates, holdout: float | str = "auto", init: Model | str | Path | None = None,
                           **options) -> list[RateRun]:
    """Runs at several learning rates from the same start, like ``sheetnet rates``."""
    run = settings(**_options(options, SETTINGS))
    arch = architecture(**_options(options, ARCHITECTURE))
    start = None if init is None else as_model(init)
    return compare_rates(as_table(data), dataio.column_names(target), list(rates), run, arch, holdout, start)


def rates_verdict(runs: list[RateRun]) -> str:
    """One line: the rate with the lowest loss, or that every rate diverged."""
    chosen = best(runs)
    if chosen is None:
        return "every rate diverged; try smaller rates"
    return (f"lowest {'holdout' if chosen.holdout_loss is not None else 'training'} loss at learning rate "
            f"{chosen.rate:g}")


RATES_NOTE = ("Every run starts from the same initial weights, with the same split and batches. 'diverged': the "
              "loss became non-finite or never beat the untrained start; 'unstable': the last epoch's loss is over "
              "1.5 times its lowest; 'stalled': it is still above 95% of the first epoch's.")


def write_rates_report(runs: list[RateRun], title: str, out, workbook=None, force: bool = False) -> bool:
    """The comparison as an HTML page (``out``) and, when any run has a loss curve, as a workbook of
    the curves with a native chart (``workbook``); whether the workbook was written."""
    rows = summary_rows(runs)
    curves = {f"lr {r.rate:g}": r.curve for r in runs if r.curve}
    images = [loss_plot(curves, "training loss by learning rate")] if curves else []
    sections = [Section("Learning rates", [rates_verdict(runs), RATES_NOTE], images,
                        [[str(v) for v in row] for row in rows])]
    write_html(Path(out), page(f"sheetnet learning-rate comparison: {title}", sections), force)
    if workbook is None or not curves:
        return False
    write_atomic(Path(workbook), lambda tmp: write_rate_book(tmp, curves, rows), force=force)
    return True


def annotate_workbook(path, report: AuditReport, out, force: bool = False) -> None:
    """A copy of the workbook with each finding marked on its cell (like ``audit --annotate``)."""
    annotate(path, report, out, force=force)


def read_signing_key(path) -> bytes:
    """The secret key in a key file made by :func:`new_signing_key`."""
    return read_key(Path(path))


def new_signing_key(path, force: bool = False) -> str:
    """Write a new secret key file readable only by its owner; its key id (which names, never reveals, it)."""
    write_atomic(Path(path), lambda tmp: tmp.write_text(new_key_text(), encoding="ascii"), force=force, mode=0o600)
    return key_id(read_key(Path(path)))


def signature_check(path, key: bytes) -> SignatureCheck:
    """Whether the workbook's signature holds under ``key`` (its status and detail)."""
    return signature_of(Path(path), key)
