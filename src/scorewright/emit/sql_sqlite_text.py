"""Decimal text to the correctly rounded double in SQLite's SQL.

SQLite's own text-to-real conversion (CAST, column affinity) is not correctly
rounded: measured on 3.40, about 1 in 200 texts of 17 significant digits (what
Python's repr writes) and some of 15 come back one ULP off. Integer arithmetic
is exact in SQLite and one IEEE operation on exact doubles is correctly rounded,
so the text is split into an integer mantissa m and a power of ten k and read as:

- m = 0: a zero with the text's sign;
- |m| <= 2^53 and |k| <= 22 (m and 10^|k| are exact doubles): m * 10^k or
  m / 10^-k, one correctly rounded operation;
- k >= 0 and |m| * 10^k < 2^63: the exact integer, converted (correctly rounded);
- |m| > 2^53 (up to 18 digits) and -23 <= k < 0: long division of |m| by 5^-k,
  8 bits a layer, to a quotient Q of 55 to 62 bits and a sticky bit (remainder
  non-zero); 2Q + sticky converted to double rounds exactly as the true value
  does (its rounding drops at least 3 bits, and no rounding midpoint falls
  strictly between 2Q and 2Q + 2), then scaled by powers of two (exact);
- anything else (more than 18 digits, 17-digit values below about 1e-7 or above
  about 9e18, exponents beyond these): SQLite's own conversion, possibly one ULP
  off. README says so.

The work is spread over layers (stages): each stage's expressions name the
previous stage's values as `P + name`, so no expression spells the text more
than a few times, and nothing nests deep enough to overflow SQLite's parser
stack (which a single expression doing all this did).
"""

from __future__ import annotations

# Stands for the previous stage's alias prefix (replaced by emit/sql.py): no raw NUL
# reaches an artifact (names holding one are renamed, literals spell it as a call).
P = "\x00P"
STEP_BITS = 8
STEPS = 8  # from a quotient of at least 2^7 after one step to 2^54 and beyond
TOP = 2 ** 54
BLANKS = "char(32, 9, 10, 13, 12, 11)"


def _grammar(s: str) -> str:
    """The trimmed, lower-case text {s} is a decimal number (GLOB tests: SQLite has no
    regular expressions): only digits, one dot, signs, one e; a sign only first or
    right after the e; a digit first, after the sign or after a leading dot; no dot
    after the e; digits after the e."""
    tests = [f"{s} NOT GLOB '*[^0-9.e+-]*'",
             f"{s} NOT GLOB '*[^e][+-]*'",
             f"{s} NOT GLOB '*e*e*'",
             f"{s} NOT GLOB '*.*.*'",
             f"{s} NOT GLOB '*e*.*'",
             f"({s} GLOB '[0-9]*' OR {s} GLOB '[+-][0-9]*' OR {s} GLOB '.[0-9]*' "
             f"OR {s} GLOB '[+-].[0-9]*')",
             f"{s} NOT GLOB '*e'",
             f"{s} NOT GLOB '*e[+-]'"]
    return "CASE WHEN " + " AND ".join(tests) + " THEN 1 ELSE 0 END"


def _five_to(j: str) -> str:
    """5^{j} for 1 <= j <= 23 (NULL otherwise): below 2^54, so a remainder times 2^8
    stays below 2^62."""
    whens = " ".join(f"WHEN {i} THEN {5 ** i}" for i in range(1, 24))
    return f"CASE {j} {whens} END"


def _exponent_of_five(dv: str) -> str:
    whens = " ".join(f"WHEN {5 ** i} THEN {i}" for i in range(1, 24))
    return f"CASE {dv} {whens} END"


def stages(x: str, number_cast: str, literal_of, boolean: bool) -> list[list[tuple[str, str]]]:
    """The stages reading the value {x} of any type to `n` (a double or NULL).
    `literal_of(v)` spells a double; `number_cast` reads a non-text value. At most
    seven values per input in any stage (SQLite: 2,000 columns a SELECT)."""
    p = P
    first = [("s", f"CASE WHEN typeof({x}) = 'text' THEN lower(trim({x}, {BLANKS})) END"),
             ("nn", number_cast.format(x=x))]
    second = [("s", f"{p}s"), ("nn", f"{p}nn"), ("e", f"instr({p}s || 'e', 'e')")]
    mant = f"substr({p}s, 1, {p}e - 1)"
    digits = f"replace({mant}, '.', '')"
    fraction = (f"CASE WHEN instr({mant}, '.') > 0 THEN length({mant}) - instr({mant}, '.') "
                "ELSE 0 END")
    k3 = f"(CAST(substr({p}s, {p}e + 1) AS INTEGER) - ({fraction}))"
    third = [("s", f"{p}s"), ("nn", f"{p}nn"), ("ok", _grammar(f"{p}s")),
             ("m", f"CASE WHEN length({digits}) <= 20 AND {digits} NOT GLOB '*[^0-9+-]*' "
                   f"THEN CAST({digits} AS INTEGER) END"),
             ("sig", f"length(ltrim(replace(replace({digits}, '-', ''), '+', ''), '0'))"),
             ("k", k3), ("dv", _five_to(f"-{k3}"))]
    m, k, sig, dv = f"{p}m", f"{p}k", f"{p}sig", f"{p}dv"
    am = f"abs({m})"
    zero = f"CASE WHEN {p}s GLOB '-*' THEN {literal_of(-0.0)} ELSE {literal_of(0.0)} END"
    fast = (f"CASE WHEN {k} >= 0 THEN CAST({m} AS REAL) * CAST('1e' || {k} AS REAL) "
            f"ELSE CAST({m} AS REAL) / CAST('1e' || -{k} AS REAL) END")
    ten_k = f"CAST(substr('1000000000000000000', 1, {k} + 1) AS INTEGER)"
    whens = []
    if boolean:
        whens += [f"WHEN {p}s = 'true' THEN {literal_of(1.0)}",
                  f"WHEN {p}s = 'false' THEN {literal_of(0.0)}"]
    whens += [
        f"WHEN {p}ok = 0 THEN NULL",
        f"WHEN {sig} = 0 THEN {zero}",
        f"WHEN {sig} > 18 OR {m} IS NULL THEN CAST({p}s AS REAL)",
        f"WHEN {am} <= {2 ** 53} AND {k} BETWEEN -22 AND 22 THEN {fast}",
        f"WHEN {k} BETWEEN 0 AND 18 AND {am} <= {2 ** 63 - 1} / {ten_k} "
        f"THEN CAST({m} * {ten_k} AS REAL)",
    ]
    direct = (f"CASE WHEN {p}s IS NULL THEN {p}nn {' '.join(whens)} "
              f"ELSE CAST({p}s AS REAL) END")
    # Long division where nothing above applies: |m| > 2^53, -23 <= k < 0.
    division = (f"{p}s IS NOT NULL AND {p}ok = 1 AND {sig} BETWEEN 1 AND 18 "
                f"AND {am} > {2 ** 53} AND {k} BETWEEN -23 AND -1")
    if boolean:
        division += f" AND {p}s NOT IN ('true', 'false')"
    # q: the quotient (NULL: no division; r then holds the value read); r: the
    # remainder; w: 5^-k * 256 + 2 * (steps taken) + (1 if negative).
    fourth = [("q", f"CASE WHEN {division} THEN {am} / {dv} END"),
              ("r", f"CASE WHEN {division} THEN {am} % {dv} ELSE {direct} END"),
              ("w", f"CASE WHEN {division} THEN {dv} * 256 + CASE WHEN {m} < 0 THEN 1 "
                    "ELSE 0 END END")]
    out = [first, second, third, fourth]
    scale = 2 ** STEP_BITS
    divisor = f"({p}w / 256)"
    for _ in range(STEPS):
        go = f"{p}q < {TOP}"
        out.append([("q", f"CASE WHEN {go} THEN {p}q * {scale} + ({p}r * {scale}) / {divisor} "
                          f"ELSE {p}q END"),
                    ("r", f"CASE WHEN {go} THEN ({p}r * {scale}) % {divisor} ELSE {p}r END"),
                    ("w", f"CASE WHEN {go} THEN {p}w + 2 ELSE {p}w END")])
    # 2Q + sticky, rounded once, then divided by 2^(sh + 1) and 2^j (exact: normal range).
    sh = f"(({p}w % 256) / 2 * {STEP_BITS})"
    wide = f"CAST(2 * {p}q + CASE WHEN {p}r > 0 THEN 1 ELSE 0 END AS REAL)"
    half = f"(({sh} + 1) / 2)"
    value = (f"{wide} / CAST(1 << {half} AS REAL) / CAST(1 << ({sh} + 1 - {half}) AS REAL) "
             f"/ CAST(1 << {_exponent_of_five(divisor)} AS REAL)")
    out.append([("n", f"CASE WHEN {p}q IS NULL THEN {p}r WHEN {p}w % 2 = 1 THEN -({value}) "
                      f"ELSE {value} END")])
    return out


def lazy(x: str, number_cast: str, literal_of, boolean: bool) -> str:
    """The value {x} of any type read to a double (or NULL) in one expression: a number
    cast at once, text through the stages in a correlated subquery that SQLite runs
    only for a row whose value is text. As layers of the whole query the stages cost
    every row their 13 layers of 30 to 200 values (200,000 rows x 30 REAL features:
    9.9 s, 1.4 s without them); each stage is fenced (LIMIT -1 OFFSET 0) so SQLite does
    not fold them into one expression that spells each name many times over."""
    layers = stages(x, number_cast, literal_of, boolean)
    parts = []
    for t, layer in enumerate(layers):
        below = f"sw_text{t - 1}"
        cols = ", ".join((text if t == 0 else text.replace(P, f"{below}."))
                         + f" AS {name}" for name, text in layer)
        source = f" FROM {below}" if t else ""
        parts.append(f"sw_text{t} AS (SELECT {cols}{source} LIMIT -1 OFFSET 0)")
    text = f"(WITH {', '.join(parts)} SELECT n FROM sw_text{len(layers) - 1})"
    # A real value is itself (the cast of it is): one typeof call for the usual case,
    # against two and a cast (200,000 rows x 30 features: 0.81 s against 1.17 s).
    return (f"CASE typeof({x}) WHEN 'real' THEN {x} WHEN 'text' THEN {text} "
            f"ELSE {number_cast.format(x=x)} END")
