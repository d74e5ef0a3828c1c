"""Holdout and training metrics: accuracy and confusion matrix, or RMSE and MAE."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from sheetnet.net.model import Model
from sheetnet.net.network import predict_outputs, predicted_codes


@dataclass(frozen=True)
class Metrics:
    """``confusion[i][j]`` counts cases of true class i predicted as class j (labels in ``labels``).

    Multilabel: accuracy is the share of cases with every label right, and the confusion matrix
    is summed over the labels (0/1). Regression: ``rmse`` and ``mae`` per output, named in ``labels``.
    """

    rows: int
    accuracy: float | None = None
    labels: tuple[str, ...] = ()
    confusion: tuple[tuple[int, ...], ...] = ()
    rmse: tuple[float, ...] = ()
    mae: tuple[float, ...] = ()

    def to_dict(self) -> dict:
        out: dict = {"rows": self.rows}
        out["labels"] = list(self.labels)
        if self.accuracy is not None:
            out.update(accuracy=self.accuracy, confusion=[list(r) for r in self.confusion])
        if self.rmse:
            out.update(rmse=list(self.rmse), mae=list(self.mae))
        return out


def evaluate(model: Model, x_raw: np.ndarray, t: np.ndarray, threshold: float = 0.5) -> Metrics:
    """Score ``model`` on raw inputs against encoded targets."""
    y = predict_outputs(model, x_raw)
    if model.task == "regression":
        err = y - t
        return Metrics(rows=len(t), labels=model.outputs, rmse=tuple(np.sqrt(np.mean(err**2, axis=0)).tolist()),
                       mae=tuple(np.mean(np.abs(err), axis=0).tolist()))
    pred = predicted_codes(model, y, threshold)
    if model.task == "multiclass":
        truth = np.argmax(t, axis=1)
        labels = model.classes or model.outputs
        accuracy = float(np.mean(pred == truth))
    else:
        truth = (t >= 0.5).astype(int)
        labels = model.classes if model.task == "binary" and model.classes else ("0", "1")
        accuracy = float(np.mean(np.all(pred == truth, axis=1)))
    size = len(labels)
    confusion = np.zeros((size, size), dtype=int)
    np.add.at(confusion, (truth.ravel(), pred.ravel()), 1)
    return Metrics(rows=len(t), accuracy=accuracy, labels=tuple(labels),
                   confusion=tuple(tuple(int(v) for v in r) for r in confusion))
