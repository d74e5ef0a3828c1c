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
    """The ModelProto in an ONNX file. Only self-contained files are read: weights kept in separate
    files (external data) would be looked up by paths the file itself names."""
    onnx = require_onnx()
    path = Path(path)
    try:
        size = path.stat().st_size
        if size > MAX_BYTES:
            raise UsageError(f"{path}: {size:,} bytes; sheetnet reads ONNX files of small networks, up to "
                             f"{MAX_BYTES:,} bytes")
        if size == 0:
            raise UsageError(f"{path}: an empty file, not an ONNX model")
        proto = onnx.load(str(path), load_external_data=False)
    except OSError as exc:
        raise UsageError(f"{path}: cannot read ({exc.strerror})") from None
    except UsageError:
        raise
    except Exception:  # onnx raises protobuf's DecodeError and others for a file that is not ONNX
        raise UsageError(f"{path}: not an ONNX model (it does not decode as one)") from None
    if any(t.data_location == onnx.TensorProto.EXTERNAL for t in proto.graph.initializer):
        raise UsageError(f"{path}: its weights are stored in separate files (ONNX external data); save the model "
                         "as one file (onnx.save with save_as_external_data=False)")
    return proto


def from_onnx(source, inputs=None, classes=None, target=None, data: dataio.DataTable | None = None) -> Model:
    """The sheetnet model of an ONNX file or ModelProto (see ``graph_in`` for what is read)."""
    proto = load_graph(source) if isinstance(source, str | Path) else source
    where = str(source) if isinstance(source, str | Path) else "an ONNX model"
    try:
        net = read_graph(proto)
    except UsageError as exc:
        raise UsageError(f"{where}: {exc}") from None
    n_in, n_out = net.layers[0][0].shape[1], net.layers[-1][0].shape[0]
    features = _features(net, n_in, dataio.column_names(inputs), dataio.column_names(target), data)
    task, labels = _task(net, n_out, dataio.column_names(classes))
    targets = dataio.column_names(target) or tuple(json.loads(net.metadata.get("sheetnet.target", "[]")))
    outputs = _outputs(task, labels, targets, n_out)
    if task == "regression" and targets and len(targets) != n_out:
        raise UsageError(f"{where}: the graph ends in {n_out} outputs with no Sigmoid or Softmax (read as a "
                         f"regression with {n_out} target columns), and {len(targets)} target column(s) were named; "
                         "a classifier's graph must end in its probabilities")
    layers = tuple(Layer(w, b, Activation(name, steepness, midpoint) if name == "sigmoid" else Activation(name))
                   for w, b, name, midpoint, steepness in net.layers)
    method = net.metadata.get("sheetnet.scaling_method", "given")
    scaling = None if net.offset is None else Scaling(method if method in ("standard", "minmax") else "given",
                                                      np.array(net.offset), np.array(net.divisor))
    training = {"source": f"ONNX graph {where}" + (f" ({net.producer})" if net.producer else ""),
                "float32": net.float32}
    if "sheetnet.training_settings" in net.metadata:
        training["settings"] = json.loads(net.metadata["sheetnet.training_settings"])
    model = Model(inputs=features, outputs=outputs, task=task, layers=layers,
                  loss="squared" if task == "regression" else "cross-entropy", scaling=scaling,
                  target=targets if task in ("binary", "multiclass") or targets else (), classes=labels,
                  training=training)
    try:  # what the model file's reader would refuse
        return model_from_dict(model.to_dict())
    except ModelFileError as exc:
        raise UsageError(f"{where}: {exc}") from None


def _features(net: GraphNetwork, n_in: int, given: tuple[str, ...], target: tuple[str, ...],
              data: dataio.DataTable | None) -> tuple[str, ...]:
    if given:
        if len(given) != n_in:
            raise UsageError(f"--inputs names {len(given)} column(s), and the ONNX graph takes {n_in} inputs")
        return given
    if net.features:
        if len(net.features) != n_in:
            raise UsageError(f"the ONNX graph names {len(net.features)} features for {n_in} inputs")
        return _as_data_names(net.features, data)
    if data is None:
        return tuple(f"x{i + 1}" for i in range(n_in))
    numeric = [c for c in data.header if c not in target and _numeric(data, c)]
    if len(numeric) != n_in:
        besides = " besides the target" if target else ""
        raise UsageError(f"the ONNX graph names no features and takes {n_in} inputs; {data.source} has "
                         f"{len(numeric)} numeric column(s){besides} ({dataio.some(numeric)}): name the inputs "
                         "(--inputs)" + ("" if target else " or the target column (--target)"))
    return tuple(numeric)


def _plain(name: str) -> str:
    return "".join(ch for ch in name.lower() if ch.isalnum())


def _as_data_names(features: tuple[str, ...], data: dataio.DataTable | None) -> tuple[str, ...]:
    """The graph's feature names, or the data's columns they stand for: converters write a column
    "sepal length (cm)" as an input "sepal_length__cm_", so names are matched by letters and digits."""
    if data is None or all(f in data.header for f in features):
        return features
    by_plain: dict[str, list[str]] = {}
    for column in data.header:
        by_plain.setdefault(_plain(column), []).append(column)
    matched = [by_plain.get(_plain(f), []) for f in features]
    if all(len(m) == 1 for m in matched):
        return tuple(m[0] for m in matched)
    missing = [f for f, m in zip(features, matched, strict=True) if len(m) != 1]
    raise UsageError(f"the ONNX graph's input(s) {dataio.some(missing)} match no single column of {data.source}; "
                     "name the data's columns in the graph's order (--inputs)")


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
                             f": give the {n_out} labels in output order (--classes, or classes=)")
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
