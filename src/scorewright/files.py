"""Atomic file writes: a reader never sees a half-written artifact or report."""

from __future__ import annotations

import os
import tempfile
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
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask
