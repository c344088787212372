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
from scorewright.verify.harness import UNVERIFIED
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
                assert rel in ("agreement.json", "agreement.html", UNVERIFIED), rel
            checked += 1
        if not (out / "agreement.json").exists() and any(out.rglob("*")):
            # a folder without its agreement report says it is unverified
            assert (out / UNVERIFIED).is_file() or sig == signal.SIGKILL
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


def _interrupt(proc, after: str, delay: float) -> tuple[float, str]:
    """SIGINT `delay` seconds after a stderr line starting with `after`; (seconds from
    the signal to the exit, all stderr). Fails if the line does not come within 60 s."""
    import queue
    import threading

    lines: queue.Queue = queue.Queue()
    reader = threading.Thread(target=lambda: [lines.put(x) for x in proc.stderr] + [
        lines.put(None)], daemon=True)
    reader.start()
    seen = []
    try:
        deadline = time.monotonic() + 60
        while not (seen and seen[-1].strip().startswith(after)):
            try:
                line = lines.get(timeout=max(deadline - time.monotonic(), 0.01))
            except queue.Empty:
                line = None
            assert line is not None, f"never saw {after!r}: {''.join(seen)}"
            seen.append(line)
        time.sleep(delay)
        proc.send_signal(signal.SIGINT)
        sent = time.monotonic()
        proc.wait(timeout=30)
        took = time.monotonic() - sent
        reader.join(timeout=10)
        while (line := lines.get_nowait() if not lines.empty() else None) is not None:
            seen.append(line)
        return took, "".join(seen)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


def test_ctrl_c_during_a_duckdb_query_stops_verify(tmp_path):
    """DuckDB turns Ctrl-C into "Query interrupted" (or, deep in a long query, does not
    look at it at all); verify stops at once with exit 130 all the same."""
    model = models.build("wine").model
    path = tmp_path / "wine.json"
    model.write(path)
    out = tmp_path / "built"
    proc = subprocess.run([sys.executable, "-m", "scorewright.cli", "build", str(path), "-o",
                           str(out), "--target", "sql-duckdb", "--random", "10"],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    query = next((out / "sql-duckdb").glob("*.sql"))
    text = query.read_text()
    source = 'FROM "input" AS t\n'
    assert text.count(source) == 1
    # The same query over the input joined with 2e11 rows that the filter drops: it runs
    # until stopped (the model's SHA-256 stays in the file, so verify runs it).
    endless = ('FROM (SELECT i.* FROM "input" AS i CROSS JOIN range(200000000000) AS r '
               'WHERE (r.range * 7) % 1000000007 = -1 UNION ALL SELECT * FROM "input") '
               'AS t\n')
    query.write_text(text.replace(source, endless))
    for delay in (0.5, 2.0):
        proc = subprocess.Popen([sys.executable, "-m", "scorewright.cli", "verify", str(path),
                                 str(out), "--random", "10"], stdout=subprocess.PIPE,
                                stderr=subprocess.PIPE, text=True)
        took, stderr = _interrupt(proc, "verifying 1 target", delay)
        assert proc.returncode == 130, stderr
        assert took < 5, f"{took:.1f} s from Ctrl-C to exit"
        assert "Query interrupted" not in stderr + proc.stdout.read()
        assert "Traceback" not in stderr and "interrupted" in stderr
        # the old report is gone; the folder says it is unverified
        assert (out / UNVERIFIED).is_file() and not (out / "agreement.json").exists()


def test_ctrl_c_during_a_build_leaves_it_marked_unverified(tmp_path):
    """Interrupted while the Cortex-M3 image is cross-built and run on qemu."""
    model = models.build("fault_binary").model
    path = tmp_path / "fault.json"
    model.write(path)
    out = tmp_path / "built"
    proc = subprocess.Popen([sys.executable, "-m", "scorewright.cli", "build", str(path), "-o",
                             str(out), "--target", "python", "--target", "c-cortex-m3",
                             "--random", "200"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    took, stderr = _interrupt(proc, "[1/2] python", 0.3)
    assert proc.returncode == 130, stderr
    assert took < 5, f"{took:.1f} s from Ctrl-C to exit"
    assert "Traceback" not in stderr and "[2/2]" not in stderr
    assert (out / UNVERIFIED).is_file()
    assert "NOT been verified" in (out / UNVERIFIED).read_text()
    assert not (out / "agreement.json").exists() and not (out / "agreement.html").exists()
