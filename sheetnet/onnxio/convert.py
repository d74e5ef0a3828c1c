"""An ONNX graph's network as a sheetnet model: the task from the output activation, feature names from
the graph (else ``inputs``, else the data's numeric columns), class labels from the graph (else
``classes``)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from sheetnet.errors import ModelFileError, UsageError
from sheetnet.net import data as dataio
from sheetnet.net.activations import Activation
from sheetnet.net.model import Layer, Model, Scaling, model_from_dict
from sheetnet.onnxio import require_onnx
from sheetnet.onnxio.graph_in import GraphNetwork, read_graph

#: The largest ONNX file read (a small network's graph is kilobytes; this refuses a stray large file).
MAX_BYTES = 200 * 1024 * 1024


def load_graph(path: str | Path):
    """The ModelProto in an ONNX file, read without following external data."""
    onnx = require_onnx()

    path = Path(path)
    try:
        if path.stat().st_size > MAX_BYTES:
            raise UsageError(f"{path}: {path.stat().st_size:,} bytes is larger than an ONNX file of a small network")
        return onnx.load(str(path), load_external_data=False)
    except OSError as exc:
        raise UsageError(f"{path}: cannot read ({exc.strerror})") from None
    except Exception as exc:  # onnx raises protobuf's DecodeError and others for a file that is not ONNX
        raise UsageError(f"{path}: not an ONNX model ({type(exc).__name__})") from None


def from_onnx(source, inputs=None, classes=None, target=None, data: dataio.DataTable | None = None) -> Model:
    """The sheetnet model of an ONNX file or ModelProto (see ``graph_in`` for what is read)."""
    proto = load_graph(source) if isinstance(source, str | Path) else source
    net = read_graph(proto)
    n_in, n_out = net.layers[0][0].shape[1], net.layers[-1][0].shape[0]
    features = _features(net, n_in, _names(inputs), _names(target), data)
    task, labels = _task(net, n_out, _names(classes))
    targets = _names(target) or tuple(json.loads(net.metadata.get("sheetnet.target", "[]")))
    outputs = _outputs(task, labels, targets, n_out)
    layers = tuple(Layer(w, b, Activation(name, steepness, midpoint) if name == "sigmoid" else Activation(name))
                   for w, b, name, midpoint, steepness in net.layers)
    scaling = None if net.offset is None else Scaling("given", np.array(net.offset), np.array(net.divisor))
    where = str(source) if isinstance(source, str | Path) else "an ONNX model"
    model = Model(inputs=features, outputs=outputs, task=task, layers=layers,
                  loss="squared" if task == "regression" else "cross-entropy", scaling=scaling,
                  target=targets if task in ("binary", "multiclass") or targets else (), classes=labels,
                  training={"source": f"ONNX graph {where}" + (f" ({net.producer})" if net.producer else ""),
                            "float32": net.float32})
    try:  # what the model file's reader would refuse
        return model_from_dict(model.to_dict())
    except ModelFileError as exc:
        raise UsageError(f"{where}: {exc}") from None


def _names(value) -> tuple[str, ...]:
    if value is None:
        return ()
    return (value,) if isinstance(value, str) else tuple(str(v) for v in value)


def _features(net: GraphNetwork, n_in: int, given: tuple[str, ...], target: tuple[str, ...],
              data: dataio.DataTable | None) -> tuple[str, ...]:
    if given:
        if len(given) != n_in:
            raise UsageError(f"--inputs names {len(given)} column(s), and the ONNX graph takes {n_in} inputs")
        return given
    if net.features:
        if len(net.features) != n_in:
            raise UsageError(f"the ONNX graph names {len(net.features)} features for {n_in} inputs")
        return net.features
    if data is None:
        return tuple(f"x{i + 1}" for i in range(n_in))
    numeric = [c for c in data.header if c not in target and _numeric(data, c)]
    if len(numeric) != n_in:
        raise UsageError(f"the ONNX graph names no features and takes {n_in} inputs; {data.source} has "
                         f"{len(numeric)} numeric column(s) besides the target ({dataio.some(numeric)}): name the "
                         "inputs with --inputs (and the target with --target)")
    return tuple(numeric)


def _numeric(data: dataio.DataTable, column: str) -> bool:
    k = data.header.index(column)
    return all(dataio.parse_number(row[k]) is not None for row in data.rows)


def _task(net: GraphNetwork, n_out: int, given: tuple[str, ...]) -> tuple[str, tuple[str, ...]]:
    """The task the output activation means, and the class labels (graph, then ``given``)."""
    last = net.layers[-1][2]
    labels = given or net.classes
    if last == "softmax":
        if len(labels) != n_out:
            raise UsageError(f"the ONNX graph ends in a softmax over {n_out} classes and "
                             + (f"{len(labels)} class labels were found" if labels else "names none") +
                             f": give the {n_out} labels in output order with --classes")
        return "multiclass", labels
    if last == "sigmoid" and n_out == 1:
        labels = labels or ("0", "1")
        if len(labels) != 2:
            raise UsageError(f"the ONNX graph ends in one sigmoid (a binary classifier) and {len(labels)} class "
                             "labels were given; give two, the negative class first")
        return "binary", labels
    if last == "sigmoid":
        return "multilabel", ()
    return "regression", ()


def _outputs(task: str, labels: tuple[str, ...], targets: tuple[str, ...], n_out: int) -> tuple[str, ...]:
    if task == "multiclass":
        return labels
    if task == "binary":
        return targets[:1] or ("y",)
    if len(targets) == n_out:
        return targets
    return ("y",) if n_out == 1 else tuple(f"y{k + 1}" for k in range(n_out))
