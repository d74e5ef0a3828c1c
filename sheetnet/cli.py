"""The command line: ``sheetnet train | score | build | demo | verify | audit | extract | report | rates``.

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

from sheetnet.book.build import Plan, from_fit, from_model, without_record, write_workbook
from sheetnet.book.signing import key_id, key_readable_by_others, new_key_text, read_key
from sheetnet.book.sizing import Requested
from sheetnet.book.write import write_rate_book
from sheetnet.checks.annotate import annotate
from sheetnet.checks.audit import audit
from sheetnet.checks.extract import extract
from sheetnet.checks.verify import VERIFY_STAGES, signature_of, verify
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
from sheetnet.flags import (
    SETTING_FLAGS,
    architecture_from,
    build_defaults,
    command_parser,
    negative_values_attached,
    settings_from,
)
from sheetnet.htmlreport import Section, loss_plot, page, write_html, write_report
from sheetnet.net import data as dataio
from sheetnet.net.fit import FitOutcome, fit
from sheetnet.net.metrics import evaluate
from sheetnet.net.model import load_model
from sheetnet.net.predict import score_table
from sheetnet.net.train import TrainSettings, stored_settings
from sheetnet.progress import Progress
from sheetnet.rates import best, compare_rates, summary_rows
from sheetnet.report import audit_lines, verify_lines
from sheetnet.training_summary import metrics_lines, summary_lines


def run_fit(args: argparse.Namespace) -> tuple[FitOutcome, dataio.DataTable, TrainSettings]:
    """Read the data (and starting model) named by the flags and train."""
    settings = settings_from(args)
    start = load_model(args.init) if args.init else None
    table = dataio.read_csv(args.data)
    progress = Progress(settings.epochs, "training", quiet=args.quiet)
    outcome = fit(table, args.target or (), settings, architecture_from(args), start=start, holdout=args.holdout,
                  inputs=args.inputs, progress=progress)
    return outcome, table, settings


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
            print("\n".join(metrics_lines("scored", metrics)))
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
        _check_target_flag(model, table, args.target, args.model)
        model = replace(model, target=args.target)
    stored = stored_settings(model, str(args.model))
    settings = settings_from(args, stored) if table is not None else None
    plan = from_model(model, table, settings, requested, args.max_cells)
    defaults = build_defaults()
    ignored = [flag for flag in MODEL_FIXES if getattr(args, _dest(flag)) != defaults[_dest(flag)]]
    if ignored:
        plan = replace(plan, notes=(*plan.notes, f"{', '.join(ignored)} ignored: the model file fixes them"))
    if plan.spec.record is not None:
        source = "the model's stored settings" if stored is not None else "the defaults (the model file stores no " \
            "training settings)"
        given = [f"--{flag.replace('_', '-')}" for flag in SETTING_FLAGS if getattr(args, flag) is not None]
        if getattr(args, "batch_full", False):
            given.append("--batch-size")
        plan = replace(plan, notes=(*plan.notes, f"the training record continues from the model's weights with "
                                                 f"{source}" + (f", except {', '.join(given)}" if given else "")))
    return plan


#: Flags of training that a given model fixes (its architecture, scaling and data split).
MODEL_FIXES = ("--hidden", "--activation", "--steepness", "--midpoint", "--output", "--loss", "--task", "--scale",
               "--holdout", "--init", "--inputs")


def _check_target_flag(model, table, target: tuple[str, ...], path: Path) -> None:
    """--target with --model names the data's column(s) holding the model's target(s): as many as the
    model has outputs' targets, and present in the data."""
    if len(target) != max(1, len(model.target)):
        raise UsageError(f"--target names {len(target)} column(s), and the model in {path} has "
                         f"{max(1, len(model.target))} target(s)")
    missing = [name for name in target if table is not None and name not in table.header]
    if missing:
        raise UsageError(f"--target {missing[0]!r}: no such column in {table.source}")


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

    if args.data is not None and args.source.suffix.lower() != ".json":
        raise UsageError("--data goes with a model file; a workbook's report plots the data it holds")
    check_output(args.out, args.force, inputs=[args.source, *([args.data] if args.data else [])], kind="HTML report")
    write_report(args.source, args.out, force=args.force, data=args.data)
    print(f"report written to {args.out}")
    return 0


def cmd_rates(args: argparse.Namespace) -> int:

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
