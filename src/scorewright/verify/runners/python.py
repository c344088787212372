"""Python artifacts run in a separate `python -I -S` process (no site-packages), fed a CSV."""

from __future__ import annotations

import csv
import io
import math
import platform
import subprocess
import sys
from pathlib import Path


from ...errors import ScorewrightError
from ...model import FrozenModel
from ...plan import build_plan, output_columns
from ...values import is_bool
from . import RunOutput, emitted, outputs_from_table


def csv_cell(value, inp=None) -> str:
    """A raw value as CSV text that the scorer reads the same way. NaN becomes the empty
    field: the text "nan" would be an unseen level in a categorical column. A bool
    becomes 1/0 where it reads as a number (a numeric input, or integer levels), as
    `values.py` reads it; the text "True" would be missing there."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    if is_bool(value) and inp is not None and (
            inp.kind == "numeric" or inp.integer_levels):
        return "1" if value else "0"
    if isinstance(value, float):
        return repr(value)
    return str(value)


def rows_csv(plan, rows: list[dict]) -> bytes:
    """The rows as the CSV a scorer reads on stdin: a header of feature names, one
    record a row (UTF-8, RFC 4180 quoting)."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\r\n")  # quotes a lone "\r" too
    writer.writerow(list(plan.feature_names))
    for row in rows:
        writer.writerow([csv_cell(row.get(inp.name), inp) for inp in plan.inputs])
    return buf.getvalue().encode("utf-8")


def scored_table(plan, stdout: bytes) -> list[list[str]]:
    """The output columns of a scorer's CSV on stdout (the input's columns, then
    `output_columns`), one list of cells a row."""
    reader = csv.reader(io.StringIO(stdout.decode("utf-8"), newline=""))
    header = next(reader)
    index = [header.index(c) for c in output_columns(plan)]
    return [[r[i] for i in index] for r in reader]


def run(artifact_dir: Path, model: FrozenModel, rows: list[dict], options: dict) -> RunOutput:
    plan = build_plan(model)
    script = emitted(artifact_dir, model, options, "python", ".py")
    interpreter = options.get("interpreter") or sys.executable
    proc = subprocess.run([interpreter, "-I", "-S", str(script)],
                          input=rows_csv(plan, rows), capture_output=True)
    if proc.returncode != 0:
        err = proc.stderr.decode("utf-8", "replace").strip()
        raise ScorewrightError(f"python: the artifact failed: {err[-300:]}")
    return outputs_from_table(plan, scored_table(plan, proc.stdout),
                              runtime=f"CPython {platform.python_version()} -I -S")
