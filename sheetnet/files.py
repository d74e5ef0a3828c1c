"""Safe output files: checked before any work, written atomically, inputs never overwritten.

Every command that writes goes through :func:`check_output` first (so a bad path fails
before training) and :func:`write_atomic` last (temporary file in the same folder, then
``os.replace``), so a failure or Ctrl-C never leaves a partial file behind.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import tempfile
from collections.abc import Callable, Iterable, Iterator
from pathlib import Path

from sheetnet.errors import SheetNetError, UsageError

#: What each kind of output file must be called (a model written as "book.xlsx" helps nobody).
OUTPUT_SUFFIXES = {"model file": (".json",), "workbook": (".xlsx",), "scores file": (".csv",),
                   "HTML report": (".html", ".htm"), "JSON report": (".json",), "ONNX file": (".onnx",)}


def check_output(path: Path, force: bool, inputs: Iterable[Path] = (), kind: str | None = None) -> Path:
    """Refuse an output path that cannot or must not be written, or whose name does not say what it
    holds (``kind``: a key of OUTPUT_SUFFIXES); return it."""
    target = Path(path)
    if not target.name or target.is_dir():
        raise UsageError(f"{path}: output path is a folder, not a file")
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise UsageError(f"{path}: output folder {folder} does not exist")
    for source in inputs:
        if _same_file(target, Path(source)):
            raise UsageError(f"{path}: output would overwrite the input file {source}")
    if kind is not None and target.suffix.lower() not in OUTPUT_SUFFIXES[kind]:
        article = "an" if kind[0] in "AEFHILMNORSX" else "a"  # an HTML, an ONNX; a model, a workbook
        raise UsageError(f"{path}: {article} {kind} must be named *{' or *'.join(OUTPUT_SUFFIXES[kind])}, "
                         f"not *{target.suffix or ' (no extension)'}")
    if target.exists() and not force:
        raise UsageError(f"{path}: output file exists; use --force to overwrite it")
    return target


def _same_file(a: Path, b: Path) -> bool:
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def write_atomic(path: Path, write: Callable[[Path], None], force: bool = False, mode: int | None = None) -> Path:
    """Call ``write(tmp)`` on a temporary path beside ``path`` and move it into place (with ``mode``,
    or the mode a new file would get)."""
    target = check_output(path, force)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent or ".")
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        write(tmp)
        os.chmod(tmp, _file_mode(target) if mode is None else mode)
        os.replace(tmp, target)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise
    return target


def _file_mode(target: Path) -> int:
    """The mode a plain new file would get (umask applied), or the overwritten file's mode."""
    if target.exists():
        return target.stat().st_mode & 0o777
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def write_text_atomic(path: Path, text: str, force: bool = False) -> Path:
    """Write UTF-8 text atomically."""
    return write_atomic(path, lambda tmp: tmp.write_text(text, encoding="utf-8"), force=force)


@contextlib.contextmanager
def reading(path: Path, error: type[SheetNetError], missing: str, folder: str) -> Iterator[None]:
    """An input file that cannot be opened as one line of ``error``: ``missing`` names what was not
    found ("data file"), ``folder`` what a folder is not ("a workbook")."""
    try:
        yield
    except FileNotFoundError:
        raise error(f"{path}: {missing} not found") from None
    except IsADirectoryError:
        raise error(f"{path}: is a folder, not {folder}") from None
    except OSError as exc:
        raise error(f"{path}: cannot read ({exc.strerror})") from None


def file_sha256(path: Path) -> str:
    """The SHA-256 of a file's bytes (read in chunks: a workbook can be large), hex."""
    digest = hashlib.sha256()
    with Path(path).open("rb") as handle:
        for chunk in iter(lambda: handle.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()
