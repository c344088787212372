"""The command line: help everywhere, one-line errors with exit 2, no partial files."""

from __future__ import annotations

import pickle
import re
import subprocess
import sys

import pytest

import models

COMMANDS = ["freeze", "show", "emit", "verify", "build", "demo"]


def run(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "scorewright.cli", *args], capture_output=True,
                          text=True, cwd=cwd)


def one_line_error(proc):
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    # A freeze from a pickle first warns that unpickling runs code; the error is one line.
    lines = [x for x in proc.stderr.strip().splitlines() if not x.startswith("warning: ")]
    assert len(lines) == 1 and lines[0].startswith("error"), proc.stderr
    assert "Traceback" not in proc.stderr
    return lines[0]


@pytest.mark.parametrize("command", [None] + COMMANDS)
def test_help(command):
    proc = run(*([command] if command else []), "--help")
    assert proc.returncode == 0 and "Usage:" in proc.stdout


@pytest.fixture()
def model_file(tmp_path):
    path = tmp_path / "fault.json"
    models.build("fault_binary").model.write(path)
    return path


def test_freeze_from_pickle_warns_and_writes(tmp_path):
    tm = models.build("spector")
    pkl = tmp_path / "spector.pkl"
    pkl.write_bytes(pickle.dumps(tm.estimator))
    out = tmp_path / "spector.json"
    proc = run("freeze", str(pkl), "-o", str(out), "--name", "spector")
    assert proc.returncode == 0, proc.stderr
    assert "runs code" in proc.stderr and "trust" in proc.stderr
    assert out.read_text() == tm.model.to_json().replace(
        tm.model.sha256, out.read_text().split('"sha256": "')[1][:64])
    again = run("freeze", str(pkl), "-o", str(out))
    assert "exists" in one_line_error(again) and "--force" in again.stderr


def test_freeze_refuses_unsupported_and_garbage(tmp_path):
    from sklearn.decomposition import PCA
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.tree import DecisionTreeClassifier

    tm = models.build("spector")
    for est, words in [(make_pipeline(PCA(), LogisticRegression()), "PCA"),
                       (DecisionTreeClassifier(), "unsupported estimator DecisionTreeClassifier")]:
        est.fit(tm.frame, tm.target)
        pkl = tmp_path / "refused.pkl"
        pkl.write_bytes(pickle.dumps(est))
        out = tmp_path / "refused.json"
        assert words in one_line_error(run("freeze", str(pkl), "-o", str(out)))
        assert not out.exists()
    junk = tmp_path / "junk.pkl"
    junk.write_bytes(b"not a pickle at all")
    assert "pickle" in one_line_error(run("freeze", str(junk), "-o", str(out)))
    assert not out.exists() and not list(tmp_path.glob(".*tmp"))


def test_show_prints_units_and_odds_ratios(model_file):
    proc = run("show", str(model_file))
    assert proc.returncode == 0, proc.stderr
    for needle in ("sha256", "per original unit", "odds ratio", "'refrigerant'", "provenance",
                   "margin > 0.0"):
        assert needle in proc.stdout


def test_emit_refuses_overwrite_and_unknown_things(model_file, tmp_path):
    out = tmp_path / "out"
    assert run("emit", str(model_file), "--target", "python", "-o", str(out)).returncode == 0
    again = run("emit", str(model_file), "--target", "python", "-o", str(out))
    assert "--force" in one_line_error(again)
    assert run("emit", str(model_file), "--target", "python", "-o", str(out),
               "--force").returncode == 0
    assert "unknown target" in one_line_error(run("emit", str(model_file), "--target", "cobol",
                                                  "-o", str(out)))
    assert "no such file" in one_line_error(run("emit", str(tmp_path / "nope.json"), "--target",
                                                "python", "-o", str(out)))
    one_line_error(run("emit", str(model_file), "--bogus"))
    one_line_error(run("emit", str(model_file)))


def test_verify_exit_codes(model_file, tmp_path):
    out = tmp_path / "built"
    proc = run("build", str(model_file), "-o", str(out), "--target", "python", "--random", "50")
    assert proc.returncode == 0, proc.stderr
    assert (out / "agreement.json").is_file() and (out / "agreement.html").is_file()
    assert run("verify", str(model_file), str(out), "--random", "20").returncode == 0
    scorer = next((out / "python").glob("*.py"))
    text = scorer.read_text()
    # Drop the overflow guard of the sigmoid: exp(-|m|) unclamped.
    guard = re.compile(r"\(708\.0 if 708\.0 < (\w+) else \1\)")
    assert len(guard.findall(text)) == 1
    scorer.write_text(guard.sub(r"\1", text))
    proc = run("verify", str(model_file), str(out), "--random", "20")
    assert proc.returncode == 1
    assert "FAIL" in proc.stdout and "python" in proc.stdout and "rows disagree" in proc.stdout
    assert "--random" in one_line_error(run("verify", str(model_file), str(out), "--random",
                                            "-3"))
    assert "no such directory" in one_line_error(run("verify", str(model_file),
                                                     str(tmp_path / "none")))
