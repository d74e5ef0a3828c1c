"""Self-contained HTML reports (plots embedded as PNG data) for a model or a workbook, and the
learning-rate comparison. matplotlib draws; nothing is fetched from the network."""

from __future__ import annotations

import base64
import html
import io
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from sheetnet.book.expected import expected_numbers
from sheetnet.book.guide import caution
from sheetnet.book.read import read_inputs, read_layout
from sheetnet.book.untrusted import read_returned_workbook
from sheetnet.checks.verify import verify
from sheetnet.files import write_text_atomic
from sheetnet.net import data as dataio
from sheetnet.net.metrics import evaluate
from sheetnet.net.model import Model, load_model
from sheetnet.net.network import forward_pass, scaled_inputs
from sheetnet.report import verify_lines


def _figure():
    import matplotlib  # lazy: matplotlib costs about a second to import and only the HTML pages draw

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt  # lazy: matplotlib costs about a second to import and only the HTML pages draw

    return plt


def _png(fig) -> str:
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=110, bbox_inches="tight")
    _figure().close(fig)
    return "data:image/png;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def loss_plot(curves: dict[str, list[float]], title: str) -> str:
    """Loss per epoch, one line per curve (log scale when the losses span decades)."""
    plt = _figure()
    fig, ax = plt.subplots(figsize=(6.4, 3.6))
    for label, values in curves.items():
        finite = [v if np.isfinite(v) else np.nan for v in values]
        ax.plot(range(1, len(finite) + 1), finite, label=label, linewidth=1.6)
    ax.set_xlabel("epoch")
    ax.set_ylabel("mean training loss")
    ax.set_title(title)
    positive = [v for values in curves.values() for v in values if np.isfinite(v) and v > 0]
    if positive and max(positive) / min(positive) > 100:
        ax.set_yscale("log")
    if len(curves) > 1:
        ax.legend(fontsize=8)
    ax.grid(alpha=0.3)
    return _png(fig)


def confusion_plot(labels: list[str], matrix: list[list[int]], title: str) -> str:
    plt = _figure()
    fig, ax = plt.subplots(figsize=(3.8, 3.4))
    ax.imshow(np.array(matrix), cmap="Blues")
    ax.set_xticks(range(len(labels)), labels, rotation=45, ha="right")
    ax.set_yticks(range(len(labels)), labels)
    ax.set_xlabel("predicted")
    ax.set_ylabel("true")
    for i, row in enumerate(matrix):
        for j, count in enumerate(row):
            ax.text(j, i, str(count), ha="center", va="center", fontsize=9)
    ax.set_title(title)
    return _png(fig)


def decision_plot(model: Model, x: np.ndarray | None, labels: list[str] | None) -> str | None:
    """For two inputs: the predicted class over the input plane, the data, and each first-layer unit's
    boundary line w1*s1 + w2*s2 + b = 0 (in raw input units, after the scaling)."""
    if len(model.inputs) != 2:
        return None
    plt = _figure()
    lo, hi = _plane(model, x)
    pad = 0.1 * (hi - lo + 1e-9)
    g0, g1 = np.meshgrid(np.linspace(lo[0] - pad[0], hi[0] + pad[0], 200), np.linspace(lo[1] - pad[1],
                                                                                       hi[1] + pad[1], 200))
    grid = np.column_stack([g0.ravel(), g1.ravel()])
    y = forward_pass(model.layers, scaled_inputs(model, grid)).output
    fig, ax = plt.subplots(figsize=(5.4, 4.2))
    if model.task == "regression":
        filled = ax.contourf(g0, g1, y[:, 0].reshape(g0.shape), levels=12, alpha=0.45, cmap="viridis")
        fig.colorbar(filled, ax=ax, label=f"predicted {model.outputs[0]}")
        if x is not None:
            ax.scatter(x[:, 0], x[:, 1], s=10, color="k", alpha=0.6)
    else:
        _class_regions(plt, ax, model, g0, g1, y, x, labels)
    offset = model.scaling.offset if model.scaling else np.zeros(2)
    scale = model.scaling.scale if model.scaling else np.ones(2)
    first = model.layers[0]
    xs = np.linspace(lo[0] - pad[0], hi[0] + pad[0], 2)
    for j in range(first.units):
        w1, w2 = first.weights[j] / scale
        b = first.bias[j] - np.dot(first.weights[j], offset / scale)
        if abs(w2) > 1e-12:
            ax.plot(xs, -(w1 * xs + b) / w2, "k--", linewidth=0.9)
    ax.set_xlim(g0.min(), g0.max())
    ax.set_ylim(g1.min(), g1.max())
    ax.set_xlabel(model.inputs[0])
    ax.set_ylabel(model.inputs[1])
    ax.set_title("decision regions and first-layer boundaries")
    return _png(fig)


def _class_regions(plt, ax, model: Model, g0, g1, y: np.ndarray, x: np.ndarray | None,
                   labels: list[str] | None) -> None:
    """Each class's predicted region in its own colour, the data's points in the colour of their class."""
    from matplotlib.patches import Patch  # lazy: matplotlib costs about a second to import and only the HTML pages draw

    names = list(model.classes or model.outputs) if model.task != "multilabel" else list(model.outputs)
    if model.task == "binary":
        names = list(model.classes or ("0", "1"))
        z = (y[:, 0] >= 0.5).astype(float)
    else:
        z = np.argmax(y, axis=1).astype(float)
    colours = [plt.get_cmap("tab10")(k % 10) for k in range(len(names))]
    ax.contourf(g0, g1, z.reshape(g0.shape), levels=np.arange(len(names) + 1) - 0.5, colors=colours, alpha=0.3)
    handles = [Patch(facecolor=colours[k], alpha=0.3, label=f"predicted {name}") for k, name in enumerate(names)]
    if x is not None and labels is not None:
        for label in sorted(set(labels)):
            pick = np.array([lab == label for lab in labels])
            colour = colours[names.index(label)] if label in names else "grey"
            handles.append(ax.scatter(x[pick, 0], x[pick, 1], s=14, color=colour, label=label, edgecolors="k",
                                      linewidths=0.4))
    ax.legend(handles=handles, fontsize=7, loc="best")


def _plane(model: Model, x: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """The part of the input plane to draw, in the data's raw units: the data's range, else where the
    model's scaling says its training inputs lay (mean +- 3 standard deviations, or min to max)."""
    if x is not None and len(x):
        return x.min(axis=0), x.max(axis=0)
    if model.scaling is None:
        return np.full(2, -3.0), np.full(2, 3.0)
    offset, scale = model.scaling.offset, model.scaling.scale
    if model.scaling.method == "minmax":
        return offset, offset + scale
    return offset - 3 * scale, offset + 3 * scale


#: Above this many units in one layer the drawing would be a blur of lines.
NETWORK_DRAWING_UNITS = 80


def network_plot(model: Model) -> str | None:
    """The network itself: units in columns, one line per weight, its width the weight's size relative
    to the largest in the network and its colour the sign (blue positive, red negative)."""
    sizes = [len(model.inputs), *(layer.units for layer in model.layers)]
    if max(sizes) > NETWORK_DRAWING_UNITS:
        return None
    plt = _figure()
    fig, ax = plt.subplots(figsize=(2.2 * len(sizes) + 1, max(3.0, 0.32 * max(sizes) + 1)))
    ys = [np.linspace(0, 1, n) if n > 1 else np.array([0.5]) for n in sizes]
    largest = max(float(np.abs(layer.weights).max(initial=0.0)) for layer in model.layers) or 1.0
    for k, layer in enumerate(model.layers):
        for j in range(layer.units):
            for i in range(sizes[k]):
                w = layer.weights[j, i]
                ax.plot([k, k + 1], [ys[k][i], ys[k + 1][j]], color="tab:blue" if w >= 0 else "tab:red",
                        linewidth=0.2 + 3.0 * abs(w) / largest, alpha=0.75, zorder=1)
    names = [list(model.inputs), *([f"{layer.activation.name} {j + 1}" for j in range(layer.units)]
                                    for layer in model.layers[:-1]), list(model.outputs)]
    for k, column in enumerate(names):
        ax.scatter([k] * len(column), ys[k], s=60, color="white", edgecolors="k", zorder=2)
        if k in (0, len(names) - 1) and len(column) <= 40:
            for y, name in zip(ys[k], column, strict=True):
                ax.text(k + (-0.08 if k == 0 else 0.08), y, name, ha="right" if k == 0 else "left",
                        va="center", fontsize=7)
    ax.set_xticks(range(len(sizes)), ["inputs", *(f"layer {k + 1}" for k in range(len(model.layers)))])
    ax.set_yticks([])
    ax.set_xlim(-1.0, len(sizes))
    ax.invert_yaxis()  # first input and first output at the top, as in the model file
    ax.set_title("the network's weights")
    return _png(fig)


@dataclass
class Section:
    title: str
    paragraphs: list[str]
    images: list[str]
    table: list[list[str]] | None = None


def page(title: str, sections: list[Section]) -> str:
    """One self-contained HTML page."""
    parts = [f"<!DOCTYPE html><html><head><meta charset='utf-8'><title>{html.escape(title)}</title>",
             "<style>body{font-family:sans-serif;max-width:60em;margin:2em auto;color:#222}"
             "table{border-collapse:collapse}td,th{border:1px solid #bbb;padding:2px 8px;text-align:right}"
             "img{max-width:100%;margin:0.5em 0}</style></head><body>", f"<h1>{html.escape(title)}</h1>"]
    for section in sections:
        parts.append(f"<h2>{html.escape(section.title)}</h2>")
        parts += [f"<p>{html.escape(p)}</p>" for p in section.paragraphs]
        if section.table:
            rows = "".join("<tr>" + "".join(f"<td>{html.escape(str(c))}</td>" for c in row) + "</tr>"
                           for row in section.table)
            parts.append(f"<table>{rows}</table>")
        parts += [f"<img alt='{html.escape(section.title)}' src='{src}'>" for src in section.images if src]
    parts.append("</body></html>")
    return "\n".join(parts)


def model_sections(model: Model, x: np.ndarray | None = None, labels: list[str] | None = None,
                   subject: str = "This report describes a model") -> list[Section]:
    """Loss per epoch, holdout metrics and confusion matrix, decision regions (two inputs) or else a
    drawing of the network. ``subject`` opens the caution (a model file's report, or a workbook's)."""

    training = model.training or {}
    arch = " -> ".join([f"{len(model.inputs)} inputs", *(f"{layer.units} {layer.activation.name}"
                                                        for layer in model.layers)])
    scaling = "none" if model.scaling is None else model.scaling.method
    sections = [Section("Model", [f"{model.task} network: {arch}; loss: {model.loss}; input scaling: {scaling} "
                                  "(plots are in the data's own units).", caution(subject)], [])]
    curve = training.get("epoch_loss")
    if curve:
        sections.append(Section("Loss per epoch", [], [loss_plot({"training": curve}, "training loss")]))
    for name in ("holdout_metrics", "train_metrics"):
        metrics = training.get(name)
        if not metrics:
            continue
        title = "Holdout metrics" if name == "holdout_metrics" else "Training metrics"
        lines = [f"{metrics['rows']} rows."]
        images = []
        if "accuracy" in metrics:
            lines.append(f"accuracy {metrics['accuracy']:.4f}")
            images.append(confusion_plot([str(v) for v in metrics["labels"]], metrics["confusion"], title))
        if "rmse" in metrics:
            lines += [f"{n}: RMSE {r:.6g}, MAE {m:.6g}" for n, r, m in zip(metrics["labels"], metrics["rmse"],
                                                                            metrics["mae"], strict=True)]
        sections.append(Section(title, lines, images))
    regions = decision_plot(model, x, labels)
    if regions:
        where = "the data's range" if x is not None and len(x) else \
            "where the model's scaling says its training inputs lay (no data given)"
        sections.append(Section("Decision regions", [f"Over {where}. Dashed: where each first-layer unit's "
                                                     "weighted sum is 0."], [regions]))
    else:
        drawing = network_plot(model)
        note = "A decision plot needs exactly two inputs; the network is drawn instead: one line per weight, " \
            "its width the weight's size (the largest is thickest), blue positive, red negative." if drawing else \
            f"A decision plot needs exactly two inputs, and a layer over {NETWORK_DRAWING_UNITS} units is too " \
            "large to draw."
        sections.append(Section("The network", [note], [drawing] if drawing else []))
    return sections


def write_html(path: Path, text: str, force: bool) -> Path:

    return write_text_atomic(Path(path), text, force=force)


def book_sections(path: Path) -> list[Section]:
    """A workbook's report: its model, the training record's loss, holdout metrics, and its verification."""
    book = read_returned_workbook(path)
    layout, _ = read_layout(book)
    inputs = read_inputs(book, layout)
    spec = layout.spec
    model = inputs.model(spec)
    numbers = expected_numbers(spec, inputs)
    x = np.array([row[: len(spec.inputs)] for row in inputs.data], dtype=float) if inputs.data else None
    labels = None
    if numbers.scoring.t is not None and spec.is_classification:
        codes = np.argmax(numbers.scoring.t, axis=1) if spec.task == "multiclass" else \
            (numbers.scoring.t[:, 0] >= 0.5).astype(int)
        names = spec.classes or ("0", "1")
        labels = [str(names[c]) for c in codes]
    training = {}
    held = np.array([s == "holdout" for s in spec.sets], dtype=bool)
    if numbers.scoring.t is not None and held.any():
        training["holdout_metrics"] = evaluate(model, x[held], numbers.scoring.t[held], inputs.threshold).to_dict()
    sections = model_sections(replace(model, training=training), x, labels,
                              subject="This workbook reproduces a model's arithmetic")
    if numbers.record is not None:
        sections.insert(1, Section("Training record", ["Mean loss per epoch of the record, as the reference "
                                                       "trainer replays it from the workbook's inputs."],
                                   [loss_plot({"record": numbers.record.epoch_loss.tolist()}, "training record")]))
    if spec.case_rows:
        overall = [f"{what}: {text}" for what, text in spec.provenance if what.startswith("metrics over all data")]
        sections.insert(1, Section("A sample of the data", [
            f"The Scoring sheet holds a sample of {spec.n_cases:,} cases, so the metrics and plots here are over "
            "that sample only." + (" The trainer's metrics over all data, from the Guide:" if overall else ""),
            *overall], []))
    sections.append(Section("Verification", verify_lines(verify(path)), []))
    return sections


def data_points(model: Model, data: str | Path) -> tuple[np.ndarray, list[str] | None]:
    """A table's input columns (raw units) for a model's plots, and the class labels when the table
    holds the model's target."""

    table = dataio.read_csv(data)
    x = dataio.feature_matrix(table, model.inputs)
    target = model.target[0] if len(model.target) == 1 else None
    labels = None
    if target in table.header and model.task in ("binary", "multiclass"):
        labels = [str(v).strip() for v in table.column(target)]
    return x, labels


def write_report(source: str | Path, out: str | Path, force: bool = False, data: str | Path | None = None,
                 model: Model | None = None) -> Path:
    """The HTML report of a model (``model``, read from ``source``; or a model file, .json) with ``data``'s
    points in the plots, or of a workbook (.xlsx)."""

    source = Path(source)
    if model is not None or source.suffix.lower() == ".json":
        model = model or load_model(source)
        sections = model_sections(model, *data_points(model, data)) if data is not None else model_sections(model)
    else:
        sections = book_sections(source)
    return write_html(Path(out), page(f"sheetnet report: {source.name}", sections), force)
