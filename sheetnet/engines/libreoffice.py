"""LibreOffice headless as an independent recalculation engine: the only module that runs it.

Each run gets a private, throw-away user profile whose settings force a full recalculation on
load (LibreOffice otherwise keeps the cached values of an .xlsx), a timeout, and its whole
process group is killed afterwards so nothing is left running. LibreOffice writes the
recalculated values with 15 significant digits.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import subprocess
import tempfile
from pathlib import Path

from sheetnet.errors import EvaluationError

RECALC_ON_LOAD = """<?xml version="1.0" encoding="UTF-8"?>
<oor:items xmlns:oor="http://openoffice.org/2001/registry" xmlns:xs="http://www.w3.org/2001/XMLSchema" \
xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance">
<item oor:path="/org.openoffice.Office.Calc/Formula/Load"><prop oor:name="OOXMLRecalcMode" oor:op="fuse">\
<value>0</value></prop></item>
<item oor:path="/org.openoffice.Office.Calc/Formula/Load"><prop oor:name="ODFRecalcMode" oor:op="fuse">\
<value>0</value></prop></item>
</oor:items>
"""
DEFAULT_TIMEOUT = 600.0


def find_soffice() -> str:
    """The LibreOffice executable, or a clear message saying how to install it."""
    for name in ("soffice", "libreoffice"):
        found = shutil.which(name)
        if found:
            return found
    raise EvaluationError("LibreOffice is not installed (on Debian/Ubuntu: apt-get install libreoffice-calc-nogui)")


def _profile(folder: Path) -> str:
    user = folder / "profile" / "user"
    user.mkdir(parents=True)
    (user / "registrymodifications.xcu").write_text(RECALC_ON_LOAD, encoding="utf-8")
    return (folder / "profile").as_uri()


def _run(command: list[str], timeout: float, home: Path) -> subprocess.CompletedProcess:
    process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, stdin=subprocess.DEVNULL,
                               start_new_session=True, env={**os.environ, "HOME": str(home)})
    try:
        out, err = process.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        _kill_group(process)
        raise EvaluationError(f"LibreOffice did not finish within {timeout:g} s") from None
    finally:
        _kill_group(process)
    return subprocess.CompletedProcess(command, process.returncode, out, err)


def _kill_group(process: subprocess.Popen) -> None:
    with contextlib.suppress(ProcessLookupError, PermissionError):
        os.killpg(process.pid, signal.SIGKILL)
    with contextlib.suppress(Exception):
        process.communicate(timeout=5)


def recalculate(source: Path, out_dir: Path, timeout: float = DEFAULT_TIMEOUT) -> Path:
    """Open ``source`` in LibreOffice, recalculate every formula and save a copy as .xlsx in
    ``out_dir`` (which must differ from the source's folder, so the input is never touched)."""
    source = Path(source).resolve()
    out_dir = Path(out_dir).resolve()
    if out_dir == source.parent:
        raise EvaluationError("internal: LibreOffice output folder must differ from the input's folder")
    soffice = find_soffice()
    with tempfile.TemporaryDirectory(prefix="sheetnet-lo-") as work:
        work_dir = Path(work)
        staged = work_dir / "in" / "book.xlsx"  # a plain name: LibreOffice names its output after the input
        staged.parent.mkdir()
        shutil.copyfile(source, staged)
        produced = work_dir / "out"
        command = [soffice, f"-env:UserInstallation={_profile(work_dir)}", "--headless", "--norestore",
                   "--nolockcheck", "--nodefault", "--convert-to", "xlsx", "--outdir", str(produced), str(staged)]
        result = _run(command, timeout, work_dir)
        output = produced / "book.xlsx"
        if not output.exists():
            detail = result.stderr.decode("utf-8", "replace").strip().splitlines()
            raise EvaluationError(f"LibreOffice could not recalculate {source.name}"
                                  + (f": {detail[-1]}" if detail else ""))
        out_dir.mkdir(parents=True, exist_ok=True)
        target = out_dir / f"{source.stem}.recalculated.xlsx"
        shutil.move(str(output), target)
    return target
