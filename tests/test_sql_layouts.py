"""Wide models and the long layout on the real engines: SQLite (standard library),
DuckDB (PyPI) and the PostgreSQL server of this test session.

Wide models sum their margins over several query layers; each check below is bit
for bit against the reference evaluator, on a model as wide as each engine's own
table limit allows (SQLite: 2,000 columns, its documented default
SQLITE_MAX_COLUMN; PostgreSQL: 1,600 columns, its documented MaxHeapAttributeNumber,
but a row must fit one 8 kB page, which holds about 1,000 double precision values:
"row is too big" was measured at 1,590).
"""

from __future__ import annotations

import dataclasses
import math
import sqlite3

import duckdb
import psycopg
import pytest

import models
from scorewright.emit.sql import emit
from scorewright.emit.sql_dialects import DIALECTS
from scorewright.errors import ScorewrightError
from scorewright.plan import build_plan
from scorewright.reference import score_row
from scorewright.verify.cases import random_rows
from test_sql import assert_agrees, run_sql


# DuckDB has no column limit to reach: its 2,600 features (35 s here) run in the slow tier;
# the default run takes DuckDB past its layer boundary (251, 260: tests/test_scale.py, below).
@pytest.mark.parametrize("dialect,n", [pytest.param("sqlite", 1_990, marks=pytest.mark.slow),
                                       ("postgres", 1_000),
                                       pytest.param("duckdb", 2_600, marks=pytest.mark.slow),
                                       ("sqlite", 99), ("sqlite", 101)])
def test_a_model_as_wide_as_the_table_allows(tmp_path, postgres_dsn, dialect, n):
    """Past the dialect's terms_per_layer terms the sums continue in the next layer (SQLite, DuckDB:
    joined back by rowid); 99 and 101 features bracket the depth at which SQLite's
    parser overflowed on nested parentheses."""
    model = models.wide_model(n)
    rows = random_rows(build_plan(model), 30, seed=5)
    sql = emit(model, {"dialect": dialect})[0].content.decode()
    if n > DIALECTS[dialect].terms_per_layer and dialect != "postgres":
        assert "t.rowid = l" in sql
    # the header's JIT advice comes with a PostgreSQL query summed over layers
    assert ("SET jit = off" in sql) == (dialect == "postgres" and n > 250)
    assert_agrees(model, rows, run_sql(tmp_path, model, rows, {"dialect": dialect},
                                       postgres_dsn))


@pytest.mark.parametrize("dialect,n", [("duckdb", 260), ("sqlite", 910)])
def test_a_feature_named_rowid_does_not_shadow_the_join(tmp_path, postgres_dsn, dialect, n):
    """A wide model on SQLite and DuckDB joins the table back by rowid; a column named
    rowid would shadow that pseudo-column (both engines then read the user's column),
    so a feature of that name is read from a renamed column, as the header says."""
    model = models.wide_model(n)
    first = dataclasses.replace(model.features[0], name="RowID")
    model = dataclasses.replace(
        model, features=(first,) + model.features[1:],
        design=(dataclasses.replace(model.design[0], feature="RowID"),) + model.design[1:],
        sha256="").sealed()
    sql = emit(model, {"dialect": dialect})[0].content.decode()
    assert '--   "RowID" <- "RowID_' in sql and '"RowID" <- "RowID"' not in sql
    # repeated and missing values: joined on them, rows would multiply or vanish
    rows = [dict(r, RowID=[1.5, 1.5, None][i % 3])
            for i, r in enumerate(random_rows(build_plan(model), 20, seed=6))]
    assert_agrees(model, rows, run_sql(tmp_path, model, rows, {"dialect": dialect},
                                       postgres_dsn))


def test_trap_postgres_memoize_over_a_lateral_subquery(tmp_path, postgres_dsn, monkeypatch):
    """For a LATERAL subquery PostgreSQL (14 and later) may add a Memoize node keyed on
    every outer reference the subquery makes, and past 1,664 keys the query fails
    ("number of columns exceeds limit"). It chose one for 251 features on rows with
    few distinct values (random rows did not show it). The emitted PostgreSQL query
    carries the input row as one composite value instead of a LATERAL join."""
    model = models.wide_model(251, prefix="memo", spread=0.3)
    names = build_plan(model).feature_names
    rows = [{f: (i * 7 + j) % 13 - 6.5 if (i + j) % 5 else None for j, f in enumerate(names)}
            for i in range(12)]
    lateral = dataclasses.replace(DIALECTS["postgres"], passthrough="lateral")
    with monkeypatch.context() as patch:
        patch.setitem(DIALECTS, "postgres", lateral)
        assert "CROSS JOIN LATERAL" in emit(model, {"dialect": "postgres"})[0].content.decode()
        with pytest.raises(ScorewrightError, match="number of columns .* exceeds limit"):
            run_sql(tmp_path, model, rows, {"dialect": "postgres"}, postgres_dsn)
    sql = emit(model, {"dialect": "postgres"})[0].content.decode()
    assert "LATERAL" not in sql and "(s.rw).*" in sql
    assert_agrees(model, rows, run_sql(tmp_path, model, rows, {"dialect": "postgres"},
                                       postgres_dsn))


@pytest.mark.parametrize("dialect", [pytest.param("sqlite", marks=pytest.mark.slow), "postgres",
                                     pytest.param("duckdb", marks=pytest.mark.slow)])
def test_the_long_layout_past_the_column_limit(tmp_path, postgres_dsn, dialect):
    """2,100 features: more than a SQLite or PostgreSQL table can hold as columns. (DuckDB
    has no such limit; its long layout at 2,100 features, 36 s here, runs in the slow tier,
    and past its layer boundary in the default run: tests/test_scale.py. SQLite's, 20 s
    here, runs in the slow tier too; its wide table at the column limit runs by default.)"""
    model = models.wide_model(2_100)
    rows = random_rows(build_plan(model), 12, seed=6)
    options = {"dialect": dialect, "layout": "long"}
    assert_agrees(model, rows, run_sql(tmp_path, model, rows, options, postgres_dsn))


def _long_sql(model, dialect="sqlite", **extra):
    return emit(model, {"dialect": dialect, "layout": "long", **extra})[0].content.decode()


def _ref(model, row):
    return score_row(build_plan(model), row)


SPECTOR_ROWS = [  # row_id, feature, value, level
    (1, "GPA", 3.1, None), (1, "TUCE", 22.0, None), (1, "PSI", 1.0, None),
    (2, "GPA", 2.6, None), (2, "PSI", None, None),            # TUCE absent, PSI NULL
    (3, "GPA", 2.9, None), (3, "GPA", 3.9, None), (3, "PSI", 0.0, None),  # GPA twice
    (None, "GPA", 4.0, None),                                  # no key: left out
    (4, "GPA", 3.3, None), (4, "not a feature", 1e300, None), (4, "TUCE", 18.0, None),
]


@pytest.mark.parametrize("dialect", ["sqlite", "duckdb", "postgres"])
def test_long_layout_rules(dialect, postgres_dsn):
    """Absent and NULL are missing; a feature given twice gives NULL outputs, never one
    of the two values; a NULL key is left out; pairs of other names are ignored."""
    model = models.build("spector").model
    sql = _long_sql(model, dialect)
    create = ("CREATE TABLE input (row_id BIGINT, feature TEXT, value DOUBLE PRECISION, "
              "level TEXT)")
    if dialect == "sqlite":
        con = sqlite3.connect(":memory:")
        con.execute(create.replace("DOUBLE PRECISION", "REAL"))
        con.executemany("INSERT INTO input VALUES (?, ?, ?, ?)", SPECTOR_ROWS)
        got = con.execute(sql).fetchall()
    elif dialect == "duckdb":
        con = duckdb.connect()
        con.execute(create.replace("DOUBLE PRECISION", "DOUBLE"))
        con.executemany("INSERT INTO input VALUES (?, ?, ?, ?)", SPECTOR_ROWS)
        got = con.execute(sql).fetchall()
    else:
        with psycopg.connect(postgres_dsn, autocommit=True) as con:
            con.execute("DROP TABLE IF EXISTS input")
            con.execute(create)
            with con.cursor() as cur:
                cur.executemany("INSERT INTO input VALUES (%s, %s, %s, %s)", SPECTOR_ROWS)
            got = con.execute(sql).fetchall()
            con.execute("DROP TABLE input")
    got = {r[0]: r[1:] for r in got}
    assert sorted(got) == [1, 2, 3, 4]
    expected = {1: {"GPA": 3.1, "TUCE": 22.0, "PSI": 1.0}, 2: {"GPA": 2.6},
                4: {"GPA": 3.3, "TUCE": 18.0}}
    for key, row in expected.items():
        ref = _ref(model, row)
        assert got[key][0] == ref.margins[0] and got[key][1] == ref.probabilities[1], key
        assert got[key][2] == ref.class_index
    assert got[3] == (None, None, None)


def test_long_layout_with_category_levels_and_own_column_names():
    model = models.build("fault_binary").model
    tm = models.build("fault_binary")
    row = tm.frame.iloc[0].to_dict()
    sql = _long_sql(model, long_columns=["unit", "what", "num", "txt"], table="readings")
    con = sqlite3.connect(":memory:")
    con.execute("CREATE TABLE readings (unit INTEGER, what TEXT, num REAL, txt TEXT)")
    for name, value in row.items():
        numeric = isinstance(value, float)
        con.execute("INSERT INTO readings VALUES (7, ?, ?, ?)",
                    (name, value if numeric else None, None if numeric else str(value)))
    cur = con.execute(sql)
    assert [c[0] for c in cur.description][0] == "unit"
    (key, margin, probability, label), = cur.fetchall()
    ref = _ref(model, row)
    assert key == 7 and margin == ref.margins[0] and probability == ref.probabilities[1]
    assert not math.isnan(margin)


@pytest.mark.parametrize("options,message", [
    ({"layout": "tall"}, "--layout 'tall'"),
    ({"layout": "long", "form": "function"}, "--form function is not available"),
    ({"layout": "long", "keep": ["GPA"]}, "--keep does not apply"),
    ({"layout": "long", "long_columns": ["a", "b", "c"]}, "KEY,FEATURE,VALUE,LEVEL"),
    ({"layout": "long", "long_columns": ["k", "f", "v", "F"]}, "must differ"),
    ({"layout": "long", "long_columns": ["margin", "f", "v", "l"]}, "named like an output"),
    ({"long_columns": ["k", "f", "v", "l"]}, "only to --layout long"),
])
def test_bad_long_options(options, message):
    with pytest.raises(ScorewrightError, match=message) as exc:
        emit(models.build("spector").model, {"dialect": "duckdb", **options})
    assert "\n" not in str(exc.value)


def test_long_layout_on_postgres_refuses_a_feature_name_with_nul():
    from scorewright.model import DesignColumn, FrozenModel, Head, NumericFeature

    feats = (NumericFeature("load\x00pct", 1.0, ()), NumericFeature("age", 2.0, ()))
    model = FrozenModel("nul", feats, tuple(DesignColumn(f.name) for f in feats),
                        Head("binary", "logit", (0, 1), (0.1,), ((0.5, -0.25),), 0.0),
                        {"scorewright_version": "test", "source": "test"}).sealed()
    with pytest.raises(ScorewrightError, match="cannot hold NUL"):
        emit(model, {"dialect": "postgres", "layout": "long"})
    for dialect in ("sqlite", "duckdb"):  # these spell NUL as an expression
        assert "r(0) || " in _long_sql(model, dialect)
