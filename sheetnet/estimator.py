"""scikit-learn style estimators around the reference trainer (needs scikit-learn installed).

``__init__`` only stores parameters; ``fit`` validates them and learns ``model_``, ``coefs_``,
``intercepts_``, ``loss_curve_``; ``to_workbook`` writes the workbook of the fitted network with a
training record that replays the fit from its initial weights.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.utils.multiclass import check_classification_targets, unique_labels
from sklearn.utils.validation import check_is_fitted, validate_data

from sheetnet.api import Requested, plan_from_run, write_plan
from sheetnet.net.activations import Activation
from sheetnet.net.data import DataTable, fit_scaling
from sheetnet.net.model import Model
from sheetnet.net.network import predict_outputs
from sheetnet.net.train import TrainSettings, init_layers, train


class _SheetNet(BaseEstimator):
    """Shared parameters. hidden_layer_sizes: units per hidden layer; activation: sigmoid, tanh, relu or
    identity; learning_rate, n_epochs, batch_size (an int or "full"), shuffle, random_state, momentum,
    l2 and scaling ("standard", "minmax" or "none") as for ``sheetnet train``."""

    def __init__(self, hidden_layer_sizes=(4,), activation="sigmoid", learning_rate=0.1, n_epochs=100,
                 batch_size=1, shuffle=True, random_state=0, momentum=0.0, l2=0.0, scaling="standard"):
        self.hidden_layer_sizes = hidden_layer_sizes
        self.activation = activation
        self.learning_rate = learning_rate
        self.n_epochs = n_epochs
        self.batch_size = batch_size
        self.shuffle = shuffle
        self.random_state = random_state
        self.momentum = momentum
        self.l2 = l2
        self.scaling = scaling

    def _settings(self) -> TrainSettings:
        batch = None if self.batch_size == "full" else int(self.batch_size)
        seed = self.random_state if isinstance(self.random_state, int | np.integer) else 0
        settings = TrainSettings(learning_rate=float(self.learning_rate), epochs=int(self.n_epochs),
                                 batch_size=batch, shuffle=bool(self.shuffle), seed=int(seed),
                                 momentum=float(self.momentum), l2=float(self.l2))
        settings.validate()
        return settings

    def _fit(self, x: np.ndarray, t: np.ndarray, task: str, outputs: tuple[str, ...], classes: tuple[str, ...],
             output: str, loss: str):
        settings = self._settings()
        if self.activation not in ("sigmoid", "tanh", "relu", "identity"):
            raise ValueError(f"activation must be sigmoid, tanh, relu or identity, got {self.activation!r}")
        hidden = tuple(int(h) for h in np.atleast_1d(self.hidden_layer_sizes)) if self.hidden_layer_sizes else ()
        inputs = tuple(str(n) for n in getattr(self, "feature_names_in_", [])) or tuple(
            f"x{i + 1}" for i in range(x.shape[1]))
        acts = [Activation(self.activation)] * len(hidden) + [Activation(output)]
        layers = init_layers([x.shape[1], *hidden, t.shape[1]], acts, settings.seed)
        model = Model(inputs=inputs, outputs=outputs, task=task, layers=layers, loss=loss,
                      scaling=fit_scaling(self.scaling, x), target=("y",) if task != "regression" else outputs,
                      classes=classes)
        scaled = x if model.scaling is None else model.scaling.apply(x)
        result = train(model, scaled, t, settings)
        self.model_ = result.model
        self.initial_model_ = result.initial
        self.loss_curve_ = result.epoch_loss.tolist()
        self.n_iter_ = settings.epochs
        self.coefs_ = [layer.weights.T.copy() for layer in result.model.layers]
        self.intercepts_ = [layer.bias.copy() for layer in result.model.layers]
        self._x_fit, self._t_fit = x, t
        return self

    def _outputs(self, x) -> np.ndarray:
        check_is_fitted(self, "model_")
        x = validate_data(self, x, reset=False)
        return predict_outputs(self.model_, np.asarray(x, dtype=float))

    def to_workbook(self, path, x=None, y=None, trace_epochs: int | None = None, force: bool = False) -> Path:
        """Write the fitted network's workbook; with ``x`` and ``y``, batch scoring of those rows (default: the
        training rows) and a training record replaying the fit from its initial weights."""

        check_is_fitted(self, "model_")
        x = self._x_fit if x is None else np.asarray(validate_data(self, x, reset=False), dtype=float)
        labels = self._labels(self._t_fit) if y is None else [str(v) for v in np.asarray(y).ravel()]
        model = self.model_
        table = _table(model, x, labels)
        plan = plan_from_run(model, self.initial_model_, table, self._settings(), Requested(epochs=trace_epochs))
        return write_plan(plan, path, force=force)[0].path


def _table(model: Model, x: np.ndarray, labels: list[str]) -> DataTable:
    header = (*model.inputs, *model.target)
    rows = tuple((*(repr(float(v)) for v in row), *label.split("\x1f")) for row, label in zip(x, labels, strict=True))
    return DataTable(source="estimator data", header=header, rows=rows, lines=tuple(range(2, len(rows) + 2)))


class SheetNetClassifier(ClassifierMixin, _SheetNet):
    """Binary (one sigmoid output) or multiclass (softmax) classifier trained with cross-entropy."""

    def fit(self, x, y):
        x, y = validate_data(self, x, y)
        check_classification_targets(y)
        self.classes_ = unique_labels(y)
        if len(self.classes_) < 2:
            raise ValueError(f"classification needs at least two classes; y has only one class: {self.classes_[0]!r}")
        names = tuple(str(c) for c in self.classes_)
        if len(self.classes_) == 2:
            t = (y == self.classes_[1]).astype(float)[:, None]
            return self._fit(np.asarray(x, float), t, "binary", ("y",), names, "sigmoid", "cross-entropy")
        t = (y[:, None] == self.classes_[None, :]).astype(float)
        return self._fit(np.asarray(x, float), t, "multiclass", names, names, "softmax", "cross-entropy")

    def predict_proba(self, x) -> np.ndarray:
        y = self._outputs(x)
        return np.hstack([1.0 - y, y]) if len(self.classes_) == 2 else y

    def predict(self, x) -> np.ndarray:
        probabilities = self.predict_proba(x)
        return self.classes_[np.argmax(probabilities, axis=1)]

    def _labels(self, t: np.ndarray) -> list[str]:
        index = (t[:, 0] >= 0.5).astype(int) if t.shape[1] == 1 else np.argmax(t, axis=1)
        return [str(self.classes_[i]) for i in index]


class SheetNetRegressor(RegressorMixin, _SheetNet):
    """Regression with identity outputs and squared error (one or several targets)."""

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.multi_output = True
        return tags

    def fit(self, x, y):
        x, y = validate_data(self, x, y, y_numeric=True, multi_output=True)
        t = np.asarray(y, dtype=float)
        self._single = t.ndim == 1
        t = t[:, None] if self._single else t
        outputs = ("y",) if t.shape[1] == 1 else tuple(f"y{k + 1}" for k in range(t.shape[1]))
        return self._fit(np.asarray(x, float), t, "regression", outputs, (), "identity", "squared")

    def predict(self, x) -> np.ndarray:
        y = self._outputs(x)
        return y[:, 0] if self._single else y

    def _labels(self, t: np.ndarray) -> list[str]:
        return ["\x1f".join(repr(float(v)) for v in row) for row in t]
