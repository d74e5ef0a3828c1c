"""Data in: CSV reading, feature and target encoding, input scaling, holdout split.

CSV files are read as UTF-8 (a byte-order mark is allowed) with the delimiter detected among
comma, semicolon and tab; blank lines, and lines starting with ``#`` before the header, are
skipped. Every complaint names the file, the line and the column.
"""

from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from sheetnet.errors import DataError, UsageError
from sheetnet.files import reading
from sheetnet.net.model import TASKS, Scaling

if TYPE_CHECKING:  # pandas is imported only where a DataFrame is used (start-up time)
    import pandas as pd

#: A worksheet's 1,048,576 rows less the header (Microsoft Support, "Excel specifications and limits").
MAX_ROWS = 1_048_575
MAX_COLUMNS = 1_000
MAX_BYTES = 512 * 1024 * 1024
#: An integer-valued numeric target with at most this many distinct values is read as classes.
MAX_INTEGER_CLASSES = 10
DELIMITERS = ",;\t"


@dataclass(frozen=True)
class DataTable:
    """A data file as text: header, rows of cells, and each row's line number in the file."""

    source: str
    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    lines: tuple[int, ...]
    notes: tuple[str, ...] = ()

    def column(self, name: str) -> list[str]:
        index = self.header.index(name)
        return [row[index] for row in self.rows]

    def require(self, names: list[str] | tuple[str, ...], what: str) -> None:
        missing = [n for n in names if n not in self.header]
        if missing:
            raise DataError(f"{self.source}: {what} column(s) not found: {some(missing)} "
                            f"(columns are: {some(self.header)})")


@dataclass(frozen=True)
class Targets:
    """Encoded targets: one row per case, one column per output unit."""

    task: str
    outputs: tuple[str, ...]
    classes: tuple[str, ...]
    values: np.ndarray


def read_csv(path: str | Path) -> DataTable:
    """Read a CSV file into a :class:`DataTable` of strings."""
    path = Path(path)
    text = _read_text(path)
    dialect = _sniff(text)
    reader = csv.reader(io.StringIO(text, newline=""), dialect)
    header: tuple[str, ...] | None = None
    rows, lines, notes = [], [], []
    try:
        for cells in reader:
            if not any(c.strip() for c in cells):
                continue
            if header is None and cells[0].lstrip().startswith("#"):
                # comment lines before the header (e.g. a note that the data is invented)
                notes.append(reader.dialect.delimiter.join(cells).lstrip("# ").strip())
                continue
            if header is None:
                header = _check_header(path, cells, reader.line_num)
                continue
            rows.append(_check_row(path, cells, len(header), reader.line_num))
            lines.append(reader.line_num)
            if len(rows) > MAX_ROWS:
                raise DataError(f"{path}: more than {MAX_ROWS:,} data rows (the limit)")
    except csv.Error as exc:
        raise DataError(f"{path}: line {reader.line_num}: malformed CSV ({exc})") from None
    if header is None:
        raise DataError(f"{path}: the file is empty")
    if not rows:
        raise DataError(f"{path}: the file has a header but no data rows")
    return DataTable(source=str(path), header=header, rows=tuple(rows), lines=tuple(lines), notes=tuple(notes))


def _read_text(path: Path) -> str:
    with reading(path, DataError, "data file", "a data file"):
        size = path.stat().st_size
        if size > MAX_BYTES:
            raise DataError(f"{path}: file is {size:,} bytes; the limit is {MAX_BYTES:,}")
        raw = path.read_bytes()
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise DataError(f"{path}: line {line}: not UTF-8 text; save the file as UTF-8") from None


def _sniff(text: str) -> type[csv.Dialect] | csv.Dialect:
    sample = "\n".join(text.splitlines()[:50])
    try:
        return csv.Sniffer().sniff(sample, delimiters=DELIMITERS)
    except csv.Error:
        return csv.excel


def _check_header(path: Path, cells: list[str], line: int) -> tuple[str, ...]:
    names = tuple(c.strip() for c in cells)
    if len(names) > MAX_COLUMNS:
        raise DataError(f"{path}: {len(names)} columns; the limit is {MAX_COLUMNS:,}")
    for i, name in enumerate(names):
        if not name:
            raise DataError(f"{path}: line {line}: column {i + 1} has an empty header")
    seen: set[str] = set()
    for name in names:
        if name in seen:
            raise DataError(f"{path}: line {line}: duplicate column name {name!r}")
        seen.add(name)
    return names


def _check_row(path: Path, cells: list[str], width: int, line: int) -> tuple[str, ...]:
    if len(cells) != width:
        raise DataError(f"{path}: line {line}: {len(cells)} fields, but the header has {width}")
    return tuple(c.strip() for c in cells)


def table_from_frame(frame: pd.DataFrame, source: str = "DataFrame") -> DataTable:
    """Wrap a pandas DataFrame as a :class:`DataTable` (numbers kept exact via ``repr``)."""
    header = tuple(str(c) for c in frame.columns)
    if len(set(header)) != len(header):
        raise DataError(f"{source}: duplicate column names")
    rows = tuple(tuple(_cell_text(v) for v in row) for row in frame.itertuples(index=False))
    if not rows:
        raise DataError(f"{source}: no data rows")
    return DataTable(source=source, header=header, rows=rows, lines=tuple(range(2, len(rows) + 2)))


def _cell_text(value: object) -> str:
    if isinstance(value, float | np.floating):
        return repr(float(value))
    return "" if value is None else str(value)


def parse_number(text: str) -> float | None:
    """A finite float from a cell's text, or None when the text is not a finite number."""
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def feature_matrix(table: DataTable, names: tuple[str, ...] | list[str]) -> np.ndarray:
    """The named columns as a float matrix; a missing, non-numeric or non-finite cell is an error."""
    table.require(names, "input")
    x = np.empty((len(table.rows), len(names)))
    for j, name in enumerate(names):
        for i, text in enumerate(table.column(name)):
            value = parse_number(text)
            if value is None:
                what = "missing value" if not text else f"non-numeric or non-finite value {text!r}"
                raise DataError(f"{table.source}: line {table.lines[i]}, column {name!r}: {what}")
            x[i, j] = value
    return x


def _label(text: str) -> str:
    """Normalise a class label: numeric labels lose trailing zeros ('1.0' -> '1')."""
    value = parse_number(text)
    if value is not None and value == int(value):
        return str(int(value))
    return text


def _sorted_labels(labels: set[str]) -> tuple[str, ...]:
    if all(parse_number(v) is not None for v in labels):
        return tuple(sorted(labels, key=float))
    return tuple(sorted(labels))


def infer_task(table: DataTable, target: tuple[str, ...], task: str | None, output: str | None) -> str:
    """Decide the task from the target column(s) unless ``--task`` or ``--output`` says.

    One 0/1 or two-label column: binary. More labels (text, or up to 10 integer values):
    multiclass. Several 0/1 columns: multilabel. Real numbers: regression.
    """
    if task is not None:
        return task
    if output == "softmax":
        return "multiclass"
    if output == "identity":
        return "regression"
    columns = [table.column(name) for name in target]
    _no_missing(table, target)
    numeric = all(parse_number(v) is not None for col in columns for v in col)
    if len(target) > 1:
        binary_cols = numeric and all({float(v) for v in col} <= {0.0, 1.0} for col in columns)
        return "multilabel" if binary_cols else "regression"
    labels = {_label(v) for v in columns[0]}
    if any(parse_number(v) is not None and float(v) != int(float(v)) for v in labels) and numeric:
        return "regression"
    if len(labels) < 2:
        if numeric and output is not None:
            return "regression"
        raise DataError(f"{table.source}: target column {target[0]!r} has only one class "
                        f"({next(iter(labels))!r}); classification needs at least two")
    if not numeric:
        return "binary" if len(labels) == 2 else "multiclass"
    if len(labels) == 2 or labels <= {"0", "1"}:
        return "binary"
    return "multiclass" if len(labels) <= MAX_INTEGER_CLASSES else "regression"


def _no_missing(table: DataTable, columns: tuple[str, ...]) -> None:
    for name in columns:
        for i, text in enumerate(table.column(name)):
            if not text:
                raise DataError(f"{table.source}: line {table.lines[i]}, column {name!r}: missing target value")


def encode_targets(table: DataTable, target: tuple[str, ...], task: str,
                   classes: tuple[str, ...] = ()) -> Targets:
    """Targets as a matrix for ``task``; ``classes`` (from a model) fixes the label order."""
    if task not in TASKS:
        raise UsageError(f"unknown task {task!r}; expected one of {', '.join(TASKS)}")
    table.require(target, "target")
    _no_missing(table, target)
    if task in ("multilabel", "regression"):
        values = feature_matrix(table, target)
        if task == "multilabel" and not np.isin(values, (0.0, 1.0)).all():
            raise DataError(f"{table.source}: multilabel targets must be 0 or 1 in every target column")
        return Targets(task=task, outputs=tuple(target), classes=(), values=values)
    if len(target) != 1:
        raise UsageError(f"a {task} task takes one target column, got {len(target)}")
    if task == "binary":
        soft = binary_probabilities(table.column(target[0]))
        if soft is not None:
            return Targets(task=task, outputs=(target[0],), classes=classes or ("0", "1"), values=soft[:, None])
    labels = [_label(v) for v in table.column(target[0])]
    classes = classes or _sorted_labels(set(labels))
    _check_classes(table, target[0], task, classes, labels)
    index = {c: k for k, c in enumerate(classes)}
    codes = np.array([index[v] for v in labels])
    if task == "binary":
        return Targets(task=task, outputs=(target[0],), classes=classes,
                       values=(codes == 1).astype(float)[:, None])
    return Targets(task=task, outputs=classes, classes=classes, values=np.eye(len(classes))[codes])


def binary_probabilities(texts: list[str]) -> np.ndarray | None:
    """Numeric binary targets in [0, 1] are used as they are (0/1, or soft targets like 0.01)."""
    values = [parse_number(v) for v in texts]
    if any(v is None or not 0.0 <= v <= 1.0 for v in values):
        return None
    return np.array(values, dtype=float)


def _check_classes(table: DataTable, column: str, task: str, classes: tuple[str, ...], labels: list[str]) -> None:
    found = set(labels)
    if len(found) < 2 and len(classes) < 2:
        raise DataError(f"{table.source}: target column {column!r} has only one class "
                        f"({next(iter(found))!r}); classification needs at least two")
    if task == "binary" and len(classes) != 2:
        raise DataError(f"{table.source}: target column {column!r} has {len(classes)} labels; "
                        "a binary task needs exactly two (use --task multiclass)")
    unknown = found - set(classes)
    if unknown:
        raise DataError(f"{table.source}: target column {column!r} has {len(unknown):,} label(s) the model does "
                        f"not know: {some(sorted(unknown))}")


def column_names(value) -> tuple[str, ...]:
    """One column name, several, or none (None) as a tuple of names: how the API and flags give columns."""
    if value is None:
        return ()
    return (value,) if isinstance(value, str) else tuple(str(v) for v in value)


def some(names, shown: int = 10) -> str:
    """The first names of a list, and how many more there are (an error stays one readable line)."""
    names = list(names)
    more = f" and {len(names) - shown:,} more" if len(names) > shown else ""
    return ", ".join(names[:shown]) + more


def fit_scaling(method: str, x: np.ndarray) -> Scaling | None:
    """Fit input scaling on training rows.

    standard: offset = mean, scale = population standard deviation (ddof=0).
    minmax: offset = min, scale = max - min. A constant column gets scale 1, so its scaled
    value is 0 for the training rows rather than a division by zero.
    """
    if method == "none":
        return None
    with np.errstate(over="ignore", invalid="ignore"):  # overflow is reported below, in words
        if method == "standard":
            offset, scale = x.mean(axis=0), x.std(axis=0)
        elif method == "minmax":
            offset, scale = x.min(axis=0), x.max(axis=0) - x.min(axis=0)
        else:
            raise UsageError(f"unknown scaling {method!r}; expected standard, minmax or none")
    scale = np.where(scale > 0, scale, 1.0)
    if not (np.isfinite(offset).all() and np.isfinite(scale).all()):
        raise DataError(f"input values too large to scale ({method}): their spread overflows; rescale the data")
    return Scaling(method=method, offset=offset, scale=scale)


def holdout_split(n: int, fraction: float, rng: np.random.Generator,
                  strata: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Training and holdout row indices, each in data order; stratified when ``strata`` given."""
    if fraction <= 0:
        return np.arange(n), np.arange(0)
    groups = [np.arange(n)] if strata is None else [np.flatnonzero(strata == s) for s in np.unique(strata)]
    held = []
    for group in groups:
        take = round(fraction * len(group))
        held.extend(rng.permutation(group)[:take].tolist())
    mask = np.zeros(n, dtype=bool)
    mask[held] = True
    return np.flatnonzero(~mask), np.flatnonzero(mask)
