"""The model: plain frozen data, and its versioned JSON file (``"format": "sheetnet-model"``).

``weights[j][i]`` is the weight from input (or unit) i of the previous layer to unit j of
this layer: one row per unit, the same orientation as the workbook's matrices.
Files are validated on load; every complaint names the JSON path (``layers[1].weights[0][2]``).
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from sheetnet.errors import ModelFileError
from sheetnet.files import write_text_atomic
from sheetnet.net.activations import Activation, check_pair
from sheetnet.onnxio.graph_out import model_to_onnx  # imports no net module: no cycle
from sheetnet.strictjson import RepeatedKey, without_repeated_keys

FORMAT = "sheetnet-model"
VERSION = 1
TASKS = ("binary", "multiclass", "multilabel", "regression")
SCALING_METHODS = ("standard", "minmax", "given")  # given: offset and divisor read from elsewhere (ONNX)


@dataclass(frozen=True)
class Layer:
    """One dense layer: ``weights`` (units, fan_in), ``bias`` (units,), an activation."""

    weights: np.ndarray
    bias: np.ndarray
    activation: Activation

    @property
    def units(self) -> int:
        return int(self.weights.shape[0])

    @property
    def fan_in(self) -> int:
        return int(self.weights.shape[1])


@dataclass(frozen=True)
class Scaling:
    """Input scaling fitted on training rows: scaled = (x - offset) / scale."""

    method: str
    offset: np.ndarray
    scale: np.ndarray

    def apply(self, x: np.ndarray) -> np.ndarray:
        return (x - self.offset) / self.scale


@dataclass(frozen=True)
class Model:
    """A feed-forward network plus what is needed to read data for it and name its outputs.

    ``target`` lists the data columns holding the targets; ``classes`` the class labels for
    binary (negative first, positive second) and multiclass tasks, else empty.
    """

    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    task: str
    layers: tuple[Layer, ...]
    loss: str
    scaling: Scaling | None = None
    target: tuple[str, ...] = ()
    classes: tuple[str, ...] = ()
    training: dict[str, Any] = field(default_factory=dict)

    def with_layers(self, layers: tuple[Layer, ...]) -> Model:
        return replace(self, layers=layers)

    @property
    def output_activation(self) -> Activation:
        return self.layers[-1].activation

    def unit_names(self, layer_index: int) -> tuple[str, ...]:
        """Names of a layer's units: the outputs for the last layer, ``h{k}_{j}`` before it."""
        if layer_index == len(self.layers) - 1:
            return self.outputs
        return tuple(f"h{layer_index + 1}_{j + 1}" for j in range(self.layers[layer_index].units))

    def source_names(self, layer_index: int) -> tuple[str, ...]:
        """Names of what feeds a layer: the inputs, or the previous layer's units."""
        return self.inputs if layer_index == 0 else self.unit_names(layer_index - 1)

    def to_onnx(self, dtype: str = "float64", threshold: float = 0.5, source: str = "", source_sha256: str = ""):
        """The model as an ONNX ModelProto (``onnx.save(model.to_onnx(), path)``); needs the onnx extra."""
        return model_to_onnx(self, dtype, threshold, source, source_sha256)

    def to_dict(self) -> dict[str, Any]:
        return {
            "format": FORMAT,
            "version": VERSION,
            "inputs": list(self.inputs),
            "outputs": list(self.outputs),
            "target": list(self.target),
            "classes": list(self.classes),
            "task": self.task,
            "scaling": None if self.scaling is None else {
                "method": self.scaling.method,
                "offset": self.scaling.offset.tolist(),
                "scale": self.scaling.scale.tolist(),
            },
            "layers": [
                {"weights": layer.weights.tolist(), "bias": layer.bias.tolist(),
                 "activation": layer.activation.to_dict()}
                for layer in self.layers
            ],
            "loss": self.loss,
            "training": self.training,
        }

    def to_json(self) -> str:
        # repr-exact floats: json writes the shortest string that round-trips.
        return json.dumps(self.to_dict(), indent=2, allow_nan=False) + "\n"

    def save(self, path: str | Path, force: bool = False) -> Path:

        return write_text_atomic(Path(path), self.to_json(), force=force)


def load_model(path: str | Path) -> Model:
    """Read and validate a model file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise ModelFileError(f"{path}: model file not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ModelFileError(f"{path}: cannot read model file ({exc})") from None
    try:
        data = json.loads(text, parse_constant=_refuse_constant, object_pairs_hook=without_repeated_keys)
    except json.JSONDecodeError as exc:
        raise ModelFileError(f"{path}: not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg})") from None
    except RepeatedKey as exc:
        raise ModelFileError(f"{path}: the key {str(exc)!r} appears twice in one JSON object") from None
    except ValueError as exc:
        raise ModelFileError(f"{path}: {exc}") from None
    try:
        return model_from_dict(data)
    except ModelFileError as exc:
        raise ModelFileError(f"{path}: {exc}") from None


def _refuse_constant(name: str) -> float:
    raise ValueError(f"non-finite number {name} is not allowed in a model file")


def model_from_dict(data: Any) -> Model:
    """Build a :class:`Model` from parsed JSON, checking every field and shape."""
    if not isinstance(data, dict):
        raise ModelFileError("the top level must be a JSON object")
    if data.get("format") != FORMAT:
        raise ModelFileError(f"format: expected {FORMAT!r}, got {data.get('format')!r}")
    if data.get("version") != VERSION:
        raise ModelFileError(f"version: this sheetnet reads version {VERSION}, got {data.get('version')!r}")
    inputs = _names(data, "inputs")
    outputs = _names(data, "outputs")
    layers = _layers(data.get("layers"), len(inputs))
    if layers[-1].units != len(outputs):
        raise ModelFileError(
            f"layers[{len(layers) - 1}].weights: the last layer has {layers[-1].units} units "
            f"but 'outputs' names {len(outputs)}"
        )
    for k, layer in enumerate(layers[:-1]):
        if layer.activation.name == "softmax":
            raise ModelFileError(f"layers[{k}].activation.name: softmax is allowed on the output layer only")
    task = _choice(data, "task", TASKS, default=_default_task(layers[-1].activation))
    _check_task_output(task, layers[-1].activation, len(layers) - 1)
    loss = _choice(data, "loss", ("squared", "cross-entropy"), default="squared")
    _check_loss(loss, layers[-1].activation, len(layers) - 1)
    classes = tuple(str(c) for c in _list(data, "classes", default=[]))
    _check_classes(task, classes, outputs)
    target = _names(data, "target", default=list(outputs) if task in ("multilabel", "regression") else [])
    both = sorted(set(target) & set(inputs))
    if both:
        raise ModelFileError(f"target: {both[0]!r} is also an input (a model would read its own answer)")
    training = data.get("training", {})
    if not isinstance(training, dict):
        raise ModelFileError("training: expected an object")
    return Model(
        inputs=inputs, outputs=outputs, task=task, layers=layers, loss=loss,
        scaling=_scaling(data.get("scaling"), len(inputs)), target=target,
        classes=classes, training=training,
    )


def _default_task(output: Activation) -> str:
    return {"softmax": "multiclass", "sigmoid": "binary", "step": "binary"}.get(output.name, "regression")


#: Output activations each task can have: a class task's outputs must be probabilities or 0/1.
TASK_OUTPUTS = {"binary": ("sigmoid", "step"), "multiclass": ("softmax", "sigmoid", "step"),
                "multilabel": ("sigmoid", "step"), "regression": ("identity", "sigmoid", "tanh", "relu")}


def _check_task_output(task: str, output: Activation, last: int) -> None:
    if output.name not in TASK_OUTPUTS[task]:
        raise ModelFileError(f"layers[{last}].activation: a {task} model's output layer cannot be {output.name!r} "
                             f"(expected {' or '.join(TASK_OUTPUTS[task])}), so 'task' and the output layer disagree")


def _check_loss(loss: str, output: Activation, last: int) -> None:
    try:
        check_pair(loss, output)
    except ModelFileError as exc:
        raise ModelFileError(f"loss: {exc} (layers[{last}])") from None


def _check_classes(task: str, classes: tuple[str, ...], outputs: tuple[str, ...]) -> None:
    if task == "binary" and len(outputs) != 1:
        raise ModelFileError(f"outputs: a binary model has one output unit, got {len(outputs)}")
    if task == "binary" and classes and len(classes) != 2:
        raise ModelFileError(f"classes: a binary model has two class labels, got {len(classes)}")
    if task == "multiclass" and classes and len(classes) != len(outputs):
        raise ModelFileError("classes: a multiclass model has one class label per output")
    if task == "multiclass" and len(outputs) < 2:
        raise ModelFileError(f"outputs: a multiclass model has one output unit per class (two or more), got "
                             f"{len(outputs)}")
    if task in ("multilabel", "regression") and classes:
        raise ModelFileError(f"classes: a {task} model has no class labels (its outputs are named in 'outputs')")
    if len(set(classes)) != len(classes):
        raise ModelFileError("classes: labels must be unique")


def _list(data: dict, key: str, default: list | None = None) -> list:
    value = data.get(key, default)
    if not isinstance(value, list):
        raise ModelFileError(f"{key}: expected a list")
    return value


def _names(data: dict, key: str, default: list | None = None) -> tuple[str, ...]:
    values = _list(data, key, default)
    if key in ("inputs", "outputs") and not values:
        raise ModelFileError(f"{key}: expected a non-empty list of names")
    for i, value in enumerate(values):
        if not isinstance(value, str) or not value.strip():
            raise ModelFileError(f"{key}[{i}]: expected a non-empty string")
    if len(set(values)) != len(values):
        raise ModelFileError(f"{key}: names must be unique")
    return tuple(values)


def _choice(data: dict, key: str, allowed: tuple[str, ...], default: str, prefix: str = "") -> str:
    value = data.get(key, default)
    if value not in allowed:
        raise ModelFileError(f"{prefix}{key}: expected one of {', '.join(allowed)}, got {value!r}")
    return value


def _number(value: Any, path: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ModelFileError(f"{path}: expected a number, got {value!r}")
    if not math.isfinite(value):
        raise ModelFileError(f"{path}: non-finite number {value!r}")
    return float(value)


def _vector(value: Any, path: str, length: int) -> np.ndarray:
    if not isinstance(value, list):
        raise ModelFileError(f"{path}: expected a list of {length} numbers")
    if len(value) != length:
        raise ModelFileError(f"{path}: expected {length} numbers, got {len(value)}")
    return np.array([_number(v, f"{path}[{i}]") for i, v in enumerate(value)], dtype=float)


def _layers(value: Any, n_inputs: int) -> tuple[Layer, ...]:
    if not isinstance(value, list) or not value:
        raise ModelFileError("layers: expected a non-empty list of layers")
    layers = []
    fan_in = n_inputs
    for k, raw in enumerate(value):
        layer = _layer(raw, f"layers[{k}]", fan_in)
        layers.append(layer)
        fan_in = layer.units
    return tuple(layers)


def _layer(raw: Any, path: str, fan_in: int) -> Layer:
    if not isinstance(raw, dict):
        raise ModelFileError(f"{path}: expected an object with weights, bias, activation")
    rows = raw.get("weights")
    if not isinstance(rows, list) or not rows:
        raise ModelFileError(f"{path}.weights: expected a non-empty list of rows (one per unit)")
    weights = np.array([_vector(row, f"{path}.weights[{j}]", fan_in) for j, row in enumerate(rows)])
    bias = _vector(raw.get("bias"), f"{path}.bias", len(rows))
    return Layer(weights=weights, bias=bias, activation=_activation(raw.get("activation"), f"{path}.activation"))


def _activation(raw: Any, path: str) -> Activation:
    if isinstance(raw, str):
        raw = {"name": raw}
    if not isinstance(raw, dict):
        raise ModelFileError(f"{path}: expected an object with a name")
    unknown = set(raw) - {"name", "steepness", "midpoint"}
    if unknown:
        raise ModelFileError(f"{path}: unknown key(s) {', '.join(sorted(unknown))}")
    name = raw.get("name")
    defaults = {"steepness": 1.0, "midpoint": 0.0}
    params = {k: _number(raw.get(k, d), f"{path}.{k}") for k, d in defaults.items()}
    try:
        return Activation(name=name, **params)
    except ModelFileError as exc:
        raise ModelFileError(f"{path}: {exc}") from None


def _scaling(raw: Any, n_inputs: int) -> Scaling | None:
    if raw is None:
        return None
    if not isinstance(raw, dict):
        raise ModelFileError("scaling: expected null or an object with method, offset, scale")
    method = _choice(raw, "method", SCALING_METHODS, default="", prefix="scaling.")
    offset = _vector(raw.get("offset"), "scaling.offset", n_inputs)
    scale = _vector(raw.get("scale"), "scaling.scale", n_inputs)
    for i, s in enumerate(scale):
        if s == 0:
            raise ModelFileError(f"scaling.scale[{i}]: must not be 0")
    return Scaling(method=method, offset=offset, scale=scale)
