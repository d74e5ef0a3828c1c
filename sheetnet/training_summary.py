"""What ``train`` and ``build`` print about a training run: the set-up, the loss every few epochs,
the metrics (wording only)."""

from __future__ import annotations

import numpy as np

from sheetnet.net.fit import FitOutcome
from sheetnet.net.metrics import Metrics


def metrics_lines(title: str, metrics: Metrics) -> list[str]:
    if metrics.accuracy is None:
        return [f"{title} ({metrics.rows} rows):"] + [
            f"  {name}: RMSE {r:.6g}  MAE {m:.6g}"
            for name, r, m in zip(metrics.labels, metrics.rmse, metrics.mae, strict=True)]
    cells = [*metrics.labels, *(str(v) for row in metrics.confusion for v in row)]
    width = max(len(c) for c in cells) + 2
    lines = [f"{title} ({metrics.rows} rows): accuracy {metrics.accuracy:.4f}",
             "  confusion (rows: true, columns: predicted)",
             "  " + " " * width + "".join(f"{label:>{width}}" for label in metrics.labels)]
    lines += ["  " + f"{label:>{width}}" + "".join(f"{v:>{width}}" for v in row)
              for label, row in zip(metrics.labels, metrics.confusion, strict=True)]
    return lines


def summary_lines(outcome: FitOutcome) -> list[str]:
    """What ``train`` prints: the inferred set-up, the loss every few epochs, the metrics."""
    model, result = outcome.model, outcome.result
    arch = " -> ".join([str(len(model.inputs)), *(f"{layer.units} {layer.activation.name}" for layer in model.layers)])
    lines = [f"task: {model.task}; network: {arch}; loss: {model.loss}; "
             f"scaling: {model.scaling.method if model.scaling else 'none'}",
             f"rows: {len(outcome.train_rows)} training, {len(outcome.holdout_rows)} holdout"]
    epochs = len(result.epoch_loss)
    every = max(1, epochs // 10)
    lines.append("per epoch: mean loss and accuracy over the epoch's cases as it ran (before each step's update); "
                 "the final model's figures follow")
    for e in range(epochs):
        if (e + 1) % every == 0 or e == 0 or e == epochs - 1:
            acc = result.epoch_accuracy[e]
            extra = "" if np.isnan(acc) else f"  accuracy {acc:.4f}"
            lines.append(f"epoch {e + 1:>6}  loss {result.epoch_loss[e]:.6g}{extra}")
    lines += metrics_lines("training", outcome.train_metrics)
    if outcome.holdout_metrics is not None:
        lines += metrics_lines("holdout", outcome.holdout_metrics)
    return lines
