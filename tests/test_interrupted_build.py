"""An interrupted `build` leaves no partial artifact: every file it left is complete."""

from __future__ import annotations

import signal
import subprocess
import sys
import time

import pytest

import models
import tally
from scorewright.emit import emitter
from scorewright.verify.profiles import builtin_names, load_profile


def _expected(model):
    out = {}
    for name in builtin_names():
        profile = load_profile(name)
        if profile.missing_requirements():
            continue
        for art in emitter(profile.emitter)(model, dict(profile.emit)):
            out[f"{name}/{art.name}"] = art.content
    return out


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL])
def test_killed_build_leaves_only_complete_files(sig, tmp_path):
    model = models.build("wine").model
    path = tmp_path / "wine.json"
    model.write(path)
    expected = _expected(model)
    checked = 0
    for delay in (0.0, 0.05, 0.3, 1.5):
        out = tmp_path / f"out-{sig.name}-{delay}"
        proc = subprocess.Popen([sys.executable, "-m", "scorewright.cli", "build", str(path),
                                 "-o", str(out), "--random", "2000"],
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        # Kill at several moments after the build starts writing.
        deadline = time.monotonic() + 60
        while not out.exists() and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.01)
        time.sleep(delay)
        proc.send_signal(sig)
        proc.wait(timeout=60)
        if not out.exists():
            continue
        for f in out.rglob("*"):
            if f.is_dir():
                continue
            rel = f.relative_to(out).as_posix()
            if sig == signal.SIGTERM:
                assert not f.name.startswith("."), f"temporary file left behind: {rel}"
            elif f.name.startswith("."):
                continue  # SIGKILL cannot be caught; a hidden temporary may stay, never a name
            if rel in expected:
                assert f.read_bytes() == expected[rel], f"partial artifact {rel}"
            else:
                assert rel in ("agreement.json", "agreement.html"), rel
            checked += 1
    tally.add(f"interrupted builds ({sig.name})", 4)
    assert checked > 0, "the build never got far enough to write anything"


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGINT])
@pytest.mark.parametrize("moment", ["mkstemp", "fsync", "replace"])
def test_signal_inside_an_atomic_write_waits_for_it(sig, moment, tmp_path, monkeypatch):
    """A signal landing at any step of a write is held until the file is whole or gone."""
    import os
    import tempfile

    from scorewright import cli, files

    old = signal.signal(signal.SIGTERM, cli._terminate)
    try:
        where = {"mkstemp": tempfile, "fsync": os, "replace": os}[moment]
        real = getattr(where, moment)

        def interrupted(*args, **kwargs):
            result = real(*args, **kwargs)
            os.kill(os.getpid(), sig)  # arrives while the temporary exists
            return result

        monkeypatch.setattr(where, moment, interrupted)
        target = tmp_path / "artifact.txt"
        with pytest.raises(KeyboardInterrupt):
            files.write_atomic(target, b"complete contents\n")
        monkeypatch.undo()
        assert [p.name for p in tmp_path.iterdir()] == ["artifact.txt"]
        assert target.read_bytes() == b"complete contents\n"
    finally:
        signal.signal(signal.SIGTERM, old)
