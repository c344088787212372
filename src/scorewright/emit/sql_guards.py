"""Where a numeric input would make PostgreSQL raise on float underflow.

PostgreSQL raises "value out of range: underflow" when a product or quotient
of two non-zero doubles rounds to zero (e.g. 5e-324 * 0.3), where IEEE
arithmetic, and so the reference evaluator, gives a signed zero. The plan's
clamp keeps values finite but not away from zero, so a subnormal input would
make the query fail.

Up to the first offset step (subtract or add a non-zero constant) a feature's
chain is a run of monotone products, quotients and clips, so the raw values for
which some product or quotient underflows form an interval around zero. Inside
it the IEEE result is the chain applied to a signed zero of the same sign
(once a value is zero it stays zero, with the same sign as the vanished
value), and no operation on a zero operand raises. The SQL therefore replaces
such a raw value by `x * 0.0`. After an offset step every non-zero value is at
least half an ULP of the offset, far from underflow for any sane constant; a
model where that is not so is refused.

The coefficient products are guarded per term, not per input: one input feeds
every output's margin, and a tiny weight of one output must not zero the value
the others read. A design value v with |v| below `product_edge(w)` gives
w * v = signed zero in IEEE; the SQL multiplies w by `v * 0.0` there instead,
which is that same signed zero without the error. This also covers a missing
input's design value, a literal whose product with w may underflow.
"""

from __future__ import annotations

import math
import struct

from ..errors import ScorewrightError
from ..plan import NumericInput

MIN_NORMAL = 2.0 ** -1022
MIN_SUBNORMAL = 5e-324


def _from_bits(bits: int) -> float:
    return struct.unpack("<d", struct.pack("<Q", bits))[0]


def _bits(x: float) -> int:
    return struct.unpack("<Q", struct.pack("<d", x))[0]


def _scaled(magnitude: float, factor: float) -> float:
    return max(magnitude * factor, MIN_SUBNORMAL) if factor != math.inf else math.inf


def needs_guard(inp: NumericInput, weights: tuple[float, ...]) -> bool:
    """Whether some raw value can make a product or quotient of this input underflow.

    Tracks a lower bound of the smallest non-zero magnitude the value can take."""
    low = MIN_SUBNORMAL
    offset = False
    risky = False

    def check(result_bound: float, what: str) -> None:
        nonlocal risky
        if result_bound < MIN_NORMAL:
            if offset:
                raise ScorewrightError(
                    f"feature {inp.name!r}: its {what} can underflow after an offset step; "
                    "PostgreSQL would raise on it and no guard is exact here")
            risky = True

    for step in inp.steps:
        c = abs(step.value)
        if step.op in ("subtract", "add"):
            if c != 0.0:
                low = math.ulp(c) / 2
                offset = True
        elif step.op == "multiply":
            if c == 0.0:
                low = math.inf  # always zero from here on: a zero operand never raises
            else:
                check(low * c, "scaling")
                low = _scaled(low, c)
        else:
            check(low / c, "scaling")
            low = _scaled(low, 1.0 / c) if low != math.inf else low
    if inp.clip is not None:
        lo, hi = inp.clip
        if lo > 0.0:
            low = lo
        elif hi < 0.0:
            low = -hi
        else:
            low = min([low] + [abs(b) for b in (lo, hi) if b != 0.0])
    for w in weights:
        if w != 0.0 and low != math.inf:
            check(low * abs(w), "coefficient product")
    return risky


def _underflows(inp: NumericInput, weights, x: float) -> bool:
    v = min(max(x, -inp.bound), inp.bound)
    for step in inp.steps:
        c = step.value
        if step.op == "subtract":
            v = v - c
        elif step.op == "add":
            v = v + c
        else:
            r = v * c if step.op == "multiply" else v / c
            if r == 0.0 and v != 0.0 and c != 0.0:
                return True
            v = r
    if inp.clip is not None:
        v = min(max(v, inp.clip[0]), inp.clip[1])
    return any(w * v == 0.0 and w != 0.0 and v != 0.0 for w in weights)


def _edge(inp, weights, sign: float) -> float:
    """The smallest magnitude m > 0 such that sign * m does not underflow (0 if none does)."""
    if not _underflows(inp, weights, sign * MIN_SUBNORMAL):
        return 0.0
    lo, hi = _bits(MIN_SUBNORMAL), _bits(1.0)
    if _underflows(inp, weights, sign * 1.0):
        raise ScorewrightError(f"feature {inp.name!r}: its scaling underflows even at 1.0")
    while hi - lo > 1:  # invariant: lo underflows, hi does not
        mid = (lo + hi) // 2
        if _underflows(inp, weights, sign * _from_bits(mid)):
            lo = mid
        else:
            hi = mid
    return _from_bits(hi)


def underflow_region(inp: NumericInput, weights: tuple[float, ...]):
    """(low, high): raw values with low < x < high underflow somewhere in the chain
    (or are zero); None when no raw value does."""
    if not needs_guard(inp, weights):
        return None
    neg, pos = _edge(inp, weights, -1.0), _edge(inp, weights, 1.0)
    if neg == 0.0 and pos == 0.0:
        return None
    return (-neg if neg else -0.0, pos if pos else MIN_SUBNORMAL)


def product_edge(w: float) -> float:
    """The smallest v > 0 with w * v != 0 (0.0 when w * v never underflows)."""
    w = abs(w)
    if w == 0.0 or w * MIN_SUBNORMAL != 0.0:
        return 0.0
    lo, hi = _bits(MIN_SUBNORMAL), _bits(1.7976931348623157e308)
    while hi - lo > 1:  # invariant: w * lo underflows, w * hi does not
        mid = (lo + hi) // 2
        if w * _from_bits(mid) == 0.0:
            lo = mid
        else:
            hi = mid
    return _from_bits(hi)
