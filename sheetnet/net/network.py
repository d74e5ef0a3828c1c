"""Forward and backward passes over a batch, vectorised with numpy (float64).

Shapes: ``x`` (batch, fan_in); per layer ``z`` and ``a`` (batch, units); ``W`` (units, fan_in).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sheetnet.net import activations as act
from sheetnet.net.model import Layer, Model


@dataclass(frozen=True)
class Pass:
    """Weighted sums ``z`` and activations ``a`` of every layer for one batch."""

    z: tuple[np.ndarray, ...]
    a: tuple[np.ndarray, ...]

    @property
    def output(self) -> np.ndarray:
        return self.a[-1]


def forward_pass(layers: tuple[Layer, ...], x: np.ndarray) -> Pass:
    """z_k = a_{k-1} W_k^T + b_k and a_k = f_k(z_k), layer by layer."""
    zs, As = [], []
    a = x
    for layer in layers:
        z = a @ layer.weights.T + layer.bias
        a = act.forward(layer.activation, z)
        zs.append(z)
        As.append(a)
    return Pass(z=tuple(zs), a=tuple(As))


def deltas(layers: tuple[Layer, ...], fwd: Pass, t: np.ndarray, loss: str) -> tuple[np.ndarray, ...]:
    """dE_n/dz for every layer: the output delta, then delta_j = f'(z_j) * sum_k w_kj delta_k
    (Bishop 2006, eq. 5.56)."""
    delta = act.output_delta(loss, layers[-1].activation, fwd.z[-1], fwd.a[-1], t)
    out = [delta]
    for k in range(len(layers) - 2, -1, -1):
        back = delta @ layers[k + 1].weights
        delta = act.derivative(layers[k].activation, fwd.z[k], fwd.a[k]) * back
        out.append(delta)
    return tuple(reversed(out))


def gradients(layers: tuple[Layer, ...], x: np.ndarray, fwd: Pass, delta: tuple[np.ndarray, ...],
              l2: float) -> tuple[tuple[np.ndarray, ...], tuple[np.ndarray, ...]]:
    """Batch-mean gradients: dW_k = mean_n delta_k a_{k-1}^T + l2 * W_k; db_k = mean_n delta_k.

    Biases carry no L2 penalty.
    """
    n = x.shape[0]
    sources = (x, *fwd.a[:-1])
    grad_w = tuple(d.T @ s / n + l2 * layer.weights for d, s, layer in zip(delta, sources, layers, strict=True))
    grad_b = tuple(d.sum(axis=0) / n for d in delta)
    return grad_w, grad_b


def scaled_inputs(model: Model, x_raw: np.ndarray) -> np.ndarray:
    """Apply the model's input scaling (or none)."""
    return x_raw if model.scaling is None else model.scaling.apply(x_raw)


def predict_outputs(model: Model, x_raw: np.ndarray) -> np.ndarray:
    """Output-layer activations for raw (unscaled) inputs."""
    return forward_pass(model.layers, scaled_inputs(model, x_raw)).output


def predicted_codes(model: Model, y: np.ndarray, threshold: float = 0.5) -> np.ndarray:
    """Class decisions: binary/multilabel y >= threshold (0/1), multiclass the arg-max index."""
    if model.task == "multiclass":
        return np.argmax(y, axis=1)
    return (y >= threshold).astype(int)


def mean_loss(model: Model, x_scaled: np.ndarray, t: np.ndarray) -> float:
    """Mean per-sample loss of the model on already-scaled inputs."""
    y = forward_pass(model.layers, x_scaled).output
    return float(np.mean(act.sample_loss(model.loss, model.output_activation, y, t)))
