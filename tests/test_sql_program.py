"""The SQL target renders the scoring program and holds no semantics of its own.

Checked on the real engines (SQLite from the standard library, DuckDB from PyPI, the
PostgreSQL server of this test session) against the program's own interpreter
(`program.run_matrix`, the reference evaluator), bit for bit.
"""

from __future__ import annotations

import dataclasses
import math
import re
from pathlib import Path

import numpy as np
import psycopg
import pytest

import models
from scorewright import program
from scorewright.emit import sql_dialects, sql_guards
from scorewright.emit.sql import emit
from scorewright.emit.sql_dialects import DIALECTS, literal
from scorewright.errors import ScorewrightError
from scorewright.plan import build_plan
from scorewright.program import Const, Op
from scorewright.reference import encode_rows
from test_sql import assert_agrees, bits, edge_rows, run_sql

SQL_FILES = sorted((Path(program.__file__).parent / "emit").glob("sql*.py"))


def _other_numeric(b, inp, single=False):
    """A different, valid lowering of a numeric input: a missing value reads -1.5, and
    the design value is |scaled value| halved."""
    x = b.emit("read_real", attr=inp.index, hint="x")
    missing = b.missing[inp.index] = b.emit("is_missing", x)
    v = b.emit("select", missing, Const(-1.5), x)
    v = b.emit("min", b.emit("max", v, Const(-inp.bound)), Const(inp.bound))
    for step in inp.steps:
        v = b.emit(program._STEP_OP[step.op], v, Const(step.value))
    return b.emit("mul", b.emit("abs", v), Const(0.5))


def _other_link(b, plan, margins):
    """A different, valid link: a plain logistic of the margin clamped to [-30, 30], and
    a decision on the probability."""
    outs = []
    for m in margins:
        g = b.emit("min", b.emit("max", m, Const(-30.0)), Const(30.0))
        outs.append(b.emit("div", Const(1.0), b.emit("add", Const(1.0),
                                                      b.emit("exp", b.emit("neg", g)))))
    if plan.task == "binary":
        p1 = outs[0]
        cls = b.emit("select", b.emit("ge", p1, Const(0.5)), Const(1), Const(0))
        return [margins[0], b.emit("sub", Const(1.0), p1), p1, cls]
    if plan.task == "multiclass":
        return [*margins, *outs, Const(0)]
    return [margins[0], outs[0]]


@pytest.mark.parametrize("name", ["fault_binary", "fault_type", "alarms_poisson"])
@pytest.mark.parametrize("dialect", ["sqlite", "duckdb"])
def test_sql_renders_whatever_the_program_says(tmp_path, monkeypatch, dialect, name):
    """With the numeric lowering and the link of program.py replaced by other valid op
    sequences, the SQL (unchanged) computes the new program, bit for bit as
    program.run_matrix does: the SQL emitter decides no missing value, scaling or link."""
    tm = models.build(name)
    plan = build_plan(tm.model)
    rows = edge_rows(name, n_frame=20)
    own = program.run_matrix(program.lower(plan), encode_rows(plan, rows))
    monkeypatch.setattr(program, "_lower_numeric", _other_numeric)
    monkeypatch.setattr(program, "_lower_link", _other_link)
    want = program.run_matrix(program.lower(plan), encode_rows(plan, rows))
    # the replaced program computes something else (so the check below can fail)
    assert not np.array_equal(own["margin_0"], want["margin_0"])
    got = run_sql(tmp_path, tm.model, rows, {"dialect": dialect, "text_pass": False}, None)
    margins = np.stack([want[f"margin_{k}"] for k in range(plan.n_outputs)], axis=1)
    assert (bits(got.margins) == bits(margins)).all()
    if plan.task == "regression":
        assert (bits(got.value) == bits(want["value"])).all()
        return
    probs = np.stack([want[f"probability_{j}"] for j in range(len(plan.classes))], axis=1)
    assert (bits(got.probabilities) == bits(probs)).all()
    assert list(got.class_index) == list(want["class_index"])


def test_an_op_the_dialect_cannot_express_is_one_error(monkeypatch):
    """A dialect without a spelling for a primitive refuses the model in one line that
    names the dialect and the op, never a silent fallback."""
    lacking = dataclasses.replace(DIALECTS["duckdb"], ops={"exp": None})
    monkeypatch.setitem(sql_dialects.DIALECTS, "duckdb", lacking)
    with pytest.raises(ScorewrightError) as exc:
        emit(models.build("fault_binary").model, {"dialect": "duckdb"})
    assert str(exc.value) == "target duckdb cannot express op exp"
    # a regression with the identity link computes no exp, so it still renders
    assert emit(models.build("diabetes_ridge").model, {"dialect": "duckdb"})


# The plan fields that carry semantics: the SQL emitter files read none of them.
SEMANTIC_FIELDS = ("fill", "bound", "steps", "clip", "fill_code", "unknown_code", "exp_guard",
                   "log_link_max", "cut", "link", "weights", "tables", "intercepts", "precision")


@pytest.mark.parametrize("path", SQL_FILES, ids=lambda p: p.name)
def test_sql_emitter_files_read_no_semantic_field_of_the_plan(path):
    text = path.read_text()
    found = [f for f in SEMANTIC_FIELDS if re.search(rf"\.{f}\b", text)]
    assert not found, f"{path.name} reads {found}"


def _pg(dsn, query):
    with psycopg.connect(dsn, autocommit=True) as con:
        return con.execute(query).fetchall()


def _near_ties():
    """(x, y) whose product is at, just above, just below, or far from 2^-1075, of both
    signs; and quotients likewise (y, x / y for the same pairs)."""
    pairs = []
    for xe, ye in ((-500, -575), (-537, -538), (-1074, -1), (-300, -775), (-20, -1055)):
        for mx in (1.0, 1.0 + 2 ** -52, 1.5, 2 - 2 ** -52):
            for my in (1.0, 1.0 - 2 ** -53, 1.25):
                x, y = math.ldexp(mx, xe), math.ldexp(my, ye)
                pairs += [(x, y), (-x, y), (x, -y), (0.75 * x, y)]
    pairs += [(0.0, 1e-300), (-0.0, 1e-300), (0.5, 0.25), (1e-200, 1e-200), (3.0, 5e-324)]
    return pairs


def test_underflow_guards_give_ieee_bits_on_postgres(postgres_dsn):
    """PostgreSQL raises where a product or quotient of non-zero doubles rounds to zero
    (test_sql.py shows it); the guarded spellings of sql_guards give IEEE's result
    instead, bit for bit, on products and quotients at and around the threshold
    2^-1075 (ties to even decide exactly 2^-1075), for variable and constant operands."""
    d = DIALECTS["postgres"]

    def lit(v):
        return literal(d, v)

    cases = []
    for x, y in _near_ties():
        # x * y, and the quotient x / (1 / y) of about the same size
        for kind, b in (("mul", y), ("div", 1 / y)):
            if not math.isfinite(b) or b == 0.0:
                continue
            for const in ([False, False], [False, True], [True, False]):
                if const[0] and x == 0.0:
                    continue  # a zero constant operand: its product never raises
                args = (Const(x) if const[0] else "a", Const(b) if const[1] else "b")
                op = Op("r", kind, args)
                text = sql_guards.guard(op, [lit(x), lit(b)], lit, const)
                cases.append((text, x * b if kind == "mul" else x / b))
    got = _pg(postgres_dsn, "SELECT " + ", ".join(t for t, _ in cases))[0]
    want = [w for _, w in cases]
    assert (bits(got) == bits(want)).all()
    assert any(w == 0.0 for w in want) and any(0.0 < abs(w) < 1e-320 for w in want)


def test_too_deep_for_duckdbs_lateral_function_call_is_one_error(monkeypatch):
    """DuckDB's plan of a LATERAL call doubles with each layer (sql_dialects); the
    function form, which has no rowid to join by instead, refuses a query past the
    limit in one line (the select form carries the row through its layers, with no
    LATERAL and no join; test_sql.py runs it)."""
    shallow = dataclasses.replace(DIALECTS["duckdb"], lateral_layers=3)
    monkeypatch.setitem(sql_dialects.DIALECTS, "duckdb", shallow)
    model = models.build("fault_binary").model
    with pytest.raises(ScorewrightError, match=r"^--form function: this model's query is "
                                               r"\d+ layers deep, and duckdb plans"):
        emit(model, {"dialect": "duckdb", "form": "function"})
    select = emit(model, {"dialect": "duckdb"})[0].content.decode()
    assert "LATERAL" not in select and "JOIN" not in select


def test_an_expression_too_large_for_spark_is_one_error(monkeypatch):
    from scorewright.emit import sql_inline

    monkeypatch.setattr(sql_inline, "MAX_CHARACTERS", 2_000)
    with pytest.raises(ScorewrightError, match=r"^--form expressions: output 'margin' would "
                                               r"be one expression of [0-9,]+ characters"):
        emit(models.build("fault_binary").model, {"dialect": "spark", "form": "expressions"})


@pytest.mark.parametrize("dialect", ["sqlite", "duckdb", "postgres"])
def test_the_ordinary_row_arm_gives_the_same_bits_at_its_edges(tmp_path, postgres_dsn,
                                                                dialect):
    """sql_ordinary spells a column for rows whose real inputs are all within their
    bounds, tested by one sum of magnitudes (one comparison each on PostgreSQL): rows
    at each bound, one ULP inside and outside it, every input at its bound at once (the
    sum passes the bound, so the general arm runs on ordinary values), and an input
    missing beside bounded ones agree with the reference evaluator bit for bit."""
    name = "fault_binary"
    tm = models.build(name)
    plan = build_plan(tm.model)
    base = dict(tm.frame.to_dict("records")[0])
    numeric = [inp for inp in plan.inputs if inp.kind == "numeric"]
    rows = []
    for inp in numeric:
        b = inp.bound
        for v in (b, -b, math.nextafter(b, 0.0), math.nextafter(-b, 0.0),
                  math.nextafter(b, math.inf), math.nextafter(-b, -math.inf)):
            rows.append(dict(base, **{inp.name: v}))
    for sign in (1.0, -1.0):
        rows.append(dict(base, **{inp.name: sign * inp.bound for inp in numeric}))
        rows.append(dict(base, **{inp.name: sign * inp.bound / len(numeric)
                                  for inp in numeric}))
    rows.append(dict(base, **{numeric[0].name: None, numeric[-1].name: numeric[-1].bound}))
    rows.append(dict(base, **{numeric[0].name: math.nan, numeric[-1].name: -1e-310}))
    text = emit(tm.model, {"dialect": dialect})[0].content.decode()
    assert "CASE WHEN abs(" in text  # the arm is there to be tested
    got = run_sql(tmp_path, tm.model, rows, {"dialect": dialect}, postgres_dsn)
    assert_agrees(tm.model, rows, got)
