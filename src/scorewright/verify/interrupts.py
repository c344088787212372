"""Ctrl-C stops `build` and `verify` even while a runtime is busy in its own code.

Python runs a signal handler only when the main thread returns to the interpreter. A
database engine running a query in C may never do so until the query ends (DuckDB checks
for signals only now and then, and sometimes not for the rest of a long query), or may
turn the KeyboardInterrupt into an error of its own ("Query interrupted"), which the
harness would record as a target that did not run, and go on. So:

- the SIGINT handler also remembers the interrupt, and the harness asks after any
  runtime error whether the user asked to stop (`stop_if_interrupted`);
- the C-level handler writes the signal to a wake-up pipe at once; a watcher thread reads
  it and calls the cancel function the running engine registered (`cancel_on_interrupt`), e.g.
  DuckDB's and SQLite's `Connection.interrupt()`, so the query returns and the main thread
  unwinds.
"""

from __future__ import annotations

import os
import signal
import threading

_interrupted = False
_cancels: list = []
_lock = threading.Lock()
_installed = False


def _on_sigint(signum, frame):
    global _interrupted
    _interrupted = True
    raise KeyboardInterrupt


def install() -> None:
    """Route SIGINT through the remembering handler and start the watcher (main thread)."""
    global _interrupted, _installed
    _interrupted = False
    signal.signal(signal.SIGINT, _on_sigint)
    if _installed:
        return
    read_end, write_end = os.pipe()
    os.set_blocking(write_end, False)
    signal.set_wakeup_fd(write_end, warn_on_full_buffer=False)
    threading.Thread(target=_watch, args=(read_end,), name="scorewright-interrupts",
                     daemon=True).start()
    _installed = True


def _watch(read_end: int) -> None:
    global _interrupted
    stops = {signal.SIGINT, signal.SIGTERM}
    while True:
        got = os.read(read_end, 64)
        if not got:
            return
        if any(b in stops for b in got):
            _interrupted = True
            with _lock:
                cancels = list(_cancels)
            for cancel in cancels:
                try:
                    cancel()
                except Exception:  # a runtime already closed: nothing left to stop
                    pass


def cancel_on_interrupt(cancel) -> None:
    """Until forget_cancel(cancel), an interrupt calls `cancel()` from the watcher thread
    (it must be safe to call from another thread, as the engines' interrupt() is)."""
    with _lock:
        _cancels.append(cancel)


def forget_cancel(cancel) -> None:
    with _lock:
        if cancel in _cancels:
            _cancels.remove(cancel)


def stop_if_interrupted() -> None:
    """Raise KeyboardInterrupt if SIGINT (or SIGTERM) arrived since install()."""
    if _interrupted:
        raise KeyboardInterrupt
