"""Java artifacts: compiled by javac and run by the JVM as the tool (`java CLASS`), fed
the same CSV as the Python scorer."""

from __future__ import annotations

import subprocess
import tempfile
from functools import lru_cache
from pathlib import Path

from ...errors import ScorewrightError
from ...model import FrozenModel
from ...plan import build_plan
from . import RunOutput, emitted, outputs_from_table
from .python import rows_csv, scored_table


@lru_cache(maxsize=None)  # asked once per process
def jvm_version(java: str) -> str:
    proc = _run([java, "-version"], "java -version", 60, text=True)
    return (proc.stderr or proc.stdout).splitlines()[0].strip()


def _run(cmd: list[str], what: str, timeout: float, **kwargs):
    try:
        proc = subprocess.run(cmd, capture_output=True, timeout=timeout, **kwargs)
    except FileNotFoundError:
        raise ScorewrightError(f"java: {cmd[0]} is not installed") from None
    except subprocess.TimeoutExpired:
        raise ScorewrightError(f"java: {what} took longer than {timeout:g} s") from None
    if proc.returncode != 0:
        err = proc.stderr if isinstance(proc.stderr, str) else proc.stderr.decode("utf-8",
                                                                                  "replace")
        raise ScorewrightError(f"java: {what} failed (status {proc.returncode}): "
                               f"{' '.join(err.split())[-400:]}")
    return proc


def run(artifact_dir: Path, model: FrozenModel, rows: list[dict], options: dict) -> RunOutput:
    plan = build_plan(model, exp="portable" if options.get("portable_exp") else "libm")
    source = emitted(artifact_dir, model, options, "java", ".java")
    name = source.stem  # the public class
    javac, java = options.get("javac", "javac"), options.get("java", "java")
    with tempfile.TemporaryDirectory(prefix="scorewright-java-") as tmp:
        # -Xlint:all -Werror: a warning in the artifact is a finding; javac itself runs
        # on the JVM's quick compiler (it starts in 0.5 s instead of 0.75 s)
        _run([javac, "-J-XX:TieredStopAtLevel=1", "-J-XX:+UseSerialGC", "-encoding",
              "US-ASCII", "-Xlint:all", "-Werror", "-d", tmp, str(source)],
             f"compiling {source.name}", 300, text=True)
        proc = _run([java, "-Xshare:auto", "-cp", tmp, name], "the scorer", 600,
                    input=rows_csv(plan, rows))
    return outputs_from_table(plan, scored_table(plan, proc.stdout),
                              runtime=f"{jvm_version(java)}, {plan.exp_kind} exp")
