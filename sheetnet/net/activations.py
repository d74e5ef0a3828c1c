"""Activation functions and losses: the numpy side of the network's vocabulary.

Every function here has a spreadsheet twin (``sheetnet.book.formula_text``) that uses the same
stable form and the same clip, so that the workbook and the trainer agree to rounding.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sheetnet.errors import ModelFileError

ELEMENTWISE = ("sigmoid", "tanh", "relu", "identity", "step")
NAMES = (*ELEMENTWISE, "softmax")
TRAINABLE = ("sigmoid", "tanh", "relu", "identity", "softmax")

#: Probabilities are clipped to at least this inside the logarithm of the cross-entropy.
#: 1e-12 (not machine epsilon) because LibreOffice snaps ``1-y`` to 0 once y is within
#: 2**-48 of 1, and then both engines must land on the same clipped value.
PROBABILITY_CLIP = 1e-12

#: A target at or above this counts as the positive class (0/1 targets, or probabilities given as targets).
TARGET_CUT = 0.5


@dataclass(frozen=True)
class Activation:
    """An activation by name; ``steepness`` and ``midpoint`` shape the sigmoid.

    sigmoid(z) = 1 / (1 + exp(-steepness * (z - midpoint))); step(z) = 1 if z >= midpoint else 0.
    The other functions ignore both parameters, which must then keep their defaults.
    """

    name: str = "sigmoid"
    steepness: float = 1.0
    midpoint: float = 0.0

    def __post_init__(self) -> None:
        if self.name not in NAMES:
            raise ModelFileError(f"unknown activation {self.name!r}; expected one of {', '.join(NAMES)}")
        shaped = self.name in ("sigmoid", "step")
        if not shaped and (self.steepness != 1.0 or self.midpoint != 0.0):
            raise ModelFileError(f"activation {self.name!r} takes no steepness or midpoint")
        if self.name == "sigmoid" and not self.steepness > 0:
            raise ModelFileError(f"sigmoid steepness must be > 0, got {self.steepness!r}")

    def to_dict(self) -> dict:
        if self.name == "sigmoid":
            return {"name": self.name, "steepness": self.steepness, "midpoint": self.midpoint}
        if self.name == "step":
            return {"name": self.name, "midpoint": self.midpoint}
        return {"name": self.name}


def stable_sigmoid(u: np.ndarray) -> np.ndarray:
    """1/(1+e^-u) for u >= 0 and e^u/(1+e^u) below, both as (1 or e^-|u|) / (1 + e^-|u|):
    no overflow for any finite u, and the same two branches as the spreadsheet formula."""
    e = np.abs(u)
    np.negative(e, out=e)
    np.exp(e, out=e)
    out = np.where(u >= 0, 1.0, e)
    e += 1.0
    out /= e
    return out


def stable_softmax(z: np.ndarray) -> np.ndarray:
    """Row-wise softmax with the row maximum subtracted first (Goodfellow et al. 2016, §4.1)."""
    e = np.exp(z - z.max(axis=-1, keepdims=True))
    return e / e.sum(axis=-1, keepdims=True)


#: f(z) per activation, for weighted sums ``z`` of shape (batch, units). A new activation is one entry
#: here and one in DERIVATIVES (if it can be trained), with its formula text in book/formula_text.py.
FORWARD = {
    "sigmoid": lambda act, z: stable_sigmoid(act.steepness * (z - act.midpoint)),
    "tanh": lambda act, z: np.tanh(z),
    "relu": lambda act, z: np.maximum(z, 0.0),
    "identity": lambda act, z: z.astype(float, copy=True),
    "step": lambda act, z: (z >= act.midpoint).astype(float),
    "softmax": lambda act, z: stable_softmax(z),
}

#: Element-wise f'(z), written from the output ``a`` where it can be (so a sheet cell can point at the
#: activation cell it already has). Softmax is not element-wise: see :func:`output_delta`.
DERIVATIVES = {
    "sigmoid": lambda act, z, a: act.steepness * a * (1.0 - a),
    "tanh": lambda act, z, a: 1.0 - a**2,
    "relu": lambda act, z, a: (z > 0).astype(float),
    "identity": lambda act, z, a: np.ones_like(z, dtype=float),
}


def forward(act: Activation, z: np.ndarray) -> np.ndarray:
    """Activation of the weighted sums ``z`` (shape (batch, units))."""
    return FORWARD[act.name](act, z)


def derivative(act: Activation, z: np.ndarray, a: np.ndarray) -> np.ndarray:
    """Element-wise f'(z) (see DERIVATIVES)."""
    rule = DERIVATIVES.get(act.name)
    if rule is None:
        raise ModelFileError(f"activation {act.name!r} has no usable derivative for training")
    return rule(act, z, a)


def _squared_loss(output: Activation, y: np.ndarray, t: np.ndarray) -> np.ndarray:
    return 0.5 * np.sum((t - y) ** 2, axis=1)


def _cross_entropy_loss(output: Activation, y: np.ndarray, t: np.ndarray) -> np.ndarray:
    positive = t * np.log(np.maximum(y, PROBABILITY_CLIP))
    if output.name == "softmax":
        return -np.sum(positive, axis=1)
    negative = (1.0 - t) * np.log(np.maximum(1.0 - y, PROBABILITY_CLIP))
    return -np.sum(positive + negative, axis=1)


def _squared_delta(output: Activation, z: np.ndarray, y: np.ndarray, t: np.ndarray) -> np.ndarray:
    g = y - t
    if output.name == "softmax":
        return y * (g - np.sum(g * y, axis=1, keepdims=True))
    return derivative(output, z, y) * g


def _cross_entropy_delta(output: Activation, z: np.ndarray, y: np.ndarray, t: np.ndarray) -> np.ndarray:
    if output.name == "sigmoid":
        return output.steepness * (y - t)
    if output.name == "softmax":
        return y - t
    # any other output: the chain rule through the clipped logarithms (a clipped term has slope 0)
    slope = -t / np.maximum(y, PROBABILITY_CLIP) * (y > PROBABILITY_CLIP) + \
        (1.0 - t) / np.maximum(1.0 - y, PROBABILITY_CLIP) * (1.0 - y > PROBABILITY_CLIP)
    return derivative(output, z, y) * slope


#: Each loss: its per-sample value (output activation, y, t) and its output delta dE/dz (output
#: activation, z, y, t). A new loss needs both, and its formula text in book/formula_text.py.
SAMPLE_LOSSES = {"squared": _squared_loss, "cross-entropy": _cross_entropy_loss}
OUTPUT_DELTAS = {"squared": _squared_delta, "cross-entropy": _cross_entropy_delta}
LOSSES = tuple(SAMPLE_LOSSES)


def sample_loss(loss: str, output: Activation, y: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Per-sample loss, shape (batch,).

    squared: 1/2 * sum_k (t_k - y_k)^2. cross-entropy on independent sigmoid outputs
    (binary, multilabel): -sum_k [t ln max(y, clip) + (1-t) ln max(1-y, clip)]; on a
    softmax output (one-of-K): -sum_k t_k ln max(y_k, clip).
    """
    return SAMPLE_LOSSES[loss](output, y, t)


def output_delta(loss: str, output: Activation, z: np.ndarray, y: np.ndarray, t: np.ndarray) -> np.ndarray:
    """dE/dz at the output layer, shape (batch, outputs).

    The canonical pairs collapse to y - t (Bishop 2006, eqs. 5.18-5.21 and 4.106-4.109):
    identity + squared, sigmoid + cross-entropy (times the steepness), softmax +
    cross-entropy. Other pairs use the chain rule; softmax + squared uses its Jacobian
    y_j (g_j - sum_k g_k y_k) with g = y - t.
    """
    return OUTPUT_DELTAS[loss](output, z, y, t)


def check_pair(loss: str, output: Activation) -> None:
    """Any output activation goes with either loss; only the loss name is checked. (Cross-entropy on
    outputs that are not probabilities is defined through the clip: outside (clip, 1 - clip) a term is
    constant.)"""
    if loss not in LOSSES:
        raise ModelFileError(f"unknown loss {loss!r}; expected one of {', '.join(LOSSES)}")
