"""Scoring a table with a model: probability or value columns and the predicted label."""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from sheetnet.net import data as dataio
from sheetnet.net.model import Model

if TYPE_CHECKING:
    import pandas as pd
from sheetnet.net.network import predict_outputs


def output_columns(model: Model) -> list[str]:
    """Names of the score columns: one probability per class, or one value per output."""
    if model.task == "regression":
        return ["predicted"] if len(model.outputs) == 1 else [f"predicted_{o}" for o in model.outputs]
    if model.task == "binary":
        return [f"probability_{c}" for c in (model.classes or ("0", "1"))]
    return [f"probability_{o}" for o in model.outputs]


def predicted_labels(model: Model, y: np.ndarray, threshold: float = 0.5) -> list[str]:
    """The label each row gets: class label, or for multilabel the ';'-joined positive outputs."""
    if model.task == "binary":
        negative, positive = model.classes or ("0", "1")
        return [positive if p >= threshold else negative for p in y[:, 0]]
    if model.task == "multiclass":
        labels = model.classes or model.outputs
        return [labels[k] for k in np.argmax(y, axis=1)]
    return [";".join(o for o, p in zip(model.outputs, row, strict=True) if p >= threshold) for row in y]


def score_table(model: Model, table: dataio.DataTable, threshold: float = 0.5, keep_other_columns: bool = True
                ) -> pd.DataFrame:
    """Every column of the table (as written in the file, in its order; only the model's inputs when
    ``keep_other_columns`` is off), then the scores and ``predicted``, so results join back on ids.
    A score column whose name the table already uses gets a ``_score`` suffix."""
    x = dataio.feature_matrix(table, model.inputs)
    y = predict_outputs(model, x)
    import pandas as pd  # lazy: the other commands start faster without it

    kept = table.header if keep_other_columns else model.inputs
    frame = pd.DataFrame({name: table.column(name) for name in kept})
    names = output_columns(model) + ([] if model.task == "regression" else ["predicted"])
    unique = [_free_name(name, frame.columns) for name in names]
    values = y if model.task != "binary" else np.hstack([1.0 - y, y])
    for k, name in enumerate(unique[: values.shape[1]]):
        frame[name] = values[:, k]
    if model.task != "regression":
        frame[unique[-1]] = predicted_labels(model, y, threshold)
    return frame


def _free_name(name: str, taken) -> str:
    while name in taken:
        name += "_score"
    return name
