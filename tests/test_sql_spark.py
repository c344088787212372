"""The SQL target's spark dialect on a real local Spark session (pyspark from PyPI,
local[2], the image's Java 17). One session serves the whole test run (`spark` in
conftest.py).

Margins must agree with the reference evaluator bit for bit; probabilities and the
log-link value within the profile's stated tolerance (its ULPs, or for a probability
its absolute bound: a row passes if either holds, as verify's rule says), because
Spark's exp is Java's StrictMath.exp (fdlibm) rather than the C library's (shown
below). A binary p0 = 1 - p1 inherits p1's absolute error, which is many ULPs of a
small p0 (8 ULPs of 0.168 from a 2-ULP p1 on mixed_scalers). The expressions
form (selectExpr) must give the query's bits exactly.
"""

from __future__ import annotations

import math
import random
import tomllib
from pathlib import Path

import numpy as np
import pytest

import models
from test_sql import DEEP, bits, edge_rows, options_for
from scorewright.emit.sql import emit, literal
from scorewright.emit.sql_dialects import DIALECTS
from scorewright.errors import ScorewrightError
from scorewright.plan import build_plan
from scorewright.reference import score_row
from scorewright.verify.cases import random_rows
from scorewright.verify.runners import sql as sql_runner

PROFILE = tomllib.loads((Path(__file__).parent.parent / "targets" / "sql-spark.toml")
                        .read_text())
ULPS = PROFILE["tolerance"]["probability_ulps"]
PROBABILITY_ABS = PROFILE["tolerance"]["probability_abs"]
SPARK = DIALECTS["spark"]


def ulp_gap(a, b) -> int:
    a, b = bits(a), bits(b)
    # doubles of one sign: the gap of their bit patterns counts the ULPs between them
    return int(np.abs(a - b).max()) if len(a) else 0


def run(tmp_path, model, rows, options, ansi):
    art = emit(model, {k: v for k, v in options.items() if k != "text_pass"})[0]
    tmp_path.mkdir(parents=True, exist_ok=True)
    (tmp_path / art.name).write_bytes(art.content)
    return sql_runner.run(tmp_path, model, rows, dict(options, ansi=ansi))


@pytest.mark.parametrize("ansi", [True, False], ids=["ansi-on", "ansi-off"])
@pytest.mark.parametrize("form", ["select", "view", "expressions"])
@pytest.mark.parametrize("name", tuple(models.WALKED))
def test_agrees_with_reference(tmp_path, spark, name, form, ansi):
    tm = models.build(name)
    if form == "expressions" and name in DEEP:
        _refused_as_expressions(tm.model, name)
        return
    plan = build_plan(tm.model)
    rows = edge_rows(name, n_frame=150 if form == "select" else 30)
    got = run(tmp_path, tm.model, rows, options_for("spark", name, form=form), ansi)
    ref = [score_row(plan, row) for row in rows]
    margins = np.array([s.margins for s in ref]).reshape(len(rows), plan.n_outputs)
    assert bits(got.margins).tolist() == bits(margins).tolist()
    if plan.task == "regression":
        assert ulp_gap(got.value, [s.value for s in ref]) <= ULPS
    else:
        want = np.array([s.probabilities for s in ref])
        gap = np.abs(bits(got.probabilities) - bits(want))
        excused = np.abs(got.probabilities - want) <= PROBABILITY_ABS
        assert ((gap <= ULPS) | excused).all(), int(gap[~excused].max(initial=0))
        assert list(got.class_index) == [s.class_index for s in ref]


@pytest.mark.parametrize("name", tuple(models.WALKED))
def test_expressions_compute_what_the_query_computes(tmp_path, spark, name):
    """selectExpr("*", *expressions) and the query give the same bits on every output
    (the same operations in the same order), not merely agreement within tolerance."""
    tm = models.build(name)
    if name in DEEP:
        _refused_as_expressions(tm.model, name)
        return
    rows = edge_rows(name, n_frame=40)
    outs = [run(tmp_path / form, tm.model, rows, options_for("spark", name, form=form), True)
            for form in ("select", "expressions")]
    for key in ("margins", "probabilities", "value"):
        a, b = (getattr(o, key) for o in outs)
        if a is not None:
            assert bits(a).tolist() == bits(b).tolist(), key
    if outs[0].class_index is not None:
        assert list(outs[0].class_index) == list(outs[1].class_index)


def _refused_as_expressions(model, name):
    """A deep program written out as one expression per output would be gigabytes (each
    step reads its operand twice): refused in one line; --form select takes it."""
    with pytest.raises(ScorewrightError, match="--form expressions") as err:
        emit(model, options_for("spark", name, form="expressions"))
    assert "\n" not in str(err.value)


def test_exp_is_not_the_c_library_exp(spark):
    """The reason for the tolerance: Spark's exp differs from math.exp (glibc) by an
    ULP on some arguments, never more."""
    rng = random.Random(5)
    xs = [rng.uniform(-708, 709) for _ in range(4000)]
    got = spark.sql("SELECT " + ", ".join(f"exp({literal(SPARK, x)})" for x in xs)).collect()
    gap = np.abs(bits(list(got[0])) - bits([math.exp(x) for x in xs]))
    assert gap.max() == 1 and (gap == 1).sum() > 0


def test_traps(spark):
    """Decimal literals, NaN = NaN, GREATEST with NaN, ANSI errors, backslash escapes."""
    row = spark.sql("SELECT typeof(0.1), typeof(" + literal(SPARK, 0.1) + "), "
                    "CAST('NaN' AS DOUBLE) = CAST('NaN' AS DOUBLE), "
                    "GREATEST(CAST('NaN' AS DOUBLE), 1.0D), 'a\\\\b', " +
                    SPARK.string("a\\b") + ", " + SPARK.string("it's")).collect()[0]
    assert row[0].startswith("decimal") and row[1] == "double"
    assert row[2] is True and math.isnan(row[3])
    assert row[4] == "a\\b" and row[5] == "a\\b" and row[6] == "it's"
    spark.conf.set("spark.sql.ansi.enabled", "true")
    for query in ("SELECT 1.0D / 0.0D", "SELECT CAST('abc' AS DOUBLE)"):
        with pytest.raises(Exception, match="DIVIDE_BY_ZERO|CAST_INVALID_INPUT"):
            spark.sql(query).collect()
    assert spark.sql("SELECT try_cast('abc' AS DOUBLE)").collect()[0][0] is None


def test_identifiers_fold_case_over_unicode(tmp_path, spark):
    """Spark matches names case-insensitively over all of unicode (e/E with acute, K and
    KELVIN SIGN are one name; shown here on the engine), so the later feature of such a
    pair reads a derived column; the hostile model runs with the default mapping."""
    from pyspark.errors import AnalysisException
    from pyspark.sql import types as T

    for a, b in (("é", "É"), ("K", "\u212a"), ("SELECT", "select")):
        schema = T.StructType([T.StructField(a, T.DoubleType()), T.StructField(b, T.DoubleType())])
        spark.createDataFrame([[1.0, 2.0]], schema).createOrReplaceTempView("probe")
        with pytest.raises(AnalysisException, match="AMBIGUOUS_REFERENCE"):
            spark.sql(f"SELECT `{b}` FROM probe").collect()
    tm = models.build("hostile")
    text = emit(tm.model, {"dialect": "spark"})[0].content.decode()
    assert '--   "select" <- "select_b1a36d25" (numeric)' in text
    rows = edge_rows("hostile", n_frame=40)
    got = run(tmp_path, tm.model, rows, {"dialect": "spark"}, True)
    ref = [score_row(build_plan(tm.model), row) for row in rows]
    assert bits(got.margins[:, 0]).tolist() == bits([s.margins[0] for s in ref]).tolist()


@pytest.mark.slow  # 28 s; by default tests/test_scale.py takes Spark past 250 terms
def test_a_model_of_many_terms_sums_flat(tmp_path, spark):
    """Past 250 terms a margin is one aggregate() over an array of its terms, added left
    to right (the same additions in the same order), not a chain of `+` 250 deep per
    layer: for 1,000 features the chain overflowed the default JVM thread stack
    (measured by hand; a stack overflow can also drop the session's connection, so it
    is not re-run here). Both the query and the expressions give the reference's bits."""
    model = models.wide_model(1_000, prefix="flat")
    plan = build_plan(model)
    rows = random_rows(plan, 12, seed=8) + [{f: None for f in plan.feature_names}]
    ref = [score_row(plan, row) for row in rows]
    for form in ("select", "expressions"):
        text = emit(model, {"dialect": "spark", "form": form})[0].content.decode()
        # one aggregate() for the ordinary-row test of magnitudes, one in each arm
        # (sql_ordinary; the expressions name the ordinary arm twice), and no long
        # chain of `+`
        assert text.count("aggregate(") == (3 if form == "select" else 5)
        assert "LATERAL" not in text
        assert max(line.count(" + ") for line in text.split("\n")) < 10
        # The sums are the question; the text pass is tested on its own.
        got = run(tmp_path / form, model, rows,
                  {"dialect": "spark", "form": form, "text_pass": False}, True)
        assert bits(got.margins[:, 0]).tolist() == bits([s.margins[0] for s in ref]).tolist()
        assert ulp_gap(got.probabilities, [s.probabilities for s in ref]) <= ULPS


def test_no_function_form():
    with pytest.raises(ScorewrightError, match="no function form"):
        emit(models.build("spector").model, {"dialect": "spark", "form": "function"})


def test_worked_example_over_a_parquet_path(tmp_path, spark):
    """The worked example for running on a cluster, step by step on the local session:
    readings in a Parquet file, a temporary view named `input` over the path, the
    emitted file run as it is through spark.sql, and the expressions through selectExpr
    on the DataFrame read from the same path; both agree with the reference."""
    import json

    from pyspark.sql import types as T

    tm = models.build("fault_binary")
    plan = build_plan(tm.model)
    rows = tm.frame.head(300).to_dict("records")
    rows += [{inp.name: None for inp in plan.inputs}]
    table = sql_runner.Table(plan, emit_settings(plan), rows, sql_runner.Spark.TYPES)
    kinds = {"double": T.DoubleType(), "bigint": T.LongType(), "string": T.StringType()}
    schema = T.StructType([T.StructField("unit_id", T.LongType())] + [
        T.StructField(c, kinds[t]) for c, t in zip(table.columns, table.types)])
    path = tmp_path / "readings.parquet"
    records = [[i] + [float(v) if t == "double" and v is not None else v
                      for v, t in zip(r, table.types)] for i, r in enumerate(table.values)]
    spark.createDataFrame(records, schema).write.parquet(str(path))

    out = tmp_path / "out"
    out.mkdir()
    for form in ("select", "expressions"):
        art = emit(tm.model, {"dialect": "spark", "form": form})[0]
        (out / art.name).write_bytes(art.content)

    spark.sql(f"CREATE OR REPLACE TEMPORARY VIEW input USING parquet "
              f"OPTIONS (path '{path}')")
    by_query = spark.sql((out / "fault_binary.spark.sql").read_text()).collect()
    doc = json.loads((out / "fault_binary.spark.expressions.json").read_text())
    by_exprs = spark.read.parquet(str(path)).selectExpr("*", *doc["expressions"]).collect()

    ref = [score_row(plan, row) for row in rows]
    for got in (by_query, by_exprs):
        assert sorted(r["unit_id"] for r in got) == list(range(len(rows)))
        for r in got:
            s = ref[r["unit_id"]]
            assert bits([r["margin"]]).tolist() == bits([s.margins[0]]).tolist()
            assert ulp_gap([r["probability"]], [s.probabilities[1]]) <= ULPS
            assert r["predicted_class"] == plan.classes[s.class_index]


def emit_settings(plan):
    from scorewright.emit.sql import settings

    return settings(plan, {"dialect": "spark"})
