"""The SQL target over the column types people really have, on the real engines:
SQLite (standard library), DuckDB (PyPI), a PostgreSQL server this session starts
(`postgres_dsn`), and Spark (pyspark, local session, ANSI mode on).

A numeric feature held as text (what the sqlite3 shell's `.import` or a CSV loader
makes) must score as the double Python's float() gives for the text
(`scorewright.values.numeric_value`); text that is no number is missing; every
number type reads as its value; booleans read 1/0; integer levels match integral
values of any type. Each engine trap is first shown to exist on the engine, then
shown handled: margins are compared with the reference evaluator bit for bit.
"""

from __future__ import annotations

import dataclasses
import random
import sqlite3
import subprocess
import shutil
from decimal import Decimal
from types import SimpleNamespace

import duckdb
import numpy as np
import psycopg
import pytest

import models
from scorewright.emit.sql import emit, function_call, object_name, settings
from scorewright.plan import build_plan
from scorewright.reference import score_row
from scorewright.verify.runners import sql as sql_runner

ENGINES = sql_runner.ENGINES


def bits(a) -> np.ndarray:
    return np.ascontiguousarray(np.asarray(a, dtype=np.float64)).view(np.int64)


def _random_texts(n: int, seed: int = 11) -> list[str]:
    """repr() of doubles at the magnitudes data has (17 significant digits for most):
    the texts a CSV written by pandas holds."""
    rng = random.Random(seed)
    out = []
    for _ in range(n):
        scale = 10.0 ** rng.randint(-9, 12)
        out.append(repr(rng.gauss(0.0, 1.0) * scale))
    return out


SQLITE_MISREAD = ["228157.669786036", "-22899.7972542599", "4.3619378904544895e-308"]
# Text cells of a numeric column: numbers in the spellings loaders keep, and text that
# is no number (missing, as values.numeric_value says).
TEXTS = ["1.5", " 2.25 ", "\t-3\n", "+.5", "5.", "1e3", "1E-2", "-0", "0.0", "-0.000",
         "0.1", "0.30000000000000004", "1.2345678901234567", "3.4567890123456789e-06",
         "9007199254740993", "123456789012345678", "1.0000000000000002",
         "abc", "1.5abc", "", " ", "NaN", "nan", "Infinity", "-inf", "1_000", "0x10",
         "1,5", "--1", "1e", ".", "e5", "1e+", "1.5d", "1e400", "-1e400", "1e-400",
         "-1e-400", "1e1000", "0e5000", "5e-324", "2.4703282292062328e-324",
         "1.7976931348623157e308", "1.7976931348623159e308", "0.000001", "4.35",
         "00012.50", "1.2345678901234567e-10", "98765432109876543.21",
         "228157.669786036", "-22899.7972542599"] + _random_texts(160)


def spector():
    return models.build("spector").model


def boolean_model():
    """spector with PSI (a 0/1 column) recorded as fitted on a boolean column."""
    model = spector()
    features = list(model.features)
    features[2] = dataclasses.replace(features[2], boolean=True)
    return dataclasses.replace(model, features=tuple(features))


TEXT_TYPES = {"sqlite": "TEXT", "postgres": "TEXT", "duckdb": "VARCHAR", "spark": "string"}


def run_typed(dsn, model, dialect, sql_type, rows, form="select"):
    """Margins of the emitted artifact over a table whose feature columns all have
    `sql_type` (the engine's own spelling; text-level categories: text), holding
    `rows` (feature -> cell)."""
    plan = build_plan(model)
    options = {"dialect": dialect} if form == "select" else {"dialect": dialect, "form": form}
    s = settings(plan, dict(options))
    d = s.dialect
    art = emit(model, options)[0].content.decode()
    columns = [s.columns[inp.name] for inp in plan.inputs]
    table = SimpleNamespace(row_column="scorewright_row", columns=columns,
                            types=[sql_type if inp.kind == "numeric" or inp.integer_levels
                                   else TEXT_TYPES[dialect] for inp in plan.inputs],
                            records=lambda: [[i] + [row.get(inp.name) for inp in plan.inputs]
                                             for i, row in enumerate(rows)])
    if form == "select":
        setup, query = [], art
    elif form == "view":
        setup, query = [art], f"SELECT * FROM {d.quote(object_name(plan))}"
    elif form == "function":
        setup, query = [art, art], function_call(plan, s)  # run twice: re-runnable
    if dialect == "spark":
        names, result = _spark(d, table, setup, query)
    else:
        names, result, _ = ENGINES[dialect].execute({"dsn": dsn}, d, s.table, table, setup,
                                                    query)
    order = names.index("scorewright_row") if "scorewright_row" in names else None
    if order is not None:
        result = sorted(result, key=lambda r: r[order])
    margin = [c for c in names if c.startswith("margin")]
    return np.array([[r[names.index(c)] for c in margin] for r in result], dtype=np.float64)


def _spark(d, table, setup, query):
    """Load every cell as a string, then CAST to the column type in Spark itself (a CSV
    read gives string columns; the typed cases are cast as a loader would)."""
    from pyspark.sql import types as T

    spark = sql_runner.Spark.session()
    spark.conf.set("spark.sql.ansi.enabled", "true")
    fields = [T.StructField(table.row_column, T.LongType())] + [
        T.StructField(c, T.StringType()) for c in table.columns]
    records = [[r[0]] + [None if v is None else str(v) for v in r[1:]]
               for r in table.records()]
    frame = spark.createDataFrame(records, T.StructType(fields))
    frame = frame.selectExpr(table.row_column, *[
        f"CAST({d.quote(c)} AS {typ}) AS {d.quote(c)}" for c, typ in zip(table.columns,
                                                                          table.types)])
    frame.createOrReplaceTempView(d.quote("input"))
    for statement in setup:
        spark.sql(statement)
    result = spark.sql(query)
    return result.columns, [list(r) for r in result.collect()]


def reference(model, rows):
    plan = build_plan(model)
    return np.array([score_row(plan, row).margins for row in rows], dtype=np.float64)


def assert_same(model, got, ref_rows, cells=None):
    want = reference(model, ref_rows)
    bad = np.nonzero((bits(got) != bits(want)).any(axis=1))[0]
    shown = cells if cells is not None else ref_rows
    assert bad.size == 0, (f"{bad.size} rows differ; first: {shown[bad[0]]!r}: "
                           f"{got[bad[0]]} vs {want[bad[0]]}")


def text_rows(texts):
    """Each text as GPA, the other two features typical values, also as text."""
    return [{"GPA": t, "TUCE": "21", "PSI": "1"} for t in texts]


# ---------------------------------------------------------------- the traps exist

def test_trap_sqlite_reads_bad_text_as_a_number_and_rounds_text_wrongly():
    con = sqlite3.connect(":memory:")
    assert con.execute("SELECT CAST('abc' AS REAL), CAST('1.5abc' AS REAL)").fetchone() \
        == (0.0, 1.5)
    # SQLite's text-to-real conversion is not correctly rounded (3.40: long double
    # scaling); Python's float() is. Found among 20,000 texts of '%.15g' % uniform(-1e6, 1e6).
    for text in SQLITE_MISREAD:
        assert con.execute("SELECT CAST(? AS REAL)", (text,)).fetchone()[0] != float(text)
    # The exact reading relies on 10^k for k <= 22 being read exactly from '1e<k>'.
    for k in range(23):
        assert con.execute("SELECT CAST('1e' || ? AS REAL)", (k,)).fetchone()[0] == 10.0 ** k


def test_trap_postgres_casts_raise_and_fold(postgres_dsn):
    with psycopg.connect(postgres_dsn, autocommit=True) as con:
        for text in ("abc", "1e400", "1e-400"):
            with pytest.raises(psycopg.Error):
                con.execute(f"SELECT CAST('{text}' AS DOUBLE PRECISION)")
        with pytest.raises(psycopg.Error, match="out of range"):
            con.execute("SELECT CAST(CAST('1e400' AS NUMERIC) AS DOUBLE PRECISION)")
        with pytest.raises(psycopg.Error, match="cannot cast"):
            con.execute("SELECT CAST(true AS DOUBLE PRECISION)")
        # A real widened directly is not its text read as double.
        direct, via_text = con.execute(
            "SELECT CAST(CAST(1.1 AS REAL) AS DOUBLE PRECISION), "
            "CAST(CAST(CAST(1.1 AS REAL) AS TEXT) AS DOUBLE PRECISION)").fetchone()
        assert direct != via_text
        # A CASE arm never taken is still cast while planning when its input is constant.
        with pytest.raises(psycopg.Error, match="invalid input syntax"):
            con.execute("SELECT CASE WHEN pg_typeof(x) = CAST('text' AS REGTYPE) THEN 1 "
                        "ELSE CAST(x AS DOUBLE PRECISION) END FROM (VALUES ('abc')) AS t(x)")


def test_trap_duckdb_try_cast_takes_more_than_numbers():
    con = duckdb.connect()
    assert con.execute("SELECT TRY_CAST('1_000' AS DOUBLE)").fetchone()[0] == 1000.0
    assert con.execute("SELECT isnan(TRY_CAST('NaN' AS DOUBLE))").fetchone()[0]
    assert con.execute("SELECT TRY_CAST(true AS DOUBLE)").fetchone()[0] == 1.0


def test_trap_spark_casts():
    spark = sql_runner.Spark.session()
    spark.conf.set("spark.sql.ansi.enabled", "true")
    assert spark.sql("SELECT try_cast('1.5d' AS DOUBLE)").collect()[0][0] == 1.5
    assert spark.sql("SELECT try_cast('Infinity' AS DOUBLE)").collect()[0][0] == float("inf")
    with pytest.raises(Exception, match="CAST_INVALID_INPUT|cannot be cast"):
        spark.sql("SELECT CAST('abc' AS DOUBLE)").collect()


# ---------------------------------------------------------------- text columns

@pytest.mark.parametrize("dialect,sql_type,form", [
    ("sqlite", "TEXT", "select"), ("sqlite", "", "select"), ("sqlite", "TEXT", "view"),
    ("postgres", "TEXT", "select"), ("postgres", "TEXT", "function"),
    ("postgres", "VARCHAR(40)", "view"),
    ("duckdb", "VARCHAR", "select"), ("duckdb", "VARCHAR", "function"),
    ("spark", "string", "select"),
])
def test_numbers_stored_as_text(postgres_dsn, dialect, sql_type, form):
    rows = text_rows(TEXTS)
    if dialect == "postgres":
        rows = [r for r in rows if "\x00" not in r["GPA"]]
    got = run_typed(postgres_dsn, spector(), dialect, sql_type, rows, form)
    assert_same(spector(), got, rows)


def test_spark_expressions_over_text(tmp_path):
    import json

    model = spector()
    d = settings(build_plan(model), {"dialect": "spark"}).dialect
    expressions = json.loads(emit(model, {"dialect": "spark", "form": "expressions"})[0]
                             .content)["expressions"]
    rows = text_rows(TEXTS[:60])
    spark = sql_runner.Spark.session()
    spark.conf.set("spark.sql.ansi.enabled", "true")
    frame = spark.createDataFrame([[i, r["GPA"], r["TUCE"], r["PSI"]] for i, r in
                                   enumerate(rows)], "i long, GPA string, TUCE string, PSI string")
    out = frame.selectExpr("*", *expressions).orderBy("i").collect()
    got = np.array([[r["margin"]] for r in out])
    assert d.name == "spark"
    assert_same(model, got, rows)


@pytest.mark.parametrize("dialect,value_type", [
    ("sqlite", "TEXT"), ("postgres", "TEXT"), ("duckdb", "VARCHAR")])
def test_long_layout_with_a_text_value_column(postgres_dsn, dialect, value_type):
    model = spector()
    plan = build_plan(model)
    s = settings(plan, {"dialect": dialect, "layout": "long"})
    d = s.dialect
    art = emit(model, {"dialect": dialect, "layout": "long"})[0].content.decode()
    rows = text_rows(TEXTS[:80])
    records = [[i, name, row[name], None] for i, row in enumerate(rows) for name in row]
    table = SimpleNamespace(row_column="row_id", columns=["feature", "value", "level"],
                            types=["TEXT" if dialect != "duckdb" else "VARCHAR", value_type,
                                   "TEXT" if dialect != "duckdb" else "VARCHAR"],
                            records=lambda: records)
    names, result, _ = ENGINES[dialect].execute({"dsn": postgres_dsn}, d, s.table, table, [],
                                                art)
    result = sorted(result, key=lambda r: r[names.index("row_id")])
    got = np.array([[r[names.index("margin")]] for r in result])
    assert_same(model, got, rows)


# ---------------------------------------------------------------- number types

def _numbers(kind):
    """(cell, the value Python reads) for a number column of this kind."""
    if kind == "integer":
        cells = [0, 1, -7, 3, 250, 2 ** 31 - 1]
        return [(c, c) for c in cells]
    if kind == "bigint":
        cells = [2 ** 53 + 1, -(2 ** 62) + 3, 9007199254740993, 12]
        return [(c, c) for c in cells]
    if kind == "decimal":
        texts = ["12345678901.123456", "0.100000", "-3.141593", "99999999999999.999999",
                 "0.000001", "2.500000"]
        return [(Decimal(t), float(t)) for t in texts]
    if kind == "single":
        values = [1.1, 0.1, -2.5, 3.4028234663852886e38, 1e-40]
        return [(v, float(np.float32(v))) for v in values]
    if kind == "double":
        values = [0.1, -0.0, 1e308, 5e-324, 2.5, -1.7976931348623157e308]
        return [(v, v) for v in values]


@pytest.mark.parametrize("dialect,sql_type,kind", [
    ("sqlite", "INTEGER", "integer"), ("sqlite", "INTEGER", "bigint"),
    ("sqlite", "REAL", "double"),
    ("postgres", "INTEGER", "integer"), ("postgres", "BIGINT", "bigint"),
    ("postgres", "NUMERIC", "decimal"), ("postgres", "REAL", "single"),
    ("postgres", "DOUBLE PRECISION", "double"),
    ("duckdb", "INTEGER", "integer"), ("duckdb", "DECIMAL(20,6)", "decimal"),
    ("duckdb", "FLOAT", "single"), ("duckdb", "DOUBLE", "double"),
    ("spark", "int", "integer"), ("spark", "decimal(20,6)", "decimal"),
    ("spark", "double", "double"),
])
def test_number_types(postgres_dsn, dialect, sql_type, kind):
    pairs = _numbers(kind)
    if dialect == "spark" and kind == "double":
        pairs = [p for p in pairs if p[0] != 5e-324]  # str() of it is read back fine, kept simple
    cells = [{"GPA": c, "TUCE": c, "PSI": c} for c, _ in pairs]
    want = [{"GPA": v, "TUCE": v, "PSI": v} for _, v in pairs]
    got = run_typed(postgres_dsn, spector(), dialect, sql_type, cells)
    assert_same(spector(), got, want, cells)


def test_postgres_numeric_beyond_double_range_is_missing(postgres_dsn):
    cells = [{"GPA": Decimal(t), "TUCE": Decimal("21"), "PSI": Decimal("1")}
             for t in ("1e400", "-1e400", "1e-400", "-1e-400", "NaN")]
    want = [{"GPA": float(t) if abs(float(t)) != float("inf") and t != "NaN" else None,
             "TUCE": 21.0, "PSI": 1.0} for t in ("1e400", "-1e400", "1e-400", "-1e-400", "NaN")]
    got = run_typed(postgres_dsn, spector(), "postgres", "NUMERIC", cells)
    assert_same(spector(), got, want, cells)


# ---------------------------------------------------------------- booleans

BOOLEAN_TEXTS = [("true", 1.0), ("FALSE", 0.0), (" True ", 1.0), ("1", 1.0), ("0", 0.0),
                 ("yes", None), ("t", None), ("", None), ("0.0", 0.0)]


@pytest.mark.parametrize("dialect,text_type", [
    ("sqlite", "TEXT"), ("postgres", "TEXT"), ("duckdb", "VARCHAR"), ("spark", "string")])
def test_boolean_feature_reads_true_and_false_text(postgres_dsn, dialect, text_type):
    model = boolean_model()
    cells = [{"GPA": "3.1", "TUCE": "21", "PSI": t} for t, _ in BOOLEAN_TEXTS]
    want = [{"GPA": 3.1, "TUCE": 21.0, "PSI": v} for _, v in BOOLEAN_TEXTS]
    got = run_typed(postgres_dsn, model, dialect, text_type, cells)
    assert_same(model, got, want, cells)


@pytest.mark.parametrize("dialect,bool_type,form", [
    ("postgres", "BOOLEAN", "select"), ("duckdb", "BOOLEAN", "select"), ("duckdb", "BOOLEAN", "function"),
    ("spark", "boolean", "select")])
def test_boolean_columns(postgres_dsn, dialect, bool_type, form):
    """A BOOLEAN column (every feature boolean-typed here: GPA and TUCE too) reads 1/0."""
    model = boolean_model()
    for f in range(2):
        features = list(model.features)
        features[f] = dataclasses.replace(features[f], boolean=True)
        model = dataclasses.replace(model, features=tuple(features))
    cells = [{"GPA": a, "TUCE": b, "PSI": c} for a, b, c in
             [(True, False, True), (False, True, False), (None, True, False)]]
    want = [{k: (None if v is None else float(v)) for k, v in r.items()} for r in cells]
    got = run_typed(postgres_dsn, model, dialect, bool_type, cells, form)
    assert_same(model, got, want, cells)


@pytest.mark.parametrize("dialect,bool_type", [("duckdb", "BOOLEAN"), ("spark", "boolean")])
def test_plain_numeric_feature_over_a_boolean_column(postgres_dsn, dialect, bool_type):
    cells = [{"GPA": True, "TUCE": False, "PSI": True}, {"GPA": False, "TUCE": True, "PSI": None}]
    want = [{k: (None if v is None else float(v)) for k, v in r.items()} for r in cells]
    got = run_typed(postgres_dsn, spector(), dialect, bool_type, cells)
    assert_same(spector(), got, want, cells)


def test_postgres_plain_numeric_feature_refuses_a_boolean_column(postgres_dsn):
    """PostgreSQL has no cast from boolean to double: the query fails loudly (the model
    does not record a boolean column); it never scores silently. The function form takes
    double or text arguments, so a BOOLEAN column finds no function at all."""
    cells = [{"GPA": True, "TUCE": False, "PSI": True}]
    with pytest.raises(Exception, match="cannot cast type boolean"):
        run_typed(postgres_dsn, spector(), "postgres", "BOOLEAN", cells)
    with pytest.raises(Exception, match="does not exist"):
        run_typed(postgres_dsn, boolean_model(), "postgres", "BOOLEAN", cells, "function")


# ---------------------------------------------------------------- integer levels

def _level_model():
    return models.build("mixed_scalers").model


LEVEL_TEXTS = [("2", 2), ("2.0", 2), (" 3 ", 3), ("+1", 1), ("2e0", 2), ("1.", 1),
               ("2.5", "unseen"), ("abc", "unseen"), ("NaN", "unseen"), ("", None),
               ("7", 7), ("  ", "unseen")]


def _level_rows(values):
    return [{"load_pct": 50, "defrost_cycles": 3, "shift_code": v, "fan_model": "FA",
             "age_years": 4} for v in values]


@pytest.mark.parametrize("dialect,text_type", [
    ("sqlite", "TEXT"), ("sqlite", ""), ("postgres", "TEXT"), ("duckdb", "VARCHAR"),
    ("spark", "string")])
def test_integer_levels_match_text(postgres_dsn, dialect, text_type):
    model = _level_model()
    cells = _level_rows([t for t, _ in LEVEL_TEXTS])
    for r in cells:  # every column text, as a CSV loader gives it
        r.update({k: str(v) for k, v in r.items() if k != "shift_code"})
    want = _level_rows([None if v is None else v for _, v in LEVEL_TEXTS])
    got = run_typed(postgres_dsn, model, dialect, text_type, cells)
    assert_same(model, got, want, cells)


@pytest.mark.parametrize("dialect,sql_type,values", [
    ("sqlite", "REAL", [2.0, 3.0, 2.5, None]), ("sqlite", "INTEGER", [2, 3, 1, None]),
    ("postgres", "DOUBLE PRECISION", [2.0, 3.0, 2.5, float("nan"), None]),
    ("postgres", "INTEGER", [2, 3, 7, None]), ("postgres", "NUMERIC", [Decimal("2.000"),
                                                                      Decimal("2.5")]),
    ("duckdb", "DOUBLE", [2.0, 3.0, 2.5, float("nan"), None]),
    ("duckdb", "INTEGER", [2, 1, None]), ("spark", "double", [2.0, 3.0, 2.5, None]),
    ("spark", "int", [2, 1, None])])
def test_integer_levels_match_numbers(postgres_dsn, dialect, sql_type, values):
    model = _level_model()
    cells = _level_rows(values)
    want = []
    for v in values:
        if isinstance(v, Decimal):
            v = float(v)
        want.append(v if v is None or v != v or v != int(v) else int(v))
    got = run_typed(postgres_dsn, model, dialect, sql_type, cells)
    assert_same(model, got, _level_rows(want), cells)


# ---------------------------------------------------------------- re-runnable files

@pytest.mark.parametrize("dialect,form", [("postgres", "function"), ("duckdb", "function"),
                                          ("postgres", "view"), ("duckdb", "view"),
                                          ("sqlite", "view")])
def test_function_and_view_files_run_twice(postgres_dsn, dialect, form):
    rows = text_rows(["1.5", "2.5"])
    typ = {"sqlite": "TEXT", "postgres": "TEXT", "duckdb": "VARCHAR"}[dialect]
    plan = build_plan(spector())
    options = {"dialect": dialect, "form": form}
    s = settings(plan, dict(options))
    art = emit(spector(), options)[0].content.decode()
    query = function_call(plan, s) if form == "function" else \
        f"SELECT * FROM {s.dialect.quote(object_name(plan))}"
    table = SimpleNamespace(row_column="scorewright_row", columns=["GPA", "TUCE", "PSI"],
                            types=[typ] * 3,
                            records=lambda: [[i, r["GPA"], r["TUCE"], r["PSI"]]
                                             for i, r in enumerate(rows)])
    names, result, _ = ENGINES[dialect].execute({"dsn": postgres_dsn}, s.dialect, s.table,
                                                table, [art, art], query)
    got = np.array([[r[names.index("margin")]] for r in
                    sorted(result, key=lambda r: r[names.index("scorewright_row")])])
    assert_same(spector(), got, rows)


# ---------------------------------------------------------------- verify's text pass

def _shell_import(tmp_path, header, records):
    """The rows written as CSV and loaded by the real sqlite3 shell's .import."""
    import csv

    path = tmp_path / "rows.csv"
    with path.open("w", newline="") as f:
        writer = csv.writer(f)
        writer.writerow(header)
        for r in records:
            writer.writerow(["" if c is None else c for c in r])
    db = tmp_path / "rows.db"
    subprocess.run([shutil.which("sqlite3"), str(db), f".import --csv {path} input"],
                   check=True, capture_output=True)
    return db


@pytest.mark.skipif(shutil.which("sqlite3") is None, reason="the sqlite3 shell is not installed "
                    "(apt-get install sqlite3; scripts/test.sh does)")
def test_sqlite_shell_import_scores_as_the_reference(tmp_path):
    """The real `.import` makes TEXT columns and '' for an empty field; the emitted query
    over that table gives the reference's bits, and the runner's text pass loads the
    same table the shell does."""
    model = spector()
    texts = [t for t in TEXTS if "\n" not in t and "\t" not in t]
    rows = text_rows(texts) + [{"GPA": None, "TUCE": "20", "PSI": None}]
    records = [[r["GPA"], r["TUCE"], r["PSI"]] for r in rows]
    db = _shell_import(tmp_path, ["GPA", "TUCE", "PSI"], records)
    con = sqlite3.connect(db)
    assert "TEXT" in con.execute("SELECT sql FROM sqlite_master").fetchone()[0]
    stored = con.execute("SELECT GPA, TUCE, PSI FROM input ORDER BY rowid").fetchall()
    assert {type(v) for r in stored for v in r} == {str}
    plan = build_plan(model)
    s = settings(plan, {"dialect": "sqlite"})
    typed = sql_runner.Table(plan, s, rows, sql_runner.SQLite.TYPES)
    text = sql_runner.TextTable(plan, typed, rows, "TEXT", sql_runner.SQLite.EMPTY_FIELD)
    assert [tuple(r[1:]) for r in text.records()] == stored
    query = emit(model, {"dialect": "sqlite"})[0].content.decode()
    cur = con.execute(query)
    names = [c[0] for c in cur.description]
    got = np.array([[r[names.index("margin")]] for r in cur.fetchall()])
    assert_same(model, got, rows)


def test_runner_fails_when_text_columns_score_differently(tmp_path):
    """A query that reads the typed table right but takes '' as 0.0 (SQLite's CAST of
    text) fails the run, naming the row."""
    model = spector()
    plan = build_plan(model)
    s = settings(plan, {"dialect": "sqlite"})
    from scorewright.emit.sql import artifact_name

    (tmp_path / artifact_name(plan, s)).write_text(
        'SELECT t.*, CAST(t."GPA" AS REAL) AS margin, 0.5 AS probability, '
        '1 AS predicted_class FROM "input" AS t')
    rows = [{"GPA": 2.5, "TUCE": 20.0, "PSI": 1.0}, {"GPA": None, "TUCE": 20.0, "PSI": 1.0}]
    with pytest.raises(Exception, match="row 1 .* scores differently when loaded as text"):
        sql_runner.run(tmp_path, model, rows, {"dialect": "sqlite"})
