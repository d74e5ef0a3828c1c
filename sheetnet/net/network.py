"""Forward and backward passes over a batch, vectorised with numpy (float64).

Shapes: ``x`` (batch, fan_in); per layer ``z`` and ``a`` (batch, units); ``W`` (units, fan_in).
"""

from __future__ import annotations

from collections.abc import Sequence
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


def forward_arrays(weights: Sequence[np.ndarray], biases: Sequence[np.ndarray],
                   activations: Sequence[act.Activation], x: np.ndarray) -> tuple[list, list]:
    """z_k = a_{k-1} W_k^T + b_k and a_k = f_k(z_k), layer by layer (lists of arrays)."""
    zs, outs = [], []
    a = x
    for w, b, f in zip(weights, biases, activations, strict=True):
        z = a @ w.T
        z += b
        a = act.forward(f, z)
        zs.append(z)
        outs.append(a)
    return zs, outs


def delta_arrays(weights: Sequence[np.ndarray], activations: Sequence[act.Activation], zs: list, outs: list,
                 t: np.ndarray, loss: str) -> list:
    """dE_n/dz for every layer: the output delta, then delta_j = f'(z_j) * sum_k w_kj delta_k
    (Bishop 2006, eq. 5.56)."""
    delta = act.output_delta(loss, activations[-1], zs[-1], outs[-1], t)
    out = [delta]
    for k in range(len(weights) - 2, -1, -1):
        delta = act.derivative(activations[k], zs[k], outs[k]) * (delta @ weights[k + 1])
        out.append(delta)
    out.reverse()
    return out


def gradient_arrays(weights: Sequence[np.ndarray], x: np.ndarray, outs: list, delta: list,
                    l2: float) -> tuple[list, list]:
    """Batch-mean gradients: dW_k = mean_n delta_k a_{k-1}^T + l2 * W_k; db_k = mean_n delta_k.

    Biases carry no L2 penalty.
    """
    n = x.shape[0]
    grad_w, grad_b = [], []
    for k, d in enumerate(delta):
        source = x if k == 0 else outs[k - 1]
        g = d.T @ source if n == 1 else d.T @ source / n
        grad_w.append(g + l2 * weights[k] if l2 else g)
        grad_b.append(d[0].copy() if n == 1 else d.sum(axis=0) / n)
    return grad_w, grad_b


def _parts(layers: Sequence[Layer]) -> tuple[list, list, list]:
    return [la.weights for la in layers], [la.bias for la in layers], [la.activation for la in layers]


def forward_pass(layers: Sequence[Layer], x: np.ndarray) -> Pass:
    """The forward pass of a model's layers on a batch."""
    zs, outs = forward_arrays(*_parts(layers), x)
    return Pass(z=tuple(zs), a=tuple(outs))


def deltas(layers: Sequence[Layer], fwd: Pass, t: np.ndarray, loss: str) -> tuple[np.ndarray, ...]:
    weights, _, activations = _parts(layers)
    return tuple(delta_arrays(weights, activations, list(fwd.z), list(fwd.a), t, loss))


def gradients(layers: Sequence[Layer], x: np.ndarray, fwd: Pass, delta: Sequence[np.ndarray],
              l2: float) -> tuple[tuple[np.ndarray, ...], tuple[np.ndarray, ...]]:
    grad_w, grad_b = gradient_arrays([la.weights for la in layers], x, list(fwd.a), list(delta), l2)
    return tuple(grad_w), tuple(grad_b)


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
