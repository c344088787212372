"""C artifacts: compiled with the artifact's host driver by a real compiler, fed binary rows.

Rows reach the scorer as its callers give them: numeric values as doubles
(NaN and +-inf pass through as they are, every other missing value is NaN),
categorical values as level codes from `values.category_code` (-1 missing,
-2 unseen). The driver prints every output as a hex float, so the comparison
is exact.
"""

from __future__ import annotations

import math
import shlex
import subprocess
import tempfile
from functools import lru_cache
from pathlib import Path

import numpy as np

from ...emit.c import driver_source
from ...errors import ScorewrightError
from ...model import FrozenModel
from ...plan import build_plan
from ...values import category_code, numeric_value
from . import RunOutput, emitted, outputs_from_table

DEFAULT_CFLAGS = "-std=c99 -O2 -ffp-contract=off"


def encode_rows(plan, rows) -> np.ndarray:
    """The driver's binary input: one double per feature per row."""
    out = np.empty((len(rows), len(plan.inputs)), dtype="<f8")
    for r, row in enumerate(rows):
        for inp in plan.inputs:
            raw = row.get(inp.name)
            if inp.kind == "numeric":
                if isinstance(raw, float) and not math.isfinite(raw):
                    out[r, inp.index] = raw  # NaN and +-inf reach the scorer as they are
                else:
                    value = numeric_value(raw, inp.boolean)
                    out[r, inp.index] = math.nan if value is None else value
            else:
                out[r, inp.index] = category_code(inp.levels, raw)
    return out


def flags_of(options: dict) -> list[str]:
    flags = options.get("cflags", DEFAULT_CFLAGS)
    return shlex.split(flags) if isinstance(flags, str) else [str(f) for f in flags]


@lru_cache(maxsize=None)  # asked once per process and compiler (a failure is not kept)
def compiler_version(compiler: str) -> str:
    try:
        proc = subprocess.run([compiler, "--version"], capture_output=True, text=True,
                              timeout=60)
    except (OSError, subprocess.TimeoutExpired) as exc:
        raise ScorewrightError(f"c: cannot run the compiler {compiler!r}: {exc}") from None
    if proc.returncode != 0 or not proc.stdout:
        raise ScorewrightError(f"c: {compiler} --version failed: {proc.stderr.strip()[-200:]}")
    return proc.stdout.splitlines()[0].strip()


def build_driver(artifact_dir: Path, model: FrozenModel, options: dict, workdir: Path) -> Path:
    """Compile the artifact and its host driver into `workdir`; the executable's path."""
    precision = options.get("precision", "double")
    source = emitted(artifact_dir, model, options, "c", ".c")
    emitted(artifact_dir, model, options, "c", ".h")
    prefix = source.stem
    driver = workdir / f"{prefix}_driver.c"
    driver.write_text(driver_source(model, prefix, precision,
                                    bool(options.get("decision_only"))), encoding="ascii")
    exe = workdir / f"{prefix}_driver"
    compiler = options.get("compiler", "gcc")
    cmd = [compiler, *flags_of(options), "-I", str(artifact_dir), "-o", str(exe),
           str(driver), str(source), "-lm"]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=300)
    if proc.returncode != 0:
        raise ScorewrightError(f"c: compiling {source.name} failed: "
                               f"{' '.join(proc.stderr.split())[-400:]}")
    return exe


def run(artifact_dir: Path, model: FrozenModel, rows: list[dict], options: dict) -> RunOutput:
    precision = options.get("precision", "double")
    plan = build_plan(model, precision)
    compiler = options.get("compiler", "gcc")
    runtime = f"{compiler_version(compiler)} {' '.join(flags_of(options))}"
    with tempfile.TemporaryDirectory(prefix="scorewright-c-") as tmp:
        work = Path(tmp)
        exe = build_driver(Path(artifact_dir), model, options, work)
        data = work / "rows.bin"
        data.write_bytes(encode_rows(plan, rows).tobytes())
        proc = subprocess.run([str(exe), str(data)], capture_output=True, text=True,
                              timeout=600)
    if proc.returncode != 0:
        raise ScorewrightError(f"c: the scorer exited with status {proc.returncode}: "
                               f"{proc.stderr.strip()[-300:]}")
    return parse_output(plan, proc.stdout, runtime, bool(options.get("decision_only")))


def parse_output(plan, text: str, runtime: str, decision_only: bool = False) -> RunOutput:
    """RunOutput from the driver's per-row lines (hex floats and a class index; only the
    class index from a decision-only scorer)."""
    table = [line.split() for line in text.splitlines()]
    try:
        if decision_only:
            return decisions(runtime, table)
        return outputs_from_table(plan, table, runtime, number=float.fromhex, class_of=int)
    except (IndexError, ValueError) as exc:
        raise ScorewrightError(f"c: unreadable scorer output ({exc})") from None


def decisions(runtime: str, table: list[list[str]]) -> RunOutput:
    """A decision-only scorer's output: one class index per row, nothing else."""
    if any(len(r) != 1 for r in table):
        raise ValueError("expected one class index per row")
    return RunOutput(runtime, None, class_index=np.array([int(r[0]) for r in table],
                                                         dtype=np.int64))
