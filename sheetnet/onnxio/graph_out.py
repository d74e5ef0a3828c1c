"""A sheetnet model out as an ONNX graph that production runtimes load.

The graph computes what the workbook computes, node for node: the input scaling (Sub, Div), each
layer as a Gemm (weights stored as (units, fan_in), so transB=1) and its activation (a sigmoid's
steepness and midpoint as Sub and Mul before Sigmoid; a step as GreaterOrEqual and Cast). Outputs:
``outputs`` (the output layer's activations, one column per output) and, for binary and multiclass
models, ``label`` (the predicted class label: probability against the threshold, or the most probable
class). Feature names, class labels, the target, the threshold and provenance go in the metadata.

Only the model's attributes are read (no import of ``sheetnet.net``), so the model's own ``to_onnx``
can call this without an import cycle.
"""

from __future__ import annotations

import json

import numpy as np

from sheetnet.errors import UsageError
from sheetnet.onnxio import require_onnx
from sheetnet.version import __version__

#: Opset and IR version: ONNX 1.12 and onnxruntime 1.14 or newer load them.
OPSET = 17
IR_VERSION = 8
DTYPES = {"float64": (np.float64, 11), "float32": (np.float32, 1)}


class _Graph:
    """Nodes and constants added in order; each new tensor gets a fresh name."""

    def __init__(self, dtype: str):
        onnx = require_onnx()
        self.helper, self.numpy_helper = onnx.helper, onnx.numpy_helper
        self.numpy_type, self.onnx_type = DTYPES[dtype]
        self.nodes, self.constants, self.count = [], [], 0

    def constant(self, name: str, value, numeric: bool = True):
        array = np.asarray(value, dtype=self.numpy_type) if numeric else np.asarray(value)
        self.constants.append(self.numpy_helper.from_array(array, name))
        return name

    def node(self, op: str, inputs: list[str], name: str, **attributes) -> str:
        self.count += 1
        out = f"{name}" if name in ("outputs", "label") else f"{name}_{self.count}"
        self.nodes.append(self.helper.make_node(op, inputs, [out], name=f"{op}_{self.count}", **attributes))
        return out


def _activation(g: _Graph, z: str, act, k: int) -> str:
    name = act.name
    if name == "sigmoid":
        if act.midpoint != 0.0:
            z = g.node("Sub", [z, g.constant(f"midpoint_{k}", act.midpoint)], f"shifted_{k}")
        if act.steepness != 1.0:
            z = g.node("Mul", [z, g.constant(f"steepness_{k}", act.steepness)], f"steep_{k}")
        return g.node("Sigmoid", [z], f"a_{k}")
    if name == "step":
        fired = g.node("GreaterOrEqual", [z, g.constant(f"midpoint_{k}", act.midpoint)], f"fired_{k}")
        return g.node("Cast", [fired], f"a_{k}", to=g.onnx_type)
    if name == "softmax":
        return g.node("Softmax", [z], f"a_{k}", axis=-1)
    if name in ("tanh", "relu"):
        return g.node(name.capitalize(), [z], f"a_{k}")
    return z  # identity


def _label(g: _Graph, model, y: str, threshold: float) -> str | None:
    """The predicted class label, as the workbook's prediction column computes it."""
    if model.task == "multiclass":
        index = g.node("ArgMax", [y], "class_index", axis=1, keepdims=0)
    elif model.task == "binary":
        positive = g.node("GreaterOrEqual", [y, g.constant("threshold", threshold)], "positive")
        flat = g.node("Reshape", [positive, g.constant("one_column", np.array([-1], dtype=np.int64), numeric=False)],
                      "positive_flat")
        index = g.node("Cast", [flat], "class_index", to=7)
    else:
        return None
    labels = g.constant("class_labels", np.array(list(model.classes), dtype=object), numeric=False)
    return g.node("Gather", [labels, index], "label", axis=0)


def model_to_onnx(model, dtype: str = "float64", threshold: float = 0.5, source: str = "",
                  source_sha256: str = ""):
    """The model as an ONNX ModelProto (checked with ``onnx.checker``)."""
    onnx = require_onnx()

    if dtype not in DTYPES:
        raise UsageError(f"dtype must be float64 or float32, got {dtype!r}")
    g = _Graph(dtype)
    h = "features"
    if model.scaling is not None:
        h = g.node("Sub", [h, g.constant("scaling_offset", model.scaling.offset)], "centred")
        h = g.node("Div", [h, g.constant("scaling_divisor", model.scaling.scale)], "scaled")
    for k, layer in enumerate(model.layers):
        z = g.node("Gemm", [h, g.constant(f"W_{k + 1}", layer.weights), g.constant(f"b_{k + 1}", layer.bias)],
                   f"z_{k + 1}", transB=1)
        h = _activation(g, z, layer.activation, k + 1)
    g.nodes.append(onnx.helper.make_node("Identity", [h], ["outputs"], name="network_output"))
    label = _label(g, model, "outputs", threshold)
    helper = onnx.helper
    outputs = [helper.make_tensor_value_info("outputs", g.onnx_type, ["rows", len(model.outputs)])]
    if label is not None:
        outputs.append(helper.make_tensor_value_info("label", onnx.TensorProto.STRING, ["rows"]))
    graph = helper.make_graph(g.nodes, "sheetnet_network",
                              [helper.make_tensor_value_info("features", g.onnx_type, ["rows", len(model.inputs)])],
                              outputs, initializer=g.constants,
                              doc_string=f"inputs (columns of 'features'): {', '.join(model.inputs)}; "
                                         f"outputs (columns of 'outputs'): {', '.join(model.outputs)}")
    proto = helper.make_model(graph, opset_imports=[helper.make_opsetid("", OPSET)], producer_name="sheetnet",
                              producer_version=__version__, ir_version=IR_VERSION)
    metadata = {"sheetnet.version": __version__, "sheetnet.feature_names": json.dumps(list(model.inputs)),
                "sheetnet.output_names": json.dumps(list(model.outputs)), "sheetnet.task": model.task,
                "sheetnet.class_labels": json.dumps(list(model.classes)), "sheetnet.target": json.dumps(list(
                    model.target)), "sheetnet.threshold": repr(float(threshold)), "sheetnet.dtype": dtype,
                "sheetnet.source": source, "sheetnet.source_sha256": source_sha256,
                "sheetnet.scaling_method": model.scaling.method if model.scaling is not None else "",
                "sheetnet.training_settings": json.dumps(model.training["settings"])
                if isinstance(model.training.get("settings"), dict) else ""}
    helper.set_model_props(proto, {k: v for k, v in metadata.items() if v})
    onnx.checker.check_model(proto, full_check=True)
    return proto
