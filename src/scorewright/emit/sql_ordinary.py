"""The ordinary-row arm: a column spelled for the rows whose real inputs are ordinary.

Almost every row holds ordinary numbers: no NULL, NaN or infinity, nothing beyond
the input's bound. On such a row the program's missing tests are false and its
clamps to the bound move nothing, yet an engine pays for them on every row (a CASE
per input and two comparisons, measured at about half of DuckDB's time on 30
features). So a column that reads real inputs is spelled

    CASE WHEN <every real input it reads is within its bound>
         THEN <its ops, without the ones that give one of their operands there>
         ELSE <its ops> END

Both arms are the program's ops (program.py). The first leaves out only an op
proven, from the test, to give one of its operands: a select whose flag is known,
an `or` with a known-false operand, a max or min with a constant that cannot move
its operand (intervals propagated by sql_guards.interval from the test's bounds).
So each row gets the same bits from either arm; the second arm runs only where the
test fails (NULL, NaN or an infinity reads fail it: every engine here orders NaN
above every number, and a NULL test is not true).

The test is a sum of magnitudes compared with the smallest bound (one addition per
input: each magnitude is at most the rounded sum of non-negative terms), or, where
a double sum past the double range raises (PostgreSQL), one comparison per input
(`Dialect.range_test`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from ..program import Const, Op
from . import sql_guards

FULL = (-math.inf, math.inf, sql_guards.MIN_SUBNORMAL)


@dataclass(frozen=True)
class Same:
    """On the rows the test admits, this op's value is its operand `name` (a name or
    a Const)."""

    name: object


def bounds(cone: list[Op], reads: set) -> dict[str, float]:
    """read -> the bound the test holds it to: the largest constant a max or min of
    `cone` (in program order) holds a value of that read alone to (the program's
    clamp of the input), else the largest double (the missing tests still go)."""
    deps: dict = {}
    found: dict = {a: [] for a in reads}
    for op in cone:
        names = [a for a in op.args if isinstance(a, str)]
        deps[op.dest] = frozenset().union(*[deps.get(a, {a}) for a in names])
        if op.op in ("max", "min") and len(names) == 1 and len(deps[op.dest]) == 1:
            (read,) = deps[op.dest]
            const = [float(a.value) for a in op.args if isinstance(a, Const)][0]
            if read in found and const != 0.0:
                found[read].append(abs(const))
    return {a: max(found[a], default=sql_guards.DBL_MAX) for a in reads}


def facts(cone: list[Op], assumed: dict[str, float], general: dict) -> dict:
    """name -> True/False (a flag's value) or Same(operand), for the ops of `cone`
    (in program order) on rows where each read in `assumed` (name -> bound) is a
    number within [-bound, bound]; `general`: every real's interval on any row."""
    out: dict = {}
    env: dict = {}

    def resolve(a):
        while not isinstance(a, Const) and isinstance(out.get(a), Same):
            a = out[a].name
        return a

    def value(a):
        a = resolve(a)
        if isinstance(a, Const):
            return sql_guards._const(float(a.value))
        if a in env:
            return env[a]
        if a in assumed:
            return (-assumed[a], assumed[a], sql_guards.MIN_SUBNORMAL)
        return general.get(a, FULL)

    def flag(a):
        a = resolve(a)
        return None if isinstance(a, Const) else out.get(a)

    for op in cone:
        fact = _fact(op, assumed, value, flag)
        if fact is not None:
            out[op.dest] = fact
        if op.type == "real":
            env[op.dest] = value(fact.name) if isinstance(fact, Same) else \
                sql_guards.interval(op, value)
    return out


def _fact(op: Op, assumed, value, flag):
    a = op.args
    if op.op == "is_missing" and a[0] in assumed:
        return False
    if op.op == "or":
        f, g = flag(a[0]), flag(a[1])
        if f is True or g is True:
            return True
        if f is False:
            return Same(a[1])
        if g is False:
            return Same(a[0])
        return None
    if op.op == "select":
        f = flag(a[0])
        return None if f is None else Same(a[1] if f else a[2])
    if op.op in ("max", "min") and (isinstance(a[0], Const) != isinstance(a[1], Const)):
        # max(x, y) is y where y > x, else x; min(x, y) is y where y < x, else x.
        if isinstance(a[1], Const):
            lo, hi, _ = value(a[0])
            c = float(a[1].value)
            keeps = lo >= c if op.op == "max" else hi <= c
            return Same(a[0]) if keeps else None
        lo, hi, _ = value(a[1])
        c = float(a[0].value)
        takes = lo > c if op.op == "max" else hi < c
        return Same(a[1]) if takes else None
    return None


def test(d, magnitudes: list[str], bounds: list[float], literal, sum_list=None) -> str:
    """Every value of `magnitudes` (spelled abs(...)) is within its bound."""
    if d.range_test == "each":
        return " AND ".join(f"{m} <= {literal(d, b)}" for m, b in zip(magnitudes, bounds))
    bound = literal(d, min(bounds))
    if sum_list is not None and len(magnitudes) > 2:
        total = sum_list.format(start=magnitudes[0], rest=", ".join(magnitudes[1:]))
    else:
        total = " + ".join(magnitudes)
    return f"{total} <= {bound}"
