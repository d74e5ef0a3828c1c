"""From a data table to a trained model: the steps ``sheetnet train`` runs, as one function.

Target inference, architecture (or a starting model), holdout split, scaling fitted on the
training rows, training, metrics, and the provenance kept in ``model.training``.
"""

from __future__ import annotations

import hashlib
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from sheetnet.errors import ModelFileError, UsageError
from sheetnet.net import data as dataio
from sheetnet.net.activations import Activation, check_pair
from sheetnet.net.metrics import Metrics, evaluate
from sheetnet.net.model import Model
from sheetnet.net.network import scaled_inputs
from sheetnet.net.train import TrainResult, TrainSettings, init_layers, seed_streams, train
from sheetnet.version import __version__

AUTO_HOLDOUT_FRACTION = 0.2
#: With ``holdout="auto"``, smaller data sets are trained on every row (worked examples).
AUTO_HOLDOUT_MIN_ROWS = 50


@dataclass(frozen=True)
class Architecture:
    """What to build when no starting model is given; ``None`` means infer it from the targets."""

    hidden: tuple[int, ...] = (4,)
    activation: Activation = field(default_factory=Activation)
    output: str | None = None
    loss: str | None = None
    task: str | None = None
    scale: str = "standard"


@dataclass(frozen=True)
class FitOutcome:
    """The trained model plus what the command line reports and the workbook replays."""

    model: Model
    result: TrainResult
    train_rows: np.ndarray
    holdout_rows: np.ndarray
    train_metrics: Metrics
    holdout_metrics: Metrics | None
    x_train: np.ndarray
    t_train: np.ndarray
    notes: tuple[str, ...]


def output_for(task: str) -> str:
    """The usual output activation for a task."""
    return {"binary": "sigmoid", "multilabel": "sigmoid", "multiclass": "softmax"}.get(task, "identity")


def loss_for(output: str) -> str:
    """Cross-entropy for probability outputs, squared error otherwise."""
    return "cross-entropy" if output in ("sigmoid", "softmax") else "squared"


def fingerprint(table: dataio.DataTable) -> str:
    """SHA-256 of the table's text (header and cells), independent of delimiter and line endings."""
    digest = hashlib.sha256()
    for row in (table.header, *table.rows):
        digest.update("\x1f".join(row).encode("utf-8"))
        digest.update(b"\x1e")
    return digest.hexdigest()


def holdout_fraction(holdout: float | str, n_rows: int) -> float:
    """Resolve ``"auto"`` (0.2 from 50 rows on, else 0) and check an explicit fraction."""
    if holdout == "auto":
        return AUTO_HOLDOUT_FRACTION if n_rows >= AUTO_HOLDOUT_MIN_ROWS else 0.0
    fraction = float(holdout)
    if not 0.0 <= fraction < 1.0:
        raise UsageError(f"holdout must be a fraction in [0, 1), got {holdout!r}")
    return fraction


def skeleton(table: dataio.DataTable, target: tuple[str, ...], inputs: tuple[str, ...] | None,
             arch: Architecture, seed: int) -> tuple[Model, dataio.Targets]:
    """A freshly initialised model for the table, and its encoded targets."""
    task = dataio.infer_task(table, target, arch.task, arch.output)
    output = Activation(arch.output or output_for(task))
    loss = arch.loss or loss_for(output.name)
    _check_pair(loss, output)
    encoded = dataio.encode_targets(table, target, task)
    inputs = inputs or tuple(c for c in table.header if c not in target)
    if not inputs:
        raise UsageError(f"{table.source}: no input columns left besides the target(s)")
    if any(h < 1 for h in arch.hidden):
        raise UsageError(f"hidden layer sizes must be >= 1, got {','.join(map(str, arch.hidden))}")
    activations = [arch.activation] * len(arch.hidden) + [output]
    sizes = [len(inputs), *arch.hidden, len(encoded.outputs)]
    model = Model(inputs=inputs, outputs=encoded.outputs, task=task, loss=loss,
                  layers=init_layers(sizes, activations, seed), target=target, classes=encoded.classes)
    return model, encoded


def _check_pair(loss: str, output: Activation) -> None:
    try:
        check_pair(loss, output)
    except ModelFileError as exc:
        raise UsageError(str(exc)) from None


def from_start(table: dataio.DataTable, start: Model, target: tuple[str, ...], arch: Architecture
               ) -> tuple[Model, dataio.Targets]:
    """The starting model with flag overrides (output activation, loss, task) applied."""
    layers = start.layers
    if arch.output and arch.output != start.output_activation.name:
        last = replace(layers[-1], activation=Activation(arch.output))
        layers = (*layers[:-1], last)
    loss = arch.loss or start.loss
    _check_pair(loss, layers[-1].activation)
    task = arch.task or start.task
    encoded = dataio.encode_targets(table, target, task, start.classes)
    if len(encoded.outputs) != layers[-1].units:
        raise UsageError(f"the starting model has {layers[-1].units} output unit(s) but the target(s) "
                         f"{', '.join(target)} give {len(encoded.outputs)} for a {task} task")
    model = replace(start, layers=layers, loss=loss, task=task, target=target, classes=encoded.classes,
                    outputs=encoded.outputs if task in ("multiclass", "multilabel", "regression") else start.outputs)
    return model, encoded


def _strata(task: str, values: np.ndarray) -> np.ndarray | None:
    """Class codes to stratify the holdout split by (none for regression and multilabel)."""
    if task == "multiclass":
        return np.argmax(values, axis=1)
    if task == "binary":
        return (values[:, 0] >= 0.5).astype(int)
    return None


def fit(table: dataio.DataTable, target: tuple[str, ...], settings: TrainSettings, arch: Architecture | None = None,
        start: Model | None = None, holdout: float | str = "auto", inputs: tuple[str, ...] | None = None,
        trace_epochs: int = 0, progress: Callable[[int], None] | None = None) -> FitOutcome:
    """Train on ``table``; with ``start`` the architecture, activations and scaling come from it."""
    settings.validate()
    arch = arch or Architecture()
    target = target or (start.target if start else ())
    if not target:
        raise UsageError("no target column given (--target)")
    table.require(target, "target")
    both = [c for c in (inputs or ()) if c in target]
    if both:
        raise UsageError(f"column {both[0]!r} is both an input and a target")
    if start is None:
        model, encoded = skeleton(table, target, inputs, arch, settings.seed)
    else:
        model, encoded = from_start(table, start, target, arch)
    x_raw = dataio.feature_matrix(table, model.inputs)
    strata = _strata(model.task, encoded.values)
    fraction = holdout_fraction(holdout, len(table.rows))
    train_rows, hold_rows = dataio.holdout_split(len(table.rows), fraction, seed_streams(settings.seed)[2], strata)
    if len(train_rows) == 0:
        raise UsageError("the holdout leaves no training rows; use a smaller --holdout")
    if start is None:
        model = replace(model, scaling=dataio.fit_scaling(arch.scale, x_raw[train_rows]))
    x_train, t_train = scaled_inputs(model, x_raw[train_rows]), encoded.values[train_rows]
    result = train(model, x_train, t_train, settings, trace_epochs=trace_epochs, progress=progress)
    trained = result.model
    train_metrics = evaluate(trained, x_raw[train_rows], t_train)
    hold_metrics = evaluate(trained, x_raw[hold_rows], encoded.values[hold_rows]) if len(hold_rows) else None
    trained = replace(trained, training=_provenance(table, settings, result, fraction, train_rows, hold_rows,
                                                    train_metrics, hold_metrics))
    return FitOutcome(model=trained, result=replace(result, model=trained), train_rows=train_rows,
                      holdout_rows=hold_rows, train_metrics=train_metrics, holdout_metrics=hold_metrics,
                      x_train=x_train, t_train=t_train, notes=(f"task: {model.task}",))


def _provenance(table, settings, result, fraction, train_rows, hold_rows, train_metrics, hold_metrics) -> dict:
    return {
        "tool": f"sheetnet {__version__}",
        "settings": settings.to_dict(),
        "seed": settings.seed,
        "epochs": settings.epochs,
        "final_loss": float(result.epoch_loss[-1]),
        "epoch_loss": result.epoch_loss.tolist(),
        "data_sha256": fingerprint(table),
        "data_rows": len(table.rows),
        "holdout_fraction": fraction,
        "training_rows": len(train_rows),
        "holdout_rows": len(hold_rows),
        "train_metrics": train_metrics.to_dict(),
        "holdout_metrics": None if hold_metrics is None else hold_metrics.to_dict(),
    }
