"""Shared helpers for the tests: small CSV writers and a CLI runner."""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

os.environ.setdefault("TQDM_DISABLE", "1")

from sheetnet.cli import main

REQUIRE_LIBREOFFICE = os.environ.get("SHEETNET_REQUIRE_LIBREOFFICE") == "1"


def pytest_runtest_setup(item) -> None:
    """Tests marked ``libreoffice`` need soffice, and ``libreoffice_bridge`` also its Python bridge:
    skipped without them, except where SHEETNET_REQUIRE_LIBREOFFICE=1 (CI), where they fail."""
    from tests.lo_edit import libreoffice_bridge_available

    missing = None
    if item.get_closest_marker("libreoffice") and shutil.which("soffice") is None:
        missing = "LibreOffice (soffice) is not installed"
    elif item.get_closest_marker("libreoffice_bridge") and not libreoffice_bridge_available():
        missing = "LibreOffice or its Python bridge (python3-uno) is not installed"
    if missing and REQUIRE_LIBREOFFICE:
        pytest.fail(f"{missing}, and SHEETNET_REQUIRE_LIBREOFFICE=1 requires it")
    if missing:
        pytest.skip(missing)


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
