"""Feature names the engine cannot hold as columns of their own, on the real engines
(SQLite from the standard library, DuckDB from PyPI, the session's PostgreSQL server).

Each trap is first shown on the engine, then the emitted SQL is run on a table the
runner builds from the same mapping and compared with the reference evaluator.
"""

from __future__ import annotations

import sqlite3

import duckdb
import psycopg
import pytest

from scorewright.emit.sql import emit
from scorewright.emit.sql_columns import derived_name, input_columns, name_key
from scorewright.emit.sql_dialects import DIALECTS
from scorewright.errors import ScorewrightError
from scorewright.model import CategoricalFeature, DesignColumn, FrozenModel, Head, NumericFeature
from test_sql import assert_agrees, run_sql

LONG = "compressor discharge temperature after the door-open interval, "  # 64 bytes


def _model(names, levels=("R404A", "R134a"), classes=("ok", "fault")):
    """A binary model over numeric features `names` and a refrigerant class category."""
    features = tuple(NumericFeature(n, 1.5 if i == 0 else None, ()) for i, n in
                     enumerate(names)) + (CategoricalFeature("refrigerant", levels, None, None),)
    design = tuple(DesignColumn(n) for n in names) + tuple(
        DesignColumn("refrigerant", (lv,)) for lv in levels[1:])
    weights = tuple(0.25 * (i + 1) * (-1) ** i for i in range(len(design)))
    head = Head("binary", "logit", classes, (0.125,), (weights,), 0.0)
    return FrozenModel("compressor names", features, design, head,
                       {"scorewright_version": "test", "source": "hand-written"}).sealed()


def _rows(model):
    names = [f.name for f in model.features]
    rows = [{n: 0.5 * (i + 1) - j for i, n in enumerate(names[:-1])} for j in range(4)]
    for row, level in zip(rows, list(model.features[-1].levels) + [None, "R22"]):
        row[names[-1]] = level
    return rows + [{names[0]: None, names[-1]: None}]


def _mapping(model, dialect, **options):
    text = emit(model, dict(options, dialect=dialect))[0].content.decode()
    return [line for line in text.splitlines() if line.startswith("--   ")]


@pytest.mark.parametrize("dialect", ["sqlite", "duckdb", "postgres"])
def test_names_equal_up_to_case_read_distinct_columns(tmp_path, postgres_dsn, dialect):
    model = _model(["Suction", "suction", "SUCTION"])
    lines = _mapping(model, dialect)
    if DIALECTS[dialect].fold_identifiers:
        assert lines[0] == '--   "Suction" <- "Suction" (numeric)'
        assert lines[1] == f'--   "suction" <- "{derived_name(DIALECTS[dialect], "suction", 8)}"' \
                           ' (numeric)'
    else:
        assert lines[1] == '--   "suction" <- "suction" (numeric)'
    rows = _rows(model)
    assert_agrees(model, rows, run_sql(tmp_path, model, rows, {"dialect": dialect}, postgres_dsn))


def test_postgres_truncates_names_at_63_bytes(tmp_path, postgres_dsn):
    """Two names sharing their first 63 bytes are one column in PostgreSQL (source: the
    PostgreSQL manual, 'Identifiers and Key Words': NAMEDATALEN - 1 = 63 bytes)."""
    with psycopg.connect(postgres_dsn, autocommit=True) as con:
        con.execute("CREATE TEMPORARY TABLE probe (x int)")
        with pytest.raises(psycopg.errors.DuplicateColumn):
            con.execute(f'ALTER TABLE probe ADD COLUMN "{LONG}a" int, ADD COLUMN "{LONG}b" int')
    model = _model([LONG + "a", LONG + "b", "é" * 40])
    lines = _mapping(model, "postgres")
    first = LONG[:63]
    assert lines[0] == f'--   "{LONG}a" <- "{first}" (numeric)'
    second = lines[1].split(" <- ")[1].split('"')[1]
    assert len(second.encode()) <= 63 and second != first
    third = lines[2].split(" <- ")[1].split('"')[1]
    assert third == "é" * 31 and len(third.encode()) == 62  # cut on a character boundary
    rows = _rows(model)
    got = run_sql(tmp_path, model, rows, {"dialect": "postgres"}, postgres_dsn)
    assert_agrees(model, rows, got)


@pytest.mark.parametrize("dialect", ["sqlite", "duckdb", "postgres"])
def test_nul_and_output_names(tmp_path, postgres_dsn, dialect):
    """A name with NUL (PostgreSQL and SQLite's SQL text cannot hold one; source: the
    PostgreSQL manual, 'Identifiers': the NUL character is not allowed) and names equal
    to output columns get derived columns; nothing raw reaches the file."""
    con = sqlite3.connect(":memory:")
    with pytest.raises(Exception, match="null character"):
        con.execute('CREATE TABLE t ("a\x00b" REAL)')
    model = _model(["suction\x00pressure", "margin", "Probability", "rowid"])
    art = emit(model, {"dialect": dialect})[0]
    assert b"\x00" not in art.content
    lines = _mapping(model, dialect)
    assert '"suction\\u0000pressure" <- "suction_pressure_' in lines[0]
    assert '"margin" <- "margin_' in lines[1]
    assert ('"Probability" <- "Probability_' in lines[2]) == DIALECTS[dialect].fold_identifiers
    rows = _rows(model)
    assert_agrees(model, rows, run_sql(tmp_path, model, rows, {"dialect": dialect}, postgres_dsn))


def test_sqlite_column_named_rowid_shadows_the_rowid(tmp_path):
    """Source: the SQLite documentation, 'ROWID tables': a declared column named rowid,
    _rowid_ or oid hides the real rowid, which the SQLite query joins on."""
    con = sqlite3.connect(":memory:")
    con.execute("CREATE TABLE t (rowid REAL)")
    con.execute("INSERT INTO t VALUES (7.5)")
    assert con.execute("SELECT rowid FROM t").fetchone()[0] == 7.5
    model = _model(["rowid", "oid"])
    assert '"rowid" <- "rowid_' in _mapping(model, "sqlite")[0]
    rows = _rows(model)
    assert_agrees(model, rows, run_sql(tmp_path, model, rows, {"dialect": "sqlite"}, None))


def test_user_mapping_wins_and_a_colliding_one_is_refused():
    model = _model(["Suction", "suction"])
    lines = _mapping(model, "duckdb", columns={"Suction": "s1"})
    assert lines[:2] == ['--   "Suction" <- "s1" (numeric)',
                         '--   "suction" <- "suction" (numeric)']
    for columns, message in (({"Suction": "x", "suction": "X"}, "same column as --column"),
                             ({"Suction": "suction"}, "")):
        if not message:
            lines = _mapping(model, "duckdb", columns=columns)
            assert "suction_" in lines[1]  # the feature gives way to the user's column
            continue
        with pytest.raises(ScorewrightError, match=message) as exc:
            emit(model, {"dialect": "duckdb", "columns": columns})
        assert "\n" not in str(exc.value)
    with pytest.raises(ScorewrightError, match="same column as 'margin'"):
        emit(model, {"dialect": "sqlite", "columns": {"Suction": "MARGIN"}})
    # With --keep the input columns do not ride along: an output name is a fine input.
    emit(model, {"dialect": "sqlite", "columns": {"Suction": "margin"}, "keep": ["site"]})
    with pytest.raises(ScorewrightError, match="cannot hold"):
        emit(model, {"dialect": "sqlite", "columns": {"Suction": "a\x00b"}})


def test_mapping_is_the_same_in_every_process_and_order_independent_of_hashing():
    d = DIALECTS["spark"]
    names = ["é", "É", "e", "K", "\u212a", "k", "İ", "i", "σ", "ς"]
    a = input_columns(d, names, {}, ("margin",), True)
    assert a == input_columns(d, names, {}, ("margin",), True)
    assert len({name_key(d, c) for c in a.values()}) == len(names)
    # The key is never finer than Spark's rule: é/É and K/KELVIN SIGN collide in Spark
    # (tests/test_sql_spark.py shows it on the engine).
    assert name_key(d, "é") == name_key(d, "É") and name_key(d, "K") == name_key(d, "\u212a")


@pytest.mark.parametrize("dialect", ["sqlite", "duckdb", "postgres"])
def test_nul_in_a_level(tmp_path, postgres_dsn, dialect):
    """SQLite and DuckDB text hold NUL (the literal is spelled with char(0)/chr(0));
    PostgreSQL text cannot, so the level can never match there and a row holding it is
    refused in one line (a value the engine cannot hold, never a name)."""
    model = _model(["suction"], levels=("R404A", "R4\x0004A", "R134a"))
    art = emit(model, {"dialect": dialect})[0]
    assert b"\x00" not in art.content
    rows = _rows(model)
    if dialect == "postgres":
        assert b"holds NUL, which postgres text cannot" in art.content
        with pytest.raises(ScorewrightError, match="PostgreSQL text cannot hold NUL") as exc:
            run_sql(tmp_path, model, rows, {"dialect": dialect}, postgres_dsn)
        assert "\n" not in str(exc.value)
        rows = [r for r in rows if "\x00" not in str(r["refrigerant"])]
    else:
        con = duckdb.connect() if dialect == "duckdb" else sqlite3.connect(":memory:")
        nul = DIALECTS[dialect].string("a\x00b")
        assert con.execute(f"SELECT {nul} = ?, {nul} = 'a'", ["a\x00b"]).fetchone() == (1, 0)
    assert_agrees(model, rows, run_sql(tmp_path, model, rows, {"dialect": dialect}, postgres_dsn))


def test_postgres_coefficient_products_guarded_per_output(tmp_path, postgres_dsn):
    """PostgreSQL raises on a product that underflows (shown in test_sql.py); a tiny weight
    of one output must not change what the others read, and a missing input's fill times
    a tiny weight must not raise (both found by tests/test_hostile_names.py)."""
    features = (NumericFeature("suction", 5.310107419050544e-258, ()),
                NumericFeature("current", None, ()),
                CategoricalFeature("zone", ("a", "b"), None, None))
    design = (DesignColumn("suction"), DesignColumn("current"), DesignColumn("zone", ("b",)))
    head = Head("multiclass", "softmax", ("none", "electrical", "leak"), (0.0, 0.0, 0.0),
                ((2.5699960698556646e-91, 0.0, 0.0), (0.0, 1.0, 0.0), (0.0, 5e-324, 0.0)), None)
    model = FrozenModel("tiny weights", features, design, head,
                        {"scorewright_version": "test", "source": "hand-written"}).sealed()
    rows = [{"suction": x, "current": c, "zone": "a"} for x in (None, 1e-300, -0.5, 3.0)
            for c in (-0.5, 0.25, -5e-324, 2.0, None)]
    got = run_sql(tmp_path, model, rows, {"dialect": "postgres"}, postgres_dsn)
    assert_agrees(model, rows, got)
