"""The SQL target on the real engines: SQLite (standard library), DuckDB (PyPI) and a
PostgreSQL server this session starts itself (`postgres_dsn` in conftest.py).

Every check compares with the reference evaluator bit for bit (int64 views of the
doubles, so even the sign of a zero counts); each trap of an engine is first shown
to exist on that engine, then shown handled by the emitted SQL.
"""

from __future__ import annotations

import dataclasses
import math
import random
import sqlite3
import struct
import subprocess
import sys

import duckdb
import numpy as np
import psycopg
import pytest

import models
from scorewright.emit.sql import emit, literal
from scorewright.emit.sql_dialects import DIALECTS
from scorewright.errors import ScorewrightError
from scorewright.plan import build_plan
from scorewright.reference import score_row
from scorewright.verify.cases import random_rows
from scorewright.verify.runners import sql as sql_runner

DIALECT_NAMES = ("sqlite", "postgres", "duckdb")
MODEL_NAMES = tuple(models.WALKED)
# models whose scoring program is deep (a log's reduction, the probit link's series): some
# forms refuse them in one line (DuckDB's function form, Spark's --form expressions)
DEEP = ("compressor_terms", "spector_probit")
# SQLite and DuckDB fold identifier case: the hostile model's "SELECT" and "select"
# features must read distinct columns there.
FOLDED = {"hostile": {"select": "select (lower case)"}}


def bits(a) -> np.ndarray:
    return np.ascontiguousarray(np.asarray(a, dtype=np.float64)).view(np.int64)


def options_for(dialect: str, name: str, **extra) -> dict:
    options = {"dialect": dialect, **extra}
    if DIALECTS[dialect].fold_identifiers and name in FOLDED:
        options["columns"] = FOLDED[name]
    return options


def run_sql(tmp_path, model, rows, options, dsn):
    """Emit with `options` and run on the dialect's engine (`settings`: the runner's)."""
    art = emit(model, {k: v for k, v in options.items() if k not in ("settings", "text_pass")})[0]
    out = tmp_path / f"{options['dialect']}-{options.get('form', 'select')}"
    out.mkdir(exist_ok=True)
    (out / art.name).write_bytes(art.content)
    return sql_runner.run(out, model, rows, dict(options, dsn=dsn))


def assert_agrees(model, rows, got):
    plan = build_plan(model)
    ref = [score_row(plan, row) for row in rows]
    margins = np.array([s.margins for s in ref]).reshape(len(rows), plan.n_outputs)
    bad = np.nonzero((bits(got.margins) != bits(margins)).any(axis=1))[0]
    assert bad.size == 0, f"margin differs on {rows[bad[0]]}: {got.margins[bad[0]]} vs " \
                          f"{margins[bad[0]]}"
    if plan.task == "regression":
        values = np.array([s.value for s in ref])
        bad = np.nonzero(bits(got.value) != bits(values))[0]
        assert bad.size == 0, f"value differs on {rows[bad[0]]}"
        return
    probs = np.array([s.probabilities for s in ref])
    bad = np.nonzero((bits(got.probabilities) != bits(probs)).any(axis=1))[0]
    assert bad.size == 0, f"probability differs on {rows[bad[0]]}: " \
                          f"{got.probabilities[bad[0]]} vs {probs[bad[0]]}"
    assert list(got.class_index) == [s.class_index for s in ref]


# ---------------------------------------------------------------- rows

NUMERIC_EDGES = [None, math.nan, math.inf, -math.inf, 1e308, -1e308, 1.7976931348623157e308,
                 5e-324, -5e-324, 1e-310, -2.2250738585072014e-308, 0.0, -0.0, 1e300, -1e300,
                 3, -7, 10 ** 20, 2 ** 53 + 1, "12.5", " -3e2 ", "not a number", True]


def _margin_push(plan, base, inp, target):
    """A raw value for `inp` that pushes the first margin towards `target`, or None."""
    def margin(x):
        return score_row(plan, dict(base, **{inp.name: x})).margins[0]
    lo, hi = -1e12, 1e12
    if (margin(hi) - target) * (margin(lo) - target) > 0:
        return None
    for _ in range(200):
        mid = (lo + hi) / 2
        if (margin(mid) - target) * (margin(lo) - target) > 0:
            lo = mid
        else:
            hi = mid
    return hi


def edge_rows(name: str, n_frame: int | None = None) -> list[dict]:
    tm = models.build(name)
    plan = build_plan(tm.model)
    frame = tm.frame.to_dict("records")
    rows = frame if n_frame is None else frame[:n_frame]
    rows = [dict(r) for r in rows]
    base = dict(frame[0])
    numeric = [i for i in plan.inputs if i.kind == "numeric"]
    for inp in plan.inputs:
        if inp.kind == "numeric":
            rows += [dict(base, **{inp.name: v}) for v in NUMERIC_EDGES]
        else:
            values = [None, "", math.nan, "unseen level", math.inf] + list(inp.levels)
            values += [2.0, 2.5, 99, "2"] if inp.integer_levels else [3, "3"]
            rows += [dict(base, **{inp.name: v}) for v in values]
    for v in (None, math.nan, 1e308, -1e308, 5e-324, -5e-324, 0.0):
        rows.append(dict(base, **{i.name: v for i in numeric}))
    weighted = [t.input for t in plan.terms if t.kind == "numeric"]
    for target in (-1000.0, -745.0, -708.5, -36.0, 36.0, 708.5, 745.0, 1000.0):
        for index in weighted[:2]:
            x = _margin_push(plan, base, plan.inputs[index], target)
            if x is not None:
                rows.append(dict(base, **{plan.inputs[index].name: x}))
    return rows


# ---------------------------------------------------------------- agreement

@pytest.mark.parametrize("name", MODEL_NAMES)
@pytest.mark.parametrize("dialect", DIALECT_NAMES)
def test_select_agrees_bit_for_bit(tmp_path, postgres_dsn, dialect, name):
    tm = models.build(name)
    rows = edge_rows(name, n_frame=400)
    got = run_sql(tmp_path, tm.model, rows, options_for(dialect, name), postgres_dsn)
    assert_agrees(tm.model, rows, got)


# DuckDB plans its table macro's LATERAL layers slowly for the multiclass models (112 s
# and 52 s measured under load): those two run under --runslow.
SLOW_FORMS = {("function", "duckdb", "fault_type"), ("function", "duckdb", "wine")}


@pytest.mark.parametrize("form,dialect,name", [
    pytest.param(form, dialect, name, marks=pytest.mark.slow
                 if (form, dialect, name) in SLOW_FORMS else ())
    for name in MODEL_NAMES
    for form, dialect in [("view", "sqlite"), ("view", "postgres"), ("view", "duckdb"),
                          ("function", "postgres"), ("function", "duckdb")]])
def test_view_and_function_forms_agree(tmp_path, postgres_dsn, form, dialect, name):
    tm = models.build(name)
    if (form, dialect) == ("function", "duckdb") and name in DEEP:
        # DuckDB plans a LATERAL call in time doubling per layer: refused in one line
        with pytest.raises(ScorewrightError, match="LATERAL") as err:
            emit(tm.model, options_for(dialect, name, form=form))
        assert "\n" not in str(err.value)
        return
    rows = edge_rows(name, n_frame=40)
    got = run_sql(tmp_path, tm.model, rows, options_for(dialect, name, form=form), postgres_dsn)
    assert_agrees(tm.model, rows, got)


def _integer_copy(plan, rows):
    out = []
    for row in rows:
        new = dict(row)
        for inp in plan.inputs:
            v = row.get(inp.name)
            if inp.kind == "numeric":
                new[inp.name] = int(round(v)) if isinstance(v, float) and math.isfinite(v) else \
                    (v if isinstance(v, int) else None)
        out.append(new)
    return out


@pytest.mark.parametrize("name", MODEL_NAMES)
@pytest.mark.parametrize("dialect", DIALECT_NAMES)
def test_integer_typed_columns(tmp_path, postgres_dsn, dialect, name):
    """Numeric features in INTEGER columns: the SQL casts before any arithmetic, so
    SQLite's and PostgreSQL's truncating integer division never happens."""
    tm = models.build(name)
    plan = build_plan(tm.model)
    rows = _integer_copy(plan, tm.frame.head(150).to_dict("records"))
    options = options_for(dialect, name)
    art = emit(tm.model, options)[0]
    s = sql_runner.settings(plan, options)
    engine = sql_runner.ENGINES[dialect]
    table = sql_runner.Table(plan, s, rows, engine.TYPES, engine.mixed_cell)
    for j, inp in enumerate(i for i in plan.inputs):
        if inp.kind == "numeric":
            col = table.columns.index(s.columns[inp.name])
            table.types[col] = engine.TYPES["integer"]
            assert all(r[col] is None or float(r[col]).is_integer() for r in table.values)
    for r in table.values:
        for col, t in enumerate(table.types):
            if t == engine.TYPES["integer"] and isinstance(r[col], float):
                r[col] = int(r[col])
    names, result, _ = engine.execute({"dsn": postgres_dsn}, s.dialect, s.table, table, [],
                                      art.content.decode())
    result.sort(key=lambda r: r[names.index(table.row_column)])
    cols = [names.index(c) for c in sql_runner.output_columns(plan)]
    got = sql_runner.outputs_from_table(plan, [[r[i] for i in cols] for r in result], "")
    assert_agrees(tm.model, rows, got)


# ---------------------------------------------------------------- traps, one by one

def _pg(dsn, query):
    with psycopg.connect(dsn, autocommit=True) as con:
        return con.execute(query).fetchall()


def _dk(query):
    return duckdb.connect().execute(query)


def test_trap_decimal_literals(postgres_dsn):
    """PostgreSQL reads 0.1 as numeric and DuckDB as DECIMAL (exact decimals): the sum of
    0.1 and 0.2 is then exactly 0.3, not the double 0.30000000000000004. The emitted
    literals are typed double. (IEEE double 0.1 + 0.2: common practice.)"""
    assert _pg(postgres_dsn, "SELECT pg_typeof(0.1)::text, 0.1 + 0.2 = 0.3") == [("numeric", True)]
    assert _dk("SELECT typeof(0.1)").fetchone()[0].startswith("DECIMAL")
    assert _dk("SELECT 0.1 + 0.2 = 0.3").fetchone()[0] is True
    pg, dk = DIALECTS["postgres"], DIALECTS["duckdb"]
    a, b = literal(pg, 0.1), literal(pg, 0.2)
    assert _pg(postgres_dsn, f"SELECT pg_typeof({a})::text, {a} + {b}") == \
        [("double precision", 0.1 + 0.2)]
    a, b = literal(dk, 0.1), literal(dk, 0.2)
    assert _dk(f"SELECT typeof({a}), {a} + {b}").fetchone() == ("DOUBLE", 0.1 + 0.2)


def _random_doubles(n, seed=3):
    rng = random.Random(seed)
    out = []
    while len(out) < n:
        x = struct.unpack("<d", struct.pack("<Q", rng.getrandbits(64)))[0]
        if math.isfinite(x):
            out.append(x)
    return out + [5e-324, -5e-324, 2.2250738585072014e-308, 1.7976931348623157e308, -0.0, 0.1]


def test_trap_literals_read_back_exactly(postgres_dsn):
    """Every literal spelling reads back to the same double on each engine. SQLite 3.40's
    own decimal reader is off by an ULP on some 17-digit literals (shown here), hence
    its mantissa-times-power-of-two spelling."""
    xs = _random_doubles(3000)
    con = sqlite3.connect(":memory:")
    misread = sum(con.execute(f"SELECT {x!r}").fetchone()[0] != x for x in xs if x != 0)
    assert misread > 0, "SQLite read every shortest decimal exactly: the trap is gone"
    d = DIALECTS["sqlite"]
    got = [con.execute(f"SELECT {literal(d, x)}").fetchone()[0] for x in xs]
    assert bits(got).tolist() == bits(xs).tolist()
    d = DIALECTS["duckdb"]
    got = _dk("SELECT " + ", ".join(literal(d, x) for x in xs[:1500])).fetchone()
    assert bits(got).tolist() == bits(xs[:1500]).tolist()
    d = DIALECTS["postgres"]
    got = _pg(postgres_dsn, "SELECT " + ", ".join(literal(d, x) for x in xs[:1500]))[0]
    assert bits(got).tolist() == bits(xs[:1500]).tolist()


def test_trap_integer_division(postgres_dsn):
    """SQLite and PostgreSQL divide integers with truncation: 7 / 2 = 3."""
    assert sqlite3.connect(":memory:").execute("SELECT 7 / 2").fetchone()[0] == 3
    assert _pg(postgres_dsn, "SELECT 7 / 2") == [(3,)]
    # test_integer_typed_columns then runs every model on INTEGER columns.


def test_trap_postgres_raises_on_exp_and_underflow(tmp_path, postgres_dsn):
    """PostgreSQL raises on exp overflow and underflow and on a product that underflows
    to zero; rows that reach each of those in unguarded SQL score without error."""
    for query in ("SELECT exp(CAST(-746 AS DOUBLE PRECISION))",
                  "SELECT exp(CAST(710 AS DOUBLE PRECISION))",
                  "SELECT CAST('5e-324' AS DOUBLE PRECISION) * CAST('0.3' AS DOUBLE PRECISION)",
                  "SELECT CAST('1e308' AS DOUBLE PRECISION) * CAST('10' AS DOUBLE PRECISION)"):
        with pytest.raises(psycopg.errors.NumericValueOutOfRange):
            _pg(postgres_dsn, query)
    # spector multiplies raw inputs by weights below 1; mixed_scalers divides first (MaxAbs).
    for name in ("spector", "mixed_scalers", "fault_type", "alarms_poisson"):
        tm = models.build(name)
        rows = edge_rows(name, n_frame=5)
        got = run_sql(tmp_path, tm.model, rows, {"dialect": "postgres"}, postgres_dsn)
        assert_agrees(tm.model, rows, got)
    sql = emit(models.build("spector").model, {"dialect": "postgres"})[0].content.decode()
    assert "* CAST('0.0' AS DOUBLE PRECISION) ELSE" in sql  # the underflow guard is there


# Every JIT threshold at zero: each query is compiled, inlined and optimized by LLVM.
FORCED_JIT = {"jit": "on", "jit_above_cost": "0", "jit_inline_above_cost": "0",
              "jit_optimize_above_cost": "0"}


def test_trap_postgres_jit_gives_the_same_bits(tmp_path, postgres_dsn, request):
    """PostgreSQL compiles expressions with LLVM when a query costs enough (jit is on by
    default where the server is built with LLVM). Compiled code could contract a
    multiply and an add or reorder operations; forced on for every query, it gives
    the same bits on every test model and on a model summed over several layers in
    both layouts. (The PostgreSQL profiles verify with jit off, for time.)"""
    with psycopg.connect(postgres_dsn, autocommit=True) as con:
        assert con.execute("SELECT pg_jit_available()").fetchone()[0], \
            "this PostgreSQL server has no JIT (Debian: the llvmjit library of the package)"
        for k, v in FORCED_JIT.items():
            con.execute("SELECT set_config(%s, %s, false)", (k, v))
        plan = "\n".join(r[0] for r in con.execute(
            "EXPLAIN ANALYZE SELECT exp(x * 0.5) FROM generate_series(1, 3) AS x"))
        assert "JIT:" in plan and "Inlining true, Optimization true" in plan, plan
    # The deep programs (a log's reduction, the probit series: the same + - * / and
    # selects, only many) take LLVM minutes to compile: --runslow only. The default tier
    # compiles one model (binary, with categoricals) besides the wide and long models
    # below; --runslow every test model.
    slow = request.config.getoption("--runslow")
    for name in [n for n in MODEL_NAMES if slow or n == "fault_binary"]:
        tm = models.build(name)
        rows = edge_rows(name, n_frame=50)
        # JIT's bits are the question here; the text pass is tested on its own.
        got = run_sql(tmp_path, tm.model, rows, dict(options_for(
            "postgres", name, settings=FORCED_JIT), text_pass=False), postgres_dsn)
        assert "jit_optimize_above_cost=0" in got.runtime, got.runtime
        assert_agrees(tm.model, rows, got)
    # Compiling is slow (260 features: 19 s wide, 95 s long; more since each column has an
    # ordinary-row arm), so the long layout runs on a model of one layer, and the default
    # tier's wide model has 100 features (two layers; 260 under --runslow).
    for n, layout in ((260 if slow else 100, "wide"), (40, "long")):
        wide = models.wide_model(n, prefix="jit", spread=0.3)
        rows = random_rows(build_plan(wide), 12, seed=n)
        got = run_sql(tmp_path, wide, rows, {"dialect": "postgres", "layout": layout,
                                             "settings": FORCED_JIT, "text_pass": False},
                      postgres_dsn)
        assert_agrees(wide, rows, got)


def test_trap_nan(tmp_path, postgres_dsn):
    """PostgreSQL and DuckDB hold NaN, call NaN = NaN true and let GREATEST return NaN;
    SQLite stores NaN as NULL. NaN is missing for the emitted SQL on all three."""
    assert _pg(postgres_dsn, "SELECT CAST('NaN' AS DOUBLE PRECISION) = "
                             "CAST('NaN' AS DOUBLE PRECISION)") == [(True,)]
    great = _pg(postgres_dsn, "SELECT GREATEST(CAST('NaN' AS DOUBLE PRECISION), 1)")[0][0]
    assert math.isnan(great)
    assert _dk("SELECT CAST('nan' AS DOUBLE) = CAST('nan' AS DOUBLE)").fetchone()[0]
    assert math.isnan(_dk("SELECT GREATEST(CAST('nan' AS DOUBLE), 1.0)").fetchone()[0])
    con = sqlite3.connect(":memory:")
    con.execute("CREATE TABLE t (x REAL)")
    con.execute("INSERT INTO t VALUES (?)", (math.nan,))
    assert con.execute("SELECT x IS NULL FROM t").fetchone()[0] == 1
    for name in ("fault_binary", "mixed_scalers"):  # imputed, zero-filled, integer levels
        tm = models.build(name)
        base = tm.frame.iloc[0].to_dict()
        rows = [dict(base, **{f: math.nan}) for f in tm.frame.columns] + \
            [dict(base, **{f: None}) for f in tm.frame.columns]
        for dialect in DIALECT_NAMES:
            assert_agrees(tm.model, rows, run_sql(tmp_path, tm.model, rows,
                                                  {"dialect": dialect}, postgres_dsn))


def test_trap_sqlite_min_keeps_its_last_argument_on_ties():
    """SQLite's min(a, b) returns b when a = b (so min(-0.0, 0.0) is 0.0), unlike
    Python's min and LEAST; the dialect spells least(a, b) as min(b, a)."""
    con = sqlite3.connect(":memory:")
    assert math.copysign(1, con.execute("SELECT min(-0.0, 0.0)").fetchone()[0]) > 0
    d = DIALECTS["sqlite"]
    got = con.execute("SELECT " + d.least.format(a="-0.0", b="0.0")).fetchone()[0]
    assert math.copysign(1, got) == math.copysign(1, min(-0.0, 0.0)) == -1


def test_trap_identifiers(tmp_path, postgres_dsn):
    """Quotes, semicolons, comment markers, backslashes, newlines, unicode and SQL keywords
    as feature names, levels and labels; 'SELECT' and 'select' are two columns in
    PostgreSQL but one in SQLite and DuckDB, where the later feature reads a derived
    column (or the user's --column mapping)."""
    tm = models.build("hostile")
    rows = edge_rows("hostile", n_frame=60)
    got = run_sql(tmp_path, tm.model, rows, {"dialect": "postgres", "table": 'in"put; --'},
                  postgres_dsn)
    assert_agrees(tm.model, rows, got)
    for dialect in ("sqlite", "duckdb"):
        text = emit(tm.model, {"dialect": dialect})[0].content.decode()
        assert '--   "select" <- "select_b1a36d25" (numeric)' in text
        for options in ({"dialect": dialect, "table": "sel'ect */ --"},
                        options_for(dialect, "hostile", table="sel'ect */ --")):
            got = run_sql(tmp_path, tm.model, rows, options, postgres_dsn)
            assert_agrees(tm.model, rows, got)
    con = sqlite3.connect(":memory:")
    with pytest.raises(sqlite3.OperationalError, match="duplicate column"):
        con.execute('CREATE TABLE t ("SELECT" REAL, "select" REAL)')


def _evil_model():
    model = models.build("spector").model
    name = "evil\nDROP TABLE victim; --\r\nDROP TABLE victim;\u2028DROP TABLE victim;"
    return dataclasses.replace(model, name=name).sealed()


def test_trap_comment_escaping(tmp_path, postgres_dsn):
    """A model name with line breaks cannot end the header comment: every header line is
    a comment, and running the file on each engine leaves a table named victim alone."""
    model = _evil_model()
    rows = models.build("spector").frame.head(5).to_dict("records")
    for dialect in DIALECT_NAMES:
        text = emit(model, {"dialect": dialect})[0].content.decode()
        # The statement starts with SELECT, or with WITH where the layers are flat (SQLite).
        start = min(text.find(f"\n{word}") for word in ("SELECT", "WITH") if f"\n{word}" in text)
        header = text[:start].split("\n")
        assert all(line.startswith("-- ") for line in header)
        assert "DROP TABLE victim" in header[1] and "\\u000a" in header[1]
        assert "\r" not in text and "\u2028" not in text
    con = sqlite3.connect(":memory:")
    con.executescript('CREATE TABLE victim (x REAL); CREATE TABLE "input" '
                      '("GPA" REAL, "TUCE" REAL, "PSI" REAL);')
    con.executescript(emit(model, {"dialect": "sqlite", "form": "view"})[0].content.decode())
    assert con.execute("SELECT count(*) FROM victim").fetchone() == (0,)
    dk = duckdb.connect()
    dk.execute('CREATE TABLE victim (x DOUBLE); CREATE TABLE "input" '
               '("GPA" DOUBLE, "TUCE" DOUBLE, "PSI" DOUBLE)')
    dk.execute(emit(model, {"dialect": "duckdb", "form": "view"})[0].content.decode())
    assert dk.execute("SELECT count(*) FROM victim").fetchone() == (0,)
    with psycopg.connect(postgres_dsn, autocommit=True) as pg:
        pg.execute("CREATE SCHEMA comment_trap; SET search_path TO comment_trap")
        pg.execute('CREATE TABLE victim (x float8); CREATE TABLE "input" '
                   '("GPA" float8, "TUCE" float8, "PSI" float8)')
        pg.execute(emit(model, {"dialect": "postgres", "form": "function"})[0].content.decode())
        assert pg.execute("SELECT count(*) FROM victim").fetchone() == (0,)
        pg.execute("DROP SCHEMA comment_trap CASCADE")
    for dialect in DIALECT_NAMES:
        assert_agrees(model, rows, run_sql(tmp_path, model, rows, {"dialect": dialect},
                                           postgres_dsn))


def test_duckdb_macro_with_decimal_arguments():
    """DuckDB macro arguments are untyped: 0.1 arrives as DECIMAL, and the macro's casts
    make it score as the double 0.1."""
    tm = models.build("spector")
    con = duckdb.connect()
    con.execute(emit(tm.model, {"dialect": "duckdb", "form": "function"})[0].content.decode())
    got = con.execute('SELECT * FROM "score_spector"(2.9, 20, 0.1)').fetchone()
    ref = score_row(build_plan(tm.model), {"GPA": 2.9, "TUCE": 20, "PSI": 0.1})
    assert bits(got[:2]).tolist() == bits([ref.margins[0], ref.probabilities[1]]).tolist()


# ---------------------------------------------------------------- the artifact

def test_sqlite_has_no_function_form():
    with pytest.raises(ScorewrightError, match="SQLite cannot define a function") as exc:
        emit(models.build("spector").model, {"dialect": "sqlite", "form": "function"})
    assert "\n" not in str(exc.value)


@pytest.mark.parametrize("options,message", [
    ({}, "needs --dialect"),
    ({"dialect": "oracle"}, "unknown SQL dialect"),
    ({"dialect": "sqlite", "form": "table"}, "--form 'table'"),
    ({"dialect": "sqlite", "precision": "float"}, "--precision does not apply"),
    ({"dialect": "sqlite", "columns": {"nope": "x"}}, "no feature 'nope'"),
    ({"dialect": "sqlite", "keep": ["GPA", "margin"]}, "output has a column"),
    ({"dialect": "postgres", "table": "a\x00b"}, "NUL"),
])
def test_bad_options(options, message):
    with pytest.raises(ScorewrightError, match=message):
        emit(models.build("spector").model, options)


def test_deterministic_with_hash_and_version():
    import scorewright

    model = models.build("fault_type").model
    for dialect in DIALECT_NAMES:
        a = emit(model, {"dialect": dialect})[0]
        assert a.content == emit(model, {"dialect": dialect})[0].content
        assert a.name == f"fault_type.{dialect}.sql"
        text = a.content.decode()
        assert model.sha256 in text and scorewright.__version__ in text


def test_keep_and_column_mapping(tmp_path):
    tm = models.build("spector")
    options = {"dialect": "sqlite", "keep": ["TUCE"], "columns": {"GPA": "grade point"}}
    sql = emit(tm.model, options)[0].content.decode()
    con = sqlite3.connect(":memory:")
    con.execute('CREATE TABLE input ("grade point" REAL, "TUCE" REAL, "PSI" REAL)')
    con.execute("INSERT INTO input VALUES (2.5, 20, 1)")
    cur = con.execute(sql)
    assert [c[0] for c in cur.description] == ["TUCE", "margin", "probability",
                                               "predicted_class"]
    row = cur.fetchone()
    ref = score_row(build_plan(tm.model), {"GPA": 2.5, "TUCE": 20, "PSI": 1})
    assert row[1] == ref.margins[0] and row[2] == ref.probabilities[1]


def test_cli_emit(tmp_path):
    model_file = tmp_path / "m.json"
    models.build("iris").model.write(model_file)
    cli = [sys.executable, "-m", "scorewright.cli", "emit", str(model_file), "--target", "sql"]
    ok = subprocess.run(cli + ["--dialect", "duckdb", "-o", str(tmp_path / "out")],
                        capture_output=True, text=True)
    assert ok.returncode == 0, ok.stderr
    assert (tmp_path / "out" / "iris.duckdb.sql").is_file()
    bad = subprocess.run(cli + ["--dialect", "sqlite", "--form", "function", "-o",
                                str(tmp_path / "bad")], capture_output=True, text=True)
    assert bad.returncode == 2 and len(bad.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "bad").exists() or not any((tmp_path / "bad").iterdir())
