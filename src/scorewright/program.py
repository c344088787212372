"""The scoring program: a scoring plan lowered to an ordered list of typed operations.

Every operation assigns one new name (single assignment) from earlier names and
constants, so a target renders the list top to bottom, one statement, expression
or node per operation, and never decides what a missing value, a link or a
guard means: those are written here, once, as lowerings into the primitives
below. Types: "real" (a double, or a float for single-precision targets), "code"
(a small integer: a level code, a class index) and "flag" (a truth value).

Primitives (`PRIMITIVES` lists each with its operand and result types):
  read_real(feature)      the raw value as a real; NaN when it is missing (the
                          rules of `values.numeric_value`)
  read_code(feature)      the raw value's level code: 0..L-1, MISSING_CODE or
                          UNSEEN_CODE (the rules of `values.category_code`)
  is_missing(x)           x is not a finite number (NaN, +-inf)
  add sub mul div         one IEEE operation each
  min max                 a selection: max(a, b) is a unless b > a (and min alike)
  neg abs                 exact
  gt ge eq                comparisons (flag)
  select(f, a, b)         a if f else b (either type)
  exp(x)                  the plan's exp (libm or portable), argument already guarded
  lookup(c, table)        table[c] for 0 <= c < len(table), else 0.0 (no level)
  sum(t0, t1, ...)        ((t0 + t1) + t2) + ...: the ordered sum, never regrouped
  output(x)               names an output column (the op's `attr`)

The composites — the input guard and scaling, the missing and unseen policies,
the stable sigmoid, the max-shifted softmax, the guarded log link and the
decision rule — are the `_lower_*` functions. The reference evaluator's bits
are the truth: `run_row` and `run_matrix` interpret this list with a scalar and
a numpy op table, and the tests hold both to `reference.score_row` and
`reference.score_matrix` bit for bit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from . import portable_exp
from .plan import CategoricalInput, NumericInput, Plan
from .values import MISSING_CODE, UNSEEN_CODE, category_code, numeric_value

REAL, CODE, FLAG = "real", "code", "flag"

# op -> (operand types, result type); "any" takes the type of its value operands.
PRIMITIVES: dict[str, tuple[tuple[str, ...] | str, str]] = {
    "read_real": ((), REAL), "read_code": ((), CODE), "is_missing": ((REAL,), FLAG),
    "add": ((REAL, REAL), REAL), "sub": ((REAL, REAL), REAL), "mul": ((REAL, REAL), REAL),
    "div": ((REAL, REAL), REAL), "min": ((REAL, REAL), REAL), "max": ((REAL, REAL), REAL),
    "neg": ((REAL,), REAL), "abs": ((REAL,), REAL),
    "gt": ("same", FLAG), "ge": ("same", FLAG), "eq": ("same", FLAG),
    "select": ("select", "any"), "exp": ((REAL,), REAL), "lookup": ((CODE,), REAL),
    "sum": ("reals", REAL), "output": ("one", "any"),
}


@dataclass(frozen=True)
class Const:
    """A literal operand: a real (float) or a code (int)."""

    value: float | int

    @property
    def type(self) -> str:
        return CODE if isinstance(self.value, int) else REAL


@dataclass(frozen=True)
class Op:
    dest: str
    op: str
    args: tuple = ()
    type: str = REAL
    attr: Any = None  # read_*: the input index; lookup: the table; output: the column name


@dataclass(frozen=True)
class Program:
    plan: Plan
    ops: tuple[Op, ...]
    outputs: tuple[str, ...] = field(default=())  # output column names, in order


class _Builder:
    def __init__(self):
        self.ops: list[Op] = []
        self.types: dict[str, str] = {}
        self.count = 0

    def emit(self, op: str, *args, attr=None, hint: str = "t") -> str:
        if op not in PRIMITIVES:
            raise ValueError(f"unknown primitive {op!r}")
        dest = f"{hint}{self.count}"
        self.count += 1
        result = PRIMITIVES[op][1]
        if result == "any":
            result = self._type(args[-1])
        self.ops.append(Op(dest, op, tuple(args), result, attr))
        self.types[dest] = result
        return dest

    def _type(self, arg) -> str:
        return arg.type if isinstance(arg, Const) else self.types[arg]


def lower(plan: Plan) -> Program:
    """The plan as a scoring program."""
    b = _Builder()
    design = {}
    for inp in plan.inputs:
        if inp.kind == "numeric":
            design[inp.index] = _lower_numeric(b, inp)
        else:
            design[inp.index] = _lower_code(b, inp)
    margins = []
    for k in range(plan.n_outputs):
        terms = []
        for term in plan.terms:
            v = design[term.input]
            if term.kind == "numeric":
                terms.append(b.emit("mul", Const(term.weights[k]), v, hint="w"))
            else:
                terms.append(b.emit("lookup", v, attr=term.tables[k], hint="w"))
        terms.append(Const(plan.intercepts[k]))
        margins.append(b.emit("sum", *terms, hint="m") if len(terms) > 1 else terms[0])
    names = output_names(plan)
    values = _lower_link(b, plan, margins)
    for name, value in zip(names, values, strict=True):
        b.emit("output", value, attr=name, hint="o")
    return Program(plan, _live(b.ops), names)


def output_names(plan: Plan) -> tuple[str, ...]:
    """The program's outputs: every margin, every class probability, then the class index
    (classification) or the value (regression)."""
    margins = tuple(f"margin_{k}" for k in range(plan.n_outputs))
    if plan.task == "regression":
        return margins + ("value",)
    probs = tuple(f"probability_{j}" for j in range(len(plan.classes)))
    return margins + probs + ("class_index",)


def _live(ops, outputs=None) -> tuple[Op, ...]:
    """The operations the outputs (all, or those named) depend on: an input with no term
    reads nothing, and a decision alone computes no exp."""
    needed: set[str] = set()
    kept = []
    for op in reversed(ops):
        if (op.op == "output" and (outputs is None or op.attr in outputs)) or op.dest in needed:
            kept.append(op)
            needed.update(a for a in op.args if isinstance(a, str))
    return tuple(reversed(kept))


def prune(program: Program, outputs) -> tuple[Op, ...]:
    """The program's operations that the named outputs need, in order."""
    return _live(program.ops, set(outputs))


def _lower_numeric(b: _Builder, inp: NumericInput) -> str:
    """Missing -> fill; clamp to the plan's bound; scaling steps; clip. Without a fill a
    missing value's design value is exactly 0.0."""
    x = b.emit("read_real", attr=inp.index, hint="x")
    missing = b.emit("is_missing", x, hint="f")
    v = b.emit("select", missing, Const(0.0 if inp.fill is None else inp.fill), x, hint="v")
    v = b.emit("max", v, Const(-inp.bound), hint="v")
    v = b.emit("min", v, Const(inp.bound), hint="v")
    for step in inp.steps:
        v = b.emit(_STEP_OP[step.op], v, Const(step.value), hint="v")
    if inp.clip is not None:
        v = b.emit("max", v, Const(inp.clip[0]), hint="v")
        v = b.emit("min", v, Const(inp.clip[1]), hint="v")
    if inp.fill is None:
        v = b.emit("select", missing, Const(0.0), v, hint="v")
    return v


_STEP_OP = {"subtract": "sub", "divide": "div", "multiply": "mul", "add": "add"}


def _lower_code(b: _Builder, inp: CategoricalInput) -> str:
    """The level code after the missing and unseen policies; a negative code is no level
    (every lookup gives 0.0)."""
    c = b.emit("read_code", attr=inp.index, hint="c")
    if inp.fill_code is not None:
        is_missing = b.emit("eq", c, Const(MISSING_CODE), hint="f")
        c = b.emit("select", is_missing, Const(inp.fill_code), c, hint="c")
    if inp.unknown_code is not None:
        # Left negative by now: unseen, or missing with no fill (treated as unseen).
        no_level = b.emit("gt", Const(0), c, hint="f")
        c = b.emit("select", no_level, Const(inp.unknown_code), c, hint="c")
    return c


def _lower_link(b: _Builder, plan: Plan, margins: list) -> list:
    """The output values in `output_columns` order."""
    guard = plan.precision.exp_guard
    if plan.task == "binary":
        m = margins[0]
        a = b.emit("abs", m)
        a = b.emit("min", a, Const(guard))
        t = b.emit("exp", b.emit("neg", a))
        d = b.emit("add", Const(1.0), t)
        p1 = b.emit("select", b.emit("ge", m, Const(0.0)),
                    b.emit("div", Const(1.0), d), b.emit("div", t, d), hint="p")
        p0 = b.emit("sub", Const(1.0), p1, hint="p")
        cls = b.emit("select", b.emit("gt", m, Const(plan.cut)), Const(1), Const(0), hint="k")
        return [m, p0, p1, cls]
    if plan.task == "multiclass":
        top, best = margins[0], Const(0)
        for k in range(1, len(margins)):
            higher = b.emit("gt", margins[k], top)
            top = b.emit("select", higher, margins[k], top)
            best = b.emit("select", higher, Const(k), best, hint="k")
        exps = [b.emit("exp", b.emit("max", b.emit("sub", m, top), Const(-guard)), hint="e")
                for m in margins]
        total = b.emit("sum", *exps) if len(exps) > 1 else exps[0]
        probs = [b.emit("div", e, total, hint="p") for e in exps]
        return [*margins, *probs, best]
    m = margins[0]
    if plan.link == "log":
        g = b.emit("max", m, Const(-guard))
        g = b.emit("min", g, Const(plan.precision.log_link_max))
        return [m, b.emit("exp", g, hint="y")]
    return [m, m]


# ---------------------------------------------------------------- interpreters

def _py_max(a, b):
    return max(a, b)


def _py_min(a, b):
    return min(a, b)


def _sum_left(*xs):
    s = xs[0]
    for x in xs[1:]:
        s = s + x
    return s


def _lookup(code, table):
    return table[code] if 0 <= code < len(table) else 0.0


SCALAR = {
    "is_missing": lambda x: not math.isfinite(x),
    "add": lambda a, b: a + b, "sub": lambda a, b: a - b,
    "mul": lambda a, b: a * b, "div": lambda a, b: a / b,
    "min": _py_min, "max": _py_max, "neg": lambda a: -a, "abs": abs,
    "gt": lambda a, b: a > b, "ge": lambda a, b: a >= b, "eq": lambda a, b: a == b,
    "select": lambda f, a, b: a if f else b, "sum": _sum_left,
}


def run_numeric(inp: NumericInput, raw: float) -> float:
    """One numeric input's design value from its raw real (NaN: missing), by the same
    lowering and op table as `run_row`."""
    b = _Builder()
    v = _lower_numeric(b, inp)
    env: dict[str, Any] = {}
    for op in b.ops:
        args = [a.value if isinstance(a, Const) else env[a] for a in op.args]
        env[op.dest] = raw if op.op == "read_real" else SCALAR[op.op](*args)
    return env[v]


def run_row(program: Program, row: Mapping) -> dict[str, Any]:
    """The outputs for one row (a mapping from feature name to raw value)."""
    plan = program.plan
    exp = portable_exp.exp if plan.exp_kind == "portable" else math.exp
    env: dict[str, Any] = {}
    out: dict[str, Any] = {}
    for op in program.ops:
        args = [a.value if isinstance(a, Const) else env[a] for a in op.args]
        if op.op == "read_real":
            inp = plan.inputs[op.attr]
            raw = numeric_value(row.get(inp.name), inp.boolean)
            value = math.nan if raw is None else raw
        elif op.op == "read_code":
            inp = plan.inputs[op.attr]
            value = category_code(inp.levels, row.get(inp.name))
        elif op.op == "exp":
            value = exp(args[0])
        elif op.op == "lookup":
            value = _lookup(args[0], op.attr)
        elif op.op == "output":
            out[op.attr] = args[0]
            continue
        else:
            value = SCALAR[op.op](*args)
        env[op.dest] = value
    return out


_EXP = {"libm": np.frompyfunc(math.exp, 1, 1), "portable": np.frompyfunc(portable_exp.exp, 1, 1)}


def _np_codes(col: np.ndarray, n_levels: int) -> np.ndarray:
    """Codes read from a matrix column (as the C caller passes them): anything that is not
    a valid code, MISSING_CODE or NaN is unseen."""
    valid = np.isfinite(col) & (col >= 0) & (col < n_levels) & (col == np.floor(col))
    missing = np.isnan(col) | (col == MISSING_CODE)
    codes = np.where(valid, np.nan_to_num(col), UNSEEN_CODE).astype(np.int64)
    return np.where(missing, MISSING_CODE, codes)


def _np_lookup(codes: np.ndarray, table) -> np.ndarray:
    padded = np.append(np.asarray(table, dtype=np.float64), 0.0)
    inside = (codes >= 0) & (codes < len(table))
    return padded[np.where(inside, codes, len(table))]


VECTOR = {
    "is_missing": lambda x: ~np.isfinite(x), "add": np.add, "sub": np.subtract, "mul": np.multiply,
    "div": np.divide, "neg": np.negative, "abs": np.abs,
    # max(a, b) is a unless b > a, as the scalar selection (and NaN-free here).
    "max": lambda a, b: np.where(np.greater(b, a), b, a),
    "min": lambda a, b: np.where(np.less(b, a), b, a),
    "gt": np.greater, "ge": np.greater_equal, "eq": np.equal,
    "select": np.where, "sum": _sum_left,
}


def run_matrix(program: Program, matrix: np.ndarray) -> dict[str, np.ndarray]:
    """The outputs for many rows, from the matrix `reference.encode_rows` makes (numeric
    values as doubles, NaN missing; categorical values as level codes)."""
    return _run_matrix(program, matrix)[0]


def sum_magnitudes(program: Program, matrix: np.ndarray) -> dict[str, np.ndarray]:
    """For each margin output that is an ordered sum, per row, the sum of its operands'
    magnitudes |t_0| + |t_1| + ... (a constant margin: its magnitude)."""
    out, env = _run_matrix(program, matrix)
    n = np.asarray(matrix).shape[0]
    by_dest = {op.dest: op for op in program.ops}
    sizes = {}
    for op in program.ops:
        if op.op == "output" and op.attr.startswith("margin_"):
            src = by_dest.get(op.args[0]) if isinstance(op.args[0], str) else None
            if src is not None and src.op == "sum":
                terms = [abs(a.value) if isinstance(a, Const) else np.abs(env[a])
                         for a in src.args]
                sizes[op.attr] = _sum_left(*terms) + np.zeros(n)
            else:
                sizes[op.attr] = np.abs(out[op.attr])
    return sizes


def _run_matrix(program: Program, matrix: np.ndarray):
    plan = program.plan
    matrix = np.asarray(matrix, dtype=np.float64)
    n = matrix.shape[0]
    env: dict[str, Any] = {}
    out: dict[str, np.ndarray] = {}
    for op in program.ops:
        args = [a.value if isinstance(a, Const) else env[a] for a in op.args]
        if op.op == "read_real":
            value = matrix[:, op.attr]
        elif op.op == "read_code":
            value = _np_codes(matrix[:, op.attr], len(plan.inputs[op.attr].levels))
        elif op.op == "exp":
            value = _EXP[plan.exp_kind](np.asarray(args[0], dtype=np.float64)).astype(np.float64)
        elif op.op == "lookup":
            value = _np_lookup(args[0], op.attr)
        elif op.op == "output":
            out[op.attr] = np.broadcast_to(np.asarray(args[0]), (n,)).copy()
            continue
        else:
            value = VECTOR[op.op](*args)
        env[op.dest] = value
    return out, env


# ---------------------------------------------------------------- constant folding

def fold(ops, env: Mapping[str, Any], dtype=np.float64) -> dict[str, Any]:
    """The values of every operation computable from `env` (name -> a known value) and
    constants, each computed as the scalar op table does in `dtype` (a float32 target
    folds in float32, as its graph would compute); a select needs only its condition and
    the operand it chooses. Reads, exp, outputs and ops the table lacks stay unknown
    (absent): a target's exp is its own, so a value through exp is never folded."""
    out = dict(env)
    with np.errstate(all="ignore"):
        for op in ops:
            if op.dest in out or (op.op not in SCALAR and op.op != "lookup"):
                continue
            args = [_fold_const(a, dtype) if isinstance(a, Const) else out.get(a, _UNKNOWN)
                    for a in op.args]
            if op.op == "select" and args[0] is not _UNKNOWN:
                value = args[1] if args[0] else args[2]
            elif any(a is _UNKNOWN for a in args):
                continue
            elif op.op == "lookup":
                value = dtype(_lookup(int(args[0]), op.attr))
            else:
                value = SCALAR[op.op](*args)
            if value is not _UNKNOWN:
                out[op.dest] = value
    return out


_UNKNOWN = object()


def _fold_const(arg: Const, dtype):
    return arg.value if arg.type == CODE else dtype(arg.value)
