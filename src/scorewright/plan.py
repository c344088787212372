"""The scoring plan: a frozen model's inputs, terms, guards and head, per precision.

`program.lower` turns the plan into the scoring program, the ordered list of typed
operations every target renders; the rules below are what that lowering writes out.
Evaluation, in order:

1. Inputs, in feature order.
   Numeric: a value that is absent, null, NaN, +-inf or not a number is
   *missing*; so is a value outside the domain of a feature's first step when that
   is a transform (log: <= 0, log1p: <= -1, sqrt: < 0). A missing value takes
   `fill` (raw units) when there is one; without a fill the feature's design value
   is exactly 0.0 and steps 2-4 are skipped. The value is then clamped to
   [-bound, bound] (the guard that keeps every later intermediate finite), the
   steps are applied one by one (`v = log(v)`, `log1p(v)`, `sqrt(v)`; `v = v - c`,
   `v = v / c`, `v = v * c`, `v = v + c`), then the optional clip
   (`v = min(max(v, lo), hi)`). log and log1p are the portable ones the program
   writes out (`program._lower_log`), the same bits on every target.
   Categorical: the value's level code (its index in `levels`); a missing value
   takes `fill_code` (or, without one, is treated as unseen); an unseen value
   takes `unknown_code` (or, without one, no level: every indicator is 0).
2. Margins, one per output k: s = t_0; s = s + t_1; ...; s = s + intercept_k,
   where a numeric term is `weight_k * v`, a categorical term is the looked-up
   contribution `table_k[code]` (0.0 for no level), a bins term the contribution of
   the value's bin (0.0 when missing without a fill), and a missing-indicator term is
   one of two contributions, as the input is present or missing (missing as step 1
   reads it, before the fill). Terms whose weights are all
   zero are left out. A model with an offset or exposure (`Plan.offset`, the feature's
   role) sums a second margin, the rate's: the same terms in the same order without the
   offset's, then the intercept.
3. Link: binary, the stable sigmoid (logit), the normal CDF (probit, through the
   upper tail in `normal_tail`) or 1 - exp(-exp(m)) (cloglog); multiclass, the
   max-shifted softmax; "decision" (binary or multiclass), none: the margins are the
   decision function and no probability is computed; regression, identity or the
   guarded exp (with an offset: the count from the first margin, the rate from the
   second). Every `exp` argument is clamped to [-exp_guard, +exp_guard] so no runtime
   overflows, underflows to a subnormal or raises (PostgreSQL raises on both).
4. Decision: binary, the positive class iff margin > cut; multiclass, the class
   of the largest margin, lowest index on ties.

Precision "float" lowers the same plan with float32 guards and budget for
targets that compute in single precision.

`exp_kind` names the exp every step uses: "libm" (the runtime's exp; the
reference evaluator calls CPython's math.exp, which is the C library's) or
"portable" (scorewright.portable_exp, which targets built with --portable-exp
carry), so such a target is compared with a reference using the same exp.
"""

from __future__ import annotations

import itertools
import math
import re
from dataclasses import dataclass

from .errors import ScorewrightError
from .model import (BINS, DECISION, POWER_OPS, QUANTILE, SPLINE, TRANSFORM_OPS,
                    CategoricalFeature,
                    FrozenModel, NumericFeature, ScalingStep, bin_count)


@dataclass(frozen=True)
class Precision:
    name: str
    budget: float     # |margin| never exceeds this, so sums and differences stay finite
    exp_guard: float  # exp() arguments are clamped to [-exp_guard, exp_guard]
    log_link_max: float  # the log link clamps its exp argument to at most this
    max_value: float  # cap for any intermediate
    normal_max: float   # probit: |margin| is clamped to this (the tail stays a normal number)
    normal_split: float  # probit: (a + split) - split rounds a to a few bits (see program)
    cloglog_max: float  # cloglog: the margin is clamped to at most this (exp(-exp(m)) normal)


# exp(-708) = 3.3e-308 is still a normal double; exp(709) = 8.2e307 is finite.
# Phi(-37.5) = 4.6e-308 is still normal, and its exp arguments stay >= -703.2;
# 1.5 * 2^36 has an ULP of 2^-16; exp(-exp(6.5)) = exp(-665.1) is normal.
DOUBLE = Precision("double", budget=1e300, exp_guard=708.0, log_link_max=709.0, max_value=1e300,
                   normal_max=37.5, normal_split=1.5 * 2.0 ** 36, cloglog_max=6.5)
# expf(-87) = 1.6e-38 is still a normal float; expf(88) = 1.65e38 is finite.
# Phi(-12.5) = 3.7e-36; 1.5 * 2^15 has a float ULP of 2^-8; exp(-exp(4.4)) = exp(-81.5).
FLOAT = Precision("float", budget=1e36, exp_guard=87.0, log_link_max=88.0, max_value=1e36,
                  normal_max=12.5, normal_split=1.5 * 2.0 ** 15, cloglog_max=4.4)
PRECISIONS = {"double": DOUBLE, "float": FLOAT}

# A bound below this would clamp ordinary data; such a model is refused.
MIN_USEFUL_BOUND = {"double": 1e15, "float": 1e6}


@dataclass(frozen=True)
class NumericInput:
    index: int
    name: str
    fill: float | None
    bound: float
    steps: tuple[ScalingStep, ...]
    clip: tuple[float, float] | None
    boolean: bool = False   # fitted on a bool column: the words true/false read as 1/0
    kind: str = "numeric"


@dataclass(frozen=True)
class CategoricalInput:
    index: int
    name: str
    levels: tuple
    fill_code: int | None
    unknown_code: int | None
    kind: str = "categorical"

    @property
    def integer_levels(self) -> bool:
        return isinstance(self.levels[0], int)


@dataclass(frozen=True)
class Term:
    """One input's contribution to each margin."""

    input: int                           # index into Plan.inputs
    # "numeric", "categorical", "encoded", "bins", "missing", "product" or "basis"
    kind: str
    weights: tuple[float, ...] = ()      # numeric: one weight per output
    # categorical: per output, one value per level code (bins: per bin); encoded: the
    # same, then the unseen and the missing contributions; missing: per output, the
    # contribution (weight * value) when the input is present and missing
    tables: tuple[tuple[float, ...], ...] = ()
    # product: its factors, each (input index, "numeric", steps) | (input, "levels", codes)
    # | (input, "missing", (present, missing)), multiplied left to right; then `steps`
    factors: tuple = ()
    steps: tuple = ()
    # basis: the spline basis index (weights per output; then `steps`, the column's own);
    # normalized: the column's position among its `factors` (each (input, "numeric",
    # steps)), divided by their `norm` (l2, l1, max), then `steps`
    basis: int = -1
    norm: str = ""

    @property
    def lookups(self) -> tuple:
        """The tables the program looks this term up in by level code, one per output:
        a categorical term's tables; an encoded term's values per level (its last two
        entries, the unseen and missing contributions, are selected, not looked up)."""
        if self.kind == "categorical":
            return self.tables
        if self.kind == "encoded":
            return tuple(t[:-2] for t in self.tables)
        return ()


@dataclass(frozen=True)
class Plan:
    name: str
    stem: str            # file-name-safe form of the model name
    sha256: str
    task: str            # binary | multiclass | regression
    link: str            # logit | probit | cloglog | softmax | identity | log
    classes: tuple | None
    precision: Precision
    inputs: tuple
    terms: tuple[Term, ...]
    intercepts: tuple[float, ...]
    cut: float | None
    exp_kind: str = "libm"  # libm | portable
    # link "calibrated": the head's Calibration (the margins are its members' decision
    # values, member by member; program._lower_calibrated)
    calibration: object = None
    # the input that is the model's offset or exposure (format version 4), else None: the
    # program then outputs a second margin, without its term, and the rate from it
    offset: int | None = None

    @property
    def n_outputs(self) -> int:
        return len(self.intercepts)

    @property
    def n_margins(self) -> int:
        """The margins the program sums: one per output, and the rate's (no offset)."""
        return self.n_outputs + (self.offset is not None)

    @property
    def feature_names(self) -> tuple[str, ...]:
        return tuple(i.name for i in self.inputs)

    @property
    def n_probabilities(self) -> int:
        return len(self.classes) if self.has_probabilities else 0

    @property
    def has_probabilities(self) -> bool:
        """A classifier whose link gives probabilities (a "decision" head gives its margins
        and its class alone)."""
        return self.task != "regression" and self.link != DECISION


def file_stem(name: str) -> str:
    """A model name turned into a safe file name (no path separators, no dots first)."""
    stem = re.sub(r"[^A-Za-z0-9_-]+", "_", name).strip("_")[:64]
    return stem or "model"


EXP_KINDS = ("libm", "portable")


def build_plan(model: FrozenModel, precision: str = "double", exp: str = "libm") -> Plan:
    prec = PRECISIONS[precision]
    if exp not in EXP_KINDS:
        raise ScorewrightError(f"exp {exp!r}: expected one of {', '.join(EXP_KINDS)}")
    inputs = []
    for index, feat in enumerate(model.features):
        if isinstance(feat, NumericFeature):
            inputs.append(("numeric", feat))
        else:
            inputs.append(("categorical", feat))
    head = model.head
    n_out = len(head.intercepts)
    # Terms in the order of each input's first design column.
    index_of = {f.name: i for i, f in enumerate(model.features)}
    columns: dict[int, list[int]] = {}
    for j, col in enumerate(model.design):
        columns.setdefault(index_of[col.feature], []).append(j)
    terms: list[Term] = []
    for i, all_cols in columns.items():
        feat = model.features[i]
        cols = [j for j in all_cols if model.design[j].missing is None
                and model.design[j].product is None and model.design[j].encoded is None
                and model.design[j].basis is None and model.design[j].normalized is None]
        if isinstance(feat, NumericFeature) and cols and model.design[cols[0]].levels:
            # one indicator per bin: per output, the contribution of each bin
            tables = []
            for k in range(n_out):
                row = [0.0] * bin_count(feat)
                for j in cols:
                    for b in model.design[j].levels:
                        row[b] = head.coefficients[k][j]
                tables.append(tuple(row))
            if any(v != 0.0 for t in tables for v in t):
                terms.append(Term(i, "bins", tables=tuple(tables)))
        elif isinstance(feat, NumericFeature):
            weights = tuple(head.coefficients[k][cols[0]] for k in range(n_out)) if cols \
                else ()
            if any(w != 0.0 for w in weights):
                terms.append(Term(i, "numeric", weights=weights))
        elif cols:
            code = {level: c for c, level in enumerate(feat.levels)}
            tables = []
            for k in range(n_out):
                row = [0.0] * len(feat.levels)
                for j in cols:
                    for level in model.design[j].levels:
                        row[code[level]] = head.coefficients[k][j]
                tables.append(tuple(row))
            if any(v != 0.0 for t in tables for v in t):
                terms.append(Term(i, "categorical", tables=tuple(tables)))
        for j in all_cols:
            weights = tuple(head.coefficients[k][j] for k in range(n_out))
            if model.design[j].normalized is not None:
                if any(w != 0.0 for w in weights):
                    terms.append(_normalized_term(model, index_of, model.design[j], weights,
                                                  prec))
                continue
            if model.design[j].basis is not None:
                if prec.name == "float":
                    raise ScorewrightError(f"feature {feat.name!r}: a spline is not scored in "
                                           "single precision; use a double target")
                if any(w != 0.0 for w in weights):
                    terms.append(Term(i, "basis", weights=weights, basis=model.design[j].basis,
                                      steps=tuple(model.design[j].scaling or ())))
                continue
            enc = model.design[j].encoded
            if enc is not None:
                # per output: weight * value per level, then unseen, then missing
                tables = tuple(tuple(head.coefficients[k][j] * v
                                     for v in (*enc[0], enc[1], enc[2])) for k in range(n_out))
                if any(v != 0.0 for t in tables for v in t):
                    terms.append(Term(i, "encoded", tables=tables))
                continue
            if model.design[j].product is not None:
                if any(w != 0.0 for w in weights):
                    terms.append(_product_term(model, index_of, model.design[j], weights,
                                               prec))
                continue
            pair = model.design[j].missing
            if pair is not None:
                # the contribution when present and when missing, each weight * value
                tables = tuple((head.coefficients[k][j] * pair[0], head.coefficients[k][j]
                                * pair[1]) for k in range(n_out))
                if any(v != 0.0 for t in tables for v in t):
                    terms.append(Term(i, "missing", tables=tables))
    if prec.name == "float" and head.calibration is not None and any(
            c.method == "isotonic" for c in head.calibration.calibrators):
        # measured: a float margin's error times an isotonic slope passes the float
        # targets' stated probability tolerance
        raise ScorewrightError("an isotonic calibrator is not scored in single precision; "
                               "use a double target")
    term_of = {t.input: t for t in terms if t.kind == "numeric"}
    budgets = _term_budgets(terms, head.intercepts, prec)
    built = []
    for i, feat in enumerate(model.features):
        if isinstance(feat, NumericFeature):
            bound = _numeric_bound(feat, term_of.get(i), budgets, prec, i,
                                   [t for t in terms if t.kind == "product"],
                                   [t for t in terms if t.kind == "basis" and t.input == i],
                                   [t for t in terms if t.kind == "normalized"])
            built.append(NumericInput(i, feat.name, feat.fill, bound,
                                      _steps_in(feat.scaling, prec), feat.clip, feat.boolean))
        else:
            built.append(_categorical_input(i, feat))
    return Plan(
        name=model.name,
        stem=file_stem(model.name),
        sha256=model.sha256,
        task=head.task,
        link=head.link,
        classes=head.classes,
        precision=prec,
        inputs=tuple(built),
        terms=tuple(terms),
        intercepts=head.intercepts,
        cut=head.cut,
        exp_kind=exp,
        calibration=head.calibration,
        offset=next((i for i, f in enumerate(model.features)
                     if getattr(f, "role", None) is not None), None),
    )


def _product_term(model, index_of, col, weights, prec: Precision) -> Term:
    if prec.name == "float" and len(col.product) > 2:
        # measured: float targets miss their stated tolerance on cubic terms near the guards
        raise ScorewrightError(f"feature {col.feature!r}: a product of {len(col.product)} "
                               "factors is not scored in single precision; use a double "
                               "target")
    factors = []
    for f in col.product:
        i = index_of[f.feature]
        feat = model.features[i]
        if f.missing is not None:
            factors.append((i, "missing", f.missing))
        elif f.levels is not None:
            if isinstance(feat, NumericFeature):
                raise ScorewrightError(f"feature {feat.name!r}: a bin in a product is not "
                                       "frozen yet")
            codes = {level: c for c, level in enumerate(feat.levels)}
            factors.append((i, "levels", tuple(codes[v] for v in f.levels)))
        else:
            factors.append((i, "numeric", _steps_in(f.scaling, prec)))
    return Term(index_of[col.feature], "product", weights=weights,
                factors=tuple(factors), steps=tuple(col.scaling or ()))


def _normalized_term(model, index_of, col, weights, prec: Precision) -> Term:
    if prec.name == "float":
        raise ScorewrightError(f"feature {col.feature!r}: a normalized column is not scored "
                               "in single precision; use a double target")
    norm, members, position = col.normalized
    factors = tuple((index_of[f.feature], "numeric", _steps_in(f.scaling, prec))
                    for f in members)
    return Term(index_of[col.feature], "normalized", weights=weights, factors=factors,
                steps=tuple(col.scaling or ()), basis=position, norm=norm)


def _steps_in(steps, prec: Precision) -> tuple:
    """The steps as a plan of this precision holds them: in single precision a bin edge
    is the float a float target compares with (the inputs reach it as floats too), so
    the reference puts a value on the same side of it."""
    if prec.name != "float":
        return steps
    if any(s.op == QUANTILE for s in steps):
        raise ScorewrightError("a quantile step is not scored in single precision; use a "
                               "double target")
    import numpy as np

    return tuple(ScalingStep(s.op, s.value, tuple(float(np.float32(e)) for e in s.edges))
                 if s.edges is not None else s for s in steps)


def _categorical_input(index: int, feat: CategoricalFeature) -> CategoricalInput:
    fill = None if feat.fill is None else feat.levels.index(feat.fill)
    unknown = None if feat.unknown_level is None else feat.levels.index(feat.unknown_level)
    return CategoricalInput(index, feat.name, feat.levels, fill, unknown)


def _term_budgets(terms, intercepts, prec: Precision) -> list[float]:
    """Per output, the largest |weight * value| one numeric term may reach so the margin
    stays within the precision's budget."""
    grown = ("numeric", "product", "basis")  # terms whose size the input guard bounds
    n_numeric = max(1, sum(1 for t in terms if t.kind in grown))
    budgets = []
    for k, intercept in enumerate(intercepts):
        fixed = abs(intercept) + sum(_fixed_size(t, k) for t in terms if t.kind not in grown)
        if fixed >= prec.budget / 2:
            raise ScorewrightError(
                f"model coefficients are too large to score safely in {prec.name} "
                f"(intercept plus category contributions reach {fixed:.3g})")
        budgets.append((prec.budget - fixed) / n_numeric)
    return budgets


def _fixed_size(term, k: int) -> float:
    """The largest |contribution| to margin k of a term the input guard does not bound:
    a looked-up or selected one, or a normalized column (|value| <= 1 before its steps,
    taken as 2 for rounding)."""
    if term.kind != "normalized":
        return max(abs(v) for v in term.tables[k])
    size = 2.0
    for step in term.steps:
        c = abs(step.value)
        size = size + c if step.op in ("subtract", "add") else \
            size * c if step.op == "multiply" else size / c
    return abs(term.weights[k]) * size


def _backward(allowed: float, steps, prec: Precision) -> float:
    """The largest |input| of these steps whose every intermediate and output stays
    within `allowed` (and the precision's cap)."""
    for step in reversed(steps):
        if step.op == SPLINE:
            allowed = min(_spline_backward(allowed, step), prec.max_value)
            continue
        if step.op in POWER_OPS:
            allowed = min(_power_backward(allowed, step), prec.max_value)
            continue
        if step.op == BINS:  # a bin number, 0..len(edges)
            allowed = prec.max_value if allowed >= len(step.edges) else 0.0
            continue
        if step.op == QUANTILE:  # in [0, 1] (uniform) or [-5.2, 5.2] (normal)
            allowed = prec.max_value if allowed >= 6.0 else 0.0
            continue
        if step.op in TRANSFORM_OPS:
            # |log x| and |log1p x| <= 745 for every double the clamp lets through, and
            # sqrt(x) <= x for x >= 1: a transform bounds its own output
            if step.op == "sqrt":
                allowed = min(allowed * allowed, prec.max_value) if allowed < 1e150 \
                    else prec.max_value
            elif allowed >= 745.0:
                allowed = prec.max_value
            else:
                allowed = 0.0
            continue
        c = abs(step.value)
        if step.op in ("subtract", "add"):
            allowed -= c
        elif step.op == "multiply":
            allowed = prec.max_value if c == 0.0 else allowed / c
        else:
            allowed *= c
        allowed = min(allowed, prec.max_value)
        if not allowed > 0:
            break
    return allowed


# A periodic spline reduces x modulo its period by halving steps from period * 2^PERIODS
# down (program._lower_remainder), so its input guard is at most that.
PERIODS = 64


def _spline_backward(allowed: float, step) -> float:
    """The largest |x| whose spline basis values stay within `allowed`. Every basis value
    inside the knots is in [0, 1] ("constant", "error" and "periodic" never leave it);
    "linear" adds at most (|x| + T) * slope; "continue" extends a degree-k polynomial,
    each de Boor level multiplying by at most 2 (|x| + T) / g (T: the largest |knot|, g:
    the smallest knot gap)."""
    from .program import spline_boundary

    if not allowed >= 1.0:
        return 0.0
    t, k = step.knots, step.degree
    reach = max(abs(v) for v in t)
    gap = min(b - a for a, b in itertools.pairwise(t))
    if step.extrapolation == "periodic":
        lo, hi = step.spline_range()
        return (hi - lo) * 2.0 ** PERIODS
    if step.extrapolation == "linear":
        slope = max(abs(v) for side in spline_boundary(step) for v in side[1])
        return (allowed - 1.0) / max(slope, 1.0) - reach
    if step.extrapolation == "continue":
        return gap / 2.0 * allowed ** (1.0 / k) - reach
    return math.inf


def _power_backward(allowed: float, step) -> float:
    """The largest |x| whose power transform stays within `allowed`: each side grows like
    (|x| + 1)^e / e (Yeo-Johnson: e = lambda above zero, 2 - lambda below; Box-Cox: lambda),
    and its expm1 argument e log1p(|x|) stays under 700; an exponent e <= 0 keeps the side
    within 1 / |e| (or log1p's own bound, e = 0)."""
    lam = step.value
    exps = (lam, 2.0 - lam) if step.op == "yeo_johnson" else (lam,)
    bound = math.inf
    for e in exps:
        if e > 0:
            bound = min(bound, math.exp(min(700.0 / e, 700.0)) - 1.0,
                        math.exp(min(math.log(allowed * e) / e, 700.0)) - 1.0
                        if allowed * e > 1 else 0.0)
        elif (e < 0 and not allowed * -e >= 1.0) or (e == 0 and allowed < 745.0):
            return 0.0
    return bound


def _numeric_bound(feat, term, budgets, prec: Precision, index: int = -1,
                   products=(), bases=(), normalized=()) -> float:
    """The largest power of ten B such that clamping the raw value to [-B, B] keeps every
    scaling intermediate, every term and every margin finite (the margin stays within the
    precision's budget). A product term shares its allowance among its numeric factors
    (the n-th root, after its other factors' largest magnitudes)."""
    allowed = prec.max_value
    if term is not None:
        for budget, weight in zip(budgets, term.weights):
            if weight != 0.0:
                allowed = min(allowed, budget / abs(weight))
    if bases:  # a spline: each basis term bounds its input through the column's steps
        room = min(budget / abs(w) for t in bases for budget, w in zip(budgets, t.weights)
                   if w != 0.0)
        room = min(_backward(min(room, prec.max_value), t.steps, prec) for t in bases)
        allowed = min(allowed, room)
    allowed = _backward(allowed, feat.scaling, prec)
    for t in products:
        mine = [f for f in t.factors if f[0] == index and f[1] == "numeric"]
        if not mine:
            continue
        room = min(budget / abs(w) for budget, w in zip(budgets, t.weights) if w != 0.0)
        room = _backward(room, t.steps, prec)
        others = 1.0
        for f in t.factors:
            if f[1] == "missing":
                others *= max(1.0, abs(f[2][0]), abs(f[2][1]))
        n = sum(1 for f in t.factors if f[1] == "numeric")
        room = (room / others) ** (1.0 / n) if room > 0 else 0.0
        for f in mine:
            allowed = min(allowed, _backward(room, f[2], prec))
    for t in normalized:  # a norm sums (squares of) its columns: each stays within room
        room = prec.max_value / len(t.factors)
        if t.norm == "l2":
            room = math.sqrt(room)
        for f in t.factors:
            if f[0] == index:
                allowed = min(allowed, _backward(room, f[2], prec))
    limit = allowed / 2  # slack for rounding in the forward direction
    if not limit >= MIN_USEFUL_BOUND[prec.name]:
        raise ScorewrightError(
            f"feature {feat.name!r}: its scaling constants and coefficient are too large to "
            f"guard in {prec.name} (inputs would have to be clamped to {limit:.3g})")
    exponent = math.floor(math.log10(limit))
    bound = float(f"1e{exponent}")
    if bound > limit:
        bound = float(f"1e{exponent - 1}")
    return bound


def lookup_terms(plan: Plan) -> list[tuple[int, Term]]:
    """(n, term) for every term the program looks up by level code, n counting the
    earlier such terms of its input (a multiclass target encoding gives an input one per
    class), so a target can name each term's tables apart."""
    seen: dict[int, int] = {}
    out = []
    for term in plan.terms:
        if term.lookups:
            out.append((seen.get(term.input, 0), term))
            seen[term.input] = seen.get(term.input, 0) + 1
    return out


def output_columns(plan: Plan) -> tuple[str, ...]:
    """The output columns every tabular target appends, in order (a "decision" head has
    no probability columns)."""
    if plan.task == "binary":
        # a calibrated head of several members: each member's decision value
        margins = ("margin",) if plan.n_outputs == 1 else tuple(
            f"margin_{j}" for j in range(plan.n_outputs))
        probs = ("probability",) if plan.has_probabilities else ()
        return margins + probs + ("predicted_class",)
    if plan.task == "multiclass":
        probs = tuple(f"probability_{j}" for j in range(plan.n_probabilities))
        return (tuple(f"margin_{j}" for j in range(plan.n_outputs)) + probs
                + ("predicted_class",))
    if plan.offset is not None:
        return ("margin", "predicted_value", "predicted_rate")
    return ("margin", "predicted_value")
