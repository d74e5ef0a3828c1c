"""Running one piece of work in a forked child process while this one does another.

Used where a 2-core machine can do two independent halves of a large job at once (reading a big
sheet, recalculating while the reference runs). Falls back to running in this process where fork
is not available or there is a single core.
"""

from __future__ import annotations

import multiprocessing
import os

from sheetnet.errors import EvaluationError


def can_fork() -> bool:
    """A child can be forked here: the platform forks, there are two cores, and this process is not
    itself a (daemonic) worker, which may not have children."""
    return "fork" in multiprocessing.get_all_start_methods() and (os.cpu_count() or 1) >= 2 and \
        not multiprocessing.current_process().daemon


class Background:
    """``function(*args)`` in a forked child; :meth:`result` returns its value or raises its exception."""

    def __init__(self, function, *args) -> None:
        self._process = None
        if not can_fork():
            self._outcome = _outcome(function, args)
            return
        context = multiprocessing.get_context("fork")
        self._receive, send = context.Pipe(duplex=False)
        self._process = context.Process(target=_send_outcome, args=(send, function, args), daemon=True)
        self._process.start()
        send.close()

    def result(self):
        if self._process is not None:
            try:
                self._outcome = self._receive.recv()
            except EOFError:
                raise EvaluationError("a worker process ended unexpectedly") from None
            self._process.join()
            self._process = None
        ok, payload = self._outcome
        if not ok:
            raise payload
        return payload

    def stop(self) -> None:
        if self._process is not None and self._process.is_alive():
            self._process.kill()
            self._process.join()


def _outcome(function, args) -> tuple[bool, object]:
    try:
        return True, function(*args)
    except Exception as exc:
        return False, exc


def _send_outcome(send, function, args) -> None:
    send.send(_outcome(function, args))
    send.close()
