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
