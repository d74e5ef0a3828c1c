"""The command line's flags: the parser of every command, the checks that turn a bad value into one
usage line, and the conversion of training flags into settings and an architecture."""

from __future__ import annotations

import argparse
import re
from pathlib import Path

import numpy as np

from sheetnet.book.build import DEFAULT_MAX_CELLS
from sheetnet.checks.tolerance import DEFAULT_TOLERANCE
from sheetnet.checks.verify import ENGINES
from sheetnet.errors import (
    UsageError,
)
from sheetnet.net.activations import Activation
from sheetnet.net.train import TrainSettings
from sheetnet.version import __version__


class _DefaultsShown(argparse.HelpFormatter):
    """Every option's default in its help, unless the help already says it (or there is none to say)."""

    def _get_help_string(self, action: argparse.Action) -> str:
        text = action.help or ""
        default = action.default
        if "default" in text or default is None or default is False or default == argparse.SUPPRESS \
                or not action.option_strings:
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


def _whole(text: str, low: int, high: int | None, says: str) -> int:
    """A whole number in [low, high] (no upper end when None), else one usage line saying ``says``."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < low or (high is not None and value > high):
        raise argparse.ArgumentTypeError(f"{says}, got {text!r}")
    return value


def _count(text: str) -> int:
    return _whole(text, 1, None, "must be >= 1")


def _count_or_zero(text: str) -> int:
    return _whole(text, 0, None, "must be >= 0 (0: none)")


def _seed(text: str) -> int:
    return _whole(text, 0, 2**63 - 1, "must be a whole number from 0 to 2**63 - 1")


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
    parts = [part.strip() for part in text.split(",")]
    if "" in parts:
        raise argparse.ArgumentTypeError(f"an empty learning rate in {text!r}: separate rates with single commas")
    rates = [_positive(part) for part in parts]
    if len(rates) < 2:
        raise argparse.ArgumentTypeError(f"give at least two learning rates, got {text!r}")
    if len(set(rates)) < len(rates):
        raise argparse.ArgumentTypeError(f"a learning rate given twice in {text!r}")
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
    p.add_argument("--target", type=_columns,
                   help="target column(s), comma-separated (needed to train; with --model: the data's name for the "
                        "model's target)")
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
    p.add_argument("--seed", type=_seed, help=f"seed of initialisation, shuffling and holdout (default 0{given})")
    p.add_argument("--momentum", type=_finite, help=f"momentum in [0, 1) (default 0{given})")
    p.add_argument("--l2", type=_finite, help=f"L2 penalty on weights, not biases (default 0{given})")
    p.add_argument("--scale", choices=("standard", "minmax", "none"), default="standard",
                   help="input scaling fitted on the training rows")
    p.add_argument("--holdout", type=_holdout, default="auto",
                   help="fraction of rows held out (default auto: 0.2 from 50 rows on, else 0)")
    p.add_argument("--init", type=Path,
                   help="start from this model file's weights, architecture and scaling (default: random weights)")
    p.add_argument("--force", action="store_true", help="overwrite an existing output file")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def command_parser() -> argparse.ArgumentParser:
    parser = _Parser(prog="sheetnet", description="Small neural networks as live spreadsheet formulas.")
    parser.add_argument("--version", action="version", version=f"sheetnet {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)
    train_p = commands.add_parser("train", help="train a network on a CSV file and save the model (JSON)")
    add_train_flags(train_p)
    train_p.add_argument("-o", "--output-file", dest="out", type=Path, required=True, help="model file to write")
    build_p = commands.add_parser("build", help="write the network as a workbook of live formulas")
    add_train_flags(build_p, data_optional=True)
    build_p.add_argument("--model", type=Path,
                         help="write the workbook for this model file (.json) or ONNX graph (.onnx) instead of "
                              "training")
    add_graph_flags(build_p, inputs=False)
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
    report_p.add_argument("source", type=Path, help="MODEL.json, MODEL.onnx or BOOK.xlsx")
    add_graph_flags(report_p)
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
    score_p.add_argument("model", type=Path, help="MODEL.json or MODEL.onnx")
    add_graph_flags(score_p)
    score_p.add_argument("data", type=Path, help="CSV file of cases to score")
    score_p.add_argument("--threshold", type=_fraction, default=0.5, help="decision threshold for probabilities")
    score_p.add_argument("--drop-other-columns", action="store_true",
                         help="leave out the table's columns that are not model inputs (ids, the target...)")
    score_p.add_argument("-o", "--output-file", dest="out", type=Path, required=True,
                         help="scores file to write (.csv)")
    score_p.add_argument("--force", action="store_true", help="overwrite an existing scores file")
    export_p = commands.add_parser("export", help="write a workbook's (or a model file's) network as an ONNX graph")
    export_p.add_argument("source", type=Path, help="BOOK.xlsx, MODEL.json or MODEL.onnx")
    export_p.add_argument("-o", "--output-file", dest="out", type=Path, required=True, help="ONNX file to write")
    export_p.add_argument("--after-training", action="store_true",
                          help="a workbook's parameters after the last step of its training record")
    export_p.add_argument("--dtype", choices=("float64", "float32"), default="float64",
                          help="number type of the graph (float64 reproduces the workbook to 1e-12)")
    export_p.add_argument("--threshold", type=_fraction,
                          help="decision threshold of the graph's label (default: the workbook's, else 0.5)")
    add_graph_flags(export_p, data=False)
    export_p.add_argument("--force", action="store_true", help="overwrite an existing ONNX file")
    return parser


def add_graph_flags(p: argparse.ArgumentParser, inputs: bool = True, data: bool = True) -> None:
    """Names an ONNX graph may not hold (a model file always does); ``data``: the command reads a table."""
    if inputs:
        p.add_argument("--inputs", type=_columns,
                       help="for an ONNX graph that names no features: its input columns in order (default: "
                            + ("the data's numeric columns other than the target)" if data else "x1, x2, ...)"))
    if inputs and data:
        p.add_argument("--target", type=_columns,
                       help="for an ONNX graph: the data's target column(s), left out of its inputs")
    p.add_argument("--classes", type=_columns,
                   help="for an ONNX graph that names no classes: the class labels in output order")


#: Training flag -> TrainSettings field.
SETTING_FLAGS = {"lr": "learning_rate", "epochs": "epochs", "batch_size": "batch_size", "shuffle": "shuffle",
                 "seed": "seed", "momentum": "momentum", "l2": "l2"}


def setting_options(args: argparse.Namespace) -> dict:
    """The training settings the flags give, as the API's keyword arguments (flags left out are absent,
    so a model's stored settings or the defaults fill them). A batch size of 'full' arrives as None
    like a flag left out, so it is told apart by the text given."""
    given = {field: getattr(args, flag) for flag, field in SETTING_FLAGS.items() if getattr(args, flag) is not None}
    if getattr(args, "batch_full", False):
        given["batch_size"] = "full"
    return given


def architecture_options(args: argparse.Namespace) -> dict:
    """The architecture the flags give, as the API's keyword arguments ('auto' is left to inference)."""
    hidden_act = Activation(args.activation, args.steepness, args.midpoint) if args.activation == "sigmoid" \
        else Activation(args.activation)
    auto = lambda value: None if value == "auto" else value  # noqa: E731
    return {"hidden": args.hidden, "activation": hidden_act, "output": auto(args.output), "loss": auto(args.loss),
            "task": auto(args.task), "scale": args.scale}


_NEGATIVE = re.compile(r"^-[0-9.]")


def negative_values_attached(argv: list[str]) -> list[str]:
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


def build_defaults() -> dict[str, object]:
    """Every flag of ``build`` as left out (to tell a flag given from its default)."""
    return vars(command_parser().parse_args(["build", "--model", "model.json", "-o", "book.xlsx"]))
