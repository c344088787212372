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
  sqrt                    the IEEE square root (correctly rounded everywhere)
  gt ge eq                comparisons (flag)
  or(f, g)                either flag
  select(f, a, b)         a if f else b (either type)
  exp(x)                  the plan's exp (libm or portable), argument already guarded
  lookup(c, table)        table[c] for 0 <= c < len(table), else 0.0 (no level)
  bucket(x, edges)        the number of edges at or below x, a code (edges ascending, x
                          never NaN): Python's bisect_right, numpy's searchsorted(side=
                          "right"); a target may search the edges any way it likes, for
                          only comparisons decide the code
  sum(t0, t1, ...)        ((t0 + t1) + t2) + ...: the ordered sum, never regrouped
  output(x)               names an output column (the op's `attr`)

The composites — the input guard and scaling, the missing and unseen policies,
the stable sigmoid, the normal CDF (probit), the complementary log-log, the
max-shifted softmax, the guarded log link and the decision rule — are the
`_lower_*` functions. The reference evaluator's bits
are the truth: `run_row` and `run_matrix` interpret this list with a scalar and
a numpy op table, and the tests hold both to `reference.score_row` and
`reference.score_matrix` bit for bit.
"""

from __future__ import annotations

import bisect
import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from . import normal_tail, portable_exp
from .errors import ScorewrightError
from .model import (BINS, NORM_FLOOR, POWER_OPS, QUANTILE, QUANTILE_BOUNDS, QUANTILE_CLIP,
                    SPLINE, TRANSFORM_DOMAIN, quantile_pieces, quantile_pieces_finite)
from .plan import CategoricalInput, NumericInput, Plan
from .values import MISSING_CODE, UNSEEN_CODE, category_code, numeric_value

REAL, CODE, FLAG = "real", "code", "flag"

# op -> (operand types, result type); "any" takes the type of its value operands.
PRIMITIVES: dict[str, tuple[tuple[str, ...] | str, str]] = {
    "read_real": ((), REAL), "read_code": ((), CODE), "is_missing": ((REAL,), FLAG),
    "add": ((REAL, REAL), REAL), "sub": ((REAL, REAL), REAL), "mul": ((REAL, REAL), REAL),
    "div": ((REAL, REAL), REAL), "min": ((REAL, REAL), REAL), "max": ((REAL, REAL), REAL),
    "neg": ((REAL,), REAL), "abs": ((REAL,), REAL), "sqrt": ((REAL,), REAL),
    "gt": ("same", FLAG), "ge": ("same", FLAG), "eq": ("same", FLAG),
    "or": ((FLAG, FLAG), FLAG),
    "select": ("select", "any"), "exp": ((REAL,), REAL), "lookup": ((CODE,), REAL),
    "bucket": ((REAL,), CODE),
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
    attr: Any = None  # read_*: the input index; lookup: the table; bucket: the edges;
    #                   output: the column name


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
        self.missing: dict[int, str] = {}  # input index -> its missing flag
        self.clamped: dict[int, str] = {}  # numeric input -> its value, filled and clamped
        self.codes: dict[int, str] = {}    # categorical input -> its code after policies
        self.products: dict[int, str] = {}  # a product term (by id) -> its value
        self.raw_codes: dict[int, str] = {}  # categorical input -> its code as read
        self.bases: dict[int, list] = {}   # spline input -> its basis values, by index
        self.basis_terms: dict[int, str] = {}  # a basis term (by id) -> its design value
        self.members: dict[tuple, str] = {}  # (input, steps) of a normalized column -> value
        self.norms: dict[tuple, str] = {}    # (norm, factors) -> the norm, floored
        self.normalized: dict[int, str] = {}  # a normalized term (by id) -> its design value

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
            design[inp.index] = _lower_numeric(b, inp, plan.precision.name == "float")
        else:
            design[inp.index] = b.codes[inp.index] = _lower_code(b, inp)
    margins = []
    offset_terms = []  # margin 0's terms but the offset's: the rate's margin
    for k in range(plan.n_outputs):
        terms = []
        for term in plan.terms:
            if k == 0 and plan.offset is not None and term.input != plan.offset:
                offset_terms.append(len(terms))
            v = design[term.input]
            if term.kind == "numeric":
                terms.append(b.emit("mul", Const(term.weights[k]), v, hint="w"))
            elif term.kind == "encoded":
                table = term.tables[k]
                w = b.emit("lookup", v, attr=table[:-2], hint="w")
                w = b.emit("select", b.emit("eq", v, Const(UNSEEN_CODE), hint="f"),
                           Const(table[-2]), w, hint="w")
                terms.append(b.emit("select", b.emit("eq", v, Const(MISSING_CODE), hint="f"),
                                    Const(table[-1]), w, hint="w"))
            elif term.kind == "product":
                terms.append(_lower_product(b, plan, term, k))
            elif term.kind == "bins":
                # the bin number (the design value, exact small integers) picks the
                # contribution; missing without a fill contributes nothing
                inp = plan.inputs[term.input]
                bins = [float(i) for i in range(1, len(term.tables[k]))]
                w = _select_by_bin(b, v, bins, term.tables[k])
                if inp.fill is None:
                    w = b.emit("select", b.missing[term.input], Const(0.0), w, hint="w")
                terms.append(w)
            elif term.kind == "basis":
                terms.append(b.emit("mul", Const(term.weights[k]),
                                    _basis_value(b, plan, term), hint="w"))
            elif term.kind == "normalized":
                terms.append(b.emit("mul", Const(term.weights[k]),
                                    _normalized_value(b, plan, term), hint="w"))
            elif term.kind == "missing":
                present, missing = term.tables[k]
                terms.append(b.emit("select", _missing_flag(b, plan.inputs[term.input]),
                                    Const(missing), Const(present), hint="w"))
            else:
                terms.append(b.emit("lookup", v, attr=term.tables[k], hint="w"))
        if k == 0:
            kept = [terms[j] for j in offset_terms]
        terms.append(Const(plan.intercepts[k]))
        margins.append(b.emit("sum", *terms, hint="m") if len(terms) > 1 else terms[0])
    if plan.offset is not None:
        # the rate's margin: the same terms, the same order, without the offset's
        kept.append(Const(plan.intercepts[0]))
        margins.append(b.emit("sum", *kept, hint="m") if len(kept) > 1 else kept[0])
    names = output_names(plan)
    values = _lower_link(b, plan, margins)
    for name, value in zip(names, values, strict=True):
        b.emit("output", value, attr=name, hint="o")
    ops = _live(b.ops)
    if plan.precision.name == "float" and any(op.op == "bucket" for op in ops):
        # its edges are doubles; a float target would compare against rounded ones
        raise ScorewrightError("a bucket (a quantile step, an isotonic calibrator) is for "
                               "double-precision targets only")
    return Program(plan, ops, names)


def output_names(plan: Plan) -> tuple[str, ...]:
    """The program's outputs: every margin, every class probability, then the class index
    (classification) or the value (regression). A model with an offset (or exposure) has a
    second margin, `margin_1`, without the offset's term, and outputs the `rate` (its
    inverse link) after the value (the expected count)."""
    margins = tuple(f"margin_{k}" for k in range(plan.n_margins))
    if plan.task == "regression":
        return margins + (("value", "rate") if plan.offset is not None else ("value",))
    probs = tuple(f"probability_{j}" for j in range(plan.n_probabilities))
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


def _lower_numeric(b: _Builder, inp: NumericInput, single: bool = False) -> str:
    """Missing -> fill; clamp to the plan's bound; scaling steps; clip. Without a fill a
    missing value's design value is exactly 0.0."""
    x = b.emit("read_real", attr=inp.index, hint="x")
    missing = b.emit("is_missing", x, hint="f")
    first = inp.steps[0].op if inp.steps else None
    placeholder = 0.0
    if first == SPLINE:
        # a missing value's basis values are 0.0 (`_basis_value`); inside the knots a
        # value stands in for it, so nothing is computed from NaN
        lo, hi = inp.steps[0].spline_range()
        placeholder = lo
        if inp.steps[0].extrapolation == "error":  # outside the knots counts as missing
            known = b.emit("select", missing, Const(lo), x, hint="v")
            outside = b.emit("or", b.emit("gt", Const(lo), known, hint="f"),
                             b.emit("gt", known, Const(hi), hint="f"), hint="f")
            missing = b.emit("or", missing, outside, hint="f")
    elif first in _DOMAIN:
        # outside the transform's domain counts as missing; with no fill, a value inside
        # the domain stands in for it, so no intermediate is infinite or NaN (and no
        # comparison meets a missing value: 1.0 stands in for it there too)
        known = b.emit("select", missing, Const(1.0), x, hint="v")
        outside = b.emit(_DOMAIN[first][0], Const(_DOMAIN[first][1]), known, hint="f")
        missing = b.emit("or", missing, outside, hint="f")
        placeholder = 1.0
    b.missing[inp.index] = missing
    v = b.emit("select", missing, Const(placeholder if inp.fill is None else inp.fill), x,
               hint="v")
    v = b.emit("max", v, Const(-inp.bound), hint="v")
    v = b.emit("min", v, Const(inp.bound), hint="v")
    b.clamped[inp.index] = v
    if first == SPLINE:
        b.bases[inp.index] = _lower_spline(b, v, inp.steps[0], inp.bound)
        return v
    v = _apply_steps(b, v, inp.steps, single)
    if inp.clip is not None:
        v = b.emit("max", v, Const(inp.clip[0]), hint="v")
        v = b.emit("min", v, Const(inp.clip[1]), hint="v")
    if inp.fill is None:
        v = b.emit("select", missing, Const(0.0), v, hint="v")
    return v


def _missing_flag(b: _Builder, inp):
    """The input is missing: a numeric input's flag (not finite, or outside its transform's
    domain); a categorical input's code as read is the missing code."""
    if inp.index not in b.missing:
        b.missing[inp.index] = b.emit("eq", b.raw_codes[inp.index], Const(MISSING_CODE),
                                      hint="f")
    return b.missing[inp.index]


def _apply_steps(b: _Builder, v, steps, single: bool = False):
    for step in steps:
        if step.op == BINS:
            v = _select_by_bin(b, v, step.edges, [float(i) for i in range(len(step.edges) + 1)])
        elif step.op in _TRANSFORM:
            v = _TRANSFORM[step.op](b, v, single)
        elif step.op in POWER_OPS:
            v = _lower_power(b, v, step, single)
        elif step.op == QUANTILE:
            v = _lower_quantile(b, v, step)
        else:
            v = b.emit(_STEP_OP[step.op], v, Const(step.value), hint="v")
    return v


def _lower_product(b: _Builder, plan: Plan, term, k: int):
    """weight_k * steps(f_1 * f_2 * ...): a numeric factor is its input's clamped value
    through the factor's own steps (0.0 when missing without a fill), a levels factor 1.0
    when the code is one of them (else 0.0), a missing factor its two values."""
    if id(term) in b.products:
        return b.emit("mul", Const(term.weights[k]), b.products[id(term)], hint="w")
    single = plan.precision.name == "float"
    p = None
    for i, kind, data in term.factors:
        inp = plan.inputs[i]
        if kind == "numeric":
            f = _apply_steps(b, b.clamped[i], data, single)
            if inp.fill is None:
                f = b.emit("select", b.missing[i], Const(0.0), f, hint="v")
        elif kind == "levels":
            hit = None
            for code in data:
                eq = b.emit("eq", b.codes[i], Const(code), hint="f")
                hit = eq if hit is None else b.emit("or", hit, eq, hint="f")
            f = b.emit("select", hit, Const(1.0), Const(0.0), hint="v")
        else:
            f = b.emit("select", _missing_flag(b, inp), Const(data[1]), Const(data[0]),
                       hint="v")
        p = f if p is None else b.emit("mul", p, f, hint="v")
    p = b.products[id(term)] = _apply_steps(b, p, term.steps, single)
    return b.emit("mul", Const(term.weights[k]), p, hint="w")


def _basis_value(b: _Builder, plan: Plan, term):
    """A spline column's design value: its basis value (0.0 when the input is missing with
    no fill, as scikit-learn's handle_missing='zeros'), then the column's own steps."""
    if id(term) not in b.basis_terms:
        inp = plan.inputs[term.input]
        v = b.bases[term.input][term.basis]
        if inp.fill is None:
            v = b.emit("select", b.missing[term.input], Const(0.0), v, hint="v")
        b.basis_terms[id(term)] = _apply_steps(b, v, term.steps)
    return b.basis_terms[id(term)]


def _normalized_value(b: _Builder, plan: Plan, term):
    """A normalized column's design value: its column's value divided by the row's norm
    over all the columns normalized with it (a norm below NORM_FLOOR taken as 1.0, as
    scikit-learn's _handle_zeros_in_scale does), then the column's own steps. Each column
    is a numeric factor (its input's clamped value through its steps, 0.0 when missing
    without a fill); the norm is computed once per set of columns."""
    if id(term) in b.normalized:
        return b.normalized[id(term)]
    members = []
    for i, _, steps in term.factors:
        if (i, steps) not in b.members:
            f = _apply_steps(b, b.clamped[i], steps)
            if plan.inputs[i].fill is None:
                f = b.emit("select", b.missing[i], Const(0.0), f, hint="v")
            b.members[(i, steps)] = f
        members.append(b.members[(i, steps)])
    key = (term.norm, term.factors)
    if key not in b.norms:
        norm = _NORMS[term.norm](b, members)
        b.norms[key] = b.emit("select", b.emit("gt", Const(NORM_FLOOR), norm, hint="f"),
                              Const(1.0), norm, hint="v")
    v = b.emit("div", members[term.basis], b.norms[key], hint="v")
    b.normalized[id(term)] = _apply_steps(b, v, term.steps)
    return b.normalized[id(term)]


def _lower_l2(b: _Builder, xs):
    """sqrt of the sum of squares in the order of numpy's einsum("ij,ij->i") over a
    C-ordered row (its sum_of_products_contig_contig_outstride0_two on 2-lane vectors,
    measured bit for bit): lane l adds the squares at positions l, l + 2, ...; a block of
    8 is added to the lanes last vector first; then the lanes are added."""
    sq = [b.emit("mul", x, x, hint="v") for x in xs]
    lanes: list = [None, None]

    def push(lane, v):
        lanes[lane] = v if lanes[lane] is None else b.emit("add", lanes[lane], v, hint="v")

    i, n = 0, len(sq)
    while n - i >= 8:
        for vec in (3, 2, 1, 0):
            for lane in (0, 1):
                push(lane, sq[i + 2 * vec + lane])
        i += 8
    for j in range(i, n):
        push((j - i) % 2, sq[j])
    total = lanes[0] if lanes[1] is None else b.emit("add", lanes[0], lanes[1], hint="v")
    return b.emit("sqrt", total, hint="v")


def _lower_l1(b: _Builder, xs):
    # numpy's pairwise sum of the magnitudes; its 0.0 start changes no sum of them
    return _pairwise_sum(b, [b.emit("abs", x, hint="v") for x in xs])


def _lower_max_norm(b: _Builder, xs):
    m = b.emit("abs", xs[0], hint="v")
    for x in xs[1:]:
        m = b.emit("max", m, b.emit("abs", x, hint="v"), hint="v")
    return m


_NORMS = {"l2": _lower_l2, "l1": _lower_l1, "max": _lower_max_norm}


def _lower_interp(b: _Builder, x, q, ref):
    """numpy's interp(x, q, ref) for a finite x, operation for operation (its C arr_interp):
    ref[0] below q[0]; ref[-1] at or above q[-1]; else slope_j * (x - q[j]) + ref[j] for
    the last j with q[j] <= x (`quantile_pieces`; a value on q[j] gives ref[j] exactly,
    as numpy's own rule there). x is clamped into [q[0], q[-1]] (so no piece meets a far
    x), its piece found by `bucket` over the pieces' starts and its three constants looked
    up: a handful of operations a value however many quantiles (scikit-learn's default is
    1,000). No piece (all quantiles one value, a constant column): ref[0] below it,
    ref[-1] from it on, as numpy's ends."""
    pieces = quantile_pieces(q, ref)
    if not pieces:
        return b.emit("select", b.emit("gt", Const(q[0]), x, hint="f"), Const(ref[0]),
                      Const(ref[-1]), hint="v")
    xc = b.emit("min", b.emit("max", x, Const(q[0]), hint="v"), Const(q[-1]), hint="v")
    v = _linear_piece(b, xc, *zip(*pieces))
    v = b.emit("select", b.emit("ge", x, Const(q[-1]), hint="f"), Const(ref[-1]), v, hint="v")
    return b.emit("select", b.emit("gt", Const(q[0]), x, hint="f"), Const(ref[0]), v, hint="v")


def _linear_piece(b: _Builder, x, starts, values, slopes):
    """slopes[j] * (x - starts[j]) + values[j] for the last j with starts[j] <= x (starts
    ascending, x not below starts[0]): j by a bucket over starts[1:], the three constants
    looked up (constants where there is one piece). numpy's interp on one segment, for the
    quantile step and the isotonic calibrator."""
    tables = [tuple(float(v) for v in t) for t in (starts, values, slopes)]
    if len(starts) == 1:
        at = [Const(t[0]) for t in tables]
    else:
        j = b.emit("bucket", x, attr=tables[0][1:], hint="j")
        at = [b.emit("lookup", j, attr=t, hint="v") for t in tables]
    return b.emit("add", b.emit("mul", at[2], b.emit("sub", x, at[0])), at[1], hint="v")


def _lower_quantile(b: _Builder, x, step):
    """scikit-learn's QuantileTransformer on a finite x (its _transform_col): the mean of
    the interpolation up the quantiles and the one down them, 0.5 * (interp(x, q, r) -
    interp(-x, -q reversed, -r reversed)); "uniform": exactly 0.0 at q[0] and 1.0 at
    q[-1] (q[0] wins when they are one value); "normal": 0.0 where x - 1e-7 < q[0] and
    1.0 where x + 1e-7 > q[-1], then the inverse normal CDF (`_lower_ndtri`) of the
    probability clamped to [QUANTILE_CLIP, 1 - QUANTILE_CLIP], which is scikit-learn's
    clip of the value."""
    q, ref = step.quantiles, step.references
    if not quantile_pieces_finite(step):
        raise ScorewrightError("a quantile step's quantiles are too close together for a "
                               "finite slope")
    up = _lower_interp(b, x, q, ref)
    down = _lower_interp(b, b.emit("neg", x, hint="v"), tuple(-v for v in reversed(q)),
                         tuple(-v for v in reversed(ref)))
    u = b.emit("mul", Const(0.5), b.emit("sub", up, down), hint="v")
    if step.output == "uniform":
        u = b.emit("select", b.emit("eq", x, Const(q[-1]), hint="f"), Const(1.0), u, hint="v")
        return b.emit("select", b.emit("eq", x, Const(q[0]), hint="f"), Const(0.0), u,
                      hint="v")
    high = b.emit("gt", b.emit("add", x, Const(QUANTILE_BOUNDS)), Const(q[-1]), hint="f")
    u = b.emit("select", high, Const(1.0), u, hint="v")
    low = b.emit("gt", Const(q[0]), b.emit("sub", x, Const(QUANTILE_BOUNDS)), hint="f")
    u = b.emit("select", low, Const(0.0), u, hint="v")
    u = b.emit("min", b.emit("max", u, Const(QUANTILE_CLIP), hint="v"),
               Const(1.0 - QUANTILE_CLIP), hint="v")
    return _lower_ndtri(b, u)


# Wichura, "Algorithm AS 241: The percentage points of the normal distribution", Applied
# Statistics 37(3), 477-484 (1988), PPND16: its coefficients, as published. For
# |p - 1/2| <= 0.425, (p - 1/2) A(r) / B(r) with r = 0.180625 - (p - 1/2)^2; else, with
# r = sqrt(-log(min(p, 1 - p))) <= 5, C(r - 1.6) / D(r - 1.6) with the sign of p - 1/2
# (its third branch, r > 5, is never reached: the quantile step clamps p to at least
# QUANTILE_CLIP, r <= 4.02). Checked against mpmath's erfinv (tests/test_quantile.py).
NDTRI_A = (3.3871328727963666080, 1.3314166789178437745e+2, 1.9715909503065514427e+3,
           1.3731693765509461125e+4, 4.5921953931549871457e+4, 6.7265770927008700853e+4,
           3.3430575583588128105e+4, 2.5090809287301226727e+3)
NDTRI_B = (1.0, 4.2313330701600911252e+1, 6.8718700749205790830e+2,
           5.3941960214247511077e+3, 2.1213794301586595867e+4, 3.9307895800092710610e+4,
           2.8729085735721942674e+4, 5.2264952788528545610e+3)
NDTRI_C = (1.42343711074968357734, 4.63033784615654529590, 5.76949722146069140550,
           3.64784832476320460504, 1.27045825245236838258, 2.41780725177450611770e-1,
           2.27238449892691845833e-2, 7.74545014278341407640e-4)
NDTRI_D = (1.0, 2.05319162663775882187, 1.67638483018380384940, 6.89767334985100004550e-1,
           1.48103976427480074590e-1, 1.51986665636164571966e-2, 5.47593808499534494600e-4,
           1.05075007164441684324e-9)


def _horner(b: _Builder, coefs, r):
    v = Const(coefs[-1])
    for c in reversed(coefs[:-1]):
        v = b.emit("add", b.emit("mul", v, r), Const(c))
    return v


def _lower_ndtri(b: _Builder, p):
    """The inverse normal CDF of p in [QUANTILE_CLIP, 1 - QUANTILE_CLIP] by AS 241 (above),
    in primitives and the program's own log, so every target computes the same bits.
    Each branch is computed on operands clamped to the range where it is selected (|q| <=
    0.425 for the central one, 0 <= r - 1.6 <= 2.5 for the tail, r <= 4.02 there), which
    changes no selected value and bounds every divisor away from zero."""
    q = b.emit("sub", p, Const(0.5))
    qc = b.emit("min", b.emit("max", q, Const(-0.425)), Const(0.425))
    r = b.emit("sub", Const(0.180625), b.emit("mul", qc, qc))
    central = b.emit("div", b.emit("mul", qc, _horner(b, NDTRI_A, r)), _horner(b, NDTRI_B, r))
    below = b.emit("gt", Const(0.0), q, hint="f")
    tail_p = b.emit("select", below, p, b.emit("sub", Const(1.0), p))
    t = b.emit("sub", b.emit("sqrt", b.emit("neg", _lower_log_unit(b, tail_p))), Const(1.6))
    t = b.emit("min", b.emit("max", t, Const(0.0)), Const(2.5))
    tail = b.emit("div", _horner(b, NDTRI_C, t), _horner(b, NDTRI_D, t))
    tail = b.emit("select", below, b.emit("neg", tail), tail)
    return b.emit("select", b.emit("ge", Const(0.425), b.emit("abs", q), hint="f"), central,
                  tail, hint="v")


def _lower_log_unit(b: _Builder, x):
    """`_lower_log` of x in [2^-31, 1], the same operations on the same values: the range
    reduction scales x up by selected powers of two (x * 2^j where it applies, rather than
    x times a selected factor, so PostgreSQL's underflow guards see products by
    constants) into [1, 2), then halves it past sqrt(2); then the same series."""
    k = Const(0.0)
    for j in (16, 8, 4, 2, 1):
        down = b.emit("gt", Const(2.0 ** (1 - j)), x)
        x = b.emit("select", down, b.emit("mul", x, Const(2.0 ** j)), x)
        k = b.emit("sub", k, b.emit("select", down, Const(float(j)), Const(0.0)))
    over = b.emit("gt", x, Const(math.sqrt(2.0)))
    x = b.emit("select", over, b.emit("mul", x, Const(0.5)), x)
    k = b.emit("add", k, b.emit("select", over, Const(1.0), Const(0.0)))
    return _log_series(b, x, k)


def ndtri(p: float) -> float:
    """The quantile step's inverse normal CDF of one probability, run by the scalar op
    table (what every target computes)."""
    b = _Builder()
    b.types["p"] = REAL
    v = _lower_ndtri(b, "p")
    env: dict[str, Any] = {"p": p}
    for op in b.ops:
        args = [a.value if isinstance(a, Const) else env[a] for a in op.args]
        env[op.dest] = SCALAR[op.op](*args)
    return env[v] if isinstance(v, str) else v.value


def _lower_spline(b: _Builder, x, step, bound: float) -> list:
    """The spline's basis values at x (finite, within the input guard), one per column,
    computed as scipy's BSpline evaluates them (the de Boor recursion of its
    `_deBoor_D`, operation for operation), so the values are its bits: the interval
    ell (t[ell] <= x < t[ell + 1], ell in k..n-1, the last closed and the end intervals
    extended) picks the knots by selections, the recursion runs on them, and each
    column selects its value on the interval (0.0 off its support). "periodic" maps x
    into [t[k], t[n]] first (numpy's remainder, exact); "constant" and "linear" evaluate
    inside the knots and select the boundary rule outside them (scikit-learn's
    SplineTransformer.transform)."""
    t, k, rule = step.knots, step.degree, step.extrapolation
    n = len(t) - k - 1
    lo, hi = step.spline_range()
    if rule == "periodic":
        x = b.emit("add", Const(lo), _lower_remainder(b, b.emit("sub", x, Const(lo)),
                                                      hi - lo, bound + abs(lo)), hint="v")
    inside = x
    if rule in ("constant", "linear"):  # the inside values never see a far x
        inside = b.emit("min", b.emit("max", x, Const(lo)), Const(hi), hint="v")
    flags = [b.emit("ge", inside, Const(t[e]), hint="f") for e in range(k + 1, n)]

    def by_interval(values):
        v = values[0]
        for f, prev, cur in zip(flags, values, values[1:]):
            if cur != prev:
                v = b.emit("select", f, cur, v, hint="v")
        return v

    knot = {d: by_interval([Const(t[ell + d]) for ell in range(k, n)])
            for d in range(1 - k, k + 1)}
    h = [Const(1.0)]
    for j in range(1, k + 1):
        hh = h[:j]
        h = [Const(0.0)] + [None] * j
        for m in range(1, j + 1):
            xb, xa = knot[m], knot[m - j]
            w = b.emit("div", hh[m - 1], b.emit("sub", xb, xa))
            h[m - 1] = b.emit("add", h[m - 1], b.emit("mul", w, b.emit("sub", xb, inside)))
            h[m] = b.emit("mul", w, b.emit("sub", inside, xa))
    n_cols = step.spline_columns()
    columns = []
    for col in range(n_cols):
        per_interval = []
        for ell in range(k, n):
            parts = [h[a] for a in range(k + 1) if (ell - k + a) % n_cols == col]
            v = parts[0] if parts else Const(0.0)
            for p in parts[1:]:
                v = b.emit("add", v, p, hint="v")
            per_interval.append(v)
        columns.append(by_interval(per_interval))
    if rule in ("constant", "linear"):
        below = b.emit("gt", Const(lo), x, hint="f")
        above = b.emit("gt", x, Const(hi), hint="f")
        (f_lo, s_lo), (f_hi, s_hi) = spline_boundary(step)
        ends = k if rule == "constant" or k > 1 else k + 1
        for col in range(n_cols):
            low = high = Const(0.0)
            if col < ends:
                low = Const(f_lo[col])
                if rule == "linear":
                    low = b.emit("add", low, b.emit("mul", b.emit("sub", x, Const(lo)),
                                                    Const(s_lo[col])), hint="v")
            if col >= n_cols - ends:
                high = Const(f_hi[col])
                if rule == "linear":
                    high = b.emit("add", high, b.emit("mul", b.emit("sub", x, Const(hi)),
                                                      Const(s_hi[col])), hint="v")
            v = b.emit("select", below, low, columns[col], hint="v")
            columns[col] = b.emit("select", above, high, v, hint="v")
    return columns


def _lower_remainder(b: _Builder, a, period: float, reach: float):
    """numpy's remainder(a, period) for |a| <= reach, period > 0, exactly: |a| reduced by
    period * 2^j from the top down (each subtraction exact: c <= r < 2c, Sterbenz), which
    is fmod(|a|, period); a negative a with a nonzero remainder r gives period - r, as
    numpy's fmod(a) + period rounds."""
    top = max(0, math.ceil(math.log2(2.0 * reach / period)))
    r = b.emit("abs", a)
    for j in range(top, -1, -1):
        c = Const(math.ldexp(period, j))
        r = b.emit("select", b.emit("ge", r, c), b.emit("sub", r, c), r, hint="v")
    wrapped = b.emit("select", b.emit("gt", r, Const(0.0)), b.emit("sub", Const(period), r),
                     r, hint="v")
    return b.emit("select", b.emit("gt", Const(0.0), a), wrapped, r, hint="v")


def de_boor(t, k: int, ell: int, x: float, nu: int = 0) -> list[float]:
    """The k + 1 basis values (their nu-th derivative) nonzero on interval ell at x, by
    the arithmetic of scipy's `_deBoor_D` (in Python floats: the same IEEE operations)."""
    h = [1.0] + [0.0] * k
    for j in range(1, k + 1):
        hh = h[:j]
        h[0] = 0.0
        for m in range(1, j + 1):
            xb, xa = t[ell + m], t[ell + m - j]
            if j <= k - nu:
                w = hh[m - 1] / (xb - xa)
                h[m - 1] += w * (xb - x)
                h[m] = w * (x - xa)
            else:
                w = j * hh[m - 1] / (xb - xa)
                h[m - 1] -= w
                h[m] = w
    return h


def spline_boundary(step) -> tuple:
    """((values, slopes) at t[k], (values, slopes) at t[n]) of every basis column of a
    non-periodic spline: what scikit-learn's SplineTransformer reads from spl(xmin),
    spl(xmin, nu=1), spl(xmax), spl(xmax, nu=1) for its constant and linear
    extrapolation."""
    t, k = step.knots, step.degree
    n = len(t) - k - 1
    out = []
    for ell, x in ((k, t[k]), (n - 1, t[n])):
        pair = []
        for nu in (0, 1):
            row = [0.0] * n
            for a, v in enumerate(de_boor(t, k, ell, x, nu)):
                row[ell - k + a] = v
            pair.append(tuple(row))
        out.append(tuple(pair))
    return tuple(out)


def _select_by_bin(b: _Builder, x, edges, values):
    """values[i] for the bin of x: i = the number of edges at or below x (the side
    scikit-learn's KBinsDiscretizer takes: a value on an edge is in the bin above it)."""
    v = Const(values[0])
    for i, edge in enumerate(edges, start=1):
        v = b.emit("select", b.emit("ge", x, Const(edge)), Const(values[i]), v, hint="v")
    return v


_STEP_OP = {"subtract": "sub", "divide": "div", "multiply": "mul", "add": "add"}
# transform -> (comparison, edge): comparison(edge, x) says x is outside its domain
_DOMAIN = {op: ("ge" if closed else "gt", edge) for op, (edge, closed) in TRANSFORM_DOMAIN.items()}


def _lower_log(b: _Builder, x, single: bool = False):
    """The natural log of x > 0 (finite), the same bits on every target: x is scaled
    by powers of two into [sqrt(2)/2, sqrt(2)] (exactly, the count kept in k), then
    with f = x - 1 and s = f / (2 + f), log(1 + f) = f - (hfsq - s (hfsq + R(s^2))),
    hfsq = f^2 / 2, R fitted with mpmath (`LOG_R`); the result k ln2 + log(1 + f) with
    ln2 in two parts, k * LN2_HI exact (a classic method). Measured against mpmath
    (tests/test_transforms.py): at most 0.75 ULP."""
    top = 64 if single else 512  # float: exponents within 2^127
    tiny, lift = (2.0 ** -126, 23) if single else (2.0 ** -1022, 52)
    # Each scaling multiplies by a selected power of two (1.0 where it does not apply),
    # so no operation overflows even where its result would be discarded.
    k = Const(0.0)
    sub = b.emit("gt", Const(tiny), x)  # subnormal: lift it into the normal range first
    x = b.emit("mul", x, b.emit("select", sub, Const(2.0 ** lift), Const(1.0)))
    k = b.emit("select", sub, Const(float(-lift)), k)
    j = top
    while j >= 1:
        up = b.emit("ge", x, Const(2.0 ** j))
        x = b.emit("mul", x, b.emit("select", up, Const(2.0 ** -j), Const(1.0)))
        k = b.emit("add", k, b.emit("select", up, Const(float(j)), Const(0.0)))
        j //= 2
    j = top
    while j >= 1:
        down = b.emit("gt", Const(2.0 ** (1 - j)), x)
        x = b.emit("mul", x, b.emit("select", down, Const(2.0 ** j), Const(1.0)))
        k = b.emit("sub", k, b.emit("select", down, Const(float(j)), Const(0.0)))
        j //= 2
    over = b.emit("gt", x, Const(math.sqrt(2.0)))
    x = b.emit("mul", x, b.emit("select", over, Const(0.5), Const(1.0)))
    k = b.emit("add", k, b.emit("select", over, Const(1.0), Const(0.0)))
    return _log_series(b, x, k)


def _log_series(b: _Builder, x, k):
    """log(x * 2^k) for x in [sqrt(2)/2, sqrt(2)] (`_lower_log`'s second half)."""
    f = b.emit("sub", x, Const(1.0))
    s = b.emit("div", f, b.emit("add", Const(2.0), f))
    z = b.emit("mul", s, s)
    p = Const(LOG_R[-1])
    for c in reversed(LOG_R[:-1]):
        p = b.emit("add", b.emit("mul", p, z), Const(c))
    r = b.emit("mul", z, p)
    hfsq = b.emit("mul", b.emit("mul", Const(0.5), f), f)
    lo = b.emit("add", b.emit("mul", s, b.emit("add", hfsq, r)),
                b.emit("mul", k, Const(float.fromhex(portable_exp.CONSTANTS["LN2_LO"]))))
    return b.emit("sub", b.emit("mul", k, Const(float.fromhex(portable_exp.CONSTANTS["LN2_HI"]))),
                  b.emit("sub", b.emit("sub", hfsq, lo), f), hint="v")


# R(z) / z = c0 + c1 z + ... on z in [0, (3 - 2 sqrt 2)^2], where R(s^2) = 2 atanh(s)/s - 2
# (Chebyshev fit of 7 terms with mpmath; `fit_log_coefficients` re-derives them)
LOG_R = tuple(float.fromhex(c) for c in (
    "0x1.5555555555558p-1", "0x1.99999999952d7p-2", "0x1.2492492df281ap-2",
    "0x1.c71c62e3f11e6p-3", "0x1.7462b51cb66b1p-3", "0x1.39fe51a7c18f9p-3",
    "0x1.2b5900de53b32p-3"))


def fit_log_coefficients(prec_bits: int = 200) -> list[str]:
    import mpmath as mp

    with mp.workprec(prec_bits):
        top = ((mp.sqrt(2) - 1) / (mp.sqrt(2) + 1)) ** 2

        def g(z):
            if z == 0:
                return mp.mpf(2) / 3
            s = mp.sqrt(z)
            return (2 * mp.atanh(s) / s - 2) / z

        poly = mp.chebyfit(g, [0, top * mp.mpf("1.0001")], 7)
        return [float.hex(float(c)) for c in reversed(poly)]


def _lower_log1p(b: _Builder, x, single: bool = False):
    """log(1 + x) for x > -1: u = 1 + x; x itself where u rounds to 1, else
    log(u) * (x / (u - 1)), which cancels the rounding of u (at most 2.3 ULP, measured)."""
    u = b.emit("add", Const(1.0), x)
    one = b.emit("eq", u, Const(1.0))
    # u - 1 is never 0 where it divides: no runtime meets a division by zero
    d = b.emit("select", one, Const(1.0), b.emit("sub", u, Const(1.0)))
    scaled = b.emit("mul", _lower_log(b, u, single), b.emit("div", x, d))
    return b.emit("select", one, x, scaled, hint="v")


def _lower_sqrt(b: _Builder, x, single: bool = False):
    """IEEE square root: correctly rounded on every runtime, so a primitive."""
    return b.emit("sqrt", x, hint="v")


_TRANSFORM = {"log": _lower_log, "log1p": _lower_log1p, "sqrt": _lower_sqrt}

EPS = 2.0 ** -52  # numpy's finfo(float64).eps: scipy's yeojohnson takes log1p below it
# Box-Cox with a negative lambda: the guard's largest |value| (about; reached at a positive
# x near 0, and a smaller x scores as that x)
BOX_COX_CAP = 1e15


def _guarded_expm1(b: _Builder, g, single: bool):
    # expm1 of anything below -708 is -1.0 in double, as it is at -708
    return _lower_expm1(b, b.emit("min", b.emit("max", g, Const(-708.0)), Const(700.0)),
                        single)


def _lower_power(b: _Builder, x, step, single: bool = False):
    """scikit-learn's PowerTransformer with its fitted lambda, written as scipy computes
    it (the log, log1p and expm1 the program's own, so every target gets the same bits).
    Yeo-Johnson: x >= 0: expm1(lambda log1p(x)) / lambda (log1p(x) for |lambda| < eps);
    x < 0: -expm1((2 - lambda) log1p(-x)) / (2 - lambda) (-log1p(-x) for
    |lambda - 2| <= eps). Box-Cox (x > 0, the domain rule): log(x) for |lambda| < 1e-19,
    else expm1(lambda log x) / lambda. The input guard keeps every expm1 argument within
    +-700 (`plan._power_backward`)."""
    lam = step.value
    if step.op == "box_cox":
        if abs(lam) < 1e-19:
            return _lower_log(b, x, single)
        if lam < 0:  # x^lam grows without bound as x nears 0: the guard holds it at the cap
            # below this x, expm1(lam log x) / lam would pass BOX_COX_CAP
            x = b.emit("max", x, Const(math.exp(math.log1p(BOX_COX_CAP * -lam) / lam)),
                       hint="v")
        g = b.emit("mul", Const(lam), _lower_log(b, x, single))
        return b.emit("div", _guarded_expm1(b, g, single), Const(lam), hint="v")
    up = b.emit("max", x, Const(0.0))          # x's positive side (0.0 below zero)
    down = b.emit("max", b.emit("neg", x), Const(0.0))
    if abs(lam) < EPS:
        pos = _lower_log1p(b, up, single)
    else:
        g = b.emit("mul", Const(lam), _lower_log1p(b, up, single))
        pos = b.emit("div", _guarded_expm1(b, g, single), Const(lam))
    if abs(lam - 2.0) > EPS:
        g = b.emit("mul", Const(2.0 - lam), _lower_log1p(b, down, single))
        neg = b.emit("div", b.emit("neg", _guarded_expm1(b, g, single)), Const(2.0 - lam))
    else:
        neg = b.emit("neg", _lower_log1p(b, down, single))
    return b.emit("select", b.emit("ge", x, Const(0.0)), pos, neg, hint="v")


def _lower_code(b: _Builder, inp: CategoricalInput) -> str:
    """The level code after the missing and unseen policies; a negative code is no level
    (every lookup gives 0.0)."""
    c = b.emit("read_code", attr=inp.index, hint="c")
    b.raw_codes[inp.index] = c
    if inp.fill_code is not None:
        is_missing = b.emit("eq", c, Const(MISSING_CODE), hint="f")
        c = b.emit("select", is_missing, Const(inp.fill_code), c, hint="c")
    if inp.unknown_code is not None:
        # Left negative by now: unseen, or missing with no fill (treated as unseen).
        no_level = b.emit("gt", Const(0), c, hint="f")
        c = b.emit("select", no_level, Const(inp.unknown_code), c, hint="c")
    return c


def _lower_link(b: _Builder, plan: Plan, margins: list) -> list:
    """The output values in `output_names` order. The class: binary, 1 iff margin > cut
    (-0.0 and 0.0 are not above a cut of 0.0); multiclass, the first largest margin (the
    lowest index on ties, as numpy's argmax). The "decision" link stops there: its margins
    are the decision function, and it computes no probability (nor any exp). No margin is
    NaN (every input is clamped to its bound, every margin stays within the precision's
    budget); were one, each rule is still these comparisons, false on NaN, the same on
    every target: binary class 0, multiclass the class chosen before it."""
    guard = plan.precision.exp_guard
    if plan.link == "calibrated":
        return [*margins, *_lower_calibrated(b, plan, margins)]
    if plan.task == "binary":
        m = margins[0]
        probs = _BINARY_LINKS[plan.link](b, plan, m) if plan.has_probabilities else ()
        cls = b.emit("select", b.emit("gt", m, Const(plan.cut)), Const(1), Const(0), hint="k")
        return [m, *probs, cls]
    if plan.task == "multiclass":
        top, best = margins[0], Const(0)
        for k in range(1, len(margins)):
            higher = b.emit("gt", margins[k], top)
            top = b.emit("select", higher, margins[k], top)
            best = b.emit("select", higher, Const(k), best, hint="k")
        if not plan.has_probabilities:
            return [*margins, best]
        if plan.link == "ovr_logit":
            # one-vs-rest: each class's sigmoid, divided by their sum
            sig = [_lower_logit(b, plan, m)[1] for m in margins]
            total = b.emit("sum", *sig)
            return [*margins, *(b.emit("div", p, total, hint="p") for p in sig), best]
        exps = [b.emit("exp", b.emit("max", b.emit("sub", m, top), Const(-guard)), hint="e")
                for m in margins]
        total = b.emit("sum", *exps) if len(exps) > 1 else exps[0]
        probs = [b.emit("div", e, total, hint="p") for e in exps]
        return [*margins, *probs, best]
    if plan.offset is not None:  # the count, then the rate, by the same link
        return [*margins, *(_regression_value(b, plan, m) for m in margins)]
    return [margins[0], _regression_value(b, plan, margins[0])]


def _regression_value(b: _Builder, plan: Plan, m):
    """A regression margin's inverse link."""
    guard = plan.precision.exp_guard
    if plan.link in ("log", "log1p"):
        g = b.emit("max", m, Const(-guard))
        g = b.emit("min", g, Const(plan.precision.log_link_max))
        if plan.link == "log1p":
            return _lower_expm1(b, g, plan.precision.name == "float")
        return b.emit("exp", g, hint="y")
    if plan.link == "sqrt":
        # the square of the margin, clamped so it stays finite
        top = math.sqrt(plan.precision.max_value)
        g = b.emit("min", b.emit("max", m, Const(-top)), Const(top))
        return b.emit("mul", g, g, hint="y")
    if plan.link == "inverse":
        return _lower_inverse(b, plan, m)
    return m


# scikit-learn's CalibratedClassifierCV leaves a probability above 1.0 + 1e-5 alone and sets
# one in (1.0, 1.0 + 1e-5] to 1.0 (after normalising)
CALIBRATED_SNAP = 1.0 + 1e-5


def _lower_calibrated(b: _Builder, plan: Plan, margins: list) -> list:
    """A calibrated head's class probabilities and class index, as scikit-learn's
    CalibratedClassifierCV.predict_proba and predict compute them: per member (its
    decision values are margins[m R .. m R + R - 1], R = 1 binary, else one per class),
    each decision value through its calibrator (`_lower_calibrator`); binary: p0 = 1 -
    p1; multiclass: each divided by their sum (numpy's sum, `_numpy_row_sum`), 1/K
    each where the sum is 0; then a value in (1, CALIBRATED_SNAP] is 1.0. The mean over
    the members is 0.0 plus each member's probability in member order, divided by the
    number of members (sklearn's mean_proba += proba; mean_proba /= n); the class is
    the first of the largest mean (numpy's argmax). A binary head outputs p1 and 1 - p1,
    as every binary link (scikit-learn's mean of the members' p0 may differ from it in
    the last bit); its class is decided on scikit-learn's two means. A NaN margin (which
    the input guards rule out) would give NaN probabilities, as in scikit-learn, and
    class 0; an infinite one an isotonic calibrator's value at that end, as numpy's clip
    and interp give."""
    cal = plan.calibration
    n_classes = len(plan.classes)
    per = 1 if plan.task == "binary" else n_classes
    members = []
    for m in range(cal.members):
        raw = [_lower_calibrator(b, plan, margins[m * per + k], cal.calibrators[m * per + k])
               for k in range(per)]
        if plan.task == "binary":
            probs = [b.emit("sub", Const(1.0), raw[0], hint="p"), raw[0]]
        else:
            total = _numpy_row_sum(b, raw)
            zero = b.emit("eq", total, Const(0.0), hint="f")
            d = b.emit("select", zero, Const(1.0), total)
            probs = [b.emit("select", zero, Const(1 / n_classes), b.emit("div", p, d), hint="p")
                     for p in raw]
        snapped = []
        for p in probs:
            keep = b.emit("select", b.emit("ge", Const(CALIBRATED_SNAP), p, hint="f"),
                          Const(1.0), p)
            snapped.append(b.emit("select", b.emit("gt", p, Const(1.0), hint="f"), keep, p,
                                  hint="p"))
        members.append(snapped)
    mean = [b.emit("div", b.emit("sum", Const(0.0), *(probs[j] for probs in members)),
                   Const(float(cal.members)), hint="p") for j in range(n_classes)]
    top, best = mean[0], Const(0)
    for k in range(1, n_classes):
        higher = b.emit("gt", mean[k], top)
        top = b.emit("select", higher, mean[k], top)
        best = b.emit("select", higher, Const(k), best, hint="k")
    if plan.task == "binary":  # as for every binary link, the output p0 is 1 - p1
        return [b.emit("sub", Const(1.0), mean[1], hint="p"), mean[1], best]
    return [*mean, best]


def _numpy_row_sum(b: _Builder, xs: list):
    """numpy's sum of a row of reals (np.sum(a, axis=1) on a C-ordered array): 0.0 plus
    its pairwise sum of the row (`_pairwise_sum`)."""
    if len(xs) < 8:  # ((0.0 + x0) + x1) + ...: the outer 0.0 + changes nothing
        return b.emit("sum", Const(0.0), *xs)
    return b.emit("add", Const(0.0), _pairwise_sum(b, xs))


def _pairwise_sum(b: _Builder, xs: list):
    """numpy's pairwise_sum: below 8 values a left fold from 0.0; up to 128, eight running
    sums combined in pairs, then the rest added in order; past 128, the two halves (the
    first a multiple of 8) summed apart and added."""
    n = len(xs)
    if n < 8:
        return b.emit("sum", Const(0.0), *xs)
    if n > 128:
        half = n // 2
        half -= half % 8
        return b.emit("add", _pairwise_sum(b, xs[:half]), _pairwise_sum(b, xs[half:]))
    acc = list(xs[:8])
    i = 8
    while i < n - n % 8:
        acc = [b.emit("add", acc[j], xs[i + j]) for j in range(8)]
        i += 8
    pair = [b.emit("add", acc[j], acc[j + 1]) for j in range(0, 8, 2)]
    total = b.emit("add", b.emit("add", pair[0], pair[1]), b.emit("add", pair[2], pair[3]))
    return b.emit("sum", total, *xs[i:]) if i < n else total


def _lower_calibrator(b: _Builder, plan: Plan, f, cal):
    """One class's calibrated probability from its decision value f. Sigmoid: scikit-
    learn's expit(-(a f + b)) (the stable sigmoid of the program, its exp guarded).
    Isotonic: scikit-learn clips f to [t_0, t_n], then numpy's interp gives, on the
    segment t_j <= f < t_j+1 (j found by a bucket over t_1 .. t_n-1, its constants by
    lookups, as the quantile step's pieces), slope_j * (f - t_j) + v_j with slope_j =
    (v_j+1 - v_j) / (t_j+1 - t_j) (the model's constants, one IEEE division each), and v_n
    at f = t_n exactly; at f = t_j the product is 0 and the value v_j, which is interp's
    own special case."""
    if cal.method == "sigmoid":
        z = b.emit("neg", b.emit("add", b.emit("mul", Const(cal.a), f), Const(cal.b)))
        return _lower_logit(b, plan, z)[1]
    xs, ys = cal.thresholds, cal.values
    if len(xs) == 1:  # scikit-learn's constant prediction
        return Const(ys[0])
    c = b.emit("min", b.emit("max", f, Const(xs[0])), Const(xs[-1]), hint="v")
    inner = _linear_piece(b, c, xs[:-1], ys[:-1], cal.slopes())
    return b.emit("select", b.emit("ge", c, Const(xs[-1]), hint="f"), Const(ys[-1]), inner,
                  hint="p")


# expm1(r) = r + r^2/2! + ... on |r| <= ln2/2 (+ rounding): 16 terms, the first one left
# out below 3e-20 of the sum
EXPM1_SERIES = tuple(1.0 / math.factorial(k) for k in range(1, 17))
EXPM1_SPLIT = 1.5 * 2.0 ** 52  # (a + split) - split: a rounded to the nearest integer


def _lower_expm1(b: _Builder, g, single: bool = False):
    """exp(g) - 1 for a guarded g, in primitives only (no runtime exp, so the same bits on
    every target): k = g / ln2 rounded, r = g - k ln2 (ln2 in two parts, k * LN2_HI
    exact), e = expm1(r) by its series; the value is e when k = 0, else
    (e + 1) * 2^k - 1, 2^k made of selected powers of two (every product exact).
    Measured against mpmath (tests/test_heads.py)."""
    if single:
        raise ScorewrightError("the log1p link (expm1 of the margin) is not scored in single "
                               "precision; use a double target")
    k = b.emit("sub", b.emit("add", b.emit("mul", g, Const(float.fromhex(
        portable_exp.CONSTANTS["INV_LN2"]))), Const(EXPM1_SPLIT)), Const(EXPM1_SPLIT))
    r = b.emit("sub", g, b.emit("mul", k, Const(float.fromhex(
        portable_exp.CONSTANTS["LN2_HI"]))))
    r = b.emit("sub", r, b.emit("mul", k, Const(float.fromhex(
        portable_exp.CONSTANTS["LN2_LO"]))))
    s = Const(EXPM1_SERIES[-1])
    for c in reversed(EXPM1_SERIES[:-1]):
        s = b.emit("add", b.emit("mul", s, r), Const(c))
    e = b.emit("mul", s, r)
    scale = _pow2_of(b, k, hint="t")
    whole = b.emit("sub", b.emit("mul", b.emit("add", e, Const(1.0)), scale), Const(1.0))
    return b.emit("select", b.emit("eq", k, Const(0.0)), e, whole, hint="y")


def exp_in_primitives(program: Program) -> Program:
    """The program with each exp written out as the portable exp (`portable_exp.STEPS`) in
    primitives, for a target that carries no routine of its own (ONNX): the same bits as
    `portable_exp.exp`, step for step. Only a plan whose exp is the portable one."""
    if program.plan.exp_kind != "portable":
        raise ValueError("only the portable exp is written in primitives")
    b = _Builder()
    b.types.update({op.dest: op.type for op in program.ops})
    ops = []
    for op in program.ops:
        if op.op != "exp":
            ops.append(op)
            continue
        b.ops = []
        y, scale = _lower_portable_exp(b, op.args[0])
        ops.extend(b.ops)
        ops.append(Op(op.dest, "mul", (y, scale), REAL))
    return Program(program.plan, tuple(ops), program.outputs)


# (a + split) - split is a rounded to the nearest integer, for 0 <= a < 2^51
_ROUND_SPLIT = 1.5 * 2.0 ** 52


def _lower_portable_exp(b: _Builder, x) -> tuple[str, str]:
    """`portable_exp.STEPS` in primitives: (y, 2^k), whose product is the portable exp of x.
    half_away is a selection; trunc is the floor of |t| (rounded by the split, less one
    where that rounded up) with t's sign, +0 for a zero; scale2 is a product of selected
    powers of two (`_pow2_of`), exactly 2^k, so y * 2^k is the routine's one rounding."""
    c = {name: Const(float.fromhex(text)) for name, text in portable_exp.CONSTANTS.items()}
    x = b.emit("max", x, c["LOW"], hint="xp")
    x = b.emit("min", x, c["HIGH"], hint="xp")
    t = b.emit("mul", x, c["INV_LN2"], hint="xp")
    up = b.emit("ge", t, Const(0.0), hint="xp")
    t = b.emit("add", t, b.emit("select", up, c["HALF"], Const(-c["HALF"].value), hint="xp"),
               hint="xp")
    a = b.emit("abs", t, hint="xp")
    n = b.emit("sub", b.emit("add", a, Const(_ROUND_SPLIT), hint="xp"), Const(_ROUND_SPLIT),
               hint="xp")
    n = b.emit("select", b.emit("gt", n, a, hint="xp"), b.emit("sub", n, c["ONE"], hint="xp"),
               n, hint="xp")
    k = b.emit("select", b.emit("ge", t, Const(0.0), hint="xp"), n,
               b.emit("sub", Const(0.0), n, hint="xp"), hint="xp")
    hi = b.emit("sub", x, b.emit("mul", k, c["LN2_HI"], hint="xp"), hint="xp")
    lo = b.emit("mul", k, c["LN2_LO"], hint="xp")
    r = b.emit("sub", hi, lo, hint="xp")
    z = b.emit("mul", r, r, hint="xp")
    p = b.emit("mul", z, c["P5"], hint="xp")
    for coef in ("P4", "P3", "P2"):
        p = b.emit("mul", z, b.emit("add", p, c[coef], hint="xp"), hint="xp")
    p = b.emit("mul", z, b.emit("add", p, c["P1"], hint="xp"), hint="xp")
    cc = b.emit("sub", r, p, hint="xp")
    q = b.emit("div", b.emit("mul", r, cc, hint="xp"), b.emit("sub", c["TWO"], cc, hint="xp"),
               hint="xp")
    y = b.emit("sub", b.emit("sub", lo, q, hint="xp"), hi, hint="xp")
    y = b.emit("sub", c["ONE"], y, hint="xp")
    return y, _pow2_of(b, k)


def _pow2_of(b: _Builder, k, hint: str = "xp"):
    """2^k for an integral real k in [-1022, 1023], as the product of the powers 2^j
    (then 2^-j) of k's binary digits: each product a power of two between 1 and 2^k,
    so exact (the expm1 lowering's and the portable exp's scaling)."""
    scale, rest = Const(1.0), k
    for j in (512, 256, 128, 64, 32, 16, 8, 4, 2, 1):
        up = b.emit("ge", rest, Const(float(j)), hint=hint)
        scale = b.emit("mul", scale, b.emit("select", up, Const(2.0 ** j), Const(1.0),
                                            hint=hint), hint=hint)
        rest = b.emit("sub", rest, b.emit("select", up, Const(float(j)), Const(0.0),
                                          hint=hint), hint=hint)
    for j in (512, 256, 128, 64, 32, 16, 8, 4, 2, 1):
        down = b.emit("ge", Const(float(-j)), rest, hint=hint)
        scale = b.emit("mul", scale, b.emit("select", down, Const(2.0 ** -j), Const(1.0),
                                            hint=hint), hint=hint)
        rest = b.emit("add", rest, b.emit("select", down, Const(float(j)), Const(0.0),
                                          hint=hint), hint=hint)
    return scale


def inverse_floor(plan: Plan) -> float:
    """The smallest normal number of the plan's precision: the inverse link divides by a
    margin at least this far from zero."""
    return 2.0 ** -126 if plan.precision.name == "float" else 2.0 ** -1022


def _lower_inverse(b: _Builder, plan: Plan, m):
    """1 / m (a Gamma model's inverse link: statsmodels' InversePower). A margin nearer
    zero than the smallest normal number, where 1 / m overflows or divides by zero, is
    taken as that number with the margin's sign (+0 and -0 as +): the value is then the
    largest the link gives (about 4.5e307 in double), the same on every target. Single
    precision is refused: near the pole a float margin's rounding (cancellation among its
    terms) moves 1 / m without bound, so no stated tolerance could hold."""
    if plan.precision.name == "float":
        raise ScorewrightError("the inverse link (1 / margin) is not scored in single "
                               "precision: near its pole the float margin's rounding moves "
                               "the value without bound; use a double target")
    tiny = inverse_floor(plan)
    small = b.emit("gt", Const(tiny), b.emit("abs", m), hint="f")
    edge = b.emit("select", b.emit("ge", m, Const(0.0), hint="f"), Const(tiny), Const(-tiny))
    return b.emit("div", Const(1.0), b.emit("select", small, edge, m), hint="y")


def _lower_logit(b: _Builder, plan: Plan, m) -> tuple[str, str]:
    """The stable sigmoid: exp of -|m| only, so nothing overflows."""
    a = b.emit("abs", m)
    a = b.emit("min", a, Const(plan.precision.exp_guard))
    t = b.emit("exp", b.emit("neg", a))
    d = b.emit("add", Const(1.0), t)
    p1 = b.emit("select", b.emit("ge", m, Const(0.0)),
                b.emit("div", Const(1.0), d), b.emit("div", t, d), hint="p")
    return b.emit("sub", Const(1.0), p1, hint="p"), p1


def _lower_probit(b: _Builder, plan: Plan, m) -> tuple[str, str]:
    """Phi(m) through the upper tail q = Phi(-|m|) (`normal_tail`, which states the
    method): p1 is q for a negative margin, else 1 - q. As for every binary link, p0
    is 1 - p1 (a binary target outputs p1 alone)."""
    prec = plan.precision
    coef = normal_tail.coefficients()
    a = b.emit("min", b.emit("abs", m), Const(prec.normal_max))
    z = b.emit("mul", a, Const(float.fromhex(normal_tail.INV_SQRT2)))
    d = b.emit("add", Const(2.0), z)
    y = b.emit("div", b.emit("sub", Const(2.0), z), d)
    t = b.emit("div", Const(2.0), d)
    # Clenshaw: b_k = (2y b_{k+1} - b_{k+2}) + c_k, down to f = (y b_1 - b_2) + c_0
    y2 = b.emit("add", y, y)
    b1, b2 = Const(coef[-1]), None
    for k in range(len(coef) - 2, 0, -1):
        r = b.emit("mul", y2, b1)
        if b2 is not None:
            r = b.emit("sub", r, b2)
        b1, b2 = b.emit("add", r, Const(coef[k])), b1
    f = b.emit("add", b.emit("sub", b.emit("mul", y, b1), b2), Const(coef[0]))
    # exp(-a^2/2 + f) = exp(-ah^2/2) * exp(f - (a - ah)(a + ah)/2), ah^2 exact
    ah = b.emit("sub", b.emit("add", a, Const(prec.normal_split)), Const(prec.normal_split))
    e1 = b.emit("exp", b.emit("neg", b.emit("mul", b.emit("mul", ah, ah), Const(0.5))))
    low = b.emit("mul", b.emit("mul", b.emit("sub", a, ah), b.emit("add", a, ah)), Const(0.5))
    e2 = b.emit("exp", b.emit("sub", f, low))
    q = b.emit("mul", b.emit("mul", b.emit("mul", Const(0.5), t), e2), e1, hint="q")
    p1 = b.emit("select", b.emit("ge", m, Const(0.0)), b.emit("sub", Const(1.0), q), q,
                hint="p")
    return b.emit("sub", Const(1.0), p1, hint="p"), p1


# 1 - exp(-u) = u - u^2/2! + u^3/3! - ... for u below CLOGLOG_SERIES_BELOW (11 terms:
# the first one left out is below 4e-19 of the sum), where 1 - exp(-u) would cancel.
CLOGLOG_SERIES_BELOW = 0.125
CLOGLOG_SERIES = tuple((-1) ** (k + 1) / math.factorial(k) for k in range(1, 12))


def _lower_cloglog(b: _Builder, plan: Plan, m) -> tuple[str, str]:
    """p1 = 1 - exp(-exp(m)), m clamped to [-exp_guard, cloglog_max] so both exps stay
    normal; by its series where u = exp(m) is small; p0 = 1 - p1."""
    prec = plan.precision
    g = b.emit("max", m, Const(-prec.exp_guard))
    g = b.emit("min", g, Const(prec.cloglog_max))
    u = b.emit("exp", g, hint="u")
    e = b.emit("exp", b.emit("neg", u))
    s = Const(CLOGLOG_SERIES[-1])
    for c in reversed(CLOGLOG_SERIES[:-1]):
        s = b.emit("add", b.emit("mul", s, u), Const(c))
    series = b.emit("mul", s, u)
    small = b.emit("gt", Const(CLOGLOG_SERIES_BELOW), u)
    p1 = b.emit("select", small, series, b.emit("sub", Const(1.0), e), hint="p")
    return b.emit("sub", Const(1.0), p1, hint="p"), p1


# atan(u) = u + u^3 P(u^2) on |u| <= 7/16 (Chebyshev fit of 11 terms with mpmath;
# `fit_atan_coefficients` re-derives them; at most 1.02 * 2^-53 relative, measured)
ATAN_P = tuple(float.fromhex(c) for c in (
    "-0x1.5555555555554p-2", "0x1.999999999885fp-3", "-0x1.24924923b06cdp-3",
    "0x1.c71c7136517a9p-4", "-0x1.745cff6136307p-4", "0x1.3b116171b0dd7p-4",
    "-0x1.10ed1cedbec09p-4", "0x1.df0b70d0fde14p-5", "-0x1.9c6054173be88p-5",
    "0x1.35da608772867p-5", "-0x1.1f782b80bfd1ep-6"))
ATAN_HALF = float.fromhex("0x1.dac670561bb4fp-2")   # atan(1/2), rounded (mpmath)
QUARTER_PI = float.fromhex("0x1.921fb54442d18p-1")  # atan(1), rounded
INV_PI = float.fromhex("0x1.45f306dc9c883p-2")      # 1/pi, rounded
CAUCHIT_MAX = 2.0 ** 100  # a margin beyond +-2^100 is taken as +-2^100


def fit_atan_coefficients(prec_bits: int = 200) -> list[str]:
    import mpmath as mp

    with mp.workprec(prec_bits):
        top = mp.mpf(7) / 16

        def g(z):
            if z == 0:
                return mp.mpf(-1) / 3
            s = mp.sqrt(z)
            return (mp.atan(s) - s) / s ** 3

        poly = mp.chebyfit(g, [0, top ** 2 * mp.mpf("1.0001")], 11)
        return [float.hex(float(c)) for c in reversed(poly)]


def _lower_atan01(b: _Builder, t):
    """atan(t) for t in [0, 1], the same bits everywhere: t is reduced around 0, 1/2 or 1
    (below 7/16, below 11/16, else: atan(t) = atan(c) + atan((t - c) / (1 + t c))), then
    the odd polynomial `ATAN_P` on |u| <= 7/16 (a classic method). Every branch is
    computed and one selected; no division meets zero."""
    r1 = b.emit("ge", t, Const(7.0 / 16.0), hint="f")
    r2 = b.emit("ge", t, Const(11.0 / 16.0), hint="f")
    half = b.emit("div", b.emit("sub", b.emit("add", t, t), Const(1.0)),
                  b.emit("add", Const(2.0), t))
    one = b.emit("div", b.emit("sub", t, Const(1.0)), b.emit("add", t, Const(1.0)))
    u = b.emit("select", r2, one, b.emit("select", r1, half, t))
    base = b.emit("select", r2, Const(QUARTER_PI),
                  b.emit("select", r1, Const(ATAN_HALF), Const(0.0)))
    z = b.emit("mul", u, u)
    p = Const(ATAN_P[-1])
    for c in reversed(ATAN_P[:-1]):
        p = b.emit("add", b.emit("mul", p, z), Const(c))
    return b.emit("add", base, b.emit("add", u, b.emit("mul", u, b.emit("mul", z, p))))


def _lower_cauchit(b: _Builder, plan: Plan, m) -> tuple[str, str]:
    """The Cauchy CDF 1/2 + atan(m)/pi through its upper tail q = P(X > |m|): for
    |m| <= 1, 1/2 - atan(|m|)/pi; beyond, atan(1/|m|)/pi (no cancellation in the far
    tail); p1 is q for a negative margin, else 1 - q; |m| at most CAUCHIT_MAX."""
    a = b.emit("min", b.emit("abs", m), Const(CAUCHIT_MAX))
    big = b.emit("gt", a, Const(1.0), hint="f")
    t = b.emit("select", big, b.emit("div", Const(1.0), b.emit("select", big, a, Const(1.0))),
               a)
    share = b.emit("mul", _lower_atan01(b, t), Const(INV_PI))
    q = b.emit("select", big, share, b.emit("sub", Const(0.5), share), hint="q")
    p1 = b.emit("select", b.emit("ge", m, Const(0.0)), b.emit("sub", Const(1.0), q), q,
                hint="p")
    return b.emit("sub", Const(1.0), p1, hint="p"), p1


def _lower_log_binary(b: _Builder, plan: Plan, m) -> tuple[str, str]:
    """A log-binomial model's probability p1 = exp(m) (statsmodels' Binomial family with
    the log link), m clamped to [-exp_guard, 0]: a margin above 0, where exp(m) would
    exceed 1, gives 1; p0 = 1 - p1."""
    g = b.emit("max", m, Const(-plan.precision.exp_guard))
    g = b.emit("min", g, Const(0.0))
    p1 = b.emit("exp", g, hint="p")
    return b.emit("sub", Const(1.0), p1, hint="p"), p1


_BINARY_LINKS = {"logit": _lower_logit, "probit": _lower_probit, "cloglog": _lower_cloglog,
                 "cauchit": _lower_cauchit, "log": _lower_log_binary}


def link_probability(link: str, margin: float, precision=None, exp_kind: str = "libm") -> float:
    """The positive-class probability a binary link's lowering gives for one margin, run
    by the scalar op table (what every target computes)."""
    from .plan import DOUBLE

    plan = Plan(name="link", stem="link", sha256="", task="binary", link=link,
                classes=(0, 1), precision=precision or DOUBLE, inputs=(), terms=(),
                intercepts=(margin,), cut=0.0, exp_kind=exp_kind)
    return run_row(lower(plan), {})["probability_1"]


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


def _bucket(x, edges):
    return bisect.bisect_right(edges, x)


SCALAR = {
    "is_missing": lambda x: not math.isfinite(x),
    "add": lambda a, b: a + b, "sub": lambda a, b: a - b,
    "mul": lambda a, b: a * b, "div": lambda a, b: a / b,
    "min": _py_min, "max": _py_max, "neg": lambda a: -a, "abs": abs, "sqrt": math.sqrt,
    "gt": lambda a, b: a > b, "ge": lambda a, b: a >= b, "eq": lambda a, b: a == b,
    "or": lambda f, g: bool(f or g),
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
        elif op.op == "bucket":
            value = _bucket(args[0], op.attr)
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
    "div": np.divide, "neg": np.negative, "abs": np.abs, "sqrt": np.sqrt,
    # max(a, b) is a unless b > a, as the scalar selection (and NaN-free here).
    "max": lambda a, b: np.where(np.greater(b, a), b, a),
    "min": lambda a, b: np.where(np.less(b, a), b, a),
    "gt": np.greater, "ge": np.greater_equal, "eq": np.equal, "or": np.logical_or,
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
            # np.asarray: on a 0-d operand (a constant margin) frompyfunc gives a float
            value = np.asarray(_EXP[plan.exp_kind](np.asarray(args[0], dtype=np.float64)),
                               dtype=np.float64)
        elif op.op == "lookup":
            value = _np_lookup(args[0], op.attr)
        elif op.op == "bucket":
            value = np.searchsorted(np.asarray(op.attr, dtype=np.float64), args[0],
                                    side="right").astype(np.int64)
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
            if op.dest in out or (op.op not in SCALAR and op.op not in ("lookup", "bucket")):
                continue
            args = [_fold_const(a, dtype) if isinstance(a, Const) else out.get(a, _UNKNOWN)
                    for a in op.args]
            if op.op == "select" and args[0] is not _UNKNOWN:
                value = args[1] if args[0] else args[2]
            elif any(a is _UNKNOWN for a in args):
                continue
            elif op.op == "lookup":
                value = dtype(_lookup(int(args[0]), op.attr))
            elif op.op == "bucket":
                value = _bucket(args[0], op.attr)
            else:
                value = SCALAR[op.op](*args)
            if value is not _UNKNOWN:
                out[op.dest] = value
    return out


_UNKNOWN = object()


def _fold_const(arg: Const, dtype):
    return arg.value if arg.type == CODE else dtype(arg.value)
