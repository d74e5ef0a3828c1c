"""Shared helpers for the tests: small CSV writers and a CLI runner."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

os.environ.setdefault("TQDM_DISABLE", "1")

from sheetnet.cli import main


def write_csv(path: Path, header: list[str], rows: list[list[object]]) -> Path:
    lines = [",".join(header)] + [",".join(str(v) for v in row) for row in rows]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.fixture
def run_cli(capsys):
    """Run the command line in-process; return (exit code, stdout, stderr)."""

    def run(*args: object) -> tuple[int, str, str]:
        code = main([str(a) for a in args])
        out = capsys.readouterr()
        return code, out.out, out.err

    return run


@pytest.fixture
def xor_csv(tmp_path: Path) -> Path:
    return write_csv(tmp_path / "xor.csv", ["x1", "x2", "y"], [[0, 0, 0], [0, 1, 1], [1, 0, 1], [1, 1, 0]])
