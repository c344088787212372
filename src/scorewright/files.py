"""Atomic file writes: a reader never sees a half-written artifact or report."""

from __future__ import annotations

import contextlib
import os
import signal
import tempfile
import threading
from pathlib import Path

from .errors import ScorewrightError


def check_writable(path: Path, force: bool) -> None:
    if path.exists() and not force:
        raise ScorewrightError(f"{path} exists; use --force to overwrite it")
    if path.exists() and path.is_dir():
        raise ScorewrightError(f"{path} is a directory")


def write_atomic(path: Path, data: bytes, force: bool = False) -> None:
    """Write to a temporary file in the same directory, then rename over `path`."""
    path = Path(path)
    check_writable(path, force)
    parent = path.parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ScorewrightError(f"cannot create directory {parent}: {exc.strerror}") from None
    with _signals_held():
        try:
            fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=parent)
        except OSError as exc:
            raise ScorewrightError(f"cannot write in {parent}: {exc.strerror}") from None
        try:
            os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; files should be as open() makes
            with os.fdopen(fd, "wb") as handle:
                handle.write(data)
                handle.flush()
                os.fsync(handle.fileno())
            os.replace(tmp, path)
        except BaseException:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(tmp)
            raise


_HELD = {signal.SIGINT, signal.SIGTERM}


@contextlib.contextmanager
def _signals_held():
    """Hold Ctrl-C and SIGTERM while a temporary exists, so none can land between
    creating it and renaming or removing it; a held signal is raised right after.
    Python handlers run in the main thread whichever thread the kernel picked, so
    swapping the handlers (not the thread's signal mask) covers every thread."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught: list[int] = []
    previous = {}
    for signum in _HELD:
        previous[signum] = signal.signal(signum, lambda got, frame: caught.append(got))
    try:
        yield
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, signal.SIG_DFL if handler is None else handler)
        if caught:
            signal.raise_signal(caught[0])


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask
