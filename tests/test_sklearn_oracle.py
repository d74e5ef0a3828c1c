"""One training step of the reference trainer equals scikit-learn's MLP after one ``fit`` step.

Outside check: scikit-learn 1.x, sklearn/neural_network (Pedregosa et al., JMLR 12:2825-2830, 2011,
from memory): SGD with momentum 0, constant learning rate, batch-mean gradients, L2 alpha*W/n_batch.
Conventions as scikit-learn's sources state them (coefs_ of shape (fan_in, fan_out), output delta
activations - y, batch-mean gradients, one fit with max_iter=1 runs one epoch); tolerance atol 1e-12
(common practice).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from sklearn.exceptions import ConvergenceWarning
from sklearn.neural_network import MLPClassifier, MLPRegressor

from sheetnet.net.activations import Activation
from sheetnet.net.model import Layer, Model
from sheetnet.net.train import TrainSettings, train

SK_ACT = {"sigmoid": "logistic", "tanh": "tanh", "relu": "relu"}


def _sklearn_step(est, x, t_fit, layers):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        est.fit(x, t_fit)
        est.coefs_ = [layer.weights.T.copy() for layer in layers]
        est.intercepts_ = [layer.bias.copy() for layer in layers]
        est.set_params(warm_start=True)
        est.fit(x, t_fit)
    return est


def _layers(rng, sizes, hidden, output):
    acts = [Activation(hidden)] * (len(sizes) - 2) + [Activation(output)]
    return tuple(Layer(rng.uniform(-0.7, 0.7, (b, a)), rng.uniform(-0.3, 0.3, b), f)
                 for a, b, f in zip(sizes[:-1], sizes[1:], acts, strict=True))


def _ours(layers, x, t, task, loss, batch, lr, l2):
    model = Model(inputs=tuple(f"x{i}" for i in range(x.shape[1])), outputs=tuple(f"y{k}" for k in range(t.shape[1])),
                  task=task, layers=layers, loss=loss)
    settings = TrainSettings(learning_rate=lr, epochs=1, batch_size=batch, shuffle=False, l2=l2)
    return train(model, x, t, settings).model.layers


def _compare(ours, est):
    for layer, coef, intercept in zip(ours, est.coefs_, est.intercepts_, strict=True):
        np.testing.assert_allclose(layer.weights, coef.T, atol=1e-12, rtol=0)
        np.testing.assert_allclose(layer.bias, intercept, atol=1e-12, rtol=0)


@pytest.mark.parametrize("hidden", ["sigmoid", "tanh", "relu"])
@pytest.mark.parametrize("batch", [None, 1])
def test_regressor_step(hidden, batch):
    rng = np.random.default_rng(11)
    x, t = rng.normal(size=(6, 3)), rng.normal(size=(6, 2))
    layers = _layers(rng, [3, 4, 2], hidden, "identity")
    est = MLPRegressor(hidden_layer_sizes=(4,), activation=SK_ACT[hidden], solver="sgd", learning_rate="constant",
                       learning_rate_init=0.05, momentum=0.0, nesterovs_momentum=False,
                       batch_size=len(x) if batch is None else batch, shuffle=False, alpha=0.0, max_iter=1,
                       early_stopping=False, random_state=0)
    _compare(_ours(layers, x, t, "regression", "squared", batch, 0.05, 0.0), _sklearn_step(est, x, t, layers))


@pytest.mark.parametrize("hidden", ["sigmoid", "tanh"])
@pytest.mark.parametrize("batch", [None, 1])
def test_binary_classifier_step(hidden, batch):
    rng = np.random.default_rng(5)
    x = rng.normal(size=(8, 2))
    y = np.array([0, 1, 1, 0, 1, 0, 0, 1])
    layers = _layers(rng, [2, 3, 1], hidden, "sigmoid")
    est = MLPClassifier(hidden_layer_sizes=(3,), activation=SK_ACT[hidden], solver="sgd", learning_rate="constant",
                        learning_rate_init=0.3, momentum=0.0, nesterovs_momentum=False,
                        batch_size=len(x) if batch is None else batch, shuffle=False, alpha=0.0, max_iter=1,
                        early_stopping=False, random_state=0)
    ours = _ours(layers, x, y[:, None].astype(float), "binary", "cross-entropy", batch, 0.3, 0.0)
    _compare(ours, _sklearn_step(est, x, y, layers))


def test_multiclass_softmax_step_with_l2():
    rng = np.random.default_rng(9)
    x = rng.normal(size=(9, 4))
    y = np.array([0, 1, 2, 2, 1, 0, 1, 2, 0])
    layers = _layers(rng, [4, 5, 3], "tanh", "softmax")
    alpha = 0.3
    est = MLPClassifier(hidden_layer_sizes=(5,), activation="tanh", solver="sgd", learning_rate="constant",
                        learning_rate_init=0.2, momentum=0.0, nesterovs_momentum=False, batch_size=len(x),
                        shuffle=False, alpha=alpha, max_iter=1, early_stopping=False, random_state=0)
    # scikit-learn scales the L2 gradient by alpha / n_batch; ours is lambda * W, so lambda = alpha / n.
    ours = _ours(layers, x, np.eye(3)[y], "multiclass", "cross-entropy", None, 0.2, alpha / len(x))
    _compare(ours, _sklearn_step(est, x, y, layers))


def test_multilabel_step_with_momentum_over_two_epochs():
    rng = np.random.default_rng(2)
    x = rng.normal(size=(4, 3))
    y = rng.integers(0, 2, (4, 2))
    y[0] = [0, 1]
    y[1] = [1, 0]
    layers = _layers(rng, [3, 4, 2], "sigmoid", "sigmoid")
    est = MLPClassifier(hidden_layer_sizes=(4,), activation="logistic", solver="sgd", learning_rate="constant",
                        learning_rate_init=0.1, momentum=0.9, nesterovs_momentum=False, batch_size=2,
                        shuffle=False, alpha=0.0, max_iter=1, early_stopping=False, random_state=0)
    est = _sklearn_step(est, x, y, layers)  # one epoch: two batches of 2, momentum carried between them
    model = Model(inputs=("a", "b", "c"), outputs=("p", "q"), task="multilabel", layers=layers,
                  loss="cross-entropy")
    ours = train(model, x, y.astype(float), TrainSettings(0.1, 1, 2, False, momentum=0.9)).model.layers
    _compare(ours, est)
