"""The README's Python example runs, and CI runs the README's test command verbatim."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")


def _blocks(language: str) -> list[str]:
    return re.findall(rf"```{language}\n(.*?)```", README, flags=re.S)


def test_readme_python_example_runs(tmp_path, monkeypatch):
    shutil.copytree(ROOT / "workbooks_demo", tmp_path / "workbooks_demo")
    monkeypatch.chdir(tmp_path)
    (example,) = _blocks("python")
    exec(compile(example, "README.md", "exec"), {})
    assert (tmp_path / "kiln.json").exists() and (tmp_path / "kiln.xlsx").exists()


def test_api_docstring_examples_run():
    import doctest

    import sheetnet.api

    assert doctest.testmod(sheetnet.api).failed == 0


def test_ci_runs_the_readme_test_command():
    commands = [b.strip() for b in _blocks("bash") if b.strip().startswith("python3 -m venv")]
    assert len(commands) == 2, "the quick start has exactly two set-up commands"
    assert "sheetnet demo" in commands[0]
    assert commands[1] in (ROOT / ".ci" / "run").read_text()


def test_readme_onnx_round_trip_runs(tmp_path, monkeypatch):
    """The README's five-line round trip, on a graph from scikit-learn's ONNX converter (iris: Fisher 1936)."""
    import shlex
    import warnings

    import numpy as np
    import pytest

    onnx = pytest.importorskip("onnx")
    from skl2onnx import to_onnx
    from sklearn.datasets import load_iris
    from sklearn.neural_network import MLPClassifier
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    from sheetnet.cli import main

    frame = load_iris(as_frame=True).frame.rename(columns={"target": "outcome"})
    x = frame.drop(columns="outcome").to_numpy(float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipeline = make_pipeline(StandardScaler(), MLPClassifier((4,), max_iter=200, random_state=0)).fit(
            x, frame.outcome)
    monkeypatch.chdir(tmp_path)
    onnx.save(to_onnx(pipeline, x[:1].astype(np.float32)), "exported.onnx")
    frame.to_csv("cases.csv", index=False)
    (block,) = [b for b in _blocks("bash") if "sheetnet export book.xlsx" in b]
    lines = [line.split("#")[0].strip() for line in block.splitlines() if line.startswith("sheetnet ")]
    assert len(lines) == 4
    for line in lines:
        assert main(shlex.split(line)[1:]) == 0, line
    session = __import__("onnxruntime").InferenceSession("edited.onnx")
    assert session.run(None, {"features": x[:3]})[0].shape == (3, 3)
