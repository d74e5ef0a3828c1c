"""scikit-learn models in: a fitted MLPClassifier or MLPRegressor (optionally after a StandardScaler or
MinMaxScaler in a Pipeline) as a sheetnet model. scikit-learn is not a dependency: nothing here
imports it, and no pickle is ever loaded."""

from __future__ import annotations

import numpy as np

from sheetnet.errors import ModelFileError, UsageError
from sheetnet.net.activations import Activation
from sheetnet.net.model import Layer, Model, Scaling, model_from_dict

SUPPORTED = ("MLPClassifier or MLPRegressor (fitted), alone or as the last step of a Pipeline whose only "
             "other step is a StandardScaler or MinMaxScaler")
_ACTIVATIONS = {"logistic": "sigmoid", "tanh": "tanh", "relu": "relu", "identity": "identity", "softmax": "softmax"}


def _kind(obj) -> str:
    return type(obj).__name__


def _split(estimator):
    if _kind(estimator) == "Pipeline":
        steps = [step for _, step in estimator.steps if step not in (None, "passthrough")]
        if len(steps) == 2:
            return steps[0], steps[1]
        if len(steps) == 1:
            return None, steps[0]
        raise UsageError(f"unsupported Pipeline with {len(steps)} steps; supported: {SUPPORTED}")
    return None, estimator


def _scaling(scaler, n_inputs: int) -> Scaling | None:
    if scaler is None:
        return None
    kind = _kind(scaler)
    if kind == "StandardScaler":
        offset = np.asarray(scaler.mean_, float) if scaler.mean_ is not None else np.zeros(n_inputs)
        scale = np.asarray(scaler.scale_, float) if scaler.scale_ is not None else np.ones(n_inputs)
        return Scaling("standard", offset, scale)
    if kind == "MinMaxScaler":
        # scikit-learn: x * scale_ + min_; as (x - offset) / divisor: divisor = 1 / scale_, offset = -min_ / scale_
        scale = np.asarray(scaler.scale_, float)
        return Scaling("minmax", -np.asarray(scaler.min_, float) / scale, 1.0 / scale)
    raise UsageError(f"unsupported scaler {kind}; supported: {SUPPORTED}")


def _names(value, count: int, what: str) -> tuple[str, ...] | None:
    if value is None:
        return None
    names = (value,) if isinstance(value, str) else tuple(str(v) for v in value)
    if len(names) != count:
        raise UsageError(f"{what}: the model has {count}, and {len(names)} name(s) were given: {', '.join(names)}")
    return names


def from_sklearn(estimator, target: str | list[str] | None = None, inputs: list[str] | None = None) -> Model:
    """The sheetnet model of a fitted scikit-learn MLP (see ``SUPPORTED``). Input names are those the
    estimator was fitted with (a DataFrame's columns), or ``inputs``, else x1, x2, ...; ``target`` names
    the data's target column (one per output for a regressor or a multilabel classifier), else "y"."""
    scaler, mlp = _split(estimator)
    kind = _kind(mlp)
    if kind not in ("MLPClassifier", "MLPRegressor"):
        raise UsageError(f"unsupported model {kind}; supported: {SUPPORTED}")
    if not hasattr(mlp, "coefs_"):
        raise UsageError(f"the {kind} is not fitted yet")
    n_inputs = mlp.coefs_[0].shape[0]
    names = [str(n) for n in getattr(estimator, "feature_names_in_", getattr(mlp, "feature_names_in_", []))]
    fitted = tuple(names) if len(names) == n_inputs else tuple(f"x{i + 1}" for i in range(n_inputs))
    inputs = _names(inputs, n_inputs, "inputs") or fitted
    hidden = Activation(_ACTIVATIONS[mlp.activation])
    output = Activation(_ACTIVATIONS[mlp.out_activation_])
    acts = [hidden] * (len(mlp.coefs_) - 1) + [output]
    layers = tuple(Layer(np.asarray(w, float).T.copy(), np.asarray(b, float).copy(), act)
                   for w, b, act in zip(mlp.coefs_, mlp.intercepts_, acts, strict=True))
    task, outputs, classes = _task(mlp, layers[-1].units)
    single = task in ("binary", "multiclass")
    targets = _names(target, 1 if single else len(outputs), "target") or (("y",) if single else outputs)
    if not single:
        outputs = targets  # a regressor's (or multilabel) outputs are its target columns
    if task == "binary":
        outputs = targets
    model = Model(inputs=inputs, outputs=outputs, task=task, layers=layers,
                  loss="squared" if task == "regression" else "cross-entropy", scaling=_scaling(scaler, n_inputs),
                  target=targets, classes=classes,
                  training={"source": f"scikit-learn {kind}", "n_iter": int(getattr(mlp, "n_iter_", 0)),
                            "final_loss": float(getattr(mlp, "loss_", 0.0) or 0.0)})
    try:  # what the model file's reader would refuse (empty or repeated names, a target among the inputs)
        model_from_dict(model.to_dict())
    except ModelFileError as exc:
        raise UsageError(f"from_sklearn: {exc}") from None
    return model


def _task(mlp, n_out: int) -> tuple[str, tuple[str, ...], tuple[str, ...]]:
    if _kind(mlp) == "MLPRegressor":
        outputs = ("y",) if n_out == 1 else tuple(f"y{k + 1}" for k in range(n_out))
        return "regression", outputs, ()
    classes = tuple(str(c) for c in mlp.classes_)
    if mlp.out_activation_ == "softmax":
        return "multiclass", classes, classes
    if n_out == 1:
        return "binary", ("y",), classes
    return "multilabel", tuple(f"label{k + 1}" for k in range(n_out)), ()
