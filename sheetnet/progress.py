"""A progress bar on stderr, shown only when stderr is a terminal and not silenced."""

from __future__ import annotations

import sys
import time
from typing import TextIO


class Progress:
    """Call with the number of finished units; redraws at most ten times a second."""

    def __init__(self, total: int, label: str, quiet: bool = False, stream: TextIO | None = None) -> None:
        self.stream = stream or sys.stderr
        self.total = max(total, 1)
        self.label = label
        self.enabled = not quiet and self.stream.isatty()
        self._last = 0.0

    def __call__(self, done: int) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if 0 < done < self.total and now - self._last < 0.1:
            return
        self._last = now
        width = 30
        filled = int(width * done / self.total)
        self.stream.write(f"\r{self.label} [{'#' * filled}{'.' * (width - filled)}] {done}/{self.total}")
        if done >= self.total:
            self.stream.write("\n")
        self.stream.flush()
