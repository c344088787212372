"""What `build` and `verify` say and how they exit: skipped targets, missing artifacts,
progress, the comparison rule, decision-only C, emit's folder layout, help and hints.

Every artifact here runs in its real runtime (the Python interpreter, SQLite, gcc, qemu);
nothing is mocked."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import pytest

import models
from scorewright.verify.compare import MAXIMA, RULE
from scorewright.verify.harness import UNVERIFIED, build_targets, summary_lines
from scorewright.verify.profiles import load_profile

ROOT = Path(__file__).resolve().parents[1]


def run(*args):
    return subprocess.run([sys.executable, "-m", "scorewright.cli", *map(str, args)],
                          capture_output=True, text=True)


@pytest.fixture()
def model_file(tmp_path):
    path = tmp_path / "fault.json"
    models.build("fault_binary").model.write(path)
    return path


def _profile(tmp_path, name: str, base: str, emit: str = "", requires: str = "") -> Path:
    """A user profile: a built-in one under another name, with extra [emit] and [requires]
    lines."""
    text = (ROOT / "targets" / f"{base}.toml").read_text()
    text = text.replace(f'name = "{base}"', f'name = "{name}"', 1)
    text = text.replace("[emit]\n", f"[emit]\n{emit}", 1)
    if requires:
        assert "[requires]" not in text
        text = text.replace("[tolerance]", f"[requires]\n{requires}\n[tolerance]", 1)
    path = tmp_path / f"{name}.toml"
    path.write_text(text)
    return path


def test_absent_runtime_is_skipped_with_its_install_command(tmp_path):
    """A target whose runtime is missing is listed as skipped with the command that
    installs it, is not written, and does not make the build fail."""
    model = models.build("fault_binary").model
    absent = _profile(tmp_path, "python-elsewhere", "python",
                      requires='modules = ["scorewright_absent_runtime"]\n'
                               'commands = ["scorewright-absent-command"]\n')
    out = tmp_path / "built"
    report = build_targets(model, out, targets=["python", str(absent)], n_random=20,
                           progress=None)
    by_name = {r.profile.name: r for r in report.results}
    skipped = by_name["python-elsewhere"]
    assert skipped.status == "skipped"
    assert skipped.install == ("python3 -m pip install scorewright_absent_runtime && "
                               "sudo apt-get install -y scorewright-absent-command")
    assert by_name["python"].status == "pass"
    assert report.ok and report.exit_status == 0
    assert not (out / "python-elsewhere").exists()
    assert not (out / UNVERIFIED).exists()
    headline = report.headline()
    assert "1 of 1 targets that ran agree" in headline and "1 skipped" in headline
    assert "DISAGREE" not in headline
    lines = summary_lines(report)
    assert any(line.startswith("SKIPPED") and "python3 -m pip install" in line
               for line in lines)
    doc = json.loads((out / "agreement.json").read_text())
    assert doc["all_agree"] is True
    entry = next(t for t in doc["targets"] if t["target"] == "python-elsewhere")
    assert entry["status"] == "skipped" and entry["install"] == skipped.install
    html = (out / "agreement.html").read_text()
    assert "DISAGREES" not in html and "skipped" in html


def test_spark_profiles_say_what_to_install():
    """The Spark profiles declare their runtime, so a machine without it skips them."""
    for name in ("sql-spark", "sql-spark-long"):
        profile = load_profile(name)
        assert set(profile.requires["modules"]) == {"pyspark", "py4j"}
        assert profile.requires["commands"] == ["java"]
        assert profile.install_command(["pyspark", "py4j", "java"]) == (
            "python3 -m pip install pyspark && "
            "sudo apt-get install -y openjdk-17-jre-headless")
        assert profile.install_command(["java"]) == \
            "sudo apt-get install -y openjdk-17-jre-headless"
    board = load_profile("c-cortex-m3")
    assert board.install_command(["arm-none-eabi-gcc", "qemu-system-arm"]) == (
        "sudo apt-get install -y gcc-arm-none-eabi libnewlib-arm-none-eabi qemu-system-arm")


def test_missing_artifact_is_an_error_not_a_disagreement(model_file, tmp_path):
    out = tmp_path / "built"
    assert run("build", model_file, "-o", out, "--target", "python", "--target", "sql-sqlite",
               "--random", "20").returncode == 0
    next((out / "sql-sqlite").glob("*.sql")).unlink()
    proc = run("verify", model_file, out, "--random", "20")
    assert proc.returncode == 2, (proc.stdout, proc.stderr)
    assert "ERROR" in proc.stdout and "is missing" in proc.stdout
    assert "DISAGREE" not in proc.stdout
    assert "1 could not be checked" in proc.stdout


def test_progress_is_a_line_per_target_on_stderr(model_file, tmp_path):
    proc = run("build", model_file, "-o", tmp_path / "built", "--target", "python",
               "--target", "sql-sqlite", "--random", "20")
    assert proc.returncode == 0, proc.stderr
    progress = [line.strip() for line in proc.stderr.splitlines()]
    assert progress[0].startswith("verifying 2 targets on ")
    assert progress[1].startswith("[1/2] python") and progress[1].endswith(" s")
    assert progress[2].startswith("[2/2] sql-sqlite") and "PASS" in progress[2]
    assert "verifying" not in proc.stdout and "[1/2]" not in proc.stdout


def test_report_states_the_comparison_rule(model_file, tmp_path):
    """A float target passes beside ULP figures in the millions; the report says why."""
    out = tmp_path / "built"
    proc = run("build", model_file, "-o", out, "--target", "c-float", "--random", "200")
    assert proc.returncode == 0, proc.stderr
    doc = json.loads((out / "agreement.json").read_text())
    (target,) = doc["targets"]
    assert target["status"] == "pass" and target["max_ulps"]["margin"] > 1e6
    html = (out / "agreement.html").read_text()
    for text in (RULE, MAXIMA):
        assert text.replace("'", "&#x27;") in html
        assert text in " ".join(proc.stdout.split())


def _flip_the_cut(c_file: Path) -> None:
    text = c_file.read_text()
    assert text.count("(m[0] > 0x0.0p+0)") == 1
    c_file.write_text(text.replace("(m[0] > 0x0.0p+0)", "(m[0] > 0x1p+0)"))


@pytest.mark.parametrize("base", ["c-double", "c-cortex-m3"])
def test_decision_only_c_verifies_on_its_decisions(base, model_file, tmp_path):
    """gcc on the host, and arm-none-eabi-gcc with qemu's Cortex-M3 board."""
    profile = load_profile(base)
    assert not profile.missing_requirements(), profile.missing_requirements()
    toml = _profile(tmp_path, f"{base}-decisions", base, emit="decision_only = true\n")
    out = tmp_path / "built"
    proc = run("build", model_file, "-o", out, "--target", toml, "--random", "300")
    assert proc.returncode == 0, (proc.stdout, proc.stderr)
    assert "decisions only: 0 differ" in proc.stdout
    c_file = next((out / f"{base}-decisions").glob("*.c"))
    assert "_margin(" not in c_file.read_text()
    _flip_the_cut(c_file)  # margins in (0, 1] now decide class 0
    proc = run("verify", model_file, out, "--target", toml, "--random", "300")
    assert proc.returncode == 1, (proc.stdout, proc.stderr)
    assert "predicted_class" in proc.stdout and "DISAGREE" in proc.stdout


def test_verify_reads_a_folder_written_by_emit(model_file, tmp_path):
    out = tmp_path / "emitted"
    for target in (["--target", "python"], ["--target", "sql", "--dialect", "sqlite"]):
        assert run("emit", model_file, *target, "-o", out).returncode == 0
    proc = run("verify", model_file, out, "--random", "20")
    assert proc.returncode == 0, (proc.stdout, proc.stderr)
    assert "PASS        python" in proc.stdout and "PASS        sql-sqlite" in proc.stdout
    assert (out / "agreement.json").is_file() and not (out / UNVERIFIED).exists()
    scorer = next(out.glob("*.py"))
    # Drop the overflow guard of the sigmoid: exp(-|m|) unclamped.
    text = scorer.read_text()
    guard = re.compile(r"\(708\.0 if 708\.0 < (\w+) else \1\)")
    assert len(guard.findall(text)) == 1
    scorer.write_text(guard.sub(r"\1", text))
    proc = run("verify", model_file, out, "--random", "20")
    assert proc.returncode == 1 and "FAIL        python" in proc.stdout, proc.stdout
    empty = tmp_path / "empty"
    empty.mkdir()
    proc = run("verify", model_file, empty)
    assert proc.returncode == 2 and "no artifacts of this model" in proc.stderr


def test_emit_help_names_the_option_it_has():
    proc = run("emit", "--help")
    assert proc.returncode == 0 and "OUTDIR" not in proc.stdout
    assert "-o, --output DIRECTORY" in proc.stdout


def test_suggested_options_are_quoted_for_a_shell(tmp_path):
    """A column name with spaces and parentheses comes back as one shell word."""
    import shlex

    rows = ["label,Annual income (EUR),Notes (free text),age"]
    rows += [f"{i % 2},{1000 + i},,{20 + i}" for i in range(39)] + ["1,about 5,,60"]
    data = tmp_path / "people.csv"
    data.write_text("\n".join(rows) + "\n")
    proc = run("fit", data, "-o", tmp_path / "m.json", "--label", "label",
               "--drop", "Notes (free text)")
    assert proc.returncode == 2
    assert "--categorical 'Annual income (EUR)'" in proc.stderr, proc.stderr
    assert shlex.split("--categorical 'Annual income (EUR)'")[1] == "Annual income (EUR)"
    proc = run("fit", data, "-o", tmp_path / "m.json", "--label", "label",
               "--drop", "Annual income (EUR)")
    assert proc.returncode == 2
    assert "--drop 'Notes (free text)'" in proc.stderr, proc.stderr



def test_bad_data_changes_nothing(model_file, tmp_path):
    """--data that cannot be read is refused before a file is written or removed."""
    bad = tmp_path / "bad.csv"
    bad.write_text("x,y\n1,2\n")
    fresh = tmp_path / "fresh"
    proc = run("build", model_file, "-o", fresh, "--target", "python", "--data", bad)
    assert proc.returncode == 2 and "none of the model's features" in proc.stderr
    assert not fresh.exists()
    built = tmp_path / "built"
    assert run("build", model_file, "-o", built, "--target", "python",
               "--random", "5").returncode == 0
    before = sorted(p.name for p in built.rglob("*"))
    proc = run("verify", model_file, built, "--data", bad)
    assert proc.returncode == 2
    assert sorted(p.name for p in built.rglob("*")) == before
    assert UNVERIFIED not in before and "agreement.json" in before
