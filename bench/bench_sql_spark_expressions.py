"""Benchmark: the spark dialect's `--form expressions` (one expression per output, for
DataFrame.selectExpr) against its `--form select` query, side by side in one local
Spark session (local[2]), on a binary and a 4-class model over 30 invented compressor
readings. The expressions form writes shared sub-expressions out in full (no subquery
can name them); whether Spark computes them once is what this measures: each form
also runs with spark.sql.subexpressionElimination.enabled off. Every output column is
aggregated so none is pruned. Variants run round-robin; prints medians, ratios and
the artifacts' sizes.

200,000 rows by default. With spark.sql.subexpressionElimination.enabled off the 4-class
select query runs a local[2] session with the default 1 GB driver heap out of memory
(at any row count: the plan, not the data), so that one variant is not run.

Run: python bench/bench_sql_spark_expressions.py [--rows N] [--repeat N]
"""

from __future__ import annotations

import argparse
import json
import statistics
import time

import numpy as np

import scorewright
from bench_sql import NAMES, fitted_model, strip_header
from scorewright.emit.sql import emit
from scorewright.plan import build_plan, output_columns
from scorewright.verify.runners.sql import Spark


def multiclass_model():
    """A 4-class fault-type logistic regression on invented readings (none, electrical,
    mechanical, leak)."""
    import pandas as pd
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    rng = np.random.default_rng(9)
    X = pd.DataFrame(rng.normal(50, 10, (4000, len(NAMES))), columns=NAMES)
    truth = rng.normal(0, 0.08, (len(NAMES), 4))
    logits = (X.values - 50) @ truth
    y = np.array(["none", "electrical", "mechanical", "leak"])[logits.argmax(axis=1)]
    est = make_pipeline(StandardScaler(), LogisticRegression(max_iter=3000)).fit(X, y)
    return scorewright.freeze(est, name="bench_fault_type")


def aggregate(plan) -> list[str]:
    """count(*) plus one aggregate per output, so no output column is pruned."""
    out = ["count(*)"]
    for name in output_columns(plan):
        out.append(f"max(`{name}`)" if name == "predicted_class" else f"sum(`{name}`)")
    return out


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=200_000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    spark = Spark.session()
    columns = ", ".join(f"50.0D + 10.0D * randn({j}) AS `{n}`" for j, n in enumerate(NAMES))
    frame = spark.sql(f"SELECT {columns} FROM range({args.rows})").cache()
    frame.count()
    frame.createOrReplaceTempView("input")
    print(f"spark {spark.version} local[2]: {args.rows:,} rows x {len(NAMES)} features, "
          f"median of {args.repeat}")
    for model in (fitted_model(), multiclass_model()):
        plan = build_plan(model)
        aggs = aggregate(plan)
        query = strip_header(emit(model, {"dialect": "spark"})[0].content.decode())
        doc = emit(model, {"dialect": "spark", "form": "expressions"})[0].content
        exprs = json.loads(doc)["expressions"]
        body = query.rstrip().rstrip(";")
        runs = {
            "select query": lambda: spark.sql(
                f"SELECT {', '.join(aggs)} FROM ({body}) AS q").collect(),
            "selectExpr expressions": lambda: frame.selectExpr("*", *exprs)
            .selectExpr(*aggs).collect(),
        }
        variants = [(name, cse) for cse in ("true", "false") for name in runs]
        if plan.task == "multiclass":
            # With CSE off the 4-class query exhausts the default 1 GB driver heap (measured).
            variants.remove(("select query", "false"))
        times = {v: [] for v in variants}
        # Round-robin, after one warm run of each, so JIT warm-up and caching favour none.
        for round_ in range(args.repeat + 1):
            for name, cse in variants:
                spark.conf.set("spark.sql.subexpressionElimination.enabled", cse)
                start = time.perf_counter()
                runs[name]()
                if round_:
                    times[(name, cse)].append(time.perf_counter() - start)
        spark.conf.set("spark.sql.subexpressionElimination.enabled", "true")
        results = {v: statistics.median(t) for v, t in times.items()}
        print(f"{plan.name} ({plan.task}, {plan.n_outputs} margin(s)); "
              f"query {len(query.encode()):,} bytes, expressions {len(doc):,} bytes")
        for (name, cse), seconds in results.items():
            print(f"  {name:<24} CSE {'on ' if cse == 'true' else 'off'} {seconds:8.3f} s")
        if ("select query", "false") not in results:
            print("  select query             CSE off  not run: out of driver heap")
        exprs_on = results[("selectExpr expressions", "true")]
        exprs_off = results[("selectExpr expressions", "false")]
        print(f"  expressions / query (CSE on)  = "
              f"{exprs_on / results[('select query', 'true')]:.2f}x")
        print(f"  expressions CSE off / CSE on  = {exprs_off / exprs_on:.2f}x")


if __name__ == "__main__":
    main()
