"""Self-contained HTML reports (plots embedded as PNG data) for a model or a workbook, and the
learning-rate comparison. matplotlib draws; nothing is fetched from the network."""

from __future__ import annotations

import base64
import html
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from sheetnet.net.model import Model
from sheetnet.net.network import forward_pass, scaled_inputs


def _figure():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

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
    lo, hi = (x.min(axis=0), x.max(axis=0)) if x is not None and len(x) else (np.array([-3.0, -3.0]),
                                                                              np.array([3.0, 3.0]))
    pad = 0.1 * (hi - lo + 1e-9)
    g0, g1 = np.meshgrid(np.linspace(lo[0] - pad[0], hi[0] + pad[0], 200), np.linspace(lo[1] - pad[1],
                                                                                       hi[1] + pad[1], 200))
    grid = np.column_stack([g0.ravel(), g1.ravel()])
    y = forward_pass(model.layers, scaled_inputs(model, grid)).output
    z = np.argmax(y, axis=1) if y.shape[1] > 1 else (y[:, 0] >= 0.5).astype(float) if model.task != "regression" \
        else y[:, 0]
    fig, ax = plt.subplots(figsize=(5, 4.2))
    ax.contourf(g0, g1, z.reshape(g0.shape), alpha=0.35, cmap="coolwarm")
    if x is not None and labels is not None:
        for label in sorted(set(labels)):
            pick = np.array([lab == label for lab in labels])
            ax.scatter(x[pick, 0], x[pick, 1], s=14, label=label, edgecolors="k", linewidths=0.3)
        ax.legend(fontsize=8)
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


def model_sections(model: Model, x: np.ndarray | None = None, labels: list[str] | None = None) -> list[Section]:
    """Loss per epoch, holdout metrics and confusion matrix, decision regions (two inputs)."""
    from sheetnet.book.guide import CAUTION

    training = model.training or {}
    arch = " -> ".join([f"{len(model.inputs)} inputs", *(f"{layer.units} {layer.activation.name}"
                                                        for layer in model.layers)])
    sections = [Section("Model", [f"{model.task} network: {arch}; loss: {model.loss}.", CAUTION], [])]
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
        sections.append(Section("Decision regions", ["Dashed: where each first-layer unit's weighted sum is 0."],
                                [regions]))
    return sections


def write_html(path: Path, text: str, force: bool) -> Path:
    from sheetnet.files import write_text_atomic

    return write_text_atomic(Path(path), text, force=force)


def book_sections(path: Path) -> list[Section]:
    """A workbook's report: its model, the training record's loss, holdout metrics, and its verification."""
    from dataclasses import replace

    from sheetnet.book.numbers import compute
    from sheetnet.book.read import read_inputs, read_layout
    from sheetnet.book.untrusted import read_returned_workbook
    from sheetnet.checks.verify import verify
    from sheetnet.net.metrics import evaluate
    from sheetnet.report import verify_lines

    book = read_returned_workbook(path)
    layout, _ = read_layout(book)
    inputs = read_inputs(book, layout)
    spec = layout.spec
    model = inputs.model(spec)
    numbers = compute(spec, inputs)
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
    sections = model_sections(replace(model, training=training), x, labels)
    if numbers.record is not None:
        sections.insert(1, Section("Training record", ["Mean loss per epoch of the record, as the reference "
                                                       "trainer replays it from the workbook's inputs."],
                                   [loss_plot({"record": numbers.record.epoch_loss.tolist()}, "training record")]))
    sections.append(Section("Verification", verify_lines(verify(path)), []))
    return sections


def write_report(source: str | Path, out: str | Path, force: bool = False) -> Path:
    """The HTML report of a model file (.json) or a workbook (.xlsx)."""
    from sheetnet.net.model import load_model

    source = Path(source)
    sections = model_sections(load_model(source)) if source.suffix.lower() == ".json" else book_sections(source)
    return write_html(Path(out), page(f"sheetnet report: {source.name}", sections), force)
