"""Ctrl-C that a library swallowed, given back at the next safe point.

lmfit evaluates parameter expressions with asteval, which turns a KeyboardInterrupt raised
inside it into an ordinary error (it keeps its sandbox closed). An interrupt that lands in
an lmfit fit would then fail one compound, and the campaign would go on and write its
outputs. The command line records every SIGINT (:func:`interrupts_recorded`); long loops
call :func:`check` between chunks, which raises KeyboardInterrupt if one was recorded.
"""

from __future__ import annotations

import signal
import threading
from contextlib import contextmanager

__all__ = ["interrupts_recorded", "check"]

_STATE = {"interrupted": False}


def _on_sigint(_signum, _frame):
    _STATE["interrupted"] = True
    raise KeyboardInterrupt


@contextmanager
def interrupts_recorded():
    """Within the block, SIGINT is recorded as well as raising KeyboardInterrupt; the
    previous handler comes back after it (main thread only; elsewhere a no-op)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    previous = signal.signal(signal.SIGINT, _on_sigint)
    _STATE["interrupted"] = False
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
        _STATE["interrupted"] = False


def check() -> None:
    """Raise KeyboardInterrupt if a SIGINT was recorded in :func:`interrupts_recorded`."""
    if _STATE["interrupted"]:
        raise KeyboardInterrupt("interrupted (the interrupt reached a library that hid it)")
