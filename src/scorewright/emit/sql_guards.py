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


def _down(x: float) -> float:
    return math.nextafter(x, -INF)


def _up(x: float) -> float:
    return math.nextafter(x, INF)


def _const(c: float):
    return (c, c, abs(c) if c != 0.0 else INF)


def _hull(a, b):
    return (min(a[0], b[0]), max(a[1], b[1]), min(a[2], b[2]))


def _add(a, b, b_const: float | None, a_const: float | None):
    lo, hi = _down(a[0] + b[0]), _up(a[1] + b[1])
    c = b_const if b_const is not None else a_const
    if c is not None and c != 0.0:
        tiny = max(math.ulp(c) / 2, MIN_SUBNORMAL)
    else:
        tiny = max(min(a[2], b[2]) * 2.0 ** -53, MIN_SUBNORMAL)
    return (lo if lo == lo else -INF, hi if hi == hi else INF, tiny)


def _products(a, b):
    out = []
    for x in (a[0], a[1]):
        for y in (b[0], b[1]):
            p = x * y
            out.append(0.0 if p != p else p)  # 0 * inf: that corner is zero
    return min(out), max(out)


def _magnitude(a) -> float:
    return max(abs(a[0]), abs(a[1]))


def _spans_zero(a) -> bool:
    return a[0] <= 0.0 <= a[1]


def _mul(a, b):
    lo, hi = _products(a, b)
    tiny = a[2] * b[2] if a[2] != INF and b[2] != INF else INF
    return (_down(lo), _up(hi), max(_down(tiny), MIN_SUBNORMAL) if tiny != INF else INF)


def _div(a, b):
    if _spans_zero(b):
        lo, hi = -INF, INF
    else:
        inv = (1.0 / b[1], 1.0 / b[0])
        lo, hi = _products(a, (min(inv), max(inv)))
    tiny = a[2] / _magnitude(b) if a[2] != INF else INF
    return (_down(lo) if lo > -INF else lo, _up(hi) if hi < INF else hi,
            max(_down(tiny), MIN_SUBNORMAL) if tiny != INF else INF)


def _exp(a):
    lo = math.exp(max(a[0], -800.0))
    hi = math.exp(a[1]) if a[1] < 709.0 else INF
    return (_down(lo) if lo > 0 else 0.0, _up(hi), max(_down(lo), MIN_SUBNORMAL))


def _abs(a):
    lo = 0.0 if _spans_zero(a) else min(abs(a[0]), abs(a[1]))
    return (lo, _magnitude(a), a[2])


def _lookup(table):
    values = tuple(table) + (0.0,)
    tiny = min([abs(v) for v in values if v != 0.0] or [INF])
    return (min(values), max(values), tiny)


def intervals(ops) -> dict:
    """name -> (low, high, smallest non-zero magnitude) of every real the ops compute."""
    env: dict = {}

    def of(arg):
        return _const(float(arg.value)) if isinstance(arg, Const) else env.get(arg)

    def const(arg):
        return float(arg.value) if isinstance(arg, Const) else None

    for op in ops:
        if op.type != "real" or op.op == "output":
            continue
        a = [of(x) for x in op.args]
        if op.op == "read_real":
            r = (-INF, INF, MIN_SUBNORMAL)
        elif op.op == "select":
            r = _hull(a[1], a[2])
        elif op.op in ("max", "min"):
            pick = max if op.op == "max" else min
            r = (pick(a[0][0], a[1][0]), pick(a[0][1], a[1][1]), min(a[0][2], a[1][2]))
        elif op.op == "add":
            r = _add(a[0], a[1], const(op.args[1]), const(op.args[0]))
        elif op.op == "sub":
            neg = (-a[1][1], -a[1][0], a[1][2])
            c = const(op.args[1])
            r = _add(a[0], neg, None if c is None else -c, const(op.args[0]))
        elif op.op == "sum":
            r = a[0]
            for x, v in zip(op.args[1:], a[1:]):
                r = _add(r, v, const(x), None)
        elif op.op == "mul":
            r = _mul(a[0], a[1])
        elif op.op == "div":
            r = _div(a[0], a[1])
        elif op.op == "neg":
            r = (-a[0][1], -a[0][0], a[0][2])
        elif op.op == "abs":
            r = _abs(a[0])
        elif op.op == "exp":
            r = _exp(a[0])
        elif op.op == "lookup":
            r = _lookup(op.attr)
        else:
            r = (-INF, INF, MIN_SUBNORMAL)
        env[op.dest] = r
    return env


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
