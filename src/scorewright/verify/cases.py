"""The rows verify checks: edge cases derived from the model, random rows from its schema,
and the user's own rows, all as typed raw values every runtime can hold.

A typed row maps each feature name to: numeric, a float (NaN and +-inf
included) or None; categorical with text levels, a str or None; with integer
levels, an int or None.
"""

from __future__ import annotations

import csv
import math
import random
from pathlib import Path

from ..errors import ScorewrightError
from ..model import QUANTILE_BOUNDS, TRANSFORM_DOMAIN
from ..plan import Plan
from ..reference import score_row
from ..values import MISSING_CODE, category_code, numeric_value

UNSEEN_TEXT = "<unseen level>"

# Raw numeric values every numeric feature is tried with (one feature at a time).
SPECIAL_NUMBERS = (
    None, math.nan, math.inf, -math.inf, 0.0, -0.0,
    5e-324, -5e-324, 2.2250738585072014e-308, -2.2250738585072014e-308,
    1e308, -1e308, 1.7976931348623157e308, -1.7976931348623157e308, 1e15, -1e15,
)
# Margins the plan treats specially: the exp guards and far beyond.
MARGIN_TARGETS = (0.0, 1.0, -1.0, 36.0, -36.0, 87.0, -87.0, 88.0, -88.0, 708.0, -708.0,
                  709.0, -709.0, 745.0, -745.0, 1000.0, -1000.0, 1e6, -1e6)


def inverse_affine(inp, z: float) -> float | None:
    """The raw value whose scaling steps give design value z (None if not invertible)."""
    return _inverse_steps(inp.steps, z)


def _inverse_steps(steps, z: float) -> float | None:
    x = z
    for step in reversed(steps):
        if step.op in ("bins", "spline", "quantile"):
            return None
        if step.op in ("log", "log1p"):
            if x > 700.0:
                return None
            x = math.exp(x) if step.op == "log" else math.expm1(x)
        elif step.op == "sqrt":
            if x < 0.0:
                return None
            x = x * x
        elif step.op == "subtract":
            x = x + step.value
        elif step.op == "add":
            x = x - step.value
        elif step.op == "multiply":
            if step.value == 0.0:
                return None
            x = x / step.value
        else:
            x = x * step.value
        if not math.isfinite(x):
            return None
    return x


def typical_value(inp) -> float:
    x = inverse_affine(inp, 0.0)
    if x is None and inp.steps and inp.steps[0].op in ("bins", "spline", "quantile"):
        edges = inp.steps[0].edges or inp.steps[0].knots or inp.steps[0].quantiles
        x = edges[len(edges) // 2]
    if x is None:
        x = inp.fill if inp.fill is not None else 0.0
    return x


def unseen_value(inp):
    if inp.integer_levels:
        return max(inp.levels) + 1
    return UNSEEN_TEXT if UNSEEN_TEXT not in inp.levels else UNSEEN_TEXT + "!"


def base_row(plan: Plan) -> dict:
    row = {}
    for inp in plan.inputs:
        if inp.kind == "numeric":
            row[inp.name] = typical_value(inp)
        else:
            row[inp.name] = inp.levels[inp.fill_code if inp.fill_code is not None else 0]
    return row


def edge_rows(plan: Plan) -> list[tuple[str, dict]]:
    """Named edge cases: every special value of every input, and margins at the cut,
    at the exp guards and far beyond."""
    base = base_row(plan)
    out = [("base row", dict(base))]
    all_missing = {inp.name: None for inp in plan.inputs}
    out.append(("every input missing", all_missing))
    for inp in plan.inputs:
        values = []
        if inp.kind == "numeric":
            values = list(SPECIAL_NUMBERS) + [inp.bound, -inp.bound,
                                              math.nextafter(inp.bound, math.inf),
                                              math.nextafter(-inp.bound, -math.inf)]
            if inp.fill is not None:
                values.append(inp.fill)
            if inp.index == plan.offset:
                # an offset or exposure of 1 and around it (0, negative, NaN, +-inf, the
                # subnormals and the huge values are SPECIAL_NUMBERS)
                values += [1.0, -1.0, 0.5, 2.0]
            if inp.steps and inp.steps[0].op in ("bins", "spline"):
                # every bin edge or spline knot, and one double either side
                for edge in inp.steps[0].edges or inp.steps[0].knots:
                    values += [edge, math.nextafter(edge, math.inf),
                               math.nextafter(edge, -math.inf)]
            elif inp.steps and inp.steps[0].op == "quantile":
                values += _quantile_values(inp.steps[0])
            elif inp.steps and inp.steps[0].op in TRANSFORM_DOMAIN:  # a transform's domain edge
                edge = TRANSFORM_DOMAIN[inp.steps[0].op][0]
                values += [edge, math.nextafter(edge, math.inf),
                           math.nextafter(edge, -math.inf), edge + 2.0 ** -30]
            if inp.clip is not None:
                for edge in inp.clip:
                    x = inverse_affine(inp, edge)
                    if x is not None:
                        values += [x, math.nextafter(x, math.inf), math.nextafter(x, -math.inf)]
        else:
            values = list(inp.levels) + [None, unseen_value(inp)]
            if not inp.integer_levels:
                values.append("")
        for value in values:
            row = dict(base)
            row[inp.name] = value
            out.append((f"{inp.name!r} = {value!r}", row))
    out.extend(_norm_rows(plan, base))
    out.extend(_margin_rows(plan, base))
    if plan.task == "multiclass" and not plan.has_probabilities:
        out.extend(_tie_rows(plan, base))
    out.extend(_threshold_rows(plan, base))
    return out


def _tie_rows(plan: Plan, base: dict) -> list[tuple[str, dict]]:
    """A multiclass decision head's ties: for each pair of neighbouring classes, the
    doubles either side of where their margins cross (an exact tie where one exists),
    moving the numeric input that separates them the most."""
    out = []
    for a in range(plan.n_outputs - 1):
        best, best_w = None, 0.0
        for term in plan.terms:
            if term.kind != "numeric":
                continue
            inp = plan.inputs[term.input]
            gap = abs(term.weights[a] - term.weights[a + 1])
            if inp.clip is None and gap > best_w:
                best, best_w = inp, gap
        if best is None:
            continue

        def gap_at(x: float, lever=best, k=a) -> float:
            m = score_row(plan, dict(base, **{lever.name: x})).margins
            return m[k] - m[k + 1]

        lo, hi = _ordered(-best.bound), _ordered(best.bound)
        low_side = gap_at(-best.bound) <= 0.0
        if (gap_at(best.bound) <= 0.0) == low_side:  # the margins do not cross
            continue
        while hi - lo > 1:  # the last x on the side of 0 the gap starts on
            mid = (lo + hi) // 2
            if (gap_at(_from_ordered(mid)) <= 0.0) == low_side:
                lo = mid
            else:
                hi = mid
        for i in (lo - 1, lo, hi, hi + 1):
            x = _from_ordered(i)
            if -best.bound <= x <= best.bound:
                out.append((f"classes {a} and {a + 1} near a tie ({best.name!r} = {x!r})",
                            dict(base, **{best.name: x})))
    return out


def _quantile_values(step) -> list[float]:
    """Every quantile and one double either side; the normal output's bounds (an end
    quantile -+ 1e-7) and one double either side; values beyond both ends."""
    q = step.quantiles
    values = [x for e in q for x in (e, math.nextafter(e, math.inf),
                                     math.nextafter(e, -math.inf))]
    span = max(q[-1] - q[0], 1.0)
    values += [q[0] - span, q[-1] + span]
    if step.output == "normal":
        for edge in (q[0] + QUANTILE_BOUNDS, q[-1] - QUANTILE_BOUNDS):
            values += [edge, math.nextafter(edge, math.inf), math.nextafter(edge, -math.inf)]
    return values


def _norm_rows(plan: Plan, base: dict) -> list[tuple[str, dict]]:
    """Per set of normalized columns: every column 0 (a zero norm, taken as 1), every
    column near the norm's floor, and one column alone."""
    out = []
    seen = set()
    for term in plan.terms:
        if term.kind != "normalized" or (term.norm, term.factors) in seen:
            continue
        seen.add((term.norm, term.factors))
        for label, z in (("0", 0.0), ("1e-16", 1e-16), ("2e-15", 2e-15), ("1", 1.0)):
            row = dict(base)
            for i, _, steps in term.factors:
                x = _inverse_steps(steps, z)
                if x is not None:
                    row[plan.inputs[i].name] = x
            out.append((f"every column of a {term.norm} norm at {label}", row))
        i, _, steps = term.factors[0]
        row = dict(base)
        for j, _, other in term.factors[1:]:
            x = _inverse_steps(other, 0.0)
            if x is not None:
                row[plan.inputs[j].name] = x
        out.append((f"one column of a {term.norm} norm alone", row))
    return out


def _threshold_rows(plan: Plan, base: dict) -> list[tuple[str, dict]]:
    """A calibrated head's isotonic thresholds: per decision value (margin k) and each of
    its thresholds t, rows whose margin is t and one double either side as nearly as the
    numeric input that moves margin k most can put it (the last value of that input whose
    margin is at most the target, and the next one), and margins beyond both ends."""
    import numpy as np

    from ..program import Program, prune
    from ..reference import encode_rows, program_of, run_matrix

    cal = plan.calibration
    if cal is None:
        return []
    goals = []  # (margin k, lever input, target)
    for k, c in enumerate(cal.calibrators):
        lever = _lever(plan, k)
        if c.method != "isotonic" or lever is None:
            continue
        xs = c.thresholds
        span = xs[-1] - xs[0] + 1.0
        for t in xs:
            goals += [(k, lever, v) for v in (math.nextafter(t, -math.inf), t,
                                              math.nextafter(t, math.inf))]
        goals += [(k, lever, xs[0] - span), (k, lever, xs[-1] + span)]
    if not goals:
        return []
    program = program_of(plan)
    names = sorted({f"margin_{k}" for k, _, _ in goals})
    margins_only = Program(plan, prune(program, names), tuple(names))
    row = encode_rows(plan, [base])[0]
    n = len(goals)
    cols = np.array([lever.index for _, lever, _ in goals])
    which = [names.index(f"margin_{k}") for k, _, _ in goals]

    def margins_at(xs):
        matrix = np.tile(row, (n, 1))
        matrix[np.arange(n), cols] = xs
        out = run_matrix(margins_only, matrix)
        return np.array([out[names[w]][i] for i, w in enumerate(which)])

    bound = np.array([lever.bound for _, lever, _ in goals])
    target = np.array([t for _, _, t in goals])
    up = margins_at(bound) >= margins_at(-bound)  # the margin increases with the input
    sign = np.where(up, 1.0, -1.0)
    a, b = _to_ordered(-bound), _to_ordered(bound)
    feasible = sign * margins_at(-bound) <= sign * target
    for _ in range(66):
        mid = (a >> 1) + (b >> 1) + (a & b & 1)  # the floor of the mean, without overflow
        low = sign * margins_at(_from_ordered_array(mid)) <= sign * target
        a, b = np.where(low, mid, a), np.where(low, b, mid)
    out, seen = [], set()
    for i in np.flatnonzero(feasible):
        k, lever, t = goals[i]
        for x in _from_ordered_array(np.array([a[i], b[i]])):
            x = float(x)
            if -lever.bound <= x <= lever.bound and (lever.index, x) not in seen:
                seen.add((lever.index, x))
                r = dict(base)
                r[lever.name] = x
                out.append((f"margin {k} near isotonic threshold {t!r} ({lever.name!r} = "
                            f"{x!r})", r))
    return out


def _to_ordered(x):
    """Doubles as int64s in their order (-0.0 and 0.0 both 0): consecutive doubles are
    consecutive integers, so bisecting the integers bisects the doubles."""
    import numpy as np

    i = np.asarray(x, dtype=np.float64).view(np.int64)
    return np.where(i >= 0, i, np.int64(-(1 << 63)) - i)


def _from_ordered_array(i):
    import numpy as np

    i = np.asarray(i, dtype=np.int64)
    return np.where(i >= 0, i, np.int64(-(1 << 63)) - i).view(np.float64)


def _lever(plan: Plan, k: int = 0):
    """The numeric input that moves margin k the most per design unit (no clip)."""
    best, best_w = None, 0.0
    for term in plan.terms:
        inp = plan.inputs[term.input]
        if term.kind == "numeric" and inp.clip is None and abs(term.weights[k]) > best_w:
            best, best_w = inp, abs(term.weights[k])
    return best


def _ordered(x: float) -> int:
    return int(_to_ordered(x))


def _from_ordered(i: int) -> float:
    return float(_from_ordered_array(i))


def _margin_rows(plan: Plan, base: dict) -> list[tuple[str, dict]]:
    lever = _lever(plan)
    if lever is None:
        return []

    def margin_at(x: float) -> float:
        row = dict(base)
        row[lever.name] = x
        return score_row(plan, row).margins[0]

    lo, hi = -lever.bound, lever.bound
    increasing = margin_at(hi) >= margin_at(lo)
    targets = list(MARGIN_TARGETS)
    if plan.cut is not None and plan.cut not in targets:
        targets.insert(0, plan.cut)
    out = []
    for target in targets:
        # Bisect in the ordering of doubles for the last x whose margin is <= target.
        a, b = _ordered(lo), _ordered(hi)
        fa = margin_at(lo) if increasing else -margin_at(lo)
        goal = target if increasing else -target
        if not fa <= goal:
            continue
        while b - a > 1:
            mid = (a + b) // 2
            fm = margin_at(_from_ordered(mid))
            if (fm if increasing else -fm) <= goal:
                a = mid
            else:
                b = mid
        for i in (a - 1, a, b, b + 1):
            x = _from_ordered(i)
            if not -lever.bound <= x <= lever.bound:
                continue
            row = dict(base)
            row[lever.name] = x
            out.append((f"margin near {target!r} ({lever.name!r} = {x!r})", row))
    return out


def random_rows(plan: Plan, n: int, seed: int = 0) -> list[dict]:
    """Rows drawn from the frozen schema: design values about N(0, 1.5^2) where scaling
    can be inverted, some missing values and unseen levels."""
    rng = random.Random(seed)
    rows = []
    for _ in range(n):
        row = {}
        for inp in plan.inputs:
            u = rng.random()
            if inp.kind == "numeric":
                if u < 0.04:
                    row[inp.name] = None
                elif u < 0.05:
                    row[inp.name] = math.nan
                elif inp.steps and inp.steps[0].op in ("spline", "quantile"):
                    # the knots or quantiles and past either end
                    lo, hi = (inp.steps[0].spline_range() if inp.steps[0].op == "spline"
                              else (inp.steps[0].quantiles[0], inp.steps[0].quantiles[-1]))
                    x = rng.uniform(lo - (hi - lo) / 4, hi + (hi - lo) / 4)
                    row[inp.name] = x
                else:
                    x = inverse_affine(inp, rng.gauss(0.0, 1.5))
                    if x is None:
                        x = typical_value(inp) + rng.gauss(0.0, 1.0)
                    row[inp.name] = x
            else:
                if u < 0.04:
                    row[inp.name] = None
                elif u < 0.07:
                    row[inp.name] = unseen_value(inp)
                else:
                    row[inp.name] = rng.choice(inp.levels)
        rows.append(row)
    return rows


def typed_row(plan: Plan, raw: dict) -> dict:
    """A row of raw values (e.g. CSV text) as the typed values every runtime can hold,
    without changing what the plan makes of it."""
    out = {}
    for inp in plan.inputs:
        value = raw.get(inp.name)
        if inp.kind == "numeric":
            out[inp.name] = value if isinstance(value, float) else numeric_value(value)
            continue
        code = category_code(inp.levels, value)
        if code == MISSING_CODE:
            out[inp.name] = None
        elif code >= 0:
            out[inp.name] = inp.levels[code]
        else:
            out[inp.name] = unseen_value(inp)
    return out


def read_csv_rows(plan: Plan, path: Path) -> list[dict]:
    try:
        with open(path, newline="", encoding="utf-8") as handle:
            reader = csv.DictReader(handle)
            if reader.fieldnames is None:
                raise ScorewrightError(f"{path}: empty file (no header line)")
            absent = [n for n in plan.feature_names if n not in reader.fieldnames]
            if len(absent) == len(plan.feature_names):
                raise ScorewrightError(f"{path}: none of the model's features is a column "
                                       f"(first feature: {plan.feature_names[0]!r})")
            return [typed_row(plan, r) for r in reader]
    except FileNotFoundError:
        raise ScorewrightError(f"{path}: no such file") from None
    except UnicodeDecodeError:
        raise ScorewrightError(f"{path}: not UTF-8 text") from None
    except csv.Error as exc:
        raise ScorewrightError(f"{path}: not a readable CSV ({exc})") from None


def rows_for_precision(plan: Plan, rows: list[dict], precision: str) -> list[dict]:
    """The rows as a target of this precision receives them: a single-precision target's
    numeric inputs are float32 values (a double beyond float range arrives as +-inf, which
    is missing), so its expected outputs are the reference's on these rounded inputs."""
    if precision != "float":
        return rows
    import numpy as np

    numeric = [inp.name for inp in plan.inputs if inp.kind == "numeric"]
    out = []
    with np.errstate(over="ignore"):
        for row in rows:
            row = dict(row)
            for name in numeric:
                v = row.get(name)
                if isinstance(v, float):
                    row[name] = float(np.float32(v))
            out.append(row)
    return out
