"""Backpropagation against central differences, for every activation/loss pair the trainer supports."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from sheetnet.net import activations as act
from sheetnet.net.activations import Activation
from sheetnet.net.model import Layer
from sheetnet.net.network import deltas, forward_pass, gradients

HIDDEN = [Activation("sigmoid"), Activation("sigmoid", 2.5, 0.3), Activation("tanh"), Activation("relu"),
          Activation("identity")]
OUTPUT_LOSS = [("identity", "squared"), ("sigmoid", "squared"), ("tanh", "squared"), ("relu", "squared"),
               ("softmax", "squared"), ("sigmoid", "cross-entropy"), ("softmax", "cross-entropy"),
               ("identity", "cross-entropy"), ("tanh", "cross-entropy")]


def _objective(layers, x, t, loss, l2):
    fwd = forward_pass(layers, x)
    data = np.mean(act.sample_loss(loss, layers[-1].activation, fwd.output, t))
    return data + 0.5 * l2 * sum(np.sum(layer.weights**2) for layer in layers)


def _network(rng, hidden, output, n_out):
    sizes = [3, 4, 3, n_out]
    acts = [hidden, hidden, output]
    return tuple(Layer(rng.normal(0, 0.6, (b, a)), rng.normal(0, 0.5, b), f)
                 for a, b, f in zip(sizes[:-1], sizes[1:], acts, strict=True))


def _targets(rng, output, loss, n, k):
    if output.name == "softmax":
        return np.eye(k)[rng.integers(0, k, n)]
    if loss == "cross-entropy":
        return rng.integers(0, 2, (n, k)).astype(float)
    return rng.normal(0.5, 0.3, (n, k))


@pytest.mark.parametrize(("hidden", "pair"), list(itertools.product(HIDDEN, OUTPUT_LOSS)))
def test_backprop_matches_central_differences(hidden, pair):
    output = Activation(pair[0], 1.7, -0.2) if pair[0] == "sigmoid" else Activation(pair[0])
    loss = pair[1]
    rng = np.random.default_rng(7)
    layers = _network(rng, hidden, output, n_out=3)
    x, t, l2 = rng.normal(0, 1, (5, 3)), _targets(rng, output, loss, 5, 3), 0.05
    fwd = forward_pass(layers, x)
    grad_w, grad_b = gradients(layers, x, fwd, deltas(layers, fwd, t, loss), l2)
    eps = 1e-5
    for k, _layer in enumerate(layers):
        for name, analytic in (("weights", grad_w[k]), ("bias", grad_b[k])):
            numeric = np.zeros_like(analytic)
            for idx in np.ndindex(analytic.shape):
                plus, minus = ([layer_.__class__(layer_.weights.copy(), layer_.bias.copy(), layer_.activation)
                                for layer_ in layers] for _ in range(2))
                getattr(plus[k], name)[idx] += eps
                getattr(minus[k], name)[idx] -= eps
                numeric[idx] = (_objective(plus, x, t, loss, l2) - _objective(minus, x, t, loss, l2)) / (2 * eps)
            # Outside check: Bishop, PRML (Springer 2006), §5.3.3 eq. (5.69), central differences;
            # eps=1e-5 as in scikit-learn's test_gradient; rtol=1e-6, atol=1e-8 (common practice).
            np.testing.assert_allclose(analytic, numeric, rtol=1e-6, atol=1e-8, err_msg=f"layer {k} {name}")


@pytest.mark.parametrize("output", ["identity", "sigmoid", "softmax"])
def test_canonical_pairs_give_output_delta_y_minus_t(output):
    rng = np.random.default_rng(3)
    z = rng.normal(0, 3, (6, 4))
    a = act.forward(Activation(output), z)
    t = np.eye(4)[rng.integers(0, 4, 6)]
    loss = "squared" if output == "identity" else "cross-entropy"
    # Outside check: Bishop, PRML (Springer 2006), §5.2 eqs. (5.18)-(5.21), §4.3.4 eq. (4.109):
    # the canonical link makes the output delta y - t; atol 1e-12.
    np.testing.assert_allclose(act.output_delta(loss, Activation(output), z, a, t), a - t, atol=1e-12)


def test_logistic_and_tanh_derivative_identities():
    z = np.linspace(-6, 6, 121)[:, None]
    sig, tanh = Activation("sigmoid"), Activation("tanh")
    s, h = act.forward(sig, z), act.forward(tanh, z)
    h_eps = 1e-6
    numeric_s = (act.forward(sig, z + h_eps) - act.forward(sig, z - h_eps)) / (2 * h_eps)
    numeric_h = (act.forward(tanh, z + h_eps) - act.forward(tanh, z - h_eps)) / (2 * h_eps)
    # Outside check: Bishop, PRML (2006), §4.3.2 eq. (4.88) dσ/da = σ(1-σ); rtol 1e-6 (common practice).
    np.testing.assert_allclose(act.derivative(sig, z, s), numeric_s, rtol=1e-6)
    # Outside check: Bishop, PRML (2006), §5.3.2 eq. (5.60) tanh' = 1 - tanh²; rtol 1e-6 (common practice).
    np.testing.assert_allclose(act.derivative(tanh, z, h), numeric_h, rtol=1e-6, atol=1e-12)
    # Outside check: σ(0) = 0.5 and σ'(0) = 0.25, Bishop (2006) §4.3.2.
    assert act.forward(sig, np.zeros((1, 1)))[0, 0] == 0.5
    assert act.derivative(sig, np.zeros((1, 1)), np.full((1, 1), 0.5))[0, 0] == 0.25
    # Outside check: Goodfellow, Bengio & Courville, Deep Learning (2016), §6.3.2: tanh(z) = 2σ(2z) - 1;
    # at z = 0.5 both equal 0.462117157260 (reproduced); atol 1e-15.
    np.testing.assert_allclose(h, 2 * act.forward(sig, 2 * z) - 1, atol=1e-15)
    assert abs(np.tanh(0.5) - 0.462117157260) < 1e-12


def test_stable_forms_never_overflow():
    z = np.array([[-1e4, -800.0, -36.0, 0.0, 36.0, 800.0, 1e4]])
    with np.errstate(over="raise", divide="raise", invalid="raise"):
        s = act.forward(Activation("sigmoid"), z)
        p = act.forward(Activation("softmax"), z)
    assert s[0, 0] == 0.0 and s[0, -1] == 1.0 and np.all(np.isfinite(s))
    assert np.all(np.isfinite(p)) and p[0, -1] == 1.0
    # Outside check: scipy.special.expit is the reference logistic function (scipy 1.x); rtol 1e-15.
    from scipy.special import expit, softmax

    np.testing.assert_allclose(s, expit(z), rtol=1e-15, atol=0)
    np.testing.assert_allclose(p, softmax(z, axis=1), rtol=1e-12, atol=1e-300)


def test_cross_entropy_is_clipped_not_infinite():
    y = np.array([[0.0], [1.0]])
    t = np.array([[1.0], [0.0]])
    loss = act.sample_loss("cross-entropy", Activation("sigmoid"), y, t)
    np.testing.assert_allclose(loss, -np.log(act.PROBABILITY_CLIP))
