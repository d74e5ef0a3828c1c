"""Pausing Python's cyclic garbage collector around the large, allocation-heavy stages.

Building or verifying a large workbook allocates millions of small objects with no reference cycles;
the collector's repeated passes over them cost about a third of the time and free nothing (reference
counting frees them). It is switched back on afterwards.
"""

from __future__ import annotations

import gc
from collections.abc import Iterator
from contextlib import contextmanager


@contextmanager
def paused_gc() -> Iterator[None]:
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()
