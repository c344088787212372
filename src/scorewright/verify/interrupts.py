"""Ctrl-C stops `build` and `verify` even when a runtime swallows it.

Python's SIGINT handler raises KeyboardInterrupt; a runtime that checks for signals
while it works may turn that into an error of its own (DuckDB raises "Query
interrupted"), which the harness would otherwise record as a target that did not run
and go on. The handler installed here also remembers the interrupt, so the harness can
ask after any runtime error whether the user asked to stop.
"""

from __future__ import annotations

import signal

_interrupted = False


def _on_sigint(signum, frame):
    global _interrupted
    _interrupted = True
    raise KeyboardInterrupt


def install() -> None:
    """Route SIGINT through the remembering handler (from the main thread)."""
    global _interrupted
    _interrupted = False
    signal.signal(signal.SIGINT, _on_sigint)


def stop_if_interrupted() -> None:
    """Raise KeyboardInterrupt if SIGINT arrived since install()."""
    if _interrupted:
        raise KeyboardInterrupt
