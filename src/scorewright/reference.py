"""The reference evaluator: the scoring plan evaluated step by step in IEEE double.

This is the oracle every artifact is compared with. `score_matrix` is a numpy
path for many rows; it performs the same operations in the same order
(element-wise, no reductions, `math.exp` for every exp) so its bits are
identical, which the tests check.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping

import numpy as np

from . import portable_exp
from .plan import CategoricalInput, Plan
from .values import MISSING_CODE, UNSEEN_CODE, category_code, numeric_value


@dataclass(frozen=True)
class Score:
    margins: tuple[float, ...]
    probabilities: tuple[float, ...] | None  # classification, in class order
    class_index: int | None                  # classification
    value: float | None                      # regression

    @property
    def label(self):
        return None if self.class_index is None else self.class_index


def resolve_code(inp: CategoricalInput, code: int) -> int | None:
    """Apply the missing and unseen policies: a level code, or None for no level."""
    if code == MISSING_CODE:
        if inp.fill_code is not None:
            return inp.fill_code
        code = UNSEEN_CODE
    if code == UNSEEN_CODE:
        return inp.unknown_code
    return code


def design_value(inp, raw: float | None) -> float:
    """A numeric input's design value from its parsed raw value (None: missing)."""
    if raw is None:
        if inp.fill is None:
            return 0.0
        raw = inp.fill
    v = apply_steps(inp, min(max(raw, -inp.bound), inp.bound))
    if inp.clip is not None:
        v = min(max(v, inp.clip[0]), inp.clip[1])
    return v


def apply_steps(inp, v):
    """The scaling steps in order; v is a float or a numpy array (same IEEE operations)."""
    for step in inp.steps:
        if step.op == "subtract":
            v = v - step.value
        elif step.op == "divide":
            v = v / step.value
        elif step.op == "multiply":
            v = v * step.value
        else:
            v = v + step.value
    return v


def exp_of(plan: Plan):
    """The plan's exp: libm's (CPython's math.exp) or the portable routine."""
    return portable_exp.exp if plan.exp_kind == "portable" else math.exp


def sigmoid(plan: Plan, m: float) -> float:
    t = exp_of(plan)(-min(abs(m), plan.precision.exp_guard))
    return 1.0 / (1.0 + t) if m >= 0.0 else t / (1.0 + t)


def score_row(plan: Plan, row: Mapping) -> Score:
    """Score one row: a mapping from feature name to raw value."""
    codes = []
    for inp in plan.inputs:
        raw = row.get(inp.name)
        if inp.kind == "numeric":
            codes.append(design_value(inp, numeric_value(raw, inp.boolean)))
        else:
            codes.append(resolve_code(inp, category_code(inp.levels, raw)))
    return score_design(plan, codes)


def score_design(plan: Plan, values: list) -> Score:
    """Steps 2-4 of the plan, from design values (numeric) and level codes (categorical)."""
    margins = []
    for k in range(plan.n_outputs):
        s = None
        for term in plan.terms:
            v = values[term.input]
            if term.kind == "numeric":
                t = term.weights[k] * v
            else:
                t = 0.0 if v is None else term.tables[k][v]
            s = t if s is None else s + t
        b = plan.intercepts[k]
        margins.append(b if s is None else s + b)
    return finish(plan, margins)


def finish(plan: Plan, margins: list[float]) -> Score:
    guard = plan.precision.exp_guard
    if plan.task == "binary":
        m = margins[0]
        p1 = sigmoid(plan, m)
        return Score((m,), (1.0 - p1, p1), 1 if m > plan.cut else 0, None)
    if plan.task == "multiclass":
        top = margins[0]
        best = 0
        for k in range(1, len(margins)):
            if margins[k] > top:
                top = margins[k]
                best = k
        exps = [exp_of(plan)(max(m - top, -guard)) for m in margins]
        total = exps[0]
        for e in exps[1:]:
            total = total + e
        return Score(tuple(margins), tuple(e / total for e in exps), best, None)
    m = margins[0]
    if plan.link == "log":
        value = exp_of(plan)(min(max(m, -guard), plan.precision.log_link_max))
    else:
        value = m
    return Score((m,), None, None, value)


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


_EXP = {"libm": np.frompyfunc(math.exp, 1, 1),
        "portable": np.frompyfunc(portable_exp.exp, 1, 1)}


def _exp_exact(x: np.ndarray, kind: str = "libm") -> np.ndarray:
    # numpy's own exp may differ from libm's by an ULP; the oracle uses libm's.
    return _EXP[kind](x).astype(np.float64)


def score_matrix(plan: Plan, matrix: np.ndarray) -> dict[str, np.ndarray]:
    """Score many rows; returns margins (n, K), probabilities (n, C) or value (n,),
    and class_index (n,)."""
    matrix = np.asarray(matrix, dtype=np.float64)
    n = matrix.shape[0]
    values: list = []
    for inp in plan.inputs:
        col = matrix[:, inp.index]
        if inp.kind == "numeric":
            values.append(_design_column(inp, col))
        else:
            values.append(_code_column(inp, col))
    margins = np.empty((n, plan.n_outputs))
    for k in range(plan.n_outputs):
        s = None
        for term in plan.terms:
            v = values[term.input]
            if term.kind == "numeric":
                t = term.weights[k] * v
            else:
                table = np.append(np.array(term.tables[k], dtype=np.float64), 0.0)
                t = table[v]  # code -1 (no level) picks the appended 0.0
            s = t if s is None else s + t
        b = plan.intercepts[k]
        margins[:, k] = np.full(n, b) if s is None else s + b
    return _finish_matrix(plan, margins)


def margin_scale(plan: Plan, matrix: np.ndarray) -> np.ndarray:
    """Per row and margin, |intercept| plus the sum of |term|: the size of the work a
    margin's sum does, against which its rounding is measured (n, K). A sum evaluated
    in another order differs by up to about n * 2^-53 times this, however small the
    margin itself is."""
    matrix = np.asarray(matrix, dtype=np.float64)
    values = [_design_column(inp, matrix[:, inp.index]) if inp.kind == "numeric"
              else _code_column(inp, matrix[:, inp.index]) for inp in plan.inputs]
    out = np.empty((matrix.shape[0], plan.n_outputs))
    for k in range(plan.n_outputs):
        total = np.full(matrix.shape[0], abs(plan.intercepts[k]))
        for term in plan.terms:
            v = values[term.input]
            if term.kind == "numeric":
                total = total + np.abs(term.weights[k] * v)
            else:
                total = total + np.abs(np.append(np.array(term.tables[k]), 0.0)[v])
        out[:, k] = total
    return out


def _design_column(inp, col: np.ndarray) -> np.ndarray:
    missing = ~np.isfinite(col)
    if inp.fill is None:
        v = np.where(missing, 0.0, col)
    else:
        v = np.where(missing, inp.fill, col)
    v = apply_steps(inp, np.minimum(np.maximum(v, -inp.bound), inp.bound))
    if inp.clip is not None:
        v = np.minimum(np.maximum(v, inp.clip[0]), inp.clip[1])
    if inp.fill is None:
        v = np.where(missing, 0.0, v)
    return v


def _code_column(inp: CategoricalInput, col: np.ndarray) -> np.ndarray:
    n_levels = len(inp.levels)
    valid = np.isfinite(col) & (col >= 0) & (col < n_levels) & (col == np.floor(col))
    missing = np.isnan(col) | (col == MISSING_CODE)
    codes = np.where(valid, np.nan_to_num(col), -1).astype(np.int64)
    unseen = -1 if inp.unknown_code is None else inp.unknown_code
    codes = np.where(~valid & ~missing, unseen, codes)
    if inp.fill_code is not None:
        codes = np.where(missing, inp.fill_code, codes)
    else:
        codes = np.where(missing, unseen, codes)
    return codes


def _finish_matrix(plan: Plan, margins: np.ndarray) -> dict[str, np.ndarray]:
    guard = plan.precision.exp_guard
    out: dict[str, np.ndarray] = {"margins": margins}
    if plan.task == "binary":
        m = margins[:, 0]
        t = _exp_exact(-np.minimum(np.abs(m), guard), plan.exp_kind)
        p1 = np.where(m >= 0.0, 1.0 / (1.0 + t), t / (1.0 + t))
        out["probabilities"] = np.stack([1.0 - p1, p1], axis=1)
        out["class_index"] = (m > plan.cut).astype(np.int64)
    elif plan.task == "multiclass":
        top = margins[:, 0].copy()
        best = np.zeros(len(top), dtype=np.int64)
        for k in range(1, margins.shape[1]):
            higher = margins[:, k] > top
            top = np.where(higher, margins[:, k], top)
            best = np.where(higher, k, best)
        exps = _exp_exact(np.maximum(margins - top[:, None], -guard), plan.exp_kind)
        total = exps[:, 0].copy()
        for k in range(1, exps.shape[1]):
            total = total + exps[:, k]
        out["probabilities"] = exps / total[:, None]
        out["class_index"] = best
    else:
        m = margins[:, 0]
        if plan.link == "log":
            out["value"] = _exp_exact(np.minimum(np.maximum(m, -guard),
                                                 plan.precision.log_link_max), plan.exp_kind)
        else:
            out["value"] = m.copy()
    return out
