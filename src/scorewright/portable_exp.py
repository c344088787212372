"""The portable exp: one exp routine, defined once as data, run by Python and rendered into C.

Targets with the portable exp carry this routine instead of calling their
runtime's exp, so every IEEE-754 platform gives the same bits: each step is one
correctly rounded double operation (+, -, *, /), a selection, a truncating
conversion to int or an exact scaling by 2^k built from its bit pattern. No step
may be fused into a multiply-add (the C target turns contraction off).

Method (a classic one; coefficients fitted by this project, see `fit_coefficients`):
  x is clamped to the guarded range [-708, 709];
  k = nearest integer to x / ln2 (ties away from zero), so |r| <= ln2/2 below;
  hi = x - k * LN2_HI, exact: LN2_HI has 32 significant bits and |k| <= 1022;
  lo = k * LN2_LO (LN2_LO = ln2 - LN2_HI, rounded); r = hi - lo;
  with z = r*r, c = r - z * P(z), where P (degree 4, Chebyshev fit) approximates
  (r * (e^r + 1) / (e^r - 1) - 2) / z on [0, (ln2/2)^2];
  then e^r = 1 + r + r*c / (2 - c), evaluated as 1 - ((lo - r*c / (2 - c)) - hi);
  the result is y * 2^k.
On the guarded range k lies in [-1021, 1023], so 2^k is a normal double built
from its exponent bits, and y * 2^k is exact (the result, >= exp(-708) =
3.3e-308, is normal): no subnormal and no overflow step exists.
Measured error (tests/test_firmware.py, against mpmath at 200 bits on a dense
grid of the guarded range): at most 1 ULP.

The float routine is the double routine on the widened argument, rounded once
to float (error at most 0.5 float ULP plus a double ULP of the double result).
"""

from __future__ import annotations

import struct

LOW, HIGH = -708.0, 709.0  # the guarded range (plan.DOUBLE.exp_guard, log_link_max)

# name -> exact double (hex text, so the C literal and the Python value are one)
CONSTANTS = {
    "LOW": float.hex(LOW),
    "HIGH": float.hex(HIGH),
    "INV_LN2": "0x1.71547652b82fep+0",
    "HALF": "0x1.0000000000000p-1",
    "LN2_HI": "0x1.62e42fee00000p-1",   # ln2 cut to 32 significant bits
    "LN2_LO": "0x1.a39ef35793c76p-33",  # ln2 - LN2_HI, rounded
    "P1": "0x1.5555555555553p-3",
    "P2": "-0x1.6c16c16c0abf9p-9",
    "P3": "0x1.1566ab5c1473dp-14",
    "P4": "-0x1.bbd532227cf4dp-20",
    "P5": "0x1.63f27409701ecp-25",
    "ONE": "0x1.0000000000000p+0",
    "TWO": "0x1.0000000000000p+1",
}

# (destination, operation, operands...) in evaluation order. Operations:
#   max, min, add, sub, mul, div: one IEEE double operation (max/min are selections);
#   half_away: +HALF if the operand is >= 0 else -HALF;
#   trunc: the integer part (a C cast to int); real: an int as a double (exact);
#   scale2: the operand times 2^k (k an int in [-1022, 1023]), built from bits.
STEPS = (
    ("x", "max", "x", "LOW"),
    ("x", "min", "x", "HIGH"),
    ("t", "mul", "x", "INV_LN2"),
    ("h", "half_away", "t"),
    ("t", "add", "t", "h"),
    ("k", "trunc", "t"),
    ("kf", "real", "k"),
    ("a", "mul", "kf", "LN2_HI"),
    ("hi", "sub", "x", "a"),
    ("lo", "mul", "kf", "LN2_LO"),
    ("r", "sub", "hi", "lo"),
    ("z", "mul", "r", "r"),
    ("p", "mul", "z", "P5"),
    ("p", "add", "p", "P4"),
    ("p", "mul", "z", "p"),
    ("p", "add", "p", "P3"),
    ("p", "mul", "z", "p"),
    ("p", "add", "p", "P2"),
    ("p", "mul", "z", "p"),
    ("p", "add", "p", "P1"),
    ("p", "mul", "z", "p"),
    ("c", "sub", "r", "p"),
    ("q", "mul", "r", "c"),
    ("d", "sub", "TWO", "c"),
    ("q", "div", "q", "d"),
    ("y", "sub", "lo", "q"),
    ("y", "sub", "y", "hi"),
    ("y", "sub", "ONE", "y"),
    ("y", "scale2", "y", "k"),
)
INT_VARIABLES = frozenset({"k"})

_VALUES = {name: float.fromhex(text) for name, text in CONSTANTS.items()}


def _pow2(k: int) -> float:
    return struct.unpack("<d", struct.pack("<Q", (k + 1023) << 52))[0]


def exp(x: float) -> float:
    """The portable exp of a double, by the steps above, in Python floats."""
    env = dict(_VALUES)
    env["x"] = float(x)
    for dest, op, *args in STEPS:
        a = env[args[0]]
        b = env[args[1]] if len(args) > 1 else None
        if op == "max":
            env[dest] = b if a < b else a
        elif op == "min":
            env[dest] = b if a > b else a
        elif op == "add":
            env[dest] = a + b
        elif op == "sub":
            env[dest] = a - b
        elif op == "mul":
            env[dest] = a * b
        elif op == "div":
            env[dest] = a / b
        elif op == "half_away":
            env[dest] = env["HALF"] if a >= 0.0 else -env["HALF"]
        elif op == "trunc":
            env[dest] = int(a)
        elif op == "real":
            env[dest] = float(a)
        else:  # scale2
            env[dest] = a * _pow2(b)
    return env["y"]


def expf(x: float) -> float:
    """The portable float exp: the double routine, rounded once to float."""
    return struct.unpack("<f", struct.pack("<f", exp(float(x))))[0]


# ---------------------------------------------------------------- C rendering

_C_BINARY = {"add": "+", "sub": "-", "mul": "*", "div": "/"}


def c_statement(dest: str, op: str, args: list[str], pow2: str, pick: str | None = None) -> str:
    """One step as a C statement on locals named as in STEPS (constants as literals);
    `pow2` names the C function that builds 2^k from its bits; `pick(f, a, b)`, if
    named, selects a's or b's bits without a branch (the same value as f ? a : b)."""
    def operand(name):
        return CONSTANTS[name] if name in CONSTANTS else name

    a = operand(args[0])
    b = operand(args[1]) if len(args) > 1 else None
    if op in _C_BINARY:
        return f"{dest} = {a} {_C_BINARY[op]} {b};"
    if op in ("max", "min", "half_away"):
        test, yes, no = {"max": (f"{a} < {b}", b, a), "min": (f"{a} > {b}", b, a),
                         "half_away": (f"{a} >= 0.0", CONSTANTS["HALF"],
                                       "-" + CONSTANTS["HALF"])}[op]
        if pick is not None:
            return f"{dest} = {pick}({test}, {yes}, {no});"
        return f"{dest} = ({test}) ? {yes} : {no};"
    if op == "trunc":
        return f"{dest} = (int){a};"
    if op == "real":
        return f"{dest} = (double){a};"
    if op == "scale2":
        return f"{dest} = {a} * {pow2}({b});"
    raise ValueError(f"unknown step {op!r}")


def c_lines(pow2: str, pick: str | None = None) -> list[str]:
    """The routine's body statements in C, in STEPS order."""
    return [c_statement(dest, op, list(args), pow2, pick) for dest, op, *args in STEPS]


def c_locals() -> list[str]:
    """The routine's local variables (x is the parameter)."""
    names = []
    for dest, *_ in STEPS:
        if dest != "x" and dest not in names:
            names.append(dest)
    ints = [n for n in names if n in INT_VARIABLES]
    reals = [n for n in names if n not in INT_VARIABLES]
    return [f"int {', '.join(ints)};", f"double {', '.join(reals)};"]


# ---------------------------------------------------------------- provenance

def fit_coefficients(prec_bits: int = 200) -> list[str]:
    """P1..P5 as hex text, re-derived with mpmath: the Chebyshev fit (5 terms) of
    (r (e^r + 1) / (e^r - 1) - 2) / r^2 as a polynomial in z = r^2 on [0, (ln2/2)^2]."""
    import mpmath as mp

    with mp.workprec(prec_bits):
        def target(z):
            if z == 0:
                return mp.mpf(1) / 6
            r = mp.sqrt(z)
            return (r * (mp.exp(r) + 1) / (mp.exp(r) - 1) - 2) / z

        top = (mp.log(2) / 2) ** 2 * mp.mpf("1.0001")
        poly = mp.chebyfit(target, [0, top], 5)
        return [float.hex(float(c)) for c in reversed(poly)]
