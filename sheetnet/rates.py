"""Choosing a learning rate with evidence: the same run (same initial weights, split and batches) at
several rates, with the loss curves side by side and a verdict on each rate."""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from sheetnet.errors import TrainingError
from sheetnet.net import activations as act
from sheetnet.net.data import DataTable, encode_targets, feature_matrix
from sheetnet.net.fit import Architecture, fit
from sheetnet.net.network import mean_loss, predict_outputs
from sheetnet.net.train import TrainSettings

#: A run "stalls" when its last epoch's loss is still above this share of its first epoch's loss.
STALL_SHARE = 0.95
#: A run is "unstable" when its last epoch's loss is more than this many times its lowest (the rate overshoots).
UNSTABLE_FACTOR = 1.5


@dataclass(frozen=True)
class RateRun:
    rate: float
    curve: list[float]
    holdout_loss: float | None
    status: str  # "ok", "stalled", "unstable" or "diverged"


def _holdout_loss(outcome, table: DataTable) -> float | None:
    rows = outcome.holdout_rows
    if not len(rows):
        return None
    model = outcome.model

    x = feature_matrix(table, model.inputs)[rows]
    t = encode_targets(table, model.target, model.task, model.classes).values[rows]
    y = predict_outputs(model, x)
    return float(np.mean(act.sample_loss(model.loss, model.output_activation, y, t)))


def compare_rates(table: DataTable, target: tuple[str, ...], rates: list[float], settings: TrainSettings,
                  arch: Architecture, holdout: float | str = "auto", start=None) -> list[RateRun]:
    runs = []
    for rate in rates:
        try:
            outcome = fit(table, target, replace(settings, learning_rate=rate), arch, start=start, holdout=holdout)
        except TrainingError:
            runs.append(RateRun(rate, [], None, "diverged"))
            continue
        curve = outcome.result.epoch_loss.tolist()
        start_loss = mean_loss(outcome.result.initial, outcome.x_train, outcome.t_train)
        stalled = len(curve) > 1 and curve[-1] > STALL_SHARE * curve[0]
        unstable = len(curve) > 1 and curve[-1] > UNSTABLE_FACTOR * min(curve)
        loss = _holdout_loss(outcome, table)
        finite = all(np.isfinite(curve)) and (loss is None or np.isfinite(loss))
        never_better = finite and min(curve) > start_loss  # every epoch worse than the untrained start
        status = "diverged" if not finite or never_better else "unstable" if unstable else \
            "stalled" if stalled else "ok"
        runs.append(RateRun(rate, curve, loss, status))
    return runs


def best(runs: list[RateRun]) -> RateRun | None:
    """The usable run with the lowest holdout loss (or last training loss when there is no holdout)."""
    usable = [r for r in runs if r.status not in ("diverged", "unstable")] or \
        [r for r in runs if r.status != "diverged"]
    if not usable:
        return None
    return min(usable, key=lambda r: r.holdout_loss if r.holdout_loss is not None else r.curve[-1])


def summary_rows(runs: list[RateRun]) -> list[list[object]]:
    rows: list[list[object]] = [["learning rate", "last epoch's mean training loss", "holdout loss", "verdict"]]
    for run in runs:
        rows.append([run.rate, run.curve[-1] if run.curve else "-",
                     run.holdout_loss if run.holdout_loss is not None else "-", run.status])
    return rows
