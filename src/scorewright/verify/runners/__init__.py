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

import numpy as np


@dataclass
class RunOutput:
    runtime: str                           # e.g. "SQLite 3.40.1", "gcc 12.2.0 -O2"
    margins: np.ndarray | None             # (n, K); None: a decision-only artifact
    probabilities: np.ndarray | None = None  # (n, C), classification
    class_index: np.ndarray | None = None    # (n,), classification
    value: np.ndarray | None = None          # (n,), regression


# runner name (a profile's verify.runner) -> module
RUNNERS = {
    "python": "scorewright.verify.runners.python",
    "sql": "scorewright.verify.runners.sql",
    "c": "scorewright.verify.runners.c",
    "onnx": "scorewright.verify.runners.onnx",
    "cortex-m": "scorewright.verify.runners.cortex_m",
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
