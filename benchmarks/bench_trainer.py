"""Trainer speed against scikit-learn's MLPClassifier with the same settings, in one process.

30 inputs, 16 sigmoid hidden units, 1 sigmoid output, cross-entropy, plain SGD (no momentum),
constant learning rate, 500 rows, 200 epochs, no shuffling. Prints seconds and the ratio
sheetnet / scikit-learn (target <= 1.0) for several batch sizes. Run: python benchmarks/bench_trainer.py
"""

from __future__ import annotations

import time
import warnings

import numpy as np
from sklearn.exceptions import ConvergenceWarning
from sklearn.neural_network import MLPClassifier

from sheetnet.net.activations import Activation
from sheetnet.net.model import Model
from sheetnet.net.train import TrainSettings, init_layers, train

ROWS, INPUTS, HIDDEN, EPOCHS, LR = 500, 30, 16, 200, 0.05


def data() -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(0)
    x = rng.normal(size=(ROWS, INPUTS))
    y = (x[:, :5].sum(axis=1) + 0.5 * rng.normal(size=ROWS) > 0).astype(int)
    return x, y


def time_sheetnet(x, y, batch: int) -> float:
    layers = init_layers([INPUTS, HIDDEN, 1], [Activation("sigmoid"), Activation("sigmoid")], seed=0)
    model = Model(inputs=tuple(f"x{i}" for i in range(INPUTS)), outputs=("y",), task="binary", layers=layers,
                  loss="cross-entropy")
    settings = TrainSettings(learning_rate=LR, epochs=EPOCHS, batch_size=batch, shuffle=False)
    start = time.perf_counter()
    train(model, x, y[:, None].astype(float), settings)
    return time.perf_counter() - start


def time_sklearn(x, y, batch: int) -> float:
    est = MLPClassifier(hidden_layer_sizes=(HIDDEN,), activation="logistic", solver="sgd", learning_rate="constant",
                        learning_rate_init=LR, momentum=0.0, nesterovs_momentum=False, batch_size=batch,
                        shuffle=False, alpha=0.0, max_iter=EPOCHS, tol=0.0, n_iter_no_change=EPOCHS + 1,
                        early_stopping=False, random_state=0)
    start = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        est.fit(x, y)
    return time.perf_counter() - start


def main() -> None:
    x, y = data()
    print(f"{INPUTS}-{HIDDEN}-1 sigmoid network, {ROWS} rows, {EPOCHS} epochs, learning rate {LR}")
    print(f"{'batch':>6} {'sheetnet s':>11} {'sklearn s':>10} {'ratio':>7}")
    for batch in (1, 32, ROWS):
        repeats = 2 if batch == 1 else 7
        ours = min(time_sheetnet(x, y, batch) for _ in range(repeats))
        theirs = min(time_sklearn(x, y, batch) for _ in range(repeats))
        print(f"{batch:>6} {ours:>11.3f} {theirs:>10.3f} {ours / theirs:>7.2f}")


if __name__ == "__main__":
    main()
