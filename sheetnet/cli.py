"""The command line: ``sheetnet train | score | build | demo | verify | audit | extract | report | rates``.

Thin by design: parse flags, call the library, print a summary. Every :class:`SheetNetError`
becomes one line on stderr and its exit code (1 bad data, 2 bad usage); nothing else prints
a traceback except a genuine bug.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import sys
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path

import numpy as np

from sheetnet.book.build import DEFAULT_MAX_CELLS, Plan, from_fit, from_model, without_record, write_workbook
from sheetnet.book.signing import key_id, key_readable_by_others, new_key_text, read_key
from sheetnet.book.sizing import Requested
from sheetnet.checks.annotate import annotate
from sheetnet.checks.audit import audit
from sheetnet.checks.extract import extract
from sheetnet.checks.verify import DEFAULT_TOLERANCE, ENGINES, VERIFY_STAGES, signature_of, verify
from sheetnet.demo import DEMO_FLAGS, demo_csv_text
from sheetnet.errors import (
    CannotVerifyError,
    EvaluationError,
    SheetNetError,
    TrainingError,
    UsageError,
    WorkbookFormatError,
)
from sheetnet.files import check_output, write_atomic, write_text_atomic
from sheetnet.net import data as dataio
from sheetnet.net.activations import Activation
from sheetnet.net.fit import Architecture, FitOutcome, fit
from sheetnet.net.metrics import Metrics, evaluate
from sheetnet.net.model import load_model
from sheetnet.net.score import score_table
from sheetnet.net.train import TrainSettings, stored_settings
from sheetnet.progress import Progress
from sheetnet.report import audit_lines, verify_lines
from sheetnet.version import __version__


class _DefaultsShown(argparse.HelpFormatter):
    """Every option's default in its help, unless the help already says it (or there is none to say)."""

    def _get_help_string(self, action: argparse.Action) -> str:
        text = action.help or ""
        default = action.default
        if "default" in text or default in (None, False, argparse.SUPPRESS) or not action.option_strings:
            return text
        shown = "none" if default == () else ",".join(map(str, default)) if isinstance(default, tuple) else default
        return f"{text} (default: {shown})".lstrip()


class _Parser(argparse.ArgumentParser):
    """argparse that raises instead of printing usage and exiting, so errors stay one line, and shows
    every default in --help."""

    def __init__(self, *args, **kwargs) -> None:
        kwargs.setdefault("formatter_class", _DefaultsShown)
        super().__init__(*args, **kwargs)

    def error(self, message: str) -> None:  # type: ignore[override]
        raise UsageError(message)


def _columns(text: str) -> tuple[str, ...]:
    names = tuple(part.strip() for part in text.split(","))
    if not all(names):
        raise argparse.ArgumentTypeError(f"empty column name in {text!r}")
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        raise argparse.ArgumentTypeError(f"column {twice[0]!r} is named twice in {text!r}")
    return names


def _hidden(text: str) -> tuple[int, ...]:
    if text.strip().lower() == "none":
        return ()
    try:
        sizes = tuple(int(part) for part in text.split(","))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected sizes like 4 or 8,4 (or 'none'), got {text!r}") from None
    if any(s < 1 for s in sizes):
        raise argparse.ArgumentTypeError(f"every hidden layer needs at least 1 unit, got {text!r}")
    return sizes


def _positive(text: str) -> float:
    value = _finite(text)
    if value <= 0:
        raise argparse.ArgumentTypeError(f"must be > 0, got {text!r}")
    return value


def _finite(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not np.isfinite(value):
        raise argparse.ArgumentTypeError(f"expected a finite number, got {text!r}")
    return value


def _count(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be >= 1, got {text!r}")
    return value


def _count_or_zero(text: str) -> int:
    return 0 if text.strip() == "0" else _count(text)


class _Batch(argparse.Action):
    """--batch-size N or 'full' (recorded apart: None also means 'not given')."""

    def __call__(self, parser, namespace, value, option_string=None) -> None:
        full = value.strip().lower() == "full"
        namespace.batch_full = full
        try:
            setattr(namespace, self.dest, None if full else _count(value))
        except argparse.ArgumentTypeError as exc:
            raise argparse.ArgumentError(self, str(exc)) from None


def _rates(text: str) -> list[float]:
    rates = [_positive(part) for part in text.split(",") if part.strip()]
    if len(rates) < 2:
        raise argparse.ArgumentTypeError(f"give at least two learning rates, got {text!r}")
    return rates


def _fraction(text: str) -> float:
    value = _finite(text)
    if not 0 <= value <= 1:
        raise argparse.ArgumentTypeError(f"must be a number in [0, 1], got {text!r}")
    return value


def _holdout(text: str) -> float | str:
    if text == "auto":
        return text
    value = _finite(text)
    if not 0 <= value < 1:
        raise argparse.ArgumentTypeError(f"must be a fraction in [0, 1) or 'auto', got {text!r}")
    return value


def add_train_flags(p: argparse.ArgumentParser, data_optional: bool = False) -> None:
    """Flags shared by every command that trains."""
    if data_optional:
        p.add_argument("data", type=Path, nargs="?", help="CSV file with a header row")
    else:
        p.add_argument("data", type=Path, help="CSV file with a header row")
    p.add_argument("--target", type=_columns, help="target column(s), comma-separated")
    p.add_argument("--inputs", type=_columns, help="input columns (default: every other column)")
    p.add_argument("--hidden", type=_hidden, default=(4,), help="hidden layer sizes, e.g. 8,4, or 'none'")
    p.add_argument("--activation", choices=("sigmoid", "tanh", "relu", "identity"), default="sigmoid",
                   help="hidden-layer activation")
    p.add_argument("--steepness", type=_positive, default=1.0, help="sigmoid steepness s in sigma(s*(z-m))")
    p.add_argument("--midpoint", type=_finite, default=0.0, help="sigmoid midpoint m in sigma(s*(z-m))")
    p.add_argument("--output", choices=("auto", "sigmoid", "softmax", "identity"), default="auto",
                   help="output activation (auto: from the task)")
    p.add_argument("--loss", choices=("auto", "squared", "cross-entropy"), default="auto",
                   help="loss (auto: cross-entropy for classes, squared for regression)")
    p.add_argument("--task", choices=("auto", "binary", "multiclass", "multilabel", "regression"), default="auto",
                   help="task (auto: from the target column(s))")
    # Training settings default to None so that build --model can tell a flag given from one left out
    # (then the model's stored settings apply); their defaults are TrainSettings' and said here.
    defaults = TrainSettings()
    given = " (build --model: the model's stored setting)" if data_optional else ""
    p.add_argument("--lr", type=_positive, help=f"learning rate (default {defaults.learning_rate}{given})")
    p.add_argument("--epochs", type=_count, help=f"epochs (default {defaults.epochs}{given})")
    p.add_argument("--batch-size", action=_Batch, help=f"rows per update: 1, N or 'full' (default {defaults.batch_size}"
                                                     f"{given})")
    p.add_argument("--shuffle", action=argparse.BooleanOptionalAction, default=None,
                   help=f"shuffle the training rows every epoch, seeded (default on{given})")
    p.add_argument("--seed", type=int, help=f"seed of initialisation, shuffling and holdout (default 0{given})")
    p.add_argument("--momentum", type=_finite, help=f"momentum in [0, 1) (default 0{given})")
    p.add_argument("--l2", type=_finite, help=f"L2 penalty on weights, not biases (default 0{given})")
    p.add_argument("--scale", choices=("standard", "minmax", "none"), default="standard",
                   help="input scaling fitted on the training rows")
    p.add_argument("--holdout", type=_holdout, default="auto",
                   help="fraction of rows held out (default auto: 0.2 from 50 rows on, else 0)")
    p.add_argument("--init", type=Path, help="start from this model file (architecture, activations, scaling)")
    p.add_argument("--force", action="store_true", help="overwrite an existing output file")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def _parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="sheetnet", description="Small neural networks as live spreadsheet formulas.")
    parser.add_argument("--version", action="version", version=f"sheetnet {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    train_p = commands.add_parser("train", help="train a network on a CSV file and save the model (JSON)")
    add_train_flags(train_p)
    train_p.add_argument("-o", "--output-file", dest="out", type=Path, required=True, help="model file to write")
    build_p = commands.add_parser("build", help="write the network as a workbook of live formulas")
    add_train_flags(build_p, data_optional=True)
    build_p.add_argument("--model", type=Path, help="write the workbook for this model file instead of training")
    build_p.add_argument("--trace-epochs", type=_count_or_zero,
                         help="epochs the training record replays, 0 for no record (default: as many as fit)")
    build_p.add_argument("--trace-rows", type=_count,
                         help="training rows the record replays (default: all, or as many as fit)")
    build_p.add_argument("--scoring-rows", type=_count,
                         help="cases the Scoring sheet holds (default: all, or a sample that fits)")
    build_p.add_argument("--max-cells", type=_count, default=DEFAULT_MAX_CELLS, help="cap on formula cells")
    build_p.add_argument("--sign-key", type=Path, metavar="KEYFILE",
                         help="sign the workbook with this secret key (HMAC-SHA256; make one with 'sheetnet new-key')")
    build_p.add_argument("-o", "--output-file", dest="out", type=Path, required=True, help="workbook to write")
    demo_p = commands.add_parser("demo", help="build the demo workbook from invented data")
    demo_p.add_argument("--out", type=Path, default=Path("sheetnet_demo"), help="folder to write into")
    demo_p.add_argument("--force", action="store_true", help="overwrite existing demo files")
    demo_p.add_argument("--quiet", action="store_true", help="no progress bar")
    verify_p = commands.add_parser("verify", help="recalculate a workbook and compare it with the reference trainer")
    verify_p.add_argument("book", type=Path)
    verify_p.add_argument("--engine", choices=ENGINES, default="embedded", help="engine(s) that recalculate")
    verify_p.add_argument("--tolerance", type=_positive, default=DEFAULT_TOLERANCE,
                          help="a cell agrees when |found - expected| <= tolerance * max(1, |expected|)")
    verify_p.add_argument("--key", type=Path, metavar="KEYFILE", help="also check the signature made with this key")
    verify_p.add_argument("--json", type=Path, help="write the report as JSON here")
    verify_p.add_argument("--force", action="store_true", help="overwrite an existing JSON report")
    verify_p.add_argument("--quiet", action="store_true", help="no progress bar")
    audit_p = commands.add_parser("audit", help="find exactly what changed in an edited workbook")
    audit_p.add_argument("book", type=Path)
    audit_p.add_argument("--against", type=Path, help="the original workbook to compare with")
    audit_p.add_argument("--key", type=Path, metavar="KEYFILE", help="also check the signature made with this key")
    audit_p.add_argument("--engine", choices=("embedded", "libreoffice", "formulas"), default="embedded",
                         help="engine that recalculates the values compared with the reference (default: embedded)")
    audit_p.add_argument("--json", type=Path, help="write the findings as JSON here")
    audit_p.add_argument("--annotate", type=Path, help="write a copy with every finding highlighted")
    audit_p.add_argument("--force", action="store_true", help="overwrite existing report files")
    audit_p.add_argument("--quiet", action="store_true", help="no progress bar")
    extract_p = commands.add_parser("extract", help="read the (edited) parameters back as a model file")
    extract_p.add_argument("book", type=Path)
    extract_p.add_argument("--after-training", action="store_true",
                           help="take the parameters after the last step of the training record")
    extract_p.add_argument("-o", "--output-file", dest="out", type=Path, required=True)
    extract_p.add_argument("--force", action="store_true", help="overwrite an existing model file")
    extract_p.add_argument("--quiet", action="store_true", help="no progress bar (extract shows none)")
    report_p = commands.add_parser("report", help="an HTML report with plots for a model file or a workbook")
    report_p.add_argument("source", type=Path, help="MODEL.json or BOOK.xlsx")
    report_p.add_argument("-o", "--output-file", dest="out", type=Path, required=True)
    report_p.add_argument("--data", type=Path, help="for a model file: a CSV whose points the plots show")
    report_p.add_argument("--force", action="store_true", help="overwrite an existing report")
    report_p.add_argument("--quiet", action="store_true", help="no progress bar (report shows none)")
    rates_p = commands.add_parser("rates", help="compare learning rates from the same initial weights")
    add_train_flags(rates_p)
    rates_p.add_argument("--rates", type=_rates, required=True, help="learning rates to compare, e.g. 0.01,0.1,1")
    rates_p.add_argument("-o", "--output-file", dest="out", type=Path, required=True, help="HTML report to write")
    rates_p.add_argument("--workbook", type=Path, help="also write a workbook with the curves and a native chart")
    key_p = commands.add_parser("new-key", help="make a secret key file for signing workbooks")
    key_p.add_argument("keyfile", type=Path, help="key file to write (readable by you only)")
    key_p.add_argument("--force", action="store_true", help="overwrite an existing key file")
    score_p = commands.add_parser("score", help="score a CSV file with a model")
    score_p.add_argument("model", type=Path)
    score_p.add_argument("data", type=Path)
    score_p.add_argument("--threshold", type=_fraction, default=0.5, help="decision threshold for probabilities")
    score_p.add_argument("--drop-other-columns", action="store_true",
                         help="leave out the table's columns that are not model inputs (ids, the target...)")
    score_p.add_argument("-o", "--output-file", dest="out", type=Path, required=True)
    score_p.add_argument("--force", action="store_true")
    return parser


#: Training flag -> TrainSettings field.
SETTING_FLAGS = {"lr": "learning_rate", "epochs": "epochs", "batch_size": "batch_size", "shuffle": "shuffle",
                 "seed": "seed", "momentum": "momentum", "l2": "l2"}


def settings_from(args: argparse.Namespace, base: TrainSettings | None = None) -> TrainSettings:
    """The flags given, over ``base`` (the defaults, or a model's stored settings). A batch size of
    'full' arrives as None like a flag left out, so it is told apart by the text given."""
    base = base or TrainSettings()
    values = {field: getattr(args, flag) for flag, field in SETTING_FLAGS.items()}
    given = {field: value for field, value in values.items() if value is not None}
    if getattr(args, "batch_full", False):
        given["batch_size"] = None
    settings = replace(base, **given)
    settings.validate()
    return settings


def architecture_from(args: argparse.Namespace) -> Architecture:
    hidden_act = Activation(args.activation, args.steepness, args.midpoint) if args.activation == "sigmoid" \
        else Activation(args.activation)
    auto = lambda value: None if value == "auto" else value  # noqa: E731
    return Architecture(hidden=args.hidden, activation=hidden_act, output=auto(args.output),
                        loss=auto(args.loss), task=auto(args.task), scale=args.scale)


def run_fit(args: argparse.Namespace) -> tuple[FitOutcome, dataio.Table, TrainSettings]:
    """Read the data (and starting model) named by the flags and train."""
    settings = settings_from(args)
    start = load_model(args.init) if args.init else None
    table = dataio.read_csv(args.data)
    progress = Progress(settings.epochs, "training", quiet=args.quiet)
    outcome = fit(table, args.target or (), settings, architecture_from(args), start=start, holdout=args.holdout,
                  inputs=args.inputs, progress=progress)
    return outcome, table, settings


def _metrics_lines(title: str, metrics: Metrics) -> list[str]:
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
    for e in range(epochs):
        if (e + 1) % every == 0 or e == 0 or e == epochs - 1:
            acc = result.epoch_accuracy[e]
            extra = "" if np.isnan(acc) else f"  accuracy {acc:.4f}"
            lines.append(f"epoch {e + 1:>6}  loss {result.epoch_loss[e]:.6g}{extra}")
    lines += _metrics_lines("training", outcome.train_metrics)
    if outcome.holdout_metrics is not None:
        lines += _metrics_lines("holdout", outcome.holdout_metrics)
    return lines


def cmd_train(args: argparse.Namespace) -> int:
    check_output(args.out, args.force, inputs=[p for p in (args.data, args.init) if p], kind="model file")
    outcome, _, _ = run_fit(args)
    print("\n".join(summary_lines(outcome)))
    outcome.model.save(args.out, force=args.force)
    print(f"model written to {args.out}")
    return 0


def cmd_score(args: argparse.Namespace) -> int:
    check_output(args.out, args.force, inputs=[args.model, args.data], kind="scores file")
    model = load_model(args.model)
    table = dataio.read_csv(args.data)
    frame = score_table(model, table, args.threshold, keep_other_columns=not args.drop_other_columns)
    write_atomic(args.out, lambda tmp: frame.to_csv(tmp, index=False, float_format="%.17g"), force=args.force)
    if all(name in table.header for name in model.target) and model.target:
        try:
            targets = dataio.encode_targets(table, model.target, model.task, model.classes)
            metrics = evaluate(model, dataio.feature_matrix(table, model.inputs), targets.values, args.threshold)
            print("\n".join(_metrics_lines("scored", metrics)))
        except SheetNetError as exc:
            print(f"note: targets present but not scored ({exc})")
    print(f"{len(frame)} rows scored; written to {args.out}")
    return 0


def cmd_build(args: argparse.Namespace) -> int:
    check_output(args.out, args.force, inputs=[p for p in (args.data, args.model, args.init) if p], kind="workbook")
    key = _key(args.sign_key)  # before any training: a bad key file fails at once
    requested = Requested(epochs=args.trace_epochs, rows=args.trace_rows, scoring_rows=args.scoring_rows)
    if args.model:
        plan = _model_plan(args, requested)
    else:
        if args.data is None:
            raise UsageError("build needs a data file, or --model MODEL.json")
        outcome, table, settings = run_fit(args)
        print("\n".join(summary_lines(outcome)))
        plan = from_fit(outcome, table, settings, requested, args.max_cells)
    def write(plan: Plan):
        return write_workbook(plan.spec, plan.inputs, args.out, force=args.force, max_cells=args.max_cells,
                              progress=Progress(1, "writing", quiet=args.quiet), sign_key=key)

    try:
        result = write(plan)
    except TrainingError as exc:
        if not args.model or plan.spec.record is None:
            raise
        # a given model's scores still belong in a workbook when continuing training from it diverges
        plan = without_record(plan, f"{exc} (from the model's weights at learning rate "
                                    f"{plan.inputs.learning_rate:g})")
        result = write(plan)
    notes = list(plan.notes)
    if key is not None:
        notes.append(f"signed with key id {key_id(key)}")
    for note in notes:
        print(f"note: {note}")
    record = "" if result.layout.record is None else f", training record of {result.layout.record.nrows:,} rows"
    print(f"workbook written to {result.path}: {result.formula_cells:,} formula cells{record}")
    return 0


def _key(path: Path | None) -> bytes | None:
    """The secret key in a key file (None without one); a warning when others can read the file."""
    if path is None:
        return None
    key = read_key(path)
    if key_readable_by_others(path):
        print(f"warning: {path} can be read by other users; keep a signing key private (chmod 600)",
              file=sys.stderr)
    return key


def cmd_new_key(args: argparse.Namespace) -> int:
    check_output(args.keyfile, args.force)
    write_atomic(args.keyfile, lambda tmp: tmp.write_text(new_key_text(), encoding="ascii"), force=args.force,
                 mode=0o600)
    key = read_key(args.keyfile)
    print(f"key written to {args.keyfile} (key id {key_id(key)}); keep it secret: whoever holds it can sign")
    return 0


def _model_plan(args: argparse.Namespace, requested: Requested):
    """A given model's workbook; its record continues training with the model's stored settings where a
    flag does not say otherwise (documented defaults for a model file that stores none)."""
    model = load_model(args.model)
    table = dataio.read_csv(args.data) if args.data else None
    if args.target:
        model = replace(model, target=args.target)
    stored = stored_settings(model)
    settings = settings_from(args, stored) if table is not None else None
    plan = from_model(model, table, settings, requested, args.max_cells)
    if plan.spec.record is not None:
        source = "the model's stored settings" if stored is not None else "the defaults (the model file stores no " \
            "training settings)"
        given = [f"--{flag.replace('_', '-')}" for flag in SETTING_FLAGS if getattr(args, flag) is not None]
        plan = replace(plan, notes=(*plan.notes, f"the training record continues from the model's weights with "
                                                 f"{source}" + (f", except {', '.join(given)}" if given else "")))
    return plan


def cmd_demo(args: argparse.Namespace) -> int:
    folder = args.out
    if folder.exists() and not folder.is_dir():
        raise UsageError(f"{folder}: --out must be a folder, and this is a file")
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UsageError(f"{folder}: cannot create the folder ({exc.strerror})") from None
    data = folder / "invented_kiln_firings.csv"
    book = folder / "kiln_demo.xlsx"
    for path in (data, book):
        check_output(path, args.force)
    write_text_atomic(data, demo_csv_text(), force=args.force)
    flags = ["build", str(data), *DEMO_FLAGS, "-o", str(book)]
    flags += ["--force"] if args.force else []
    flags += ["--quiet"] if args.quiet else []
    code = cmd_build(_parser().parse_args(flags))
    report = verify(book, progress=Progress(VERIFY_STAGES, "verifying", quiet=args.quiet))
    print(verify_lines(report)[-1] + " (embedded engine)")
    print(f"demo data (invented) written to {data}")
    print(f"demo workbook written to {book}: open it in a spreadsheet application, start with the Guide sheet")
    return code if report.ok else 1


def cmd_verify(args: argparse.Namespace) -> int:
    if args.json:
        check_output(args.json, args.force, inputs=[args.book], kind="JSON report")
    key = _key(args.key)
    try:
        bar = Progress(VERIFY_STAGES, "verifying", quiet=args.quiet)
        report = verify(args.book, engine=args.engine, tolerance=args.tolerance, progress=bar, key=key)
    except (WorkbookFormatError, EvaluationError) as exc:
        reason = f"cannot verify: {exc}{_signature_note(args.book, key, exc)}"
        if args.json:
            _write_json(args.json, {"file": str(args.book), "ok": False, "verdict": "cannot-verify",
                                    "reason": reason}, args.force)
        raise CannotVerifyError(reason) from None
    print("\n".join(verify_lines(report)))
    if args.json:
        _write_json(args.json, report.to_dict(), args.force)
    if report.signature is not None and not report.signature.holds:
        return 1
    return VERIFY_EXIT[report.verdict]


#: verify's exit code by verdict (2, cannot verify, comes from CannotVerifyError).
VERIFY_EXIT = {"ok": 0, "mismatch": 1, "stale": 4}


def _write_json(path: Path, data: dict, force: bool) -> None:
    write_text_atomic(path, json.dumps(data, indent=2, default=str) + "\n", force=force)


def _signature_note(path: Path, key: bytes | None, error: Exception) -> str:
    """For a workbook that cannot be verified: whether its signature holds (with a key), which says
    whether what made it unverifiable happened after signing."""
    if key is None:
        return ""
    try:
        check = signature_of(path, key)
    except SheetNetError:
        return "; the signature cannot be checked either (the file cannot be read)"
    return f"; signature {check.status}: {check.detail}"


def cmd_audit(args: argparse.Namespace) -> int:
    sources = [p for p in (args.book, args.against) if p]
    for path, kind in ((args.json, "JSON report"), (args.annotate, "workbook")):
        if path:
            check_output(path, args.force, inputs=sources, kind=kind)
    bar = Progress(1, "auditing", quiet=args.quiet)
    bar(0)
    report = audit(args.book, against=args.against, key=_key(args.key), engine=args.engine)
    bar(1)
    print("\n".join(audit_lines(report)))
    if args.json:
        _write_json(args.json, report.to_dict(), args.force)
    if args.annotate:
        annotate(args.book, report, args.annotate, force=args.force)
        print(f"annotated copy written to {args.annotate}")
    return 3 if report.total else 0


def cmd_extract(args: argparse.Namespace) -> int:
    check_output(args.out, args.force, inputs=[args.book], kind="model file")
    model, note = extract(args.book, after_training=args.after_training)
    model.save(args.out, force=args.force)
    print(f"{note}; model written to {args.out}")
    return 0


def cmd_report(args: argparse.Namespace) -> int:
    from sheetnet.htmlreport import write_report

    if args.data is not None and args.source.suffix.lower() != ".json":
        raise UsageError("--data goes with a model file; a workbook's report plots the data it holds")
    check_output(args.out, args.force, inputs=[args.source, *([args.data] if args.data else [])], kind="HTML report")
    write_report(args.source, args.out, force=args.force, data=args.data)
    print(f"report written to {args.out}")
    return 0


def cmd_rates(args: argparse.Namespace) -> int:
    from sheetnet.book.write import write_rate_book
    from sheetnet.htmlreport import Section, loss_plot, page, write_html
    from sheetnet.rates import best, compare_rates, summary_rows

    for path, kind in ((args.out, "HTML report"), (args.workbook, "workbook")):
        if path:
            check_output(path, args.force, inputs=[p for p in (args.data, args.init) if p], kind=kind)
    settings = settings_from(args)
    table = dataio.read_csv(args.data)
    start = load_model(args.init) if args.init else None
    runs = compare_rates(table, args.target or (), args.rates, settings, architecture_from(args), args.holdout, start)
    rows = summary_rows(runs)
    chosen = best(runs)
    verdict = (f"lowest {'holdout' if chosen and chosen.holdout_loss is not None else 'training'} loss at learning "
               f"rate {chosen.rate:g}" if chosen else "every rate diverged; try smaller rates")
    for row in rows:
        print("  ".join(f"{v:>20}" if not isinstance(v, float) else f"{v:>20.6g}" for v in row))
    print(verdict)
    curves = {f"lr {r.rate:g}": r.curve for r in runs if r.curve}
    images = [loss_plot(curves, "training loss by learning rate")] if curves else []
    note = ("Every run starts from the same initial weights, with the same split and batches. 'diverged': the "
            "loss became non-finite or never beat the untrained start; 'unstable': the last epoch's loss is over "
            "1.5 times its lowest; 'stalled': it is still above 95% of the first epoch's.")
    sections = [Section("Learning rates", [verdict, note], images, [[str(v) for v in row] for row in rows])]
    write_html(args.out, page(f"sheetnet learning-rate comparison: {args.data.name}", sections), args.force)
    print(f"report written to {args.out}")
    if args.workbook and curves:
        write_atomic(args.workbook, lambda tmp: write_rate_book(tmp, curves, rows), force=args.force)
        print(f"workbook written to {args.workbook}")
    return 0


COMMANDS = {"train": cmd_train, "score": cmd_score, "build": cmd_build, "demo": cmd_demo, "verify": cmd_verify,
            "audit": cmd_audit, "extract": cmd_extract, "report": cmd_report, "rates": cmd_rates,
            "new-key": cmd_new_key}


_NEGATIVE = re.compile(r"^-[0-9.]")


def _negative_values_attached(argv: list[str]) -> list[str]:
    """``--lr -0.1`` as ``--lr=-0.1``: argparse takes a value that starts with '-' for an option unless it
    is a plain negative number, so ``--rates -1,0.1`` would fail as a missing value instead of saying
    that -1 is out of range."""
    out: list[str] = []
    for token in argv:
        if out and out[-1].startswith("--") and "=" not in out[-1] and _NEGATIVE.match(token):
            out[-1] = f"{out[-1]}={token}"
        else:
            out.append(token)
    return out


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point: returns the exit code."""
    try:
        args = _parser().parse_args(_negative_values_attached(sys.argv[1:] if argv is None else list(argv)))
        return COMMANDS[args.command](args)
    except SheetNetError as exc:
        print(f"sheetnet: error: {exc}", file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("sheetnet: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:  # the reader of our output went away (e.g. `| head`): nothing left to say
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except Exception as exc:  # a bug: still one line, never a traceback (set SHEETNET_DEBUG=1 to see it)
        if os.environ.get("SHEETNET_DEBUG"):
            raise
        print(f"sheetnet: internal error ({type(exc).__name__}: {exc}); please report it", file=sys.stderr)
        return 70


def run() -> None:
    """The console script: like :func:`main`, but skips freeing every object at exit (large workbooks
    leave millions of them; files are closed and output flushed first)."""
    code = main()
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(code)


if __name__ == "__main__":
    run()
