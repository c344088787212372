"""The reference evaluator: the scoring program interpreted in IEEE double, the oracle.

Every artifact is compared with this. `score_row` runs the program's scalar op table
(the truth); `score_matrix` runs its numpy op table over many rows, the same
operations in the same order (element-wise, no reductions, libm's exp for every
exp), so its bits are identical, which the tests check. Neither holds semantics of
its own: those are the program's lowering (`program.py`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from .plan import NumericInput, Plan
from .program import Program, lower, run_matrix, run_numeric, run_row, sum_magnitudes
from .values import category_code, numeric_value


@dataclass(frozen=True)
class Score:
    margins: tuple[float, ...]
    probabilities: tuple[float, ...] | None  # classification with probabilities, in class
    #                                          order (None: a "decision" head has none)
    class_index: int | None                  # classification
    value: float | None                      # regression
    rate: float | None = None                # regression with an offset or exposure

    @property
    def label(self):
        return None if self.class_index is None else self.class_index


_PROGRAMS: dict[int, tuple[Plan, Program]] = {}


def program_of(plan: Plan) -> Program:
    """The plan's program, lowered once per plan object."""
    hit = _PROGRAMS.get(id(plan))
    if hit is not None and hit[0] is plan:
        return hit[1]
    if len(_PROGRAMS) >= 64:
        _PROGRAMS.clear()
    program = lower(plan)
    _PROGRAMS[id(plan)] = (plan, program)  # holding the plan keeps its id unique
    return program


def score_row(plan: Plan, row: Mapping) -> Score:
    """Score one row: a mapping from feature name to raw value."""
    out = run_row(program_of(plan), row)
    margins = tuple(out[f"margin_{k}"] for k in range(plan.n_outputs))
    if plan.task == "regression":
        return Score(margins, None, None, out["value"], out.get("rate"))
    probs = tuple(out[f"probability_{j}"] for j in range(plan.n_probabilities)) \
        if plan.has_probabilities else None
    return Score(margins, probs, out["class_index"], None)


def design_value(inp: NumericInput, raw: float | None) -> float:
    """A numeric input's design value from its parsed raw value (None: missing)."""
    return run_numeric(inp, math.nan if raw is None else raw)


# ---------------------------------------------------------------- many rows

def encode_rows(plan: Plan, rows) -> np.ndarray:
    """Rows (mappings) as the matrix `score_matrix` takes: one column per
    feature; numeric values as doubles (NaN: missing); categorical values as
    level codes (-1: missing, -2: unseen)."""
    rows = list(rows)
    out = np.empty((len(rows), len(plan.inputs)), dtype=np.float64)
    for r, row in enumerate(rows):
        for inp in plan.inputs:
            raw = row.get(inp.name)
            if inp.kind == "numeric":
                v = numeric_value(raw, inp.boolean)
                out[r, inp.index] = math.nan if v is None else v
            else:
                out[r, inp.index] = category_code(inp.levels, raw)
    return out


def score_matrix(plan: Plan, matrix: np.ndarray) -> dict[str, np.ndarray]:
    """Score many rows; returns margins (n, K), probabilities (n, C) (not for a
    "decision" head) or value (n,) (and rate (n,) with an offset or exposure), and
    class_index (n,)."""
    out = run_matrix(program_of(plan), matrix)
    n = np.asarray(matrix).shape[0]
    result = {"margins": np.stack([out[f"margin_{k}"] for k in range(plan.n_outputs)], axis=1)
              .reshape(n, plan.n_outputs)}
    if plan.task == "regression":
        result["value"] = out["value"]
        if "rate" in out:
            result["rate"] = out["rate"]
    else:
        if plan.has_probabilities:
            result["probabilities"] = np.stack(
                [out[f"probability_{j}"] for j in range(plan.n_probabilities)], axis=1)
        result["class_index"] = out["class_index"].astype(np.int64)
    return result


def margin_scale(plan: Plan, matrix: np.ndarray) -> np.ndarray:
    """Per row and margin, |intercept| plus the sum of |term|: the size of the work a
    margin's sum does, against which its rounding is measured (n, K). A sum evaluated
    in another order differs by up to about n * 2^-53 times this, however small the
    margin itself is."""
    out = sum_magnitudes(program_of(plan), matrix)
    n = np.asarray(matrix).shape[0]
    return np.stack([out[f"margin_{k}"] for k in range(plan.n_outputs)], axis=1).reshape(
        n, plan.n_outputs)
