"""How the scoring query reads an input column of any type as a number.

One rule for every dialect (the dialect record says how to spell each part); it
is the rule of `scorewright.values`:

- a number column (integer, decimal, real/float, double) gives its value as a
  double; NaN and +-inf are missing (the design value's CASE sends them to the
  fill, emit/sql.py);
- a text column (what the sqlite3 shell's `.import`, a CSV loader or an untyped
  table gives) holding a decimal number, blanks around it allowed, gives the
  double Python's float() gives for that text; any other text ('abc', '1.5abc',
  'NaN', 'Infinity', '', '1_000') is missing;
- a boolean column gives 1.0/0.0, and so does the text 'true'/'false' (any case)
  for a feature fitted on a boolean column.

The query cannot know the column's type when it is written, so it asks the
engine at run time (typeof / pg_typeof; SQLite's typeof is per value). Every
arm of the CASE must compile for every column type, and where the engine folds
constants while planning (PostgreSQL) no arm may raise for a constant it does
not take: text is only cast once its grammar and range are checked.
"""

from __future__ import annotations

from ..plan import Plan
from ..values import MISSING_CODE, UNSEEN_CODE
from . import sql_sqlite_text
from .sql_dialects import Dialect, literal

# The decimal grammar of values.NUMBER over ASCII digits and the six ASCII blanks
# (values.py's \\s and \\d also take unicode blanks and digits; no engine here does).
BLANKS = r"[ \t\n\r\f\x0B]*"
GRAMMAR = BLANKS + r"[-+]?([0-9]+[.]?[0-9]*|[.][0-9]+)([eE][-+]?[0-9]+)?" + BLANKS
# Exact bounds for PostgreSQL's range check (numeric arithmetic is exact): a decimal
# at or above 2^1024 - 2^970 rounds to infinity, one at or below 2^-1075 to zero.
PG_OVERFLOW = "power(CAST(2 AS NUMERIC), 1024) - power(CAST(2 AS NUMERIC), 970)"
PG_UNDERFLOW_SCALE = "power(CAST(2 AS NUMERIC), 1075)"


def type_test(d: Dialect, x: str, names) -> str:
    """{x}'s run-time type is one of `names` (the engine's own type names)."""
    spelled = ", ".join(d.type_literal.format(name=n) for n in names)
    return f"{d.type_name.format(x=x)} IN ({spelled})"


def stages(d: Dialect, x: str, literal, boolean: bool = False) -> list[list[tuple[str, str]]]:
    """The layers reading {x} to `n`: [(name, expression)] per layer, a later layer
    naming the one below's values as sql_sqlite_text.P + name. One layer, except
    where the engine's own text conversion is inexact (SQLite: sql_sqlite_text)."""
    if d.text_double_rule == "staged":
        return [[("n", sql_sqlite_text.lazy(x, d.number_cast, lambda v: literal(d, v),
                                            boolean))]]
    return [[("n", number(d, x, literal, boolean))]]


def number(d: Dialect, x: str, literal, boolean: bool = False) -> str:
    """The double (or NULL: missing) the value {x} of any column type stands for;
    `boolean`: the words true/false read as 1.0/0.0 too. `literal(d, v)` spells a
    double."""
    text = f"CAST({x} AS {d.text})"
    # Text, and numbers whose exact decimal text is read instead of their cast.
    arms = [(type_test(d, x, d.text_types + d.exact_text_types),
             text_number(d, text, literal, boolean))]
    if boolean and d.boolean_type is not None:
        # No cast from boolean to double compiles here, so the boolean column is read
        # through its text and every other number too: a real column's shortest text
        # read back as real, the others' text as double (exact while
        # extra_float_digits > 0, the default). A plain numeric feature keeps the
        # cast, so a boolean column is refused loudly there.
        arms.append((type_test(d, x, (d.boolean_type,)),
                     f"CASE WHEN {text} = 'true' THEN {literal(d, 1.0)} "
                     f"WHEN {text} = 'false' THEN {literal(d, 0.0)} END"))
        arms.append((type_test(d, x, d.single_types),
                     f"CAST(CAST(CASE WHEN {type_test(d, x, d.single_types)} THEN {text} "
                     f"END AS {d.single}) AS {d.double})"))
        rest = text_number(d, text, literal, False)
    else:
        rest = d.number_cast.format(x=_guarded(d, x, arms))
    whens = " ".join(f"WHEN {test} THEN {value}" for test, value in arms)
    return f"CASE {whens} ELSE {rest} END"


def _guarded(d: Dialect, x: str, arms) -> str:
    """{x} for the final cast: NULL where an earlier arm took the value, so a planner
    folding constants never casts a text constant (PostgreSQL)."""
    if not d.folds_constant_casts:
        return x
    taken = " OR ".join(test for test, _ in arms)
    return f"CASE WHEN {taken} THEN NULL ELSE {x} END"


def text_number(d: Dialect, text: str, literal, boolean: bool) -> str:
    """The double a text value {text} stands for (NULL: not a number)."""
    whens = []
    if boolean:
        word = f"lower({d.trim_blanks.format(t=text)})"
        whens += [f"WHEN {word} = 'true' THEN {literal(d, 1.0)}",
                  f"WHEN {word} = 'false' THEN {literal(d, 0.0)}"]
    pattern = d.string(d.regex_start + GRAMMAR + d.regex_end)
    value = _pg_double(d, text, literal) if d.text_double_rule == "range" else \
        d.text_double.format(t=text)
    whens.append(f"WHEN {d.full_match.format(t=text, pattern=pattern)} THEN {value}")
    return f"CASE {' '.join(whens)} END"


def _signed_zero(d: Dialect, text: str, literal, negative_test: str) -> str:
    return f"CASE WHEN {negative_test} THEN {literal(d, -0.0)} ELSE {literal(d, 0.0)} END"


def _pg_double(d: Dialect, text: str, literal) -> str:
    """PostgreSQL's text-to-double cast raises on a value beyond double range and on
    one that underflows to zero ('1e-400'), where Python gives inf (missing) and a
    signed zero: the exact numeric value is compared with the exact bounds first. An
    exponent of four digits or more is decided by its sign (numeric refuses
    exponents beyond 1000; a mantissa long enough to matter there is not supported)."""
    number = f"abs(CAST({text} AS NUMERIC))"
    negative = _signed_zero(d, text, literal, f"{text} ~ '^{BLANKS}-'")
    huge = (f"CASE WHEN {text} ~ '^[^eE]*[1-9]' AND {text} ~ '[eE][+]?0*[1-9][0-9]{{3}}' "
            f"THEN NULL ELSE {negative} END")
    return (f"CASE WHEN {text} ~ '[eE][-+]?0*[1-9][0-9]{{3}}' THEN {huge} "
            f"ELSE CASE WHEN {number} >= {PG_OVERFLOW} THEN NULL "
            f"WHEN {number} * {PG_UNDERFLOW_SCALE} <= 1 THEN {negative} "
            f"ELSE CAST({text} AS {d.double}) END END")


def category_stages(d: Dialect, x: str, literal) -> list[list[tuple[str, str]]]:
    """An integer-level category's value as a double (`n`) to compare with the levels:
    numbers as they are, booleans 1/0, text as a decimal (so '2', '2.0', ' 2 ' and
    2.0 all match level 2); NULL where it is no number."""
    return stages(d, x, literal)


def category_missing(d: Dialect, x: str) -> str:
    """An integer-level category is missing: NULL, the empty text or a float NaN
    (the text 'NaN' is no number and so unseen, as in values.category_code)."""
    text = f"CAST({x} AS {d.text})"
    tests = [f"{x} IS NULL", f"({type_test(d, x, d.text_types)} AND {text} = '')"]
    if d.nan_types:
        tests.append(f"({type_test(d, x, d.nan_types)} AND {text} = {d.string(d.nan_text)})")
    return " OR ".join(tests)


def unreachable(d: Dialect, level) -> bool:
    """A text level no value in this engine can equal (it holds NUL, which the engine's
    text cannot): left out of the lookup, where it could never match."""
    return isinstance(level, str) and "\x00" in level and d.nul_char is None


def _text_code(d: Dialect, inp, col: str) -> str:
    """read_code (program.py) of a text-level category, from the column's text
    (values.category_code: NULL and '' are missing, a text that is no level unseen)."""
    value = f"CAST({col} AS {d.text}){d.text_collate}"
    miss, unseen = MISSING_CODE, UNSEEN_CODE
    if d.code_list is not None and not any(unreachable(d, lv) for lv in inp.levels):
        levels = ", ".join(d.string(level) for level in inp.levels)
        position = d.code_list.format(levels=levels, value=value)
        return (f"CASE WHEN {col} IS NULL THEN {miss} WHEN {value} = '' THEN {miss} "
                f"ELSE COALESCE(NULLIF({position}, 0) - 1, {unseen}) END")
    whens = f"WHEN '' THEN {miss} " + " ".join(
        f"WHEN {d.string(level)} THEN {code}" for code, level in enumerate(inp.levels)
        if not unreachable(d, level))
    return f"CASE WHEN {col} IS NULL THEN {miss} ELSE CASE {value} {whens} ELSE {unseen} END END"


def integer_code(d: Dialect, inp, value: str, missing: str) -> str:
    """read_code of an integer-level category from its value as a double (sql_reading:
    2, 2.0, '2' and ' 2.0 ' all read 2.0; NULL when no number) and its missing test."""
    whens = " ".join(f"WHEN {literal(d, float(level))} THEN {code}"
                     for code, level in enumerate(inp.levels))
    return (f"CASE WHEN {missing} = 1 THEN {MISSING_CODE} "
            f"ELSE CASE {value} {whens} ELSE {UNSEEN_CODE} END END")


def read_stages(plan: Plan, d: Dialect, source: dict[str, str], typed: bool) -> dict:
    """input index -> the layers reading it, innermost first, each [(alias, expression)]
    where expressions name the layer below's values as sql_sqlite_text.P + name
    (without the r<i>_ prefix): a numeric or integer-level input read from a column of
    any type to a double r<i>_n (sql_reading; NULL when missing or no number), with
    x<i> = 1 where an integer-level category is missing; a text-level category's code
    c<i> in one layer."""
    out = {}
    for inp in plan.inputs:
        col = source[inp.name]
        i = inp.index
        if inp.kind == "numeric":
            found = [[("n", col)]] if typed else stages(d, col, literal,
                                                                    inp.boolean)
            out[i] = [[(f"r{i}_{n}", e) for n, e in stage] for stage in found]
        elif inp.integer_levels:
            # The number and the missing test, coded a layer later: a CASE over the
            # levels spells its operand once per level in DuckDB.
            missing = f"CASE WHEN {category_missing(d, col)} THEN 1 ELSE 0 END"
            found = category_stages(d, col, literal)
            out[i] = [[(f"r{i}_{n}", e) for n, e in stage] for stage in found]
            out[i][0].append((f"x{i}", missing))
        else:
            out[i] = [[(f"c{i}", _text_code(d, inp, col))]]
    return out
