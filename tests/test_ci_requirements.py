"""CI must really run the LibreOffice tests: with SHEETNET_REQUIRE_LIBREOFFICE=1 a missing soffice
fails a marked test instead of skipping it (and without the variable, it is skipped)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _run_marked_test(tmp_path: Path, require: bool) -> subprocess.CompletedProcess:
    folder = tmp_path / "probe"
    folder.mkdir()
    (folder / "conftest.py").write_text("from tests.conftest import pytest_runtest_setup  # noqa: F401\n")
    (folder / "pytest.ini").write_text("[pytest]\nmarkers =\n    libreoffice: probe\n")
    (folder / "test_probe.py").write_text("import pytest\n\n@pytest.mark.libreoffice\ndef test_needs_it():\n"
                                          "    pass\n")
    env = {**os.environ, "PATH": str(Path(sys.executable).parent), "PYTHONPATH": str(ROOT)}
    env.pop("SHEETNET_REQUIRE_LIBREOFFICE", None)
    if require:
        env["SHEETNET_REQUIRE_LIBREOFFICE"] = "1"
    return subprocess.run([sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider", str(folder),
                           "-c", str(folder / "pytest.ini")],
                          capture_output=True, text=True, env=env, cwd=tmp_path, timeout=120)


def test_missing_libreoffice_fails_when_required(tmp_path):
    done = _run_marked_test(tmp_path, require=True)
    assert done.returncode == 1 and "SHEETNET_REQUIRE_LIBREOFFICE=1 requires it" in done.stdout, done.stdout


def test_missing_libreoffice_skips_otherwise(tmp_path):
    done = _run_marked_test(tmp_path, require=False)
    assert done.returncode == 0 and "1 skipped" in done.stdout, done.stdout
