"""ONNX in and out, with onnxruntime as the oracle (an implementation of the ONNX operator specification,
https://onnx.ai/onnx/operators/, outside this project) and LibreOffice recalculating the workbooks.

Graphs come from scikit-learn's ONNX converter (skl2onnx) with its default options, and from
``onnx.helper`` in the shapes deep-learning exporters write for small MLPs: PyTorch's ``torch.onnx``
writes a Linear layer as Gemm with transB=1 and ends a classifier in logits (with an optional Softmax);
Keras through tf2onnx writes Dense as MatMul + Add, with the activation as its own node.

Data sets are scikit-learn's bundled copies: iris (Fisher 1936, "The use of multiple measurements in
taxonomic problems"), Wisconsin diagnostic breast cancer (Street, Wolberg & Mangasarian 1993) and
diabetes (Efron, Hastie, Johnstone & Tibshirani 2004, "Least angle regression").
"""

from __future__ import annotations

import hashlib
import json
import warnings

import numpy as np
import openpyxl
import pandas as pd
import pytest

onnx = pytest.importorskip("onnx")
ort = pytest.importorskip("onnxruntime")

from onnx import TensorProto, helper, numpy_helper  # noqa: E402

import sheetnet  # noqa: E402
from sheetnet.errors import UsageError  # noqa: E402
from tests.bookcheck import libreoffice_values  # noqa: E402

#: float32 graphs: onnxruntime computes in float32, the workbook in float64, so they agree to float32
#: rounding (a relative 2**-24 per operation, a few operations deep).
FLOAT32 = {"rtol": 1e-5, "atol": 1e-6}


def _frame(loader: str):
    import sklearn.datasets

    frame = getattr(sklearn.datasets, loader)(as_frame=True).frame
    if loader == "load_iris":
        frame["species"] = np.array(["setosa", "versi color", "virginica"])[frame.pop("target")]
    return frame


def _scoring(path, values=None) -> pd.DataFrame:
    """The Scoring sheet's case rows under their headers (``values``: a recalculated copy's cells)."""
    sheet = openpyxl.load_workbook(path, data_only=True)["Scoring"]
    rows = [list(r) for r in sheet.iter_rows(values_only=True)]
    top = next(n for n, r in enumerate(rows) if r[0] == "case")
    if values is not None:
        from openpyxl.utils import get_column_letter

        rows = [[values.get(("Scoring", f"{get_column_letter(c + 1)}{n + 1}")) for c in range(len(rows[top]))]
                for n in range(len(rows))]
        rows[top] = [c.value for c in sheet[top + 1]]
    body = [r for r in rows[top + 1:] if isinstance(r[0], int | float)]
    return pd.DataFrame(body, columns=rows[top])


def _session(path):
    return ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])


def _libreoffice_outputs(book, tmp_path, outputs) -> tuple[pd.DataFrame, np.ndarray]:
    frame = _scoring(book, libreoffice_values(book, tmp_path / "lo"))
    return frame, frame[[f"a {name}" for name in outputs]].to_numpy(float)


@pytest.mark.slow
@pytest.mark.libreoffice
@pytest.mark.parametrize("loader, target, kind", [("load_iris", "species", "multiclass"),
                                                  ("load_breast_cancer", "target", "binary"),
                                                  ("load_diabetes", "target", "regression")])
def test_scikit_learn_converter_graphs_become_workbooks_libreoffice_agrees_with(loader, target, kind, tmp_path,
                                                                                 run_cli):
    from skl2onnx import to_onnx
    from sklearn.neural_network import MLPClassifier, MLPRegressor
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import MinMaxScaler, StandardScaler

    frame = _frame(loader)
    x = frame.drop(columns=target).to_numpy(float)
    mlp = (MLPRegressor if kind == "regression" else MLPClassifier)(hidden_layer_sizes=(6,), max_iter=300,
                                                                    random_state=0)
    scaler = MinMaxScaler() if kind == "binary" else StandardScaler()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipeline = make_pipeline(scaler, mlp).fit(x, frame[target])
    graph, data, book = tmp_path / "m.onnx", tmp_path / "d.csv", tmp_path / "b.xlsx"
    onnx.save(to_onnx(pipeline, x[:1].astype(np.float32)), graph)
    frame.to_csv(data, index=False)
    code, _, err = run_cli("build", "--model", graph, data, "--target", target, "--trace-epochs", "1",
                             "--trace-rows", "20", "--quiet", "-o", book)
    assert code == 0, err
    assert run_cli("verify", book, "--quiet")[0] == 0
    model = sheetnet.from_onnx(graph, target=target, inputs=list(frame.columns.drop(target)))
    recalculated, outputs = _libreoffice_outputs(book, tmp_path, model.outputs)
    runtime = _session(graph).run(None, {"X": recalculated[list(model.inputs)].to_numpy(np.float32)})
    if kind == "regression":
        np.testing.assert_allclose(outputs, runtime[0], **FLOAT32)
        return
    probabilities = np.array([[row[c] for c in pipeline.classes_] for row in runtime[1]])
    if kind == "binary":
        probabilities = probabilities[:, 1:]
    np.testing.assert_allclose(outputs, probabilities, **FLOAT32)
    clear = np.abs(outputs - 0.5).min(axis=1) > 1e-4 if kind == "binary" else np.ones(len(outputs), bool)
    assert (recalculated["predicted"].astype(str).to_numpy()[clear] == runtime[0].astype(str)[clear]).all()


def _tensor(name: str, value) -> onnx.TensorProto:
    return numpy_helper.from_array(np.asarray(value, dtype=np.float32), name)


def _torch_shaped(w1, b1, w2, b2, softmax: bool) -> onnx.ModelProto:
    """torch.onnx.export of Sequential(Linear, ReLU, Linear[, Softmax(dim=1)]): Gemm with transB=1."""
    nodes = [helper.make_node("Gemm", ["input", "fc1.weight", "fc1.bias"], ["/fc1/Gemm_output_0"], name="/fc1/Gemm",
                              alpha=1.0, beta=1.0, transB=1),
             helper.make_node("Relu", ["/fc1/Gemm_output_0"], ["/act/Relu_output_0"], name="/act/Relu"),
             helper.make_node("Gemm", ["/act/Relu_output_0", "fc2.weight", "fc2.bias"], ["logits"], name="/fc2/Gemm",
                              alpha=1.0, beta=1.0, transB=1)]
    if softmax:
        nodes.append(helper.make_node("Softmax", ["logits"], ["output"], name="/softmax/Softmax", axis=1))
    graph = helper.make_graph(nodes, "main_graph",
                              [helper.make_tensor_value_info("input", TensorProto.FLOAT, ["batch", w1.shape[1]])],
                              [helper.make_tensor_value_info("output" if softmax else "logits", TensorProto.FLOAT,
                                                             ["batch", w2.shape[0]])],
                              [_tensor("fc1.weight", w1), _tensor("fc1.bias", b1), _tensor("fc2.weight", w2),
                               _tensor("fc2.bias", b2)])
    return helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17)], producer_name="pytorch",
                             ir_version=8)


def _keras_shaped(mean, std, w1, b1, w2, b2) -> onnx.ModelProto:
    """tf2onnx of a Keras model with a Normalization layer and Dense(tanh), Dense(sigmoid): Sub/Div,
    MatMul + Add, the activation as its own node, an Identity to the output."""
    nodes = [helper.make_node("Sub", ["dense_input", "norm/mean"], ["norm/sub:0"], name="norm/sub"),
             helper.make_node("Div", ["norm/sub:0", "norm/std"], ["norm/truediv:0"], name="norm/truediv"),
             helper.make_node("MatMul", ["norm/truediv:0", "dense/kernel"], ["dense/MatMul:0"], name="dense/MatMul"),
             helper.make_node("Add", ["dense/MatMul:0", "dense/bias"], ["dense/BiasAdd:0"], name="dense/BiasAdd"),
             helper.make_node("Tanh", ["dense/BiasAdd:0"], ["dense/Tanh:0"], name="dense/Tanh"),
             helper.make_node("MatMul", ["dense/Tanh:0", "dense_1/kernel"], ["dense_1/MatMul:0"],
                              name="dense_1/MatMul"),
             helper.make_node("Add", ["dense_1/MatMul:0", "dense_1/bias"], ["dense_1/BiasAdd:0"],
                              name="dense_1/BiasAdd"),
             helper.make_node("Sigmoid", ["dense_1/BiasAdd:0"], ["dense_1/Sigmoid:0"], name="dense_1/Sigmoid"),
             helper.make_node("Identity", ["dense_1/Sigmoid:0"], ["dense_1"], name="Identity")]
    graph = helper.make_graph(nodes, "tf2onnx",
                              [helper.make_tensor_value_info("dense_input", TensorProto.FLOAT, ["unk__1", len(mean)])],
                              [helper.make_tensor_value_info("dense_1", TensorProto.FLOAT, ["unk__2", 1])],
                              [_tensor("norm/mean", mean), _tensor("norm/std", std), _tensor("dense/kernel", w1),
                               _tensor("dense/bias", b1), _tensor("dense_1/kernel", w2), _tensor("dense_1/bias", b2)])
    return helper.make_model(graph, opset_imports=[helper.make_opsetid("", 13)], producer_name="tf2onnx",
                             ir_version=7)


@pytest.mark.slow
@pytest.mark.libreoffice
@pytest.mark.parametrize("shape", ["torch logits + softmax", "keras tanh + sigmoid"])
def test_deep_learning_exporter_shapes_become_workbooks_libreoffice_agrees_with(shape, tmp_path, run_cli):
    rng = np.random.default_rng(7)
    frame = _frame("load_iris")
    x = frame.iloc[:, :4].to_numpy(float)
    graph, data, book = tmp_path / "m.onnx", tmp_path / "d.csv", tmp_path / "b.xlsx"
    if shape.startswith("torch"):
        proto = _torch_shaped(rng.normal(size=(5, 4)), rng.normal(size=5), rng.normal(size=(3, 5)),
                              rng.normal(size=3), softmax=True)
        extra = ["--classes", "setosa,versi color,virginica", "--target", "species"]
    else:
        frame = frame.assign(species=(frame.species == "setosa").astype(int))
        proto = _keras_shaped(x.mean(axis=0), x.std(axis=0), rng.normal(size=(4, 6)), rng.normal(size=6),
                              rng.normal(size=(6, 1)), rng.normal(size=1))
        extra = ["--target", "species"]
    onnx.save(proto, graph)
    frame.to_csv(data, index=False)
    code, _, err = run_cli("build", "--model", graph, data, *extra, "--trace-epochs", "1", "--trace-rows", "20",
                             "--quiet", "-o", book)
    assert code == 0, err
    assert run_cli("verify", book, "--quiet")[0] == 0
    guide = {r[0]: r[1] for r in openpyxl.load_workbook(book)["Guide"].iter_rows(values_only=True) if r[0]}
    assert "float32 weights are computed in float64" in guide["precision"]
    model = sheetnet.from_onnx(graph, classes=extra[1].split(",") if shape.startswith("torch") else None,
                               inputs=list(frame.columns[:4]), target="species")
    recalculated, outputs = _libreoffice_outputs(book, tmp_path, model.outputs)
    feed = recalculated[list(model.inputs)].to_numpy(np.float32)
    runtime = _session(graph).run(None, {proto.graph.input[0].name: feed})[0]
    np.testing.assert_allclose(outputs, runtime, **FLOAT32)


@pytest.fixture(scope="module")
def trained_book(tmp_path_factory):
    """A workbook sheetnet trained (iris, 4-5-3 softmax), small enough to recalculate in seconds."""
    from sheetnet.cli import main

    folder = tmp_path_factory.mktemp("onnx_out")
    _frame("load_iris").to_csv(folder / "iris.csv", index=False)
    assert main(["build", str(folder / "iris.csv"), "--target", "species", "--hidden", "5", "--epochs", "30",
                 "--trace-epochs", "1", "--trace-rows", "30", "--quiet", "-o", str(folder / "book.xlsx")]) == 0
    return folder / "book.xlsx"


@pytest.mark.slow
@pytest.mark.libreoffice
@pytest.mark.libreoffice_bridge
def test_an_edited_workbook_exports_to_a_graph_onnxruntime_runs_with_the_workbooks_numbers(trained_book, tmp_path,
                                                                                             run_cli):
    from tests.lo_edit import edit_in_libreoffice, libreoffice_bridge_available

    if not libreoffice_bridge_available():
        pytest.skip("LibreOffice's Python bridge (python3-uno) is not installed")
    names = openpyxl.load_workbook(trained_book).defined_names
    sheet, cells = next(iter(names["W_1"].destinations))
    first = cells.split(":")[0].replace("$", "")
    edited = edit_in_libreoffice(trained_book, tmp_path / "edited.xlsx", [
        {"op": "value", "sheet": sheet, "cell": first, "value": 2.5},
        {"op": "insert_rows", "sheet": "Scoring", "at": 3, "count": 1}])
    code, _, err = run_cli("export", edited, "-o", tmp_path / "e.onnx")
    assert code == 0, err
    recalculated = _scoring(edited, libreoffice_values(edited, tmp_path / "lo"))
    graph = onnx.load(tmp_path / "e.onnx")
    onnx.checker.check_model(graph, full_check=True)
    meta = {p.key: p.value for p in graph.metadata_props}
    inputs, labels = json.loads(meta["sheetnet.feature_names"]), json.loads(meta["sheetnet.class_labels"])
    assert meta["sheetnet.source_sha256"] == hashlib.sha256(edited.read_bytes()).hexdigest()
    assert meta["sheetnet.version"] == sheetnet.__version__
    outputs, label = _session(tmp_path / "e.onnx").run(None, {"features": recalculated[inputs].to_numpy(float)})
    expected = recalculated[[f"a {c}" for c in labels]].to_numpy(float)
    np.testing.assert_allclose(outputs, expected, rtol=1e-12, atol=1e-12)  # float64: the workbook's numbers
    assert (label == recalculated["predicted"].astype(str).to_numpy()).all()
    untouched = sheetnet.extract_model(trained_book)
    assert sheetnet.extract_model(edited).layers[0].weights[0, 0] == 2.5 != untouched.layers[0].weights[0, 0]


def test_after_training_exports_the_records_last_step(trained_book, tmp_path, run_cli):
    assert run_cli("export", trained_book, "--after-training", "-o", tmp_path / "after.onnx")[0] == 0
    final = sheetnet.extract_model(trained_book, after_training=True)
    read = sheetnet.from_onnx(tmp_path / "after.onnx")
    for a, b in zip(read.layers, final.layers, strict=True):
        assert np.array_equal(a.weights, b.weights) and np.array_equal(a.bias, b.bias)


@pytest.mark.parametrize("activation, steepness, midpoint", [("sigmoid", 1.0, 0.0), ("sigmoid", 2.5, -0.75),
                                                             ("tanh", 1.0, 0.0), ("relu", 1.0, 0.0)])
def test_model_to_onnx_and_back_is_bit_exact_in_float64(activation, steepness, midpoint):
    rng = np.random.default_rng(11)
    hidden = sheetnet.Activation(activation, steepness, midpoint) if activation == "sigmoid" else \
        sheetnet.Activation(activation)
    model = sheetnet.Model(inputs=("a b", "c", "d"), outputs=("no", "maybe", "yes"), task="multiclass",
                           loss="cross-entropy",
                           layers=(sheetnet.Layer(rng.normal(size=(4, 3)), rng.normal(size=4), hidden),
                                   sheetnet.Layer(rng.normal(size=(3, 4)), rng.normal(size=3),
                                                  sheetnet.Activation("softmax"))),
                           scaling=sheetnet.Scaling("standard", rng.normal(size=3), rng.uniform(0.5, 2, size=3)),
                           target=("answer",), classes=("no", "maybe", "yes"))
    back = sheetnet.from_onnx(model.to_onnx())
    assert (back.inputs, back.outputs, back.classes, back.target, back.task) == \
        (model.inputs, model.outputs, model.classes, model.target, model.task)
    for a, b in zip(back.layers, model.layers, strict=True):
        assert np.array_equal(a.weights, b.weights) and np.array_equal(a.bias, b.bias) and a.activation == b.activation
    assert np.array_equal(back.scaling.offset, model.scaling.offset)
    assert np.array_equal(back.scaling.scale, model.scaling.scale)
    x = rng.normal(size=(50, 3))
    runtime = ort.InferenceSession(model.to_onnx().SerializeToString()).run(None, {"features": x})[0]
    from sheetnet.net.network import predict_outputs

    np.testing.assert_allclose(runtime, predict_outputs(model, x), rtol=1e-12, atol=1e-14)
    single = ort.InferenceSession(model.to_onnx("float32").SerializeToString())
    np.testing.assert_allclose(single.run(None, {"features": x.astype(np.float32)})[0], predict_outputs(model, x),
                               **FLOAT32)


def _graph_with(node: onnx.NodeProto, inputs, outputs, initializers=()) -> onnx.ModelProto:
    graph = helper.make_graph([node], "g", inputs, outputs, list(initializers))
    return helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17)], ir_version=8)


def _unsupported(kind: str) -> onnx.ModelProto:
    x = helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, 4, 4])
    y = helper.make_tensor_value_info("y", TensorProto.FLOAT, ["n", 3])
    if kind == "convolution":
        return _graph_with(helper.make_node("Conv", ["x", "k"], ["y"], name="conv1"), [x], [y],
                           [_tensor("k", np.ones((1, 1, 3, 3)))])
    if kind == "recurrent cell":
        seq = helper.make_tensor_value_info("x", TensorProto.FLOAT, [5, 1, 3])
        return _graph_with(helper.make_node("LSTM", ["x", "W", "R"], ["y"], name="lstm1", hidden_size=2), [seq], [y],
                           [_tensor("W", np.ones((1, 8, 3))), _tensor("R", np.ones((1, 8, 2)))])
    flat = helper.make_tensor_value_info("x", TensorProto.FLOAT, ["n", 3])
    nodes = [helper.make_node("MatMul", ["x", "w"], ["h"], name="dense"),
             helper.make_node("Relu", ["h"], ["r"], name="relu"),
             helper.make_node("MatMul", ["r", "w2"], ["h2"], name="dense2"),
             helper.make_node("Add", ["h2", "r"], ["y"], name="skip")]  # a residual branch
    graph = helper.make_graph(nodes, "g", [flat], [y], [_tensor("w", np.ones((3, 3))), _tensor("w2", np.ones((3, 3)))])
    return helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17)], ir_version=8)


@pytest.mark.parametrize("kind, named", [("convolution", "'conv1' (Conv)"), ("recurrent cell", "'lstm1' (LSTM)"),
                                         ("branch", "(a branch)")])
def test_graphs_that_are_not_feed_forward_networks_give_one_line(kind, named, tmp_path, run_cli):
    onnx.save(_unsupported(kind), tmp_path / "g.onnx")
    (tmp_path / "d.csv").write_text("a,b,c\n1,2,3\n")
    code, _, err = run_cli("build", "--model", tmp_path / "g.onnx", tmp_path / "d.csv", "-o", tmp_path / "b.xlsx")
    assert code == 2 and named in err and "sheetnet reads Gemm" in err and len(err.strip().splitlines()) == 1, err
    assert not (tmp_path / "b.xlsx").exists()


def test_without_the_onnx_package_the_error_says_how_to_install_it(monkeypatch, tmp_path):
    import sys

    monkeypatch.setitem(sys.modules, "onnx", None)
    with pytest.raises(UsageError, match=r"pip install 'sheetnet\[onnx\]'"):
        sheetnet.from_onnx(tmp_path / "any.onnx")


def test_a_graph_that_names_no_features_takes_the_datas_numeric_columns_or_asks(tmp_path, run_cli):
    rng = np.random.default_rng(3)
    onnx.save(_torch_shaped(rng.normal(size=(5, 4)), rng.normal(size=5), rng.normal(size=(3, 5)), rng.normal(size=3),
                            softmax=True), tmp_path / "m.onnx")
    frame = _frame("load_iris")
    frame.to_csv(tmp_path / "d.csv", index=False)
    assert run_cli("score", tmp_path / "m.onnx", tmp_path / "d.csv", "--classes", "a,b,c", "-o",
                   tmp_path / "s.csv")[0] == 0
    assert list(pd.read_csv(tmp_path / "s.csv").columns[:5]) == list(frame.columns)
    frame.insert(0, "id", range(len(frame)))
    frame.to_csv(tmp_path / "ids.csv", index=False)
    code, _, err = run_cli("score", tmp_path / "m.onnx", tmp_path / "ids.csv", "--classes", "a,b,c", "-o",
                           tmp_path / "t.csv")
    assert code == 2 and "--inputs" in err and not (tmp_path / "t.csv").exists()
    code, _, err = run_cli("score", tmp_path / "m.onnx", tmp_path / "d.csv", "-o", tmp_path / "u.csv")
    assert code == 2 and "--classes" in err


def _small(nodes, outputs=("y",), initializers=(), width=3) -> onnx.ModelProto:
    graph = helper.make_graph(nodes, "g", [helper.make_tensor_value_info("x", TensorProto.FLOAT, ["n", width])],
                              [helper.make_tensor_value_info(o, TensorProto.FLOAT, ["n", None]) for o in outputs],
                              list(initializers))
    return helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17)], ir_version=8)


def _misread_if_accepted(kind: str) -> onnx.ModelProto:
    """Graphs that would be misread if their extra node were skipped: each must be refused."""
    w, b = _tensor("w", np.ones((3, 2))), _tensor("b", np.zeros(2))
    dense = helper.make_node("MatMul", ["x", "w"], ["h"], name="dense")
    if kind == "if":
        then = helper.make_graph([helper.make_node("Neg", ["h"], ["r"], name="neg")], "then", [],
                                 [helper.make_tensor_value_info("r", TensorProto.FLOAT, None)])
        other = helper.make_graph([helper.make_node("Identity", ["h"], ["s"], name="same")], "else", [],
                                  [helper.make_tensor_value_info("s", TensorProto.FLOAT, None)])
        flag = numpy_helper.from_array(np.array(True), "flag")
        return _small([dense, helper.make_node("If", ["flag"], ["y"], name="/If", then_branch=then,
                                               else_branch=other)], initializers=[w, flag])
    if kind == "second head":
        return _small([dense, helper.make_node("Sigmoid", ["h"], ["y"], name="out")], outputs=("y", "h"),
                      initializers=[w])
    if kind == "weights of the wrong shape":
        return _small([helper.make_node("Gemm", ["x", "w5", "b"], ["y"], name="/fc1/Gemm")],
                      initializers=[_tensor("w5", np.ones((5, 4))), b])
    if kind == "scale after the output":  # a temperature on logits: not a sigmoid's steepness
        return _small([dense, helper.make_node("Mul", ["h", "temp"], ["y"], name="/temperature/Mul")],
                      initializers=[w, _tensor("temp", [0.5])])
    shape = numpy_helper.from_array(np.array([1, -1], dtype=np.int64), "shape")
    return _small([dense, helper.make_node("Reshape", ["h", "shape"], ["y"], name="/flat/Reshape")],
                  initializers=[w, shape])


@pytest.mark.parametrize("kind, says", [("if", "'/If' (If)"), ("second head", "output 'h' is not computed from"),
                                        ("weights of the wrong shape", "'/fc1/Gemm' (Gemm)"),
                                        ("reshape of the rows", "'/flat/Reshape' (Reshape)"),
                                        ("scale after the output", "'/temperature/Mul' (Mul)")])
def test_graphs_that_would_be_misread_are_refused(kind, says, tmp_path, run_cli):
    onnx.save(_misread_if_accepted(kind), tmp_path / "g.onnx")
    (tmp_path / "d.csv").write_text("a,b,c\n1,2,3\n4,5,6\n")
    for command in (["score", tmp_path / "g.onnx", tmp_path / "d.csv", "-o", tmp_path / "s.csv"],
                    ["export", tmp_path / "g.onnx", "-o", tmp_path / "e.onnx"]):
        code, _, err = run_cli(*command)
        assert code == 2 and says in err and len(err.strip().splitlines()) == 1, (command[0], err)
    assert not (tmp_path / "s.csv").exists() and not (tmp_path / "e.onnx").exists()


def test_files_that_are_not_self_contained_graphs_are_refused(tmp_path, run_cli):
    (tmp_path / "empty.onnx").write_bytes(b"")
    code, _, err = run_cli("export", tmp_path / "empty.onnx", "-o", tmp_path / "e.onnx")
    assert code == 2 and "empty.onnx: an empty file" in err
    proto = _torch_shaped(np.ones((5, 4)), np.zeros(5), np.ones((3, 5)), np.zeros(3), softmax=True)
    onnx.save(proto, tmp_path / "ext.onnx", save_as_external_data=True, all_tensors_to_one_file=True,
              location="weights.bin", size_threshold=0)
    code, _, err = run_cli("export", tmp_path / "ext.onnx", "--classes", "a,b,c", "-o", tmp_path / "e.onnx")
    assert code == 2 and "external data" in err and not (tmp_path / "e.onnx").exists()


def test_scikit_learns_dataframe_form_names_the_datas_columns(tmp_path, run_cli):
    """skl2onnx given a DataFrame writes one input per column (names made identifier-safe) joined by
    FeatureVectorizer: those names are the graph's features, matched to the data's columns."""
    from skl2onnx import to_onnx
    from sklearn.neural_network import MLPClassifier
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    frame = _frame("load_iris")
    features = frame.drop(columns="species")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        mlp = make_pipeline(StandardScaler(), MLPClassifier((4,), max_iter=100, random_state=0)).fit(
            features, frame.species)
    onnx.save(to_onnx(mlp, features[:1]), tmp_path / "m.onnx")
    frame.to_csv(tmp_path / "d.csv", index=False)
    model = sheetnet.api.as_model(tmp_path / "m.onnx", tmp_path / "d.csv")
    assert model.inputs == tuple(features.columns)
    assert run_cli("score", tmp_path / "m.onnx", tmp_path / "d.csv", "-o", tmp_path / "s.csv")[0] == 0
    scored = pd.read_csv(tmp_path / "s.csv")
    assert (scored.predicted == mlp.predict(features)).mean() > 0.99
