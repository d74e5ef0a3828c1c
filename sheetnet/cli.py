"""The command line: ``sheetnet train | score | build | demo | verify | audit | extract | report | rates |
export | new-key``.

Thin by design: parse flags, call the library, print a summary. Every :class:`SheetNetError`
becomes one line on stderr and its exit code (1 bad data, 2 bad usage); nothing else prints
a traceback except a genuine bug.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path

from sheetnet import api
from sheetnet.demo import DEMO_FLAGS, demo_csv_text
from sheetnet.errors import (
    CannotVerifyError,
    EvaluationError,
    SheetNetError,
    UsageError,
    WorkbookFormatError,
)
from sheetnet.files import check_output, write_atomic, write_text_atomic
from sheetnet.flags import (
    architecture_options,
    build_defaults,
    command_parser,
    negative_values_attached,
    setting_options,
)
from sheetnet.progress import Progress
from sheetnet.report import audit_lines, verify_lines
from sheetnet.training_summary import metrics_lines, summary_lines


def _training(args: argparse.Namespace) -> dict:
    """The API's keyword arguments for training that the flags give, with a progress bar over epochs."""
    options = {**setting_options(args), **architecture_options(args)}
    epochs = api.settings(**{k: v for k, v in options.items() if k in api.SETTINGS}).epochs
    return {"holdout": args.holdout, "init": args.init, "inputs": args.inputs,
            "progress": Progress(epochs, "training", quiet=args.quiet), **options}


def cmd_train(args: argparse.Namespace) -> int:
    check_output(args.out, args.force, inputs=[p for p in (args.data, args.init) if p], kind="model file")
    outcome = api.train(args.data, args.target, **_training(args))
    print("\n".join(summary_lines(outcome)))
    outcome.model.save(args.out, force=args.force)
    print(f"model written to {args.out}")
    return 0


def cmd_score(args: argparse.Namespace) -> int:
    check_output(args.out, args.force, inputs=[args.model, args.data], kind="scores file")
    table = api.as_table(args.data)
    model = api.as_model(args.model, table, args.inputs, args.classes, args.target)
    frame = api.score(model, table, args.threshold, keep_other_columns=not args.drop_other_columns)
    write_atomic(args.out, lambda tmp: frame.to_csv(tmp, index=False, float_format="%.17g"), force=args.force)
    if args.threshold != 0.5 and model.task not in ("binary", "multilabel"):
        print(f"note: --threshold is ignored: a {model.task} model " + ("predicts the most probable class"
              if model.task == "multiclass" else "has no decision threshold"))
    try:
        metrics = api.score_metrics(model, table, args.threshold)
        if metrics is not None:
            print("\n".join(metrics_lines("scored", metrics)))
    except SheetNetError as exc:
        print(f"note: targets present but not scored ({exc})")
    print(f"{len(frame)} rows scored; written to {args.out}")
    return 0


def cmd_build(args: argparse.Namespace) -> int:
    check_output(args.out, args.force, inputs=[p for p in (args.data, args.model, args.init) if p], kind="workbook")
    key = _key(args.sign_key)  # before any training: a bad key file fails at once
    requested = api.Requested(epochs=args.trace_epochs, rows=args.trace_rows, scoring_rows=args.scoring_rows)
    if args.model:
        plan = _model_plan(args, requested)
    else:
        if args.data is None:
            raise UsageError("build needs a data file, or --model MODEL.json")
        plan, outcome = api.plan_from_data(args.data, args.target, requested, args.max_cells, **_training(args))
        print("\n".join(summary_lines(outcome)))
    result, plan = api.write_plan(plan, args.out, force=args.force, max_cells=args.max_cells,
                                  progress=Progress(1, "writing", quiet=args.quiet), sign_key=key,
                                  keep_scores=bool(args.model))
    notes = list(plan.notes)
    if key is not None:
        notes.append(f"signed with key id {api.key_id(key)}")
    for note in notes:
        print(f"note: {note}")
    rows = 0 if result.layout.record is None else result.layout.record.nrows
    record = f", training record of {rows:,} row{'' if rows == 1 else 's'}" if rows else ""
    print(f"workbook written to {result.path}: {result.formula_cells:,} formula cells{record}")
    return 0


def _key(path: Path | None) -> bytes | None:
    """The secret key in a key file (None without one); a warning when others can read the file."""
    if path is None:
        return None
    key = api.read_signing_key(path)
    if api.key_readable_by_others(path):
        print(f"warning: {path} can be read by other users; keep a signing key private (chmod 600)",
              file=sys.stderr)
    return key


def cmd_new_key(args: argparse.Namespace) -> int:
    check_output(args.keyfile, args.force)
    identity = api.new_signing_key(args.keyfile, force=args.force)
    print(f"key written to {args.keyfile} (key id {identity}); keep it secret: whoever holds it can sign")
    return 0


def _model_plan(args: argparse.Namespace, requested: api.Requested) -> api.Plan:
    """A given model's workbook (its record continues with the model's stored settings where a flag
    does not say otherwise), noting the flags the model makes meaningless."""
    graph = args.model.suffix.lower() == ".onnx"
    plan = api.plan_from_model(args.model, args.data, args.target, requested, args.max_cells,
                               inputs=args.inputs if graph else None, classes=args.classes, **setting_options(args))
    defaults = build_defaults()
    fixed = [flag for flag in MODEL_FIXES if not (graph and flag == "--inputs")]
    ignored = [flag for flag in fixed if getattr(args, _dest(flag)) != defaults[_dest(flag)]]
    if ignored:
        plan = replace(plan, notes=(*plan.notes, f"{', '.join(ignored)} ignored: the model file fixes them"))
    return plan


#: Flags of training that a given model fixes (its architecture, scaling and data split).
MODEL_FIXES = ("--hidden", "--activation", "--steepness", "--midpoint", "--output", "--loss", "--task", "--scale",
               "--holdout", "--init", "--inputs")


def _dest(flag: str) -> str:
    return flag.lstrip("-").replace("-", "_")


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
    code = cmd_build(command_parser().parse_args(flags))
    report = api.verify_workbook(book, progress=Progress(api.VERIFY_STAGES, "verifying", quiet=args.quiet))
    print(verify_lines(report)[-1] + " (embedded engine)")
    print(f"demo data (invented) written to {data}")
    print(f"demo workbook written to {book}: open it in a spreadsheet application, start with the Guide sheet")
    return code if report.ok else 1


def cmd_verify(args: argparse.Namespace) -> int:
    if args.json:
        check_output(args.json, args.force, inputs=[args.book], kind="JSON report")
    key = _key(args.key)
    try:
        bar = Progress(api.VERIFY_STAGES, "verifying", quiet=args.quiet)
        report = api.verify_workbook(args.book, engine=args.engine, tolerance=args.tolerance, key=key,
                                     progress=bar)
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
        check = api.signature_check(path, key)
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
    report = api.audit_workbook(args.book, against=args.against, key=_key(args.key), engine=args.engine)
    bar(1)
    print("\n".join(audit_lines(report)))
    if args.json:
        _write_json(args.json, report.to_dict(), args.force)
    if args.annotate:
        api.annotate_workbook(args.book, report, args.annotate, force=args.force)
        print(f"annotated copy written to {args.annotate}")
    return 3 if report.total else 0


def cmd_extract(args: argparse.Namespace) -> int:
    check_output(args.out, args.force, inputs=[args.book], kind="model file")
    model, note = api.extract_with_note(args.book, after_training=args.after_training)
    model.save(args.out, force=args.force)
    print(f"{note}; model written to {args.out}")
    return 0


def cmd_report(args: argparse.Namespace) -> int:

    if args.data is not None and args.source.suffix.lower() not in api.MODEL_SUFFIXES:
        raise UsageError("--data goes with a model file; a workbook's report plots the data it holds")
    check_output(args.out, args.force, inputs=[args.source, *([args.data] if args.data else [])], kind="HTML report")
    api.report_html(args.source, args.out, force=args.force, data=args.data, inputs=args.inputs, classes=args.classes,
                    target=args.target)
    print(f"report written to {args.out}")
    return 0


def cmd_rates(args: argparse.Namespace) -> int:

    for path, kind in ((args.out, "HTML report"), (args.workbook, "workbook")):
        if path:
            check_output(path, args.force, inputs=[p for p in (args.data, args.init) if p], kind=kind)
    runs = api.compare_learning_rates(args.data, args.target, args.rates, args.holdout, args.init,
                                      **setting_options(args), **architecture_options(args))
    for row in api.summary_rows(runs):
        print("  ".join(f"{v:>20}" if not isinstance(v, float) else f"{v:>20.6g}" for v in row))
    print(api.rates_verdict(runs))
    book_written = api.write_rates_report(runs, args.data.name, args.out, args.workbook, force=args.force)
    print(f"report written to {args.out}")
    if book_written:
        print(f"workbook written to {args.workbook}")
    return 0


def cmd_export(args: argparse.Namespace) -> int:
    check_output(args.out, args.force, inputs=[args.source], kind="ONNX file")
    note = api.export_onnx(args.source, args.out, after_training=args.after_training, dtype=args.dtype,
                           threshold=args.threshold, force=args.force, inputs=args.inputs, classes=args.classes)
    print(f"{note}; written to {args.out}")
    return 0


COMMANDS = {"train": cmd_train, "score": cmd_score, "build": cmd_build, "demo": cmd_demo, "verify": cmd_verify,
            "audit": cmd_audit, "extract": cmd_extract, "report": cmd_report, "rates": cmd_rates,
            "new-key": cmd_new_key, "export": cmd_export}


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point: returns the exit code."""
    try:
        args = command_parser().parse_args(negative_values_attached(sys.argv[1:] if argv is None else list(argv)))
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
