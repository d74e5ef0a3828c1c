"""The train and score commands: good runs and every bad input of the foundation issue."""

from __future__ import annotations

import hashlib
import re
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from tests.conftest import write_csv

ROWS = [[0.1, 1.0, "no"], [0.4, 0.2, "yes"], [0.9, 0.8, "yes"], [0.3, 0.1, "no"], [0.7, 0.5, "yes"]]


@pytest.fixture
def good_csv(tmp_path: Path) -> Path:
    return write_csv(tmp_path / "good.csv", ["a", "b", "label"], ROWS)


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest() if path.exists() else ""


def _files(folder: Path) -> set[str]:
    return {p.name for p in folder.iterdir()}


BAD_DATA = {
    "missing file": (None, 1, "not found"),
    "empty file": ("", 1, "empty"),
    "header only": ("a,b,label\n", 1, "no data rows"),
    "duplicate column": ("a,a,label\n1,2,x\n", 1, "duplicate column name 'a'"),
    "non-numeric feature": ("a,b,label\n1,2,no\n3,oops,yes\n", 1, "line 3, column 'b'"),
    "missing feature": ("a,b,label\n1,,no\n3,4,yes\n", 1, "line 2, column 'b': missing value"),
    "one class": ("a,b,label\n1,2,no\n3,4,no\n", 1, "only one class"),
    "ragged row": ("a,b,label\n1,2,no\n3,4\n", 1, "line 3: 2 fields"),
    "not utf-8": ("a,b,label\n1,2,caf\xe9\n", 1, "not UTF-8"),
    "infinite feature": ("a,b,label\n1,inf,no\n3,4,yes\n", 1, "line 2, column 'b'"),
}


@pytest.mark.parametrize("case", sorted(BAD_DATA))
def test_bad_data_gives_one_line_and_no_output(case, tmp_path, run_cli):
    text, code_expected, needle = BAD_DATA[case]
    data = tmp_path / "data.csv"
    if text is not None:
        data.write_bytes(text.encode("latin-1") if case == "not utf-8" else text.encode("utf-8"))
    before = _digest(data)
    code, _out, err = run_cli("train", data, "--target", "label", "-o", tmp_path / "m.json")
    assert code == code_expected
    assert needle in err and str(data) in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not (tmp_path / "m.json").exists()
    assert _digest(data) == before


BAD_USAGE = {
    "unknown target": (["--target", "nope"], 1, "target column(s) not found: nope"),
    "hidden 0": (["--target", "label", "--hidden", "0"], 2, "--hidden"),
    "lr 0": (["--target", "label", "--lr", "0"], 2, "--lr"),
    "lr negative": (["--target", "label", "--lr=-0.5"], 2, "--lr"),
    "epochs 0": (["--target", "label", "--epochs", "0"], 2, "--epochs"),
    "batch size 0": (["--target", "label", "--batch-size", "0"], 2, "--batch-size"),
    "unknown flag": (["--target", "label", "--bogus"], 2, "--bogus"),
    "step cannot train": (["--target", "label", "--init", "STEP"], 2, "step"),
    "unknown loss": (["--target", "label", "--loss", "hinge"], 2, "--loss"),
    "target named twice": (["--target", "label,label"], 2, "named twice"),
    "input is the target": (["--target", "label", "--inputs", "a,label"], 2, "both an input and a target"),
}


@pytest.mark.parametrize("case", sorted(BAD_USAGE))
def test_bad_usage_gives_one_line_and_no_output(case, good_csv, tmp_path, run_cli):
    flags, code_expected, needle = BAD_USAGE[case]
    if "STEP" in flags:
        step_model = tmp_path / "step.json"
        step_model.write_text('{"format": "sheetnet-model", "version": 1, "inputs": ["a", "b"], "outputs": ["label"],'
                              ' "layers": [{"weights": [[1, 1]], "bias": [-1], "activation": "step"}]}')
        flags = [str(step_model) if f == "STEP" else f for f in flags]
    code, _, err = run_cli("train", good_csv, *flags, "-o", tmp_path / "m.json")
    assert code == code_expected, err
    assert needle in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not (tmp_path / "m.json").exists()


def test_output_folder_missing(good_csv, tmp_path, run_cli):
    code, _, err = run_cli("train", good_csv, "--target", "label", "-o", tmp_path / "nowhere" / "m.json")
    assert code == 2 and "does not exist" in err
    assert not (tmp_path / "nowhere").exists()


def test_existing_output_needs_force(good_csv, tmp_path, run_cli):
    out = tmp_path / "m.json"
    out.write_text("keep me")
    code, _, err = run_cli("train", good_csv, "--target", "label", "-o", out)
    assert code == 2 and "--force" in err and out.read_text() == "keep me"
    code, _, err = run_cli("train", good_csv, "--target", "label", "--epochs", "3", "--force", "-o", out)
    assert code == 0 and out.read_text().startswith("{")
    assert _files(tmp_path) == {"good.csv", "m.json"}  # no temporary file left behind


def test_output_never_overwrites_an_input(good_csv, run_cli):
    before = _digest(good_csv)
    code, _, err = run_cli("train", good_csv, "--target", "label", "--force", "-o", good_csv)
    assert code == 2 and "overwrite the input" in err and _digest(good_csv) == before


def test_train_prints_inferred_setup_and_metrics(good_csv, tmp_path, run_cli):
    code, out, _ = run_cli("train", good_csv, "--target", "label", "--epochs", "20", "-o", tmp_path / "m.json")
    assert code == 0
    assert "task: binary" in out and "accuracy" in out and "confusion" in out and "epoch     20" in out


def test_score_writes_probabilities_and_labels(good_csv, tmp_path, run_cli):
    run_cli("train", good_csv, "--target", "label", "--epochs", "50", "-o", tmp_path / "m.json")
    code, _out, err = run_cli("score", tmp_path / "m.json", good_csv, "-o", tmp_path / "s.csv")
    assert code == 0, err
    frame = pd.read_csv(tmp_path / "s.csv")
    assert list(frame.columns) == ["a", "b", "label", "probability_no", "probability_yes", "predicted"]
    assert frame["label"].tolist() == pd.read_csv(good_csv)["label"].tolist()  # kept, to join results back
    assert ((frame["probability_no"] + frame["probability_yes"] - 1).abs() < 1e-12).all()
    assert set(frame["predicted"]) <= {"no", "yes"}
    assert (frame["predicted"] == "yes").tolist() == (frame["probability_yes"] >= 0.5).tolist()


def test_score_keeps_ids_in_order_and_can_drop_them(tmp_path, run_cli):
    rows = [[f"id-{i:03d}", 0.1 * i, (i * 7 % 5) / 5, "yes" if i % 3 else "no", "predicted?"] for i in range(12)]
    data = write_csv(tmp_path / "d.csv", ["case_id", "a", "b", "label", "predicted"], rows)
    assert run_cli("train", data, "--target", "label", "--inputs", "a,b", "--epochs", "5", "-o",
                   tmp_path / "m.json")[0] == 0
    assert run_cli("score", tmp_path / "m.json", data, "-o", tmp_path / "s.csv")[0] == 0
    frame = pd.read_csv(tmp_path / "s.csv")
    assert list(frame.columns) == ["case_id", "a", "b", "label", "predicted", "probability_no", "probability_yes",
                                   "predicted_score"]  # the table's own 'predicted' keeps its name
    assert frame["case_id"].tolist() == [r[0] for r in rows]
    assert run_cli("score", tmp_path / "m.json", data, "--drop-other-columns", "-o", tmp_path / "t.csv")[0] == 0
    assert list(pd.read_csv(tmp_path / "t.csv").columns) == ["a", "b", "probability_no", "probability_yes",
                                                              "predicted"]


def test_csv_dialects_give_the_same_model(tmp_path, run_cli):
    lines = ["a,b,label"] + [",".join(map(str, r)) for r in ROWS]
    variants = {
        "comma.csv": "\n".join(lines),
        "semicolon.csv": "\n".join(line.replace(",", ";") for line in lines),
        "tab.csv": "\n".join(line.replace(",", "\t") for line in lines),
        "bom_crlf_blank.csv": "\ufeff" + "\r\n".join([lines[0], "", *lines[1:], ""]),
        "quoted.csv": "\n".join(",".join(f'"{c}"' for c in line.split(",")) for line in lines),
    }
    models = []
    for name, text in variants.items():
        (tmp_path / name).write_text(text, encoding="utf-8")
        code, _, err = run_cli("train", tmp_path / name, "--target", "label", "--epochs", "5",
                               "-o", tmp_path / f"{name}.json")
        assert code == 0, (name, err)
        models.append((tmp_path / f"{name}.json").read_text().split('"training"')[0])
    assert len(set(models)) == 1


def test_python_dash_m_runs_without_traceback(tmp_path):
    result = subprocess.run([sys.executable, "-m", "sheetnet", "train", str(tmp_path / "none.csv"), "--target", "y",
                             "-o", str(tmp_path / "m.json")], capture_output=True, text=True, check=False)
    assert result.returncode == 1 and result.stderr.startswith("sheetnet: error:")
    assert "Traceback" not in result.stderr


def test_divergence_is_one_line_naming_the_epoch(tmp_path, run_cli):
    rows = [[i, i * 1000.0] for i in range(20)]
    data = write_csv(tmp_path / "big.csv", ["a", "y"], rows)
    code, _out, err = run_cli("train", data, "--target", "y", "--scale", "none", "--lr", "10", "--epochs", "50",
                             "-o", tmp_path / "m.json")
    assert code == 1 and "diverged" in err and re.search(r"in epoch [0-9]+", err)
    assert len(err.strip().splitlines()) == 1 and "Warning" not in err
    assert not (tmp_path / "m.json").exists()


@pytest.mark.parametrize("command, output, kind", [
    (["train", "{data}", "--target", "label", "--epochs", "1", "-o"], "model.xlsx", "model file"),
    (["build", "{data}", "--target", "label", "--epochs", "1", "-o"], "book.csv", "workbook"),
    (["score", "{model}", "{data}", "-o"], "scores.json", "scores file"),
    (["report", "{model}", "-o"], "report.pdf", "HTML report"),
    (["extract", "{book}", "-o"], "model.xlsx", "model file"),
    (["verify", "{book}", "--json"], "report.txt", "JSON report"),
    (["audit", "{book}", "--annotate"], "marked.csv", "workbook"),
    (["export", "{book}", "-o"], "model.json", "ONNX file"),
], ids=["train", "build", "score", "report", "extract", "verify", "audit", "export"])
def test_output_names_must_say_what_they_hold(command, output, kind, good_csv, tmp_path, run_cli):
    model, book = tmp_path / "m.json", tmp_path / "b.xlsx"
    assert run_cli("train", good_csv, "--target", "label", "--epochs", "1", "-o", model)[0] == 0
    assert run_cli("build", good_csv, "--target", "label", "--epochs", "1", "-o", book)[0] == 0
    args = [a.format(data=good_csv, model=model, book=book) for a in command] + [str(tmp_path / output)]
    code, _out, err = run_cli(*args)
    assert code == 2 and f"{'an' if kind[0] in 'HO' else 'a'} {kind} must be named" in err
    assert not (tmp_path / output).exists()
