"""The Python API: everything the command line does, for notebooks and scripts.

Data may be a CSV path, a pandas DataFrame, or a numpy array (columns named ``x1``, ``x2``, ...;
with ``target`` naming the target column(s) among them). Functions raise :class:`SheetNetError`
subclasses with the same messages the command line prints.

>>> import numpy as np, sheetnet
>>> x = np.array([[0, 0, 0], [0, 1, 1], [1, 0, 1], [1, 1, 0]] * 5, dtype=float)
>>> outcome = sheetnet.train(x, target="x3", hidden=(3,), learning_rate=1.0, epochs=5, batch_size="full")
>>> outcome.model.task
'binary'
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from sheetnet.book.build import DEFAULT_MAX_CELLS, from_fit, from_model, write_workbook
from sheetnet.book.sizing import Requested
from sheetnet.checks.audit import audit
from sheetnet.checks.extract import extract
from sheetnet.checks.verify import verify
from sheetnet.htmlreport import write_report
from sheetnet.net import data as dataio
from sheetnet.net.activations import Activation
from sheetnet.net.fit import Architecture, FitOutcome, fit
from sheetnet.net.model import Model, load_model
from sheetnet.net.predict import score_table
from sheetnet.net.train import TrainSettings, stored_settings
from sheetnet.rates import compare_rates

if TYPE_CHECKING:
    import pandas as pd


def as_table(data, source: str = "data") -> dataio.DataTable:
    """A CSV path, a DataFrame or a 2-D numpy array as a data table."""
    if isinstance(data, str | Path):
        return dataio.read_csv(data)
    if isinstance(data, np.ndarray):
        import pandas as pd  # lazy: pandas costs about half a second to import and only this path needs it

        data = pd.DataFrame(np.atleast_2d(data), columns=[f"x{i + 1}" for i in range(np.atleast_2d(data).shape[1])])
    return dataio.table_from_frame(data, source)


def _columns(value) -> tuple[str, ...]:
    return (value,) if isinstance(value, str) else tuple(value)


SETTINGS = ("learning_rate", "epochs", "batch_size", "shuffle", "seed", "momentum", "l2")


def settings(learning_rate: float = 0.1, epochs: int = 100, batch_size: int | str = 1, shuffle: bool = True,
             seed: int = 0, momentum: float = 0.0, l2: float = 0.0) -> TrainSettings:
    """Gradient-descent settings; ``batch_size="full"`` uses every training row per step."""
    return TrainSettings(learning_rate=learning_rate, epochs=epochs,
                         batch_size=None if batch_size == "full" else int(batch_size), shuffle=shuffle, seed=seed,
                         momentum=momentum, l2=l2)


def train(data, target, hidden=(4,), activation: str = "sigmoid", output: str | None = None, loss: str | None = None,
          task: str | None = None, scale: str = "standard", learning_rate: float = 0.1, epochs: int = 100,
          batch_size: int | str = 1, shuffle: bool = True, seed: int = 0, momentum: float = 0.0, l2: float = 0.0,
          holdout: float | str = "auto", init: Model | str | Path | None = None) -> FitOutcome:
    """Train like ``sheetnet train``; the result's ``model`` saves with ``.save(path)``."""
    run = settings(learning_rate, epochs, batch_size, shuffle, seed, momentum, l2)
    arch = Architecture(hidden=tuple(hidden), activation=Activation(activation), output=output, loss=loss, task=task,
                        scale=scale)
    start = load_model(init) if isinstance(init, str | Path) else init
    return fit(as_table(data), _columns(target), run, arch, start=start, holdout=holdout)


def score(model: Model | str | Path, data, threshold: float = 0.5, keep_other_columns: bool = True) -> pd.DataFrame:
    """Scores like ``sheetnet score``: the data's columns, probabilities (or values) and ``predicted``."""

    model = load_model(model) if isinstance(model, str | Path) else model
    return score_table(model, as_table(data), threshold, keep_other_columns)


def build_workbook(path, data=None, target=None, model: Model | str | Path | None = None, trace_epochs=None,
                   trace_rows=None, scoring_rows=None, max_cells: int = DEFAULT_MAX_CELLS, force: bool = False,
                   **train_options) -> Path:
    """Write the workbook like ``sheetnet build``: train on ``data`` (``train_options`` as for :func:`train`), or
    write it for ``model`` (with ``data``: scoring, and a record continuing from the model's weights with its
    stored settings, or those given). Without size arguments the workbook fits ``max_cells``."""
    requested = Requested(epochs=trace_epochs, rows=trace_rows, scoring_rows=scoring_rows)
    table = None if data is None else as_table(data)
    if model is None:
        run = settings(**{k: v for k, v in train_options.items() if k in SETTINGS})
        plan = from_fit(train(data, target, **train_options), table, run, requested, max_cells)
    else:
        model = load_model(model) if isinstance(model, str | Path) else model
        if target is not None:
            model = replace(model, target=_columns(target))
        base = stored_settings(model) or TrainSettings()
        run = replace(base, **{k: v if k != "batch_size" or v != "full" else None
                               for k, v in train_options.items() if k in SETTINGS})
        plan = from_model(model, table, run if table is not None else None, requested, max_cells)
    return write_workbook(plan.spec, plan.inputs, Path(path), force=force, max_cells=max_cells).path


def verify_workbook(path, engine: str = "embedded", tolerance: float = 1e-9):
    """Recalculate and compare like ``sheetnet verify``; the report's ``ok`` and ``to_dict()`` say the rest."""

    return verify(path, engine=engine, tolerance=tolerance)


def audit_workbook(path, against=None):
    """Classified findings like ``sheetnet audit`` (``report.to_dict()`` is the JSON report)."""

    return audit(path, against=against)


def extract_model(path, after_training: bool = False) -> Model:
    """The workbook's (possibly edited) model like ``sheetnet extract``."""

    return extract(path, after_training=after_training)[0]


def report_html(source, out, force: bool = False, data=None) -> Path:
    """The HTML report of a model file (``data``: a CSV whose points the plots show) or a workbook, like
    ``sheetnet report``."""

    return write_report(source, out, force=force, data=data)


def compare_learning_rates(data, target, rates, holdout: float | str = "auto", **train_options):
    """Runs at several learning rates from the same start, like ``sheetnet rates`` (a list of RateRun)."""

    run = settings(**{k: v for k, v in train_options.items() if k in SETTINGS})
    arch_options = {k: v for k, v in train_options.items() if k not in SETTINGS}
    arch = Architecture(hidden=tuple(arch_options.get("hidden", (4,))),
                        activation=Activation(arch_options.get("activation", "sigmoid")),
                        output=arch_options.get("output"), loss=arch_options.get("loss"),
                        task=arch_options.get("task"), scale=arch_options.get("scale", "standard"))
    return compare_rates(as_table(data), _columns(target), list(rates), run, arch, holdout)
