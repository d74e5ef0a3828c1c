"""The trainer and scorer against published examples, textbook facts and open data sets."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from sheetnet.net.activations import Activation
from sheetnet.net.model import Layer, Model, load_model
from sheetnet.net.network import predict_outputs
from sheetnet.net.train import TrainSettings, train
from tests.conftest import write_csv

XOR_X = np.array([[0, 0], [0, 1], [1, 0], [1, 1]], dtype=float)
XOR_T = np.array([0, 1, 1, 0], dtype=float)


def _model(layers, n_in, n_out, task="binary", loss="squared"):
    return Model(inputs=tuple(f"x{i + 1}" for i in range(n_in)), outputs=tuple(f"y{k + 1}" for k in range(n_out)),
                 task=task, layers=tuple(layers), loss=loss)


def goodfellow_xor_model() -> Model:
    """Goodfellow, Bengio & Courville, Deep Learning (MIT Press 2016), §6.1: W=[[1,1],[1,1]], c=[0,-1],
    w=[1,-2], b=0, ReLU hidden units, linear output."""
    hidden = Layer(np.array([[1.0, 1.0], [1.0, 1.0]]), np.array([0.0, -1.0]), Activation("relu"))
    out = Layer(np.array([[1.0, -2.0]]), np.array([0.0]), Activation("identity"))
    return _model([hidden, out], 2, 1, task="regression")


def test_goodfellow_relu_xor_outputs_exactly():
    # Outside check: Goodfellow et al. (2016) §6.1 "Learning XOR": outputs exactly 0, 1, 1, 0.
    assert predict_outputs(goodfellow_xor_model(), XOR_X)[:, 0].tolist() == [0.0, 1.0, 1.0, 0.0]


def _step_unit(weights, bias):
    return Layer(np.array([weights], dtype=float), np.array([bias], dtype=float), Activation("step"))


@pytest.mark.parametrize(("weights", "bias", "truth"), [
    ([1, 1], -1.5, [0, 0, 0, 1]),   # AND
    ([1, 1], -0.5, [0, 1, 1, 1]),   # OR
])
def test_threshold_units_and_or(weights, bias, truth):
    # Truth tables of AND and OR with a threshold unit (common practice).
    y = predict_outputs(_model([_step_unit(weights, bias)], 2, 1), XOR_X)[:, 0]
    assert y.tolist() == truth


def test_threshold_unit_not():
    # Truth table of NOT with a threshold unit (common practice).
    y = predict_outputs(_model([_step_unit([-1], 0.5)], 1, 1), np.array([[0.0], [1.0]]))[:, 0]
    assert y.tolist() == [1, 0]


def test_two_layer_threshold_xor():
    # XOR = AND(OR, NAND) with threshold units (common practice).
    hidden = Layer(np.array([[1.0, 1.0], [-1.0, -1.0]]), np.array([-0.5, 1.5]), Activation("step"))
    out = _step_unit([1, 1], -1.5)
    assert predict_outputs(_model([hidden, out], 2, 1), XOR_X)[:, 0].tolist() == XOR_T.tolist()


def test_a_single_logistic_unit_on_xor_ends_at_the_symmetric_optimum():
    """Minsky & Papert, Perceptrons (MIT Press 1969): no single linear unit separates XOR. For a
    logistic unit under cross-entropy the loss is convex and, XOR being symmetric, w = 0, b = 0 (every
    output 0.5, loss ln 2) makes the gradient sum (y - t) x vanish: it is the unique optimum (Bishop,
    PRML, Springer 2006, section 4.3.2, eq. 4.91, equation number from memory). The trainer, started
    away from it, must arrive there."""
    unit = Layer(np.array([[0.8, -1.3]]), np.array([0.4]), Activation("sigmoid"))
    model = _model([unit], 2, 1, loss="cross-entropy")
    result = train(model, XOR_X, XOR_T[:, None], TrainSettings(0.5, 3000, None, False))
    y = predict_outputs(result.model, XOR_X)[:, 0]
    assert np.allclose(y, 0.5, atol=1e-4), y
    assert result.epoch_loss[-1] == pytest.approx(np.log(2), abs=1e-7)
    assert result.epoch_loss[0] > result.epoch_loss[-1] + 0.05


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_seeded_2_2_1_sigmoid_network_learns_xor(xor_csv, tmp_path, run_cli, seed):
    out = tmp_path / "xor.json"
    code, _, err = run_cli("train", xor_csv, "--target", "y", "--hidden", "2", "--lr", "2", "--epochs", "3000",
                           "--batch-size", "full", "--scale", "none", "--seed", seed, "-o", out)
    assert code == 0, err
    y = predict_outputs(load_model(out), XOR_X)[:, 0]
    assert ((y >= 0.5) == XOR_T.astype(bool)).all(), y


def test_worked_one_step_example_through_the_command_line(tmp_path, run_cli):
    """Mazur, "A Step by Step Backpropagation Example" (2015 blog post); all values from memory:
    inputs 0.05, 0.10; targets 0.01, 0.99; w1..w8 = .15 .20 .25 .30 .40 .45 .50 .55; biases .35, .60
    (per layer); learning rate 0.5; sigmoid units and E = sum 1/2 (t - o)^2."""
    model = {"format": "sheetnet-model", "version": 1, "inputs": ["i1", "i2"], "outputs": ["o1", "o2"],
             "task": "regression", "scaling": None, "loss": "squared", "training": {},
             "layers": [{"weights": [[0.15, 0.20], [0.25, 0.30]], "bias": [0.35, 0.35],
                         "activation": {"name": "sigmoid", "steepness": 1.0, "midpoint": 0.0}},
                        {"weights": [[0.40, 0.45], [0.50, 0.55]], "bias": [0.60, 0.60],
                         "activation": {"name": "sigmoid"}}]}
    (tmp_path / "m.json").write_text(json.dumps(model))
    data = write_csv(tmp_path / "d.csv", ["i1", "i2", "o1", "o2"], [[0.05, 0.10, 0.01, 0.99]])
    code, _, err = run_cli("train", data, "--target", "o1,o2", "--init", tmp_path / "m.json", "--lr", "0.5",
                           "--epochs", "1", "--batch-size", "1", "--scale", "none", "--no-shuffle",
                           "--output", "sigmoid", "--loss", "squared", "-o", tmp_path / "out.json")
    assert code == 0, err
    trained = json.loads((tmp_path / "out.json").read_text())
    # Outside check: Mazur (2015), values from memory: E_total = 0.298371109 before the update;
    # w1+ .. w4+ = 0.149780716, 0.19956143, 0.24975114, 0.29950229;
    # w5+ .. w8+ = 0.35891648, 0.408666186, 0.511301270, 0.561370121; atol 1e-8.
    assert abs(trained["training"]["final_loss"] - 0.298371109) < 1e-8
    np.testing.assert_allclose(trained["layers"][0]["weights"], [[0.149780716, 0.19956143], [0.24975114, 0.29950229]],
                               atol=1e-8)
    np.testing.assert_allclose(trained["layers"][1]["weights"], [[0.35891648, 0.408666186], [0.511301270, 0.561370121]],
                               atol=1e-8)


def _sklearn_csv(loader, path: Path, label_names: bool) -> Path:
    bunch = loader(as_frame=True)
    frame = bunch.frame.copy()
    if label_names:
        frame["target"] = np.asarray(bunch.target_names)[bunch.target]
    frame.to_csv(path, index=False)
    return path


@pytest.mark.parametrize(("loader_name", "floor", "names"), [
    # Outside check: Fisher (1936), "The use of multiple measurements in taxonomic problems", Annual Eugenics 7,
    # 179-188 (iris, as shipped by scikit-learn); holdout accuracy floor 0.90 (common practice).
    ("load_iris", 0.90, True),
    # Outside check: Street, Wolberg & Mangasarian (1993), breast cancer Wisconsin (diagnostic), as shipped by
    # scikit-learn; holdout accuracy floor 0.95 (common practice).
    ("load_breast_cancer", 0.95, False),
])
def test_open_data_sets_reach_holdout_accuracy(loader_name, floor, names, tmp_path, run_cli):
    import sklearn.datasets

    data = _sklearn_csv(getattr(sklearn.datasets, loader_name), tmp_path / "d.csv", names)
    out = tmp_path / "m.json"
    code, stdout, err = run_cli("train", data, "--target", "target", "--hidden", "8", "--holdout", "0.25", "-o", out)
    assert code == 0, err
    holdout = load_model(out).training["holdout_metrics"]
    assert holdout["accuracy"] >= floor, stdout
