"""SQL dialects as data: one record of flags and spellings per engine.

The SQL emitter asks the record how to spell a thing; it never asks which
engine it is writing for. Each flag names the trap it answers:

- decimal literals are exact `numeric`/`DECIMAL` in PostgreSQL and DuckDB, so
  every literal is a string cast to the double type (the engine's own correctly
  rounded string-to-double conversion);
- SQLite 3.40's decimal-to-double conversion is off by an ULP for about one
  17-digit literal in 200, so SQLite literals are an integer mantissa times a
  power of two, both of which it reads exactly;
- SQLite's two-argument min() returns its *last* argument on a tie (a signed
  zero tie matters), so `least(a, b)` is spelled min(b, a) there;
- PostgreSQL raises on a float product or quotient that underflows to zero;
- NaN: PostgreSQL and DuckDB hold it and call NaN = NaN true (so x <> x is no
  NaN test); SQLite stores NaN as NULL;
- SQLite and DuckDB match identifiers case-insensitively even when quoted
  (ASCII letters only), Spark over all of unicode (`é` = `É`); PostgreSQL
  truncates identifiers to 63 bytes (sql_columns derives names around these);
- PostgreSQL text cannot hold NUL; the others can, but no raw NUL is written
  into an artifact: a NUL inside a string literal is spelled as a function call;
- an input column may be of any type (a CSV loaded by the sqlite3 shell's
  `.import` is all TEXT): the query asks the engine for each value's type at run
  time and reads text through a checked grammar (emit/sql_reading.py). The
  fields after `number_cast` name the trap each answers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from ..errors import ScorewrightError

DBL_MAX = 1.7976931348623157e308


@dataclass(frozen=True)
class Dialect:
    name: str
    double: str                 # the double type, as written in CAST
    text: str                   # the text type, as written in CAST
    integer: str                # the type of integer class labels
    exact_decimal_literals: bool  # CAST('<shortest repr>' AS double) reads back exactly
    greatest: str               # two-argument maximum, ties keep {a}
    least: str                  # two-argument minimum, ties keep {a}
    nan_test: str | None        # is {x} (a number) NaN; None: the engine cannot hold NaN
    text_collate: str           # appended to text comparisons: byte-wise equality
    passthrough: str            # how all input columns ride along: "rowid" (joined back),
                                # "row" (the whole row as one composite value) or
                                # "lateral" (t.* beside a LATERAL subquery: no dialect
                                # now; test_sql_layouts shows PostgreSQL's trap with it)
    fence: str                  # appended to each subquery so no layer is inlined twice
    raises_on_underflow: bool   # x * c or x / c that rounds to 0 raises an error
    fold_identifiers: bool      # quoted identifiers match case-insensitively
    identifier_max_bytes: int | None
    view: str                   # CREATE ... VIEW {name} AS
    function_form: str | None   # template under templates/sql/ for --form function
    parameter: str = ""         # the n-th (1-based) / i-th (0-based) argument inside the body
    parameter_decl: str = ""    # its declaration
    typed_parameters: bool = False  # categorical arguments are passed CAST to text
    function_call: str = ""     # a query scoring {table} through the function {name}({args})
    no_function_reason: str = ""

    # Reading a column of any type (emit/sql_reading.py).
    type_name: str = ""         # {x}'s type, as the engine names it at run time
    text_types: tuple[str, ...] = ()  # the names of text types
    number_cast: str = ""       # a non-text value {x} as double (NULL where it is no number)
    trim_blanks: str = ""       # the text {t} without the ASCII blanks around it
    # How checked decimal text {t} becomes a double: "cast": the engine's cast
    # (text_double) is correctly rounded and never raises; "range": PostgreSQL's
    # raises beyond double range and on underflow to zero; "staged": SQLite's is
    # not correctly rounded, so the text is read by integer arithmetic over several
    # layers (sql_sqlite_text).
    text_double_rule: str = "cast"
    text_double: str = ""
    full_match: str = ""        # {t} matches the whole regular expression {pattern}
    regex_start: str = "^"      # anchors spelled into the pattern
    regex_end: str = "$"
    type_literal: str = "'{name}'"  # a type name as the type_name expression compares it
    # Numbers whose cast to double is not the correctly rounded value or raises
    # (PostgreSQL numeric beyond double range), read through their exact decimal text.
    exact_text_types: tuple[str, ...] = ()
    # A boolean column's type where no cast from boolean to double exists (PostgreSQL):
    # read through its text 'true'/'false'. None: the cast gives 1/0, or no such type.
    boolean_type: str | None = None
    single_types: tuple[str, ...] = ()  # single-precision types (read back from their text)
    single: str = ""                    # the single type, as written in CAST
    # PostgreSQL folds a CAST of a constant while planning, even in a CASE arm the
    # value never takes, so the final cast reads NULL where an earlier arm applies.
    folds_constant_casts: bool = False
    # Float types whose NaN reads as nan_text once cast to text: a category's NaN is
    # missing, the text 'NaN' is unseen (values.category_code).
    nan_types: tuple[str, ...] = ()
    nan_text: str = "NaN"

    identifier_quote: str = '"'   # doubled inside a quoted name
    backslash_escapes: bool = False  # string literals treat \\ as an escape character
    fold_unicode: bool = False  # case folding covers all of unicode, not ASCII alone
    identifier_forbidden: str = "\x00"  # characters no column name in an artifact holds
    nul_char: str | None = None  # a NUL character as an expression; None: text cannot hold it
    reserved_columns: tuple[str, ...] = ()  # names an input column must not take
    expressions_form: bool = False  # --form expressions: one expression per output
    # A category's contribution looked up from a list ({values}; {code} 0-based, -1: none)
    # instead of a CASE: DuckDB expands `CASE c WHEN ...` into one copy of c per branch,
    # which for a 5,000-level feature exhausted 24 GB of memory.
    lookup_list: str | None = None
    # A text category's 1-based position in a list of its levels ({levels}; 0: none)
    # instead of a CASE over the levels: Spark's optimizer exhausted a 6 GB heap on a
    # 5,000-branch CASE.
    code_list: str | None = None
    # The pseudo-column naming a table row, if the engine has one: a model of more than
    # a few hundred terms reads its inputs in blocks joined back by it (emit/sql.py).
    rowid: str | None = None
    # Terms one margin layer adds (emit/sql.py sums a wide model over layers): the
    # sum nests that deep, under the 1,000 SQLite and DuckDB accept. SQLite takes
    # larger blocks: fewer layers prepared faster (6,000 features in long layout:
    # 65 s in blocks of 250, 42 s in blocks of 900).
    terms_per_layer: int = 250
    # Terms one layer adds where each layer reads its own inputs (the long layout's
    # pivots; rowid joins); None: terms_per_layer. Spark, long layout, 10,000 features:
    # 389 s in blocks of 250, 265 s in blocks of 1,000, over 330 s in blocks of 2,500
    # (each block's pivot tests every row against each of its features).
    terms_per_join: int | None = None
    # start + each of rest, left to right, as one flat call ({start}, {rest}) instead of
    # a chain of `+` nested as deep as there are terms.
    sum_list: str | None = None
    # passthrough "row": the input row `t` as one value, and its columns again from `s.rw`.
    row_value: str = "t"
    row_columns: str = "(s.rw).*"
    # At most this many inputs read in one layer: a SELECT holds at most 2,000 columns
    # in SQLite and its text reading carries up to seven values per input
    # (sql_sqlite_text); a wider model reads its inputs in blocks joined by rowid.
    read_width: int | None = None
    # The layers as a flat WITH list instead of nested subqueries: SQLite's parser
    # stack overflowed on the text reading (sql_sqlite_text) nested under them.
    flat_layers: bool = False
    # A header note for a model summed over more than one layer (engine advice).
    large_query_note: str | None = None
    # At most this many layers under a LATERAL call (the function form's call); a
    # deeper query is refused there in one line. DuckDB decorrelates a LATERAL subquery into a plan that doubles
    # with each layer reading a column of the layer below twice (measured on a chain
    # of such layers over 1,000,000 rows: 10 layers 0.24 s, 12 layers 2.0 s, 16 layers
    # 21 s; the same chain joined by rowid 0.3 s).
    lateral_layers: int | None = None
    # How much deeper an inlined CASE nests than a binary operation, in the units of
    # sql_program's MAX_DEPTH: SQLite's parser stack (100 entries) took 15 nested CASEs
    # and overflowed at 16, against 31 nested parenthesized additions; counted as one
    # level, the selections of a quantile step of 100 quantiles overflowed it.
    select_depth: int = 1
    # Spellings of primitives that differ from sql_program.spellings (a function of the
    # spelled operands); None: the dialect cannot express that op.
    ops: dict = field(default_factory=dict)
    # How the ordinary-row arm tests that every real input a column reads is within
    # its bound (sql_ordinary): "sum", the sum of magnitudes against the smallest
    # bound; "each", one comparison per input, where a sum past the double range
    # raises instead of giving infinity (PostgreSQL).
    range_test: str = "sum"
    # The ordinary arm a layer below the general one, instead of both in one CASE:
    # Spark compiles a layer into one Java method, and with both arms in it the method
    # outgrew what the JVM compiles to machine code (1,000,000 rows x 30 features:
    # 2.4 s; 0.45 s with the ordinary arm alone). Apart, the method holding the general
    # arm runs interpreted but only tests a value on an ordinary row (1.6x the
    # minimal expression, from 6.2x).
    ordinary_layer: bool = False

    def quote(self, name: str) -> str:
        q = self.identifier_quote
        return q + name.replace(q, q + q) + q

    def string(self, value: str) -> str:
        """A string literal; NULs are joined in as `nul_char` (callers check that the
        dialect has one)."""
        parts = [self._literal(part) for part in value.split("\x00")]
        if len(parts) == 1:
            return parts[0]
        return "(" + f" || {self.nul_char} || ".join(parts) + ")"

    def _literal(self, value: str) -> str:
        if self.backslash_escapes:
            value = value.replace("\\", "\\\\")
        return "'" + value.replace("'", "''") + "'"


def literal(d: Dialect, x: float) -> str:
    """A double literal the engine reads back to exactly x, typed as double."""
    x = float(x)
    if d.exact_decimal_literals:
        return f"CAST('{x!r}' AS {d.double})"
    if x == 0.0:
        return "-0.0" if math.copysign(1.0, x) < 0 else "0.0"
    if x.is_integer() and abs(x) < 2.0 ** 53:
        return repr(x)
    mantissa, exponent = math.frexp(x)
    m, e = int(mantissa * 2 ** 53), exponent - 53
    while m % 2 == 0:
        m, e = m // 2, e + 1
    return f"({m} * {2.0 ** e!r})"


SQLITE = Dialect(
    name="sqlite",
    double="REAL",
    text="TEXT",
    integer="INTEGER",
    exact_decimal_literals=False,
    greatest="max({a}, {b})",
    least="min({b}, {a})",
    nan_test=None,
    text_collate=" COLLATE BINARY",
    passthrough="rowid",
    rowid="rowid",
    terms_per_layer=900,
    fence=" LIMIT -1 OFFSET 0",
    raises_on_underflow=False,
    fold_identifiers=True,
    identifier_max_bytes=None,
    # No CREATE OR REPLACE VIEW in SQLite: the file drops its own view first, so it
    # can be run again.
    view="DROP VIEW IF EXISTS {name};\nCREATE VIEW {name} AS",
    # SQLite types each value, not the column: typeof() per value. CAST alone reads
    # 'abc' as 0.0 and '1.5abc' as 1.5, so text is read only after a grammar check;
    # a blob is no number.
    type_name="typeof({x})",
    text_types=("text",),
    number_cast="CASE WHEN typeof({x}) IN ('integer', 'real') THEN CAST({x} AS REAL) END",
    trim_blanks="trim({t}, char(32, 9, 10, 13, 12, 11))",
    text_double_rule="staged",
    flat_layers=True,
    read_width=250,
    select_depth=2,
    function_form=None,
    nul_char="char(0)",
    # A column of one of these names shadows the rowid the query joins on.
    reserved_columns=("rowid", "_rowid_", "oid"),
    no_function_reason="SQLite cannot define a function in SQL (only through its C API); "
                       "use --form select or --form view",
)

POSTGRES = Dialect(
    name="postgres",
    double="DOUBLE PRECISION",
    text="TEXT",
    integer="BIGINT",
    exact_decimal_literals=True,
    greatest="GREATEST({a}, {b})",
    least="LEAST({a}, {b})",
    nan_test="{x} = CAST('NaN' AS DOUBLE PRECISION)",
    text_collate=' COLLATE "C"',
    # Not LATERAL: for a lateral subquery PostgreSQL may choose a Memoize node keyed on
    # every input reference, which fails past 1,664 keys ("number of columns exceeds
    # limit", measured from 250 features on rows with few distinct values).
    passthrough="row",
    # A column named t would be read where the query means the whole row t.
    reserved_columns=("t",),
    fence=" OFFSET 0",
    raises_on_underflow=True,
    range_test="each",
    fold_identifiers=False,
    identifier_max_bytes=63,
    view="CREATE OR REPLACE VIEW {name} AS",
    # No TRY_CAST in PostgreSQL and static types: every arm compiles for the column's
    # type, text is cast only after its grammar and range are checked.
    type_name="pg_typeof({x})",
    type_literal="CAST('{name}' AS REGTYPE)",
    text_types=("text", "character varying", "character", "unknown"),
    number_cast="CAST({x} AS DOUBLE PRECISION)",
    trim_blanks="btrim({t}, chr(32) || chr(9) || chr(10) || chr(13) || chr(12) || chr(11))",
    text_double_rule="range",
    full_match="{t} ~ {pattern}",
    exact_text_types=("numeric",),
    boolean_type="boolean",
    single_types=("real",),
    single="REAL",
    folds_constant_casts=True,
    nan_types=("double precision", "real", "numeric"),
    function_form="sql/function_postgres.sql.j2",
    parameter="${n}",
    parameter_decl="{type}",
    typed_parameters=True,
    function_call="SELECT t.*, s.*\nFROM {table} AS t CROSS JOIN LATERAL {name}({args}) AS s;",
    # Measured on PostgreSQL 15 (2,000 features, long layout, 40 rows).
    large_query_note="PostgreSQL: with jit on (its default where built with LLVM), "
                     "compiling a query this large can take far longer than running it "
                     "(2,000 features, long layout, 40 rows: 31 s, 3 s with jit off). The "
                     "results are the same bits either way: SET jit = off in the session "
                     "that runs it.",
)

DUCKDB = Dialect(
    name="duckdb",
    double="DOUBLE",
    text="VARCHAR",
    integer="BIGINT",
    exact_decimal_literals=True,
    greatest="GREATEST({a}, {b})",
    least="LEAST({a}, {b})",
    nan_test="isnan({x})",
    text_collate="",
    # The whole row as one struct value, unpacked by unnest: a LATERAL subquery
    # (t.* beside it) cost half the query though its plan showed no join (43-53 ms
    # of 97, 1,000,000 rows x 30 features), and DuckDB plans a chain of LATERAL
    # layers in time that doubles with each layer (lateral_layers).
    passthrough="row",
    row_value="t",
    row_columns="unnest(s.rw)",
    # A column named t would be read where the query means the whole row t.
    reserved_columns=("t",),
    lateral_layers=10,
    rowid="rowid",
    fence="",
    raises_on_underflow=False,
    fold_identifiers=True,
    identifier_max_bytes=None,
    view="CREATE OR REPLACE VIEW {name} AS",
    # TRY_CAST alone takes '1_000', 'NaN' and 'inf': text is grammar-checked first.
    type_name="typeof({x})",
    text_types=("VARCHAR",),
    number_cast="TRY_CAST({x} AS DOUBLE)",
    trim_blanks="trim({t}, chr(32) || chr(9) || chr(10) || chr(13) || chr(12) || chr(11))",
    text_double_rule="cast",
    text_double="TRY_CAST({t} AS DOUBLE)",
    full_match="regexp_full_match({t}, {pattern})",
    regex_start="",
    regex_end="",
    nan_types=("DOUBLE", "FLOAT"),
    nan_text="nan",
    function_form="sql/function_duckdb.sql.j2",
    parameter="p{i}",
    parameter_decl="p{i}",
    nul_char="chr(0)",
    function_call="SELECT t.*, s.*\nFROM {table} AS t CROSS JOIN LATERAL {name}({args}) AS s;",
    # list_extract counts a negative index from the end: every code below 0 reads
    # index 0, which is NULL.
    lookup_list="COALESCE(list_extract([{values}], GREATEST({code}, -1) + 1), {zero})",
)

# Spark SQL: backtick names, backslash escapes in strings, NaN = NaN true and NaN above
# every number; names match case-insensitively (spark.sql.caseSensitive=false).
# ANSI mode (the default in Spark 4) raises on division by zero and invalid casts;
# nothing here divides by a value that can be zero and every text read is try_cast.
SPARK = Dialect(
    name="spark",
    double="DOUBLE",
    text="STRING",
    integer="BIGINT",
    exact_decimal_literals=True,
    greatest="GREATEST({a}, {b})",
    least="LEAST({a}, {b})",
    nan_test="isnan({x})",
    text_collate="",
    passthrough="row",
    row_value="struct(t.*)",
    row_columns="s.rw.*",
    fence="",
    raises_on_underflow=False,
    fold_identifiers=True,
    identifier_max_bytes=None,
    view="CREATE OR REPLACE TEMPORARY VIEW {name} AS",
    # try_cast alone takes '1.5d', 'NaN' and 'Infinity' (Java's parser): text is
    # grammar-checked first; Java's `$` also matches before a final U+2028, so \z.
    type_name="typeof({x})",
    text_types=("string",),
    number_cast="try_cast({x} AS DOUBLE)",
    trim_blanks="trim(BOTH chr(32) || chr(9) || chr(10) || chr(13) || chr(12) || chr(11) "
                "FROM {t})",
    text_double_rule="cast",
    text_double="try_cast({t} AS DOUBLE)",
    full_match="{t} RLIKE {pattern}",
    regex_end="\\z",
    nan_types=("double", "float"),
    function_form=None,
    no_function_reason="the spark dialect has no function form; use --form select or view",
    identifier_quote="`",
    backslash_escapes=True,
    fold_unicode=True,
    nul_char="chr(0)",
    expressions_form=True,
    lookup_list=("CASE WHEN {code} >= 0 THEN element_at(array({values}), CAST({code} + 1 AS INT)) "
                 "ELSE {zero} END"),
    code_list="array_position(array({levels}), {value})",
    sum_list="aggregate(array({rest}), {start}, (acc, x) -> acc + x)",
    ordinary_layer=True,
    terms_per_join=1_000,
)

DIALECTS = {d.name: d for d in (SQLITE, POSTGRES, DUCKDB, SPARK)}


def dialect(name: str | None) -> Dialect:
    if name is None:
        raise ScorewrightError(f"--target sql needs --dialect ({', '.join(DIALECTS)})")
    if name not in DIALECTS:
        raise ScorewrightError(f"unknown SQL dialect {name!r}; known: {', '.join(DIALECTS)}")
    return DIALECTS[name]
