"""Runners: each executes one family of artifacts in its real runtime.

A runner is a module with

    def run(artifact_dir: Path, model: FrozenModel, rows: list[dict], options: dict) -> RunOutput

`rows` are mappings from feature name to raw value (float, incl. NaN and +-inf;
int; str; None or absent for missing). `options` are the target profile's
[verify] table merged over its [emit] table. The runner loads the rows into the
runtime as that runtime would receive them, runs the artifact, and returns its
outputs in the shapes of `reference.score_matrix`.
"""

from __future__ import annotations

from dataclasses import dataclass
from importlib import import_module
from pathlib import Path

import numpy as np


@dataclass
class RunOutput:
    runtime: str                           # e.g. "SQLite 3.40.1", "gcc 12.2.0 -O2"
    margins: np.ndarray | None             # (n, K); None: a decision-only artifact
    probabilities: np.ndarray | None = None  # (n, C), classification with probabilities
    class_index: np.ndarray | None = None    # (n,), classification
    value: np.ndarray | None = None          # (n,), regression
    rate: np.ndarray | None = None           # (n,), regression with an offset or exposure


def emitted(artifact_dir, model, options: dict, family: str, suffix: str) -> Path:
    """The path of the artifact ending in `suffix` that the family's emitter writes for
    this model with the emit options among `options` (a runner never recomputes a file
    name, prefix or class name); an error naming it when the file is not there."""
    from ...emit import EMITTERS
    from ...errors import ScorewrightError

    module = import_module(EMITTERS[family])
    emit_options = {k: v for k, v in options.items() if k in module.OPTIONS}
    (name,) = [a.name for a in module.emit(model, emit_options) if a.name.endswith(suffix)]
    path = Path(artifact_dir) / name
    if not path.is_file():
        raise ScorewrightError(f"{family}: artifact {path} is missing")
    return path


def class_by_label(plan):
    """A class cell holding the class label (as text or a number): its index, -1 when it
    names no class."""
    labels = [str(c) for c in plan.classes]
    return lambda cell: labels.index(str(cell)) if str(cell) in labels else -1


def outputs_from_table(plan, table, runtime: str, number=float, class_of=None) -> RunOutput:
    """The one reader of a runtime's output table: rows of cells in the order of
    `plan.output_columns` (binary: margin, positive-class probability, class;
    multiclass: K margins, K probabilities, class; a "decision" head: the margins and
    the class; regression: margin, value, and the rate with an offset or exposure).
    `number` reads a real cell (text, a hex float, a hex word...), `class_of` a class
    cell (default: the class label, `class_by_label`). A short or unreadable row
    raises IndexError or ValueError, which each runner words for its runtime."""
    n, k = len(table), plan.n_outputs
    if plan.task == "regression":
        m = np.array([number(r[0]) for r in table]).reshape(n, 1)
        rate = None if plan.offset is None else np.array([number(r[2]) for r in table])
        return RunOutput(runtime, m, value=np.array([number(r[1]) for r in table]), rate=rate)
    class_of = class_of or class_by_label(plan)
    m = np.array([[number(x) for x in r[:k]] for r in table]).reshape(n, k)
    if not plan.has_probabilities:  # a decision head: the margins, then the class
        return RunOutput(runtime, m, None, np.array([class_of(r[k]) for r in table],
                                                    dtype=np.int64))
    width = 1 if plan.task == "binary" else plan.n_probabilities
    p = np.array([[number(x) for x in r[k:k + width]] for r in table]).reshape(n, width)
    if plan.task == "binary":
        p = np.concatenate([1.0 - p, p], axis=1)
    cls = np.array([class_of(r[k + width]) for r in table], dtype=np.int64)
    return RunOutput(runtime, m, p, cls)


# runner name (a profile's verify.runner) -> module
RUNNERS = {
    "python": "scorewright.verify.runners.python",
    "sql": "scorewright.verify.runners.sql",
    "c": "scorewright.verify.runners.c",
    "onnx": "scorewright.verify.runners.onnx",
    "cortex-m": "scorewright.verify.runners.cortex_m",
    "java": "scorewright.verify.runners.java",
}


def runner_module(name: str):
    from ...errors import ScorewrightError

    if name not in RUNNERS:
        raise ScorewrightError(f"unknown runner {name!r}; known: {', '.join(sorted(RUNNERS))}")
    return import_module(RUNNERS[name])


def artifact_size(name: str):
    """The runner's optional `size(artifact_dir, model, options) -> dict` (flash, RAM,
    stack...), or None when the runner has none."""
    return getattr(runner_module(name), "size", None)


def runner(name: str):
    """The runner's `run` function."""
    return runner_module(name).run
