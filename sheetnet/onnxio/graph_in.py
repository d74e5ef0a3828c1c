"""ONNX graphs of feed-forward networks in: the path from the graph's input to the network's output read
as a scaler, dense layers and activations, the way framework exporters write them.

What is read (everything else on the path is an error naming the node, its op type and this list):

* a leading scaler: the ``ai.onnx.ml`` Scaler node, or Sub / Div / Mul / Add with constants;
* dense layers: Gemm (transA 0, any transB, alpha, beta), or MatMul followed by an optional Add;
* activations: Sigmoid, Tanh, Relu, Softmax (last axis), Identity;
* nodes that change nothing: Cast to a float type, Identity, Flatten, Reshape to (rows, features),
  Dropout (inference);
* endings after the network's output (left to the workbook): ArgMax, ZipMap, ArrayFeatureExtractor,
  ``1 - p`` with Concat (scikit-learn's converter), a label lookup; their class labels are read.

Several one-column inputs joined by a Concat name the features. Weights of float32 graphs are read
as they are stored and computed in float64 from then on.
"""

from __future__ import annotations

import json
from collections import defaultdict
from dataclasses import dataclass, field

import numpy as np

from sheetnet.errors import UsageError
from sheetnet.onnxio import require_onnx

ACTIVATION_OPS = {"Sigmoid": "sigmoid", "Tanh": "tanh", "Relu": "relu", "Softmax": "softmax"}
UNCHANGED_OPS = ("Cast", "CastLike", "Identity", "Flatten", "Reshape", "Dropout")
JOIN_OPS = ("Concat", "FeatureVectorizer")  # one-column inputs joined into the feature matrix
SUBGRAPH_OPS = ("If", "Loop", "Scan")  # control flow: what they compute is not on any visible path
AFFINE_OPS = ("Sub", "Div", "Mul", "Add")
ENDING_OPS = ("ArgMax", "ZipMap", "ArrayFeatureExtractor", "LabelEncoder", "Gather", "TopK", "Concat", "Greater",
              "GreaterOrEqual", "Less")
SUPPORTED = ("Gemm, MatMul (+ Add), Sigmoid, Tanh, Relu, Softmax, Identity, Cast, Flatten, Reshape, Dropout, "
             "a leading Scaler or Sub/Div/Mul/Add with constants, and classifier endings (ArgMax, ZipMap, "
             "ArrayFeatureExtractor, 1 - p with Concat)")
FLOAT_TYPES = (1, 10, 11, 16)  # FLOAT, FLOAT16, DOUBLE, BFLOAT16


@dataclass
class GraphNetwork:
    """What the graph says, as plain data: per layer (weights (units, fan_in), bias, activation name, its
    midpoint and steepness),
    the input scaling (offset, divisor; None when there is none), feature and class names when present."""

    layers: list[tuple[np.ndarray, np.ndarray, str, float, float]] = field(default_factory=list)
    offset: np.ndarray | None = None
    divisor: np.ndarray | None = None
    features: tuple[str, ...] = ()
    classes: tuple[str, ...] = ()
    float32: bool = False
    producer: str = ""
    metadata: dict[str, str] = field(default_factory=dict)


def _fail(node, why: str) -> UsageError:
    name = node.name or (node.output[0] if node.output else "?")
    return UsageError(f"ONNX node {name!r} ({node.op_type}): {why}; sheetnet reads {SUPPORTED}")


class _Reader:
    """One walk along the graph's main path, from the input to the network's output."""

    def __init__(self, graph):
        self.to_array = require_onnx().numpy_helper.to_array
        self.graph = graph
        self.constants = {t.name: self.to_array(t) for t in graph.initializer}
        for node in graph.node:
            if node.op_type == "Constant":
                value = next((a for a in node.attribute if a.name == "value"), None)
                if value is not None:
                    self.constants[node.output[0]] = self.to_array(value.t)
        self.consumers = defaultdict(list)
        for node in graph.node:
            for name in node.input:
                self.consumers[name].append(node)
        self.outputs = {o.name for o in graph.output}
        self.net = GraphNetwork()
        self.width = 0
        self.scaling = (np.zeros(1), np.ones(1))  # scaled = (x - offset) / divisor, before the first layer
        self.pending = None  # (weights, bias) of a layer whose activation is not read yet
        self.shape = None  # (midpoint, steepness) written as Sub and Mul before a Sigmoid
        self.shape_node = None  # the last node that wrote them, named if no Sigmoid follows

    def start(self) -> str:
        inputs = [i for i in self.graph.input if i.name not in self.constants]
        if not inputs:
            raise UsageError("the ONNX graph has no input")
        for item in inputs:
            if item.type.tensor_type.elem_type not in (*FLOAT_TYPES, 6, 7):
                raise UsageError(f"ONNX input {item.name!r} is not numeric")
        self.net.float32 = any(i.type.tensor_type.elem_type == 1 for i in inputs)
        if len(inputs) == 1:
            dims = inputs[0].type.tensor_type.shape.dim
            self.width = dims[-1].dim_value if dims and dims[-1].dim_value else 0
            return inputs[0].name
        names = {i.name for i in inputs}
        joins = [n for n in self.graph.node if n.op_type in JOIN_OPS and set(n.input) == names]
        if not joins:
            raise UsageError(f"the ONNX graph has {len(inputs)} inputs ({', '.join(sorted(names)[:5])}) and no Concat "
                             "or FeatureVectorizer joining them; sheetnet reads one input, or one-column inputs joined "
                             "into the features")
        self.net.features = tuple(joins[0].input)
        self.width = len(joins[0].input)
        return joins[0].output[0]

    def walk(self) -> GraphNetwork:
        control = next((n for n in self.graph.node if n.op_type in SUBGRAPH_OPS), None)
        if control is not None:
            raise _fail(control, "control flow (a graph inside a node)")
        current = self.start()
        while True:
            main = [n for n in self.consumers[current] if not self._is_ending(n, current)]
            if not main:
                break
            if len(main) > 1:
                raise _fail(main[1], f"the tensor {current!r} feeds {len(main)} nodes (a branch)")
            current = self._step(main[0], current)
        self._close("identity")
        if not self.net.layers:
            raise UsageError("the ONNX graph has no dense layer (Gemm or MatMul) on its path from input to output")
        self._outputs_follow(current)
        self._endings()
        return self.net

    def _outputs_follow(self, network_output: str) -> None:
        """Every output of the graph is the network's output or computed from it (labels, probabilities):
        an output from elsewhere (a hidden layer, a second head) would be silently left out."""
        reached, frontier = {network_output}, [network_output]
        while frontier:
            for node in self.consumers[frontier.pop()]:
                for name in node.output:
                    if name not in reached:
                        reached.add(name)
                        frontier.append(name)
        stray = [o for o in self.outputs if o not in reached]
        if stray:
            raise UsageError(f"the ONNX graph's output {stray[0]!r} is not computed from the network's output "
                             f"{network_output!r} (a hidden layer or a second head); sheetnet reads graphs whose "
                             "outputs are the network's output and labels or probabilities made from it")

    def _is_ending(self, node, current: str) -> bool:
        """After the first dense layer: label and probability bookkeeping that reads the network's output."""
        if not self.net.layers and self.pending is None:
            return False
        if node.op_type == "Sub":  # 1 - p: the negative class's probability
            return node.input[0] in self.constants and node.input[1] == current
        return node.op_type in ENDING_OPS

    def _step(self, node, current: str) -> str:
        op = node.op_type
        if op in ACTIVATION_OPS:
            if op == "Softmax" and _attribute(node, "axis", -1) not in (-1, 1):
                raise _fail(node, "a softmax over an axis other than the features")
            self._close(ACTIVATION_OPS[op])
        elif op in ("Gemm", "MatMul"):
            self._close("identity")
            self.pending = self._dense(node, current)
        elif op in AFFINE_OPS:
            self._affine(node, current)
        elif op == "Scaler":
            self._scale(node)
        elif op in UNCHANGED_OPS:
            self._unchanged(node)
        else:
            raise _fail(node, "not part of a feed-forward network")
        return node.output[0]

    def _constant(self, node, name: str) -> np.ndarray:
        if name not in self.constants:
            raise _fail(node, f"its operand {name!r} is computed, not a constant")
        return np.asarray(self.constants[name], dtype=float)

    def _dense(self, node, current: str) -> tuple[np.ndarray, np.ndarray]:
        if node.input[0] != current:
            raise _fail(node, "the data is not its first operand")
        w = self._constant(node, node.input[1])
        if w.ndim != 2:
            raise _fail(node, f"weights of shape {w.shape}, not a matrix")
        if node.op_type == "MatMul":
            self._fits(node, w.shape[0])
            return w.T.copy(), np.zeros(w.shape[1])
        if _attribute(node, "transA", 0):
            raise _fail(node, "transA=1 (the data transposed)")
        w = w if _attribute(node, "transB", 0) else w.T
        self._fits(node, w.shape[1])
        w = _attribute(node, "alpha", 1.0) * w
        bias = np.zeros(w.shape[0])
        if len(node.input) > 2 and node.input[2]:
            bias = _attribute(node, "beta", 1.0) * self._broadcast(node, self._constant(node, node.input[2]),
                                                                   w.shape[0])
        return np.ascontiguousarray(w), np.array(bias, dtype=float)

    def _fits(self, node, fan_in: int) -> None:
        """A layer's weights take as many values as the data (or the layer before) gives."""
        width = self._units()
        if width and fan_in != width:
            raise _fail(node, f"its weights take {fan_in} values and {width} arrive")

    def _broadcast(self, node, value: np.ndarray, units: int) -> np.ndarray:
        if value.size not in (1, units):
            raise _fail(node, f"a bias of {value.size} values for {units} units")
        return np.broadcast_to(value.ravel(), (units,))

    def _affine(self, node, current: str) -> None:
        """Add after a MatMul is its bias; Sub/Div/Mul/Add with a constant before any layer is scaling."""
        other = node.input[1] if node.input[0] == current else node.input[0]
        value = self._constant(node, other).ravel()
        if self.pending is not None and node.op_type == "Add" and self.shape is None:
            weights, bias = self.pending
            self.pending = (weights, bias + self._broadcast(node, value, len(bias)))
            return
        if self.pending is not None and node.op_type in ("Sub", "Mul") and value.size == 1:
            midpoint, steepness = self.shape or (0.0, 1.0)
            self.shape = (float(value[0]), steepness) if node.op_type == "Sub" else (midpoint, float(value[0]))
            self.shape_node = node
            return
        if self.net.layers or self.pending is not None:
            raise _fail(node, "arithmetic between layers that is not a bias")
        if node.input[0] != current and node.op_type in ("Sub", "Div"):
            raise _fail(node, "the data is its second operand")
        offset, divisor = self.scaling
        with np.errstate(divide="ignore", invalid="ignore"):  # a division by 0 is refused, in words, at the end
            self.scaling = {"Sub": (offset + value * divisor, divisor), "Add": (offset - value * divisor, divisor),
                            "Div": (offset, divisor * value), "Mul": (offset, divisor / value)}[node.op_type]

    def _scale(self, node) -> None:
        """The ai.onnx.ml Scaler: (x - offset) * scale."""
        if self.net.layers or self.pending is not None:
            raise _fail(node, "a scaler between layers")
        offset, divisor = self.scaling
        shift = np.asarray(_attribute(node, "offset", [0.0]), float)
        scale = np.asarray(_attribute(node, "scale", [1.0]), float)
        with np.errstate(divide="ignore", invalid="ignore"):  # a scale of 0 is refused, in words, at the end
            self.scaling = (offset + shift * divisor, divisor / scale)

    def _unchanged(self, node) -> None:
        if node.op_type == "Cast" and _attribute(node, "to", 1) not in FLOAT_TYPES:
            raise _fail(node, "a cast to a type that is not a float")
        if node.op_type == "Reshape":
            shape = self._constant(node, node.input[1]).astype(int).tolist()
            if len(shape) != 2 or shape[0] not in (-1, 0) or shape[1] not in (-1, self._units()) or shape == [-1, -1]:
                raise _fail(node, f"a reshape to {shape}, not to (rows, features)")

    def _units(self) -> int:
        if self.pending is not None:
            return self.pending[0].shape[0]
        return self.net.layers[-1][0].shape[0] if self.net.layers else self.width

    def _close(self, activation: str) -> None:
        """The pending layer gets its activation (or the identity when another layer or the end follows)."""
        if self.pending is None:
            if activation != "identity":
                raise UsageError(f"an activation ({activation}) with no dense layer before it")
            return
        weights, bias = self.pending
        self.pending, shape, self.shape = None, self.shape, None
        if shape is not None and activation != "sigmoid":
            raise _fail(self.shape_node, f"a shift or scale of the weighted sums followed by {activation}, not by a "
                                         "Sigmoid (whose midpoint and steepness it would be)")
        if not self.net.layers:
            self._finish_scaling(weights.shape[1])
        elif weights.shape[1] != self.net.layers[-1][0].shape[0]:
            raise UsageError(f"a dense layer takes {weights.shape[1]} values, and the layer before gives "
                             f"{self.net.layers[-1][0].shape[0]}")
        self.net.layers.append((weights, bias, activation, *(shape or (0.0, 1.0))))

    def _finish_scaling(self, width: int) -> None:
        try:
            offset, divisor = (np.broadcast_to(v, (width,)).astype(float) for v in self.scaling)
        except ValueError:
            raise UsageError(f"the ONNX graph's input scaling has {max(v.size for v in self.scaling)} values for "
                             f"{width} inputs") from None
        if np.all(offset == 0) and np.all(divisor == 1):
            return
        if np.any(divisor == 0) or not np.all(np.isfinite(divisor)) or not np.all(np.isfinite(offset)):
            raise UsageError("the ONNX graph's input scaling multiplies a feature by 0 or divides it by 0 (or by a "
                             "value that is not finite)")
        self.net.offset, self.net.divisor = offset, divisor

    def _endings(self) -> None:
        """Class labels from the endings scikit-learn's converter writes, or from sheetnet's metadata."""
        for node in self.graph.node:
            if node.op_type == "ZipMap":
                labels = _attribute(node, "classlabels_strings", None) or _attribute(node, "classlabels_int64s", None)
                if labels:
                    self.net.classes = tuple(_text(v) for v in labels)
            elif node.op_type == "ArrayFeatureExtractor" and node.input[0] in self.constants and not self.net.classes:
                self.net.classes = tuple(_text(v) for v in np.asarray(self.constants[node.input[0]]).ravel())


def _text(value) -> str:
    return value.decode() if isinstance(value, bytes) else str(value)


def _attribute(node, name: str, default):
    for attribute in node.attribute:
        if attribute.name == name:
            return require_onnx().helper.get_attribute_value(attribute)
    return default


def read_graph(proto) -> GraphNetwork:
    """The network in an ONNX ModelProto (checked with ``onnx.checker`` first)."""
    onnx = require_onnx()

    try:
        onnx.checker.check_model(proto)
    except onnx.checker.ValidationError as exc:
        raise UsageError(f"not a valid ONNX model: {str(exc).splitlines()[0]}") from None
    net = _Reader(proto.graph).walk()
    net.producer = " ".join(p for p in (proto.producer_name, proto.producer_version) if p)
    net.metadata = {p.key: p.value for p in proto.metadata_props}
    stored = net.metadata.get("sheetnet.feature_names")
    if stored and not net.features:
        net.features = tuple(json.loads(stored))
    stored = net.metadata.get("sheetnet.class_labels")
    if stored:
        net.classes = tuple(json.loads(stored))
    return net
