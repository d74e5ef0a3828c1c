"""The reference trainer: plain gradient descent with optional momentum and L2, and a trace.

Conventions (the workbook's training record follows them cell for cell):

* One step = one update on a batch of consecutive rows of the epoch's order (data order, or a
  fresh permutation per epoch when shuffling). The last batch of an epoch may be smaller.
* Batch loss and gradient are means over the rows of the batch.
* L2 (``l2`` = lambda): the gradient of every weight gains ``lambda * w``; biases are not penalised.
  Reported losses are the data loss only.
* Momentum (``momentum`` = mu): v <- mu * v - lr * g, then p <- p + v, with v = 0 at the start.
  With mu = 0 this is p <- p - lr * g exactly.
* Seeds: ``np.random.SeedSequence(seed)`` spawns independent streams for initialisation,
  shuffling and the holdout split, so changing one use never shifts another.
* Initialisation: W and b drawn from U(-r, r) with r = sqrt(6 / (fan_in + fan_out)), or
  sqrt(2 / (fan_in + fan_out)) for sigmoid layers (Glorot & Bengio 2010, as scikit-learn applies
  it), then rounded to 12 decimal places so that every spreadsheet writer and reader keeps them
  exactly.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, replace

import numpy as np

from sheetnet.errors import ModelFileError, TrainingError, UsageError
from sheetnet.net import activations as act
from sheetnet.net.model import Layer, Model
from sheetnet.net.network import delta_arrays, forward_arrays, gradient_arrays

INIT_DECIMALS = 12


@dataclass(frozen=True)
class TrainSettings:
    """Gradient-descent settings. ``batch_size=None`` means the full training set per step."""

    learning_rate: float = 0.1
    epochs: int = 100
    batch_size: int | None = 1
    shuffle: bool = True
    seed: int = 0
    momentum: float = 0.0
    l2: float = 0.0

    def validate(self) -> None:
        if not (isinstance(self.learning_rate, float | int) and math.isfinite(self.learning_rate)
                and self.learning_rate > 0):
            raise UsageError(f"learning rate must be a positive number, got {self.learning_rate!r}")
        if not isinstance(self.epochs, int) or self.epochs < 1:
            raise UsageError(f"epochs must be a whole number >= 1, got {self.epochs!r}")
        if self.batch_size is not None and (not isinstance(self.batch_size, int) or self.batch_size < 1):
            raise UsageError(f"batch size must be a whole number >= 1 or 'full', got {self.batch_size!r}")
        if not (math.isfinite(self.momentum) and 0 <= self.momentum < 1):
            raise UsageError(f"momentum must be in [0, 1), got {self.momentum!r}")
        if not (math.isfinite(self.l2) and self.l2 >= 0):
            raise UsageError(f"L2 penalty must be >= 0, got {self.l2!r}")

    def to_dict(self) -> dict:
        return {"learning_rate": self.learning_rate, "epochs": self.epochs,
                "batch_size": "full" if self.batch_size is None else self.batch_size,
                "shuffle": self.shuffle, "seed": self.seed, "momentum": self.momentum, "l2": self.l2}


def stored_settings(model: Model, source: str = "the model file") -> TrainSettings | None:
    """The settings a model was trained with, as ``train`` stores them in the model file (None for a
    model trained elsewhere, which stores none); settings stored but not valid are refused with their
    JSON path, never replaced by defaults in silence."""
    raw = model.training.get("settings") if isinstance(model.training, dict) else None
    if raw is None:
        return None
    if not isinstance(raw, dict):
        raise ModelFileError(f"{source}: training.settings: expected an object")
    values = {}
    for key, read in _SETTING_READERS.items():
        if key not in raw and key not in _OPTIONAL_SETTINGS:
            raise ModelFileError(f"{source}: training.settings.{key} is missing")
        try:
            values[key] = read(raw.get(key, _OPTIONAL_SETTINGS.get(key)))
        except (TypeError, ValueError) as exc:
            raise ModelFileError(f"{source}: training.settings.{key}: {exc}") from None
    settings = TrainSettings(**values)
    try:
        settings.validate()
    except UsageError as exc:
        raise ModelFileError(f"{source}: training.settings: {exc}") from None
    return settings


def _number(value) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError(f"expected a number, got {value!r}")
    return float(value)


def _batch(value) -> int | None:
    return None if value == "full" else _whole(value)


def _whole(value) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise ValueError(f"expected a whole number, got {value!r}")
    return value


def _truth(value) -> bool:
    if not isinstance(value, bool):
        raise ValueError(f"expected true or false, got {value!r}")
    return value


#: How each stored setting is read (a wrong type is refused with its JSON path); the optional ones'
#: defaults are those of files written before they were stored.
_SETTING_READERS = {"learning_rate": _number, "epochs": _whole, "batch_size": _batch, "shuffle": _truth,
                    "seed": _whole, "momentum": _number, "l2": _number}
_OPTIONAL_SETTINGS = {"batch_size": 1, "momentum": 0.0, "l2": 0.0}


@dataclass(frozen=True)
class TraceStep:
    """Everything one update computed. Per layer k (0-based) the tuples hold arrays:

    ``z[k]``, ``a[k]``, ``delta[k]``: (batch, units_k); ``grad_w[k]``: (units_k, fan_in_k);
    ``grad_b[k]``: (units_k,); ``before``/``after``: the layers' parameters around the update;
    ``velocity[k]``: (W, b) after the update (zeros when momentum is off).
    ``rows`` are indices into the training rows; ``inputs`` the scaled inputs, ``targets`` the
    encoded targets, ``loss`` the per-sample loss (batch,), all before the update.
    """

    epoch: int
    step: int
    rows: np.ndarray
    inputs: np.ndarray
    targets: np.ndarray
    z: tuple[np.ndarray, ...]
    a: tuple[np.ndarray, ...]
    loss: np.ndarray
    delta: tuple[np.ndarray, ...]
    grad_w: tuple[np.ndarray, ...]
    grad_b: tuple[np.ndarray, ...]
    before: tuple[Layer, ...]
    after: tuple[Layer, ...]
    velocity: tuple[tuple[np.ndarray, np.ndarray], ...]


@dataclass(frozen=True)
class TrainResult:
    """The trained model, the model it started from, per-epoch curves and the optional trace.

    ``epoch_loss[e]`` / ``epoch_accuracy[e]``: mean per-sample loss and accuracy of epoch e+1,
    each sample scored by the parameters in force when its step ran (before that update).
    Accuracy is NaN for regression.
    """

    model: Model
    initial: Model
    epoch_loss: np.ndarray
    epoch_accuracy: np.ndarray
    trace: tuple[TraceStep, ...]


def seed_streams(seed: int) -> tuple[np.random.Generator, np.random.Generator, np.random.Generator]:
    """Independent generators for initialisation, shuffling and the holdout split."""
    init, shuffle, split = np.random.SeedSequence(seed).spawn(3)
    return np.random.default_rng(init), np.random.default_rng(shuffle), np.random.default_rng(split)


def init_layers(sizes: list[int], activations: list[act.Activation], seed: int) -> tuple[Layer, ...]:
    """Seeded initial layers for ``sizes`` = [n_inputs, units_1, ..., n_outputs]."""
    rng = seed_streams(seed)[0]
    layers = []
    for fan_in, fan_out, activation in zip(sizes[:-1], sizes[1:], activations, strict=True):
        factor = 2.0 if activation.name == "sigmoid" else 6.0
        r = math.sqrt(factor / (fan_in + fan_out))
        w = np.round(rng.uniform(-r, r, size=(fan_out, fan_in)), INIT_DECIMALS)
        b = np.round(rng.uniform(-r, r, size=fan_out), INIT_DECIMALS)
        layers.append(Layer(weights=w, bias=b, activation=activation))
    return tuple(layers)


def check_trainable(model: Model) -> None:
    """Refuse layers whose derivative cannot drive gradient descent."""
    for k, layer in enumerate(model.layers):
        if layer.activation.name not in act.TRAINABLE:
            raise UsageError(
                f"layer {k + 1} uses the {layer.activation.name!r} activation, whose derivative is zero "
                "almost everywhere: it can score data but cannot be trained by gradient descent"
            )
    act.check_pair(model.loss, model.output_activation)


def _batches(n: int, settings: TrainSettings, rng: np.random.Generator) -> list[np.ndarray | slice]:
    """Row selections of one epoch: index arrays when shuffled, slices (no copying) in data order."""
    size = n if settings.batch_size is None else min(settings.batch_size, n)
    if not settings.shuffle:
        return [slice(i, i + size) for i in range(0, n, size)]
    order = rng.permutation(n)
    return [order[i:i + size] for i in range(0, n, size)]


def epoch_batches(n: int, settings: TrainSettings, epochs: int | None = None
                  ) -> Iterator[list[np.ndarray | slice]]:
    """The batches (row indices) of each epoch, as the trainer draws them from the seed."""
    shuffle_rng = seed_streams(settings.seed)[1]
    for _ in range(settings.epochs if epochs is None else epochs):
        yield _batches(n, settings, shuffle_rng)


def _correct(task: str, y: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Per-sample correctness at threshold 0.5 (multilabel: every label right)."""
    if task == "multiclass":
        return np.argmax(y, axis=1) == np.argmax(t, axis=1)
    return np.all((y >= 0.5) == (t >= 0.5), axis=1)


def _check_finite(weights: list[np.ndarray], biases: list[np.ndarray], epoch: int) -> None:
    for k, (w, b) in enumerate(zip(weights, biases, strict=True)):
        if not (np.isfinite(w).all() and np.isfinite(b).all()):
            raise TrainingError(
                f"training diverged: a parameter of layer {k + 1} became non-finite in epoch {epoch}; "
                "try a smaller learning rate"
            )


def _layers(template: tuple[Layer, ...], weights: list[np.ndarray], biases: list[np.ndarray]) -> tuple[Layer, ...]:
    return tuple(replace(layer, weights=w, bias=b) for layer, w, b in zip(template, weights, biases, strict=True))


def train(model: Model, x: np.ndarray, t: np.ndarray, settings: TrainSettings,
          trace_epochs: int = 0, progress: Callable[[int], None] | None = None,
          schedule: Iterable[list[np.ndarray]] | None = None) -> TrainResult:
    """Train ``model`` (its layers are the starting point) on scaled inputs ``x`` and targets ``t``.

    ``trace_epochs``: record every step of the first that many epochs (0: none).
    ``progress`` is called with the number of finished epochs.
    ``schedule``: the batches (row indices into ``x``) of every epoch, replayed as given instead
    of being drawn from the settings; the number of epochs is then ``len(schedule)``.
    """
    settings.validate()
    check_trainable(model)
    if schedule is None:
        schedule = epoch_batches(len(x), settings)
    with np.errstate(over="ignore", invalid="ignore"):  # divergence is reported in words, by epoch
        return _train(model, x, t, settings, trace_epochs, progress, schedule)


def _train(model: Model, x: np.ndarray, t: np.ndarray, settings: TrainSettings, trace_epochs: int,
           progress: Callable[[int], None] | None, schedule: Iterable[list[np.ndarray]]) -> TrainResult:
    acts = [layer.activation for layer in model.layers]
    weights = [layer.weights.copy() for layer in model.layers]
    biases = [layer.bias.copy() for layer in model.layers]
    vel_w = [np.zeros_like(w) for w in weights]
    vel_b = [np.zeros_like(b) for b in biases]
    lr, mu, l2 = settings.learning_rate, settings.momentum, settings.l2
    epoch_loss, epoch_acc, trace = [], [], []
    step = 0
    for epoch, batches in enumerate(schedule, start=1):
        outputs, targets = [], []
        for rows in batches:
            step += 1
            xb, tb = x[rows], t[rows]
            zs, outs = forward_arrays(weights, biases, acts, xb)
            delta = delta_arrays(weights, acts, zs, outs, tb, model.loss)
            grad_w, grad_b = gradient_arrays(weights, xb, outs, delta, l2)
            before = (list(weights), list(biases)) if epoch <= trace_epochs else None
            for k in range(len(weights)):
                if mu:
                    vel_w[k] = mu * vel_w[k] - lr * grad_w[k]
                    vel_b[k] = mu * vel_b[k] - lr * grad_b[k]
                    weights[k] = weights[k] + vel_w[k]
                    biases[k] = biases[k] + vel_b[k]
                else:  # identical to the momentum form with mu = 0, without its work
                    weights[k] = weights[k] - lr * grad_w[k]
                    biases[k] = biases[k] - lr * grad_b[k]
            if before is not None:
                trace.append(_trace_step(model, epoch, step, rows, xb, tb, zs, outs, delta, grad_w, grad_b, before,
                                         (weights, biases), (vel_w, vel_b), lr, mu))
            outputs.append(outs[-1])
            targets.append(tb)
        _check_finite(weights, biases, epoch)
        y_all, t_all = np.concatenate(outputs), np.concatenate(targets)
        epoch_loss.append(float(np.mean(act.sample_loss(model.loss, acts[-1], y_all, t_all))))
        epoch_acc.append(float(np.mean(_correct(model.task, y_all, t_all))) if model.task != "regression"
                         else math.nan)
        if progress is not None:
            progress(epoch)
    return TrainResult(model=model.with_layers(_layers(model.layers, weights, biases)), initial=model,
                       epoch_loss=np.array(epoch_loss), epoch_accuracy=np.array(epoch_acc), trace=tuple(trace))


def _trace_step(model, epoch, step, rows, xb, tb, zs, outs, delta, grad_w, grad_b, before, after, velocity, lr, mu
                ) -> TraceStep:
    """A frozen record of one update (arrays are copied where the loop reuses them)."""
    loss = act.sample_loss(model.loss, model.layers[-1].activation, outs[-1], tb)
    if mu:
        vel = tuple((vw.copy(), vb.copy()) for vw, vb in zip(*velocity, strict=True))
    else:
        vel = tuple((-lr * gw, -lr * gb) for gw, gb in zip(grad_w, grad_b, strict=True))
    rows = np.arange(rows.start, rows.start + len(xb)) if isinstance(rows, slice) else np.asarray(rows)
    return TraceStep(epoch=epoch, step=step, rows=rows, inputs=xb, targets=tb, z=tuple(zs), a=tuple(outs),
                     loss=loss, delta=tuple(delta), grad_w=tuple(grad_w), grad_b=tuple(grad_b),
                     before=_layers(model.layers, *before), after=_layers(model.layers, *after), velocity=vel)
