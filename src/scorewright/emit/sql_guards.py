"""Where PostgreSQL would raise on float underflow: a runtime's trap, not semantics.

PostgreSQL raises "value out of range: underflow" when a product or quotient of
two non-zero doubles rounds to zero (e.g. 5e-324 * 0.3), where IEEE arithmetic,
and so the scoring program, gives a signed zero. What the result *is* stays the
program's business (the IEEE signed zero); only how to reach it without the
error is the dialect's (`Dialect.raises_on_underflow`), so this module reads
the op list and changes no value.

`risky(ops)` propagates, for every real of the program, an interval and a lower
bound of its non-zero magnitudes (a sum x + c with a non-zero constant c is
never closer to zero than half an ULP of c; a clamp or select keeps the
smaller bound of its operands; a product multiplies the bounds...). A product
or quotient whose bound cannot round to zero needs nothing. The others are
spelled with the signed zero IEEE gives where the result would vanish:

- an operand x times or over a constant c: where |x| < `edge(op, c)` the
  product is zero, so x is replaced there by `x * 0.0` (a signed zero of x's
  sign; no operation on a zero operand raises) - exact, the edge being found
  by bisection over the doubles;
- a constant over a variable y: where |y| >= `edge`, the constant's signed zero
  is divided instead;
- two variables: the product (quotient) is scaled by powers of two, which is
  exact, into normal range and compared with the scaled threshold 2^-1075; a
  scaled result that rounds to exactly the threshold is decided by the exact
  error of the product (Dekker's split), so the test is exact too.
"""

from __future__ import annotations

import math
import struct

from ..program import Const, Op

MIN_SUBNORMAL = 5e-324
DBL_MAX = 1.7976931348623157e308
# A product or quotient whose magnitude is at least this (computed from bounds) does
# not round to zero: zero is below 2^-1075.
SAFE = 2.0 ** -1073
INF = math.inf


def _from_bits(bits: int) -> float:
    return struct.unpack("<d", struct.pack("<Q", bits))[0]


def _bits(x: float) -> int:
    return struct.unpack("<Q", struct.pack("<d", x))[0]


def _out(lo: float, hi: float, tiny: float):
    """An interval widened by one ULP each way (the bounds were rounded), and a floor
    of its non-zero magnitudes (INF: always zero)."""
    lo = -INF if lo != lo else math.nextafter(lo, -INF)
    hi = INF if hi != hi else math.nextafter(hi, INF)
    return (lo, hi, tiny if tiny == INF else max(math.nextafter(tiny, 0.0), MIN_SUBNORMAL))


def _const(c: float):
    return (c, c, abs(c) if c != 0.0 else INF)


def _magnitude(a) -> float:
    return max(abs(a[0]), abs(a[1]))


def _corners(a, b):
    # 0 * inf is a zero corner
    return [0.0 if x * y != x * y else x * y for x in a[:2] for y in b[:2]]


def _add(a, b, c: float | None):
    """a + b; c: a constant operand. A non-zero result of x + c is at least half an ULP
    of c (x is either below |c| / 2 or a multiple of that half ULP)."""
    tiny = math.ulp(c) / 2 if c else min(a[2], b[2]) * 2.0 ** -53
    return _out(a[0] + b[0], a[1] + b[1], tiny)


def _step(op, a, c0, c1):
    """The interval of one op from its operands' (c0, c1: constant operands or None)."""
    if op.op == "select":
        return (min(a[1][0], a[2][0]), max(a[1][1], a[2][1]), min(a[1][2], a[2][2]))
    if op.op in ("max", "min"):
        pick = max if op.op == "max" else min
        return (pick(a[0][0], a[1][0]), pick(a[0][1], a[1][1]), min(a[0][2], a[1][2]))
    if op.op == "add":
        return _add(a[0], a[1], c1 if c1 is not None else c0)
    if op.op == "sub":
        return _add(a[0], (-a[1][1], -a[1][0], a[1][2]), -c1 if c1 is not None else c0)
    if op.op == "mul":
        p = _corners(a[0], a[1])
        return _out(min(p), max(p), a[0][2] * a[1][2])
    if op.op == "div":
        b = a[1]
        p = [-INF, INF] if b[0] <= 0.0 <= b[1] else _corners(a[0], (1 / b[1], 1 / b[0]))
        return _out(min(p), max(p), a[0][2] / max(_magnitude(b), MIN_SUBNORMAL))
    if op.op == "neg":
        return (-a[0][1], -a[0][0], a[0][2])
    if op.op == "abs":
        x = a[0]
        return (0.0 if x[0] <= 0.0 <= x[1] else min(abs(x[0]), abs(x[1])), _magnitude(x), x[2])
    if op.op == "exp":
        lo = math.exp(max(a[0][0], -800.0))
        return _out(lo, math.exp(a[0][1]) if a[0][1] < 709.0 else INF, lo)
    if op.op == "lookup":
        values = tuple(op.attr) + (0.0,)
        return (min(values), max(values), min([abs(v) for v in values if v] or [INF]))
    return (-INF, INF, MIN_SUBNORMAL)  # read_real, and any op without a rule


def intervals(ops) -> dict:
    """name -> (low, high, smallest non-zero magnitude) of every real the ops compute."""
    env: dict = {}
    for op in ops:
        if op.type != "real" or op.op == "output":
            continue
        env[op.dest] = interval(op, env.get)
    return env


def interval(op: Op, known) -> tuple:
    """The interval of one real op, `known(name)` giving its operands' intervals."""
    a = [_const(float(x.value)) if isinstance(x, Const) else known(x) for x in op.args]
    consts = [float(x.value) if isinstance(x, Const) else None for x in op.args]
    if op.op == "sum":
        r = a[0]
        for v, c in zip(a[1:], consts[1:]):
            r = _add(r, v, c)
        return r
    return _step(op, a, *(consts + [None, None])[:2])


def risky(ops) -> set[str]:
    """The products and quotients among `ops` that may round to zero from non-zero
    operands (on an engine that raises there, they need `guard`)."""
    env = intervals(ops)
    out = set()
    for op in ops:
        if op.op not in ("mul", "div"):
            continue
        a, b = (_const(float(x.value)) if isinstance(x, Const) else env[x] for x in op.args)
        if a[2] == INF or b[2] == INF:
            continue  # always zero: a zero operand never raises
        bound = a[2] * b[2] if op.op == "mul" else a[2] / _magnitude(b)
        if not bound >= SAFE:
            out.add(op.dest)
    return out


def _smallest(test) -> float:
    """The smallest positive double v with test(v) true (test monotone; 0.0: none fails)."""
    if test(MIN_SUBNORMAL):
        return 0.0
    lo, hi = _bits(MIN_SUBNORMAL), _bits(DBL_MAX)
    while hi - lo > 1:  # invariant: test(lo) false, test(hi) true
        mid = (lo + hi) // 2
        if test(_from_bits(mid)):
            hi = mid
        else:
            lo = mid
    return _from_bits(hi)


def product_edge(c: float) -> float:
    """The smallest v > 0 with c * v != 0 (0.0 when c * v never underflows)."""
    c = abs(c)
    return _smallest(lambda v: c * v != 0.0)


def quotient_edge(c: float) -> float:
    """The smallest v > 0 with v / c != 0 (0.0 when v / c never underflows)."""
    c = abs(c)
    return _smallest(lambda v: v / c != 0.0)


def divisor_edge(c: float) -> float:
    """The smallest y > 0 with c / y == 0 (c a non-zero constant)."""
    c = abs(c)
    return _smallest(lambda y: c / y == 0.0 or y == INF)


def guard(op: Op, args: list[str], lit, is_const: list[bool]) -> str:
    """The product or quotient `op` of spelled operands `args` as the IEEE result
    without the engine's underflow error; `lit(x)` spells a double; `is_const[i]` says
    whether operand i is a constant."""
    x, y = args
    zero = lit(0.0)
    if op.op == "mul" and (is_const[0] or is_const[1]):
        c, i = (op.args[0].value, 1) if is_const[0] else (op.args[1].value, 0)
        small = _small(args[i], lit(product_edge(c)), zero)
        return f"{x} * {small}" if i == 1 else f"{small} * {y}"
    if op.op == "div" and is_const[1]:
        return f"{_small(x, lit(quotient_edge(op.args[1].value)), zero)} / {y}"
    if op.op == "div" and is_const[0]:
        c = op.args[0].value
        e = lit(divisor_edge(c))
        return (f"CASE WHEN {y} >= {e} OR {y} <= -{e} THEN {lit(math.copysign(0.0, c))} / {y} "
                f"ELSE {x} / {y} END")
    if op.op == "mul":
        return _variable_product(x, y, lit)
    return _variable_quotient(x, y, lit)


def _small(v: str, edge: str, zero: str) -> str:
    return f"CASE WHEN {v} > -{edge} AND {v} < {edge} THEN {v} * {zero} ELSE {v} END"


def _ties(a: str, b: str, p: str, lit) -> str:
    """The exact a * b - p (Dekker: each factor split into halves of 26 bits, every
    partial product exact), for a, b, p well inside normal range."""
    k = lit(134217729.0)

    def halves(v):
        big = f"(({v}) * {k} - (({v}) * {k} - ({v})))"
        return big, f"(({v}) - {big})"

    ah, al = halves(a)
    bh, bl = halves(b)
    return f"(((({ah} * {bh} - {p}) + {ah} * {bl}) + {al} * {bh}) + {al} * {bl})"


def _variable_product(x: str, y: str, lit) -> str:
    """x * y vanishes iff |x y| <= 2^-1075: never when |x| or |y| >= 1, nor when both
    are >= 2^-537. Otherwise, scaled by 2^537 each (exact), the product lies in
    [2^-1074, 2^537) and the threshold is 1/2. The arms of a CASE are tried in order,
    so each scaled value is only computed where it is in range, and the exact error
    of the product only on a tie."""
    s, half, one, low = lit(2.0 ** 537), lit(0.5), lit(1.0), lit(2.0 ** -537)
    a, b = f"(abs({x}) * {s})", f"(abs({y}) * {s})"
    p = f"({a} * {b})"
    zero = f"({x} * {lit(0.0)}) * {y}"
    return (f"CASE WHEN abs({x}) >= {one} OR abs({y}) >= {one} THEN {x} * {y} "
            f"WHEN abs({x}) >= {low} AND abs({y}) >= {low} THEN {x} * {y} "
            f"WHEN {p} > {half} THEN {x} * {y} WHEN {p} < {half} THEN {zero} "
            f"WHEN {_ties(a, b, half, lit)} <= {lit(0.0)} THEN {zero} ELSE {x} * {y} END")


def _variable_quotient(x: str, y: str, lit) -> str:
    """x / y vanishes iff |x / y| <= 2^-1075; only when |y| > 1 and |x| < 2^-51 can it.
    Then |x| 2^1000 <= |y| 2^-75 is the same test with both sides exact."""
    return (f"CASE WHEN abs({y}) <= {lit(1.0)} OR abs({x}) >= {lit(2.0 ** -51)} THEN {x} / {y} "
            f"WHEN abs({y}) * {lit(2.0 ** -75)} >= abs({x}) * {lit(2.0 ** 1000)} "
            f"THEN ({x} * {lit(0.0)}) / {y} "
            f"ELSE {x} / {y} END")
