"""Benchmark: the emitted Spark SQL query against a hand-written minimal expression of
the same model, on 1,000,000 rows x 30 numeric features in a local Spark session
(local[2]). Both are timed side by side in one session; prints medians and the ratio.
Each query is wrapped in `SELECT count(*), sum(probability)`; the input is a cached
temporary view of normal random readings generated inside Spark.

Run: python bench/bench_sql_spark.py [--repeat N]
"""

from __future__ import annotations

import argparse
import statistics
import time

from bench_sql import NAMES, fitted_model, minimal_sql, strip_header, wrap
from scorewright.emit.sql import emit
from scorewright.plan import build_plan
from scorewright.verify.runners.sql import Spark

ROWS = 1_000_000


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    model = fitted_model()
    plan = build_plan(model)
    spark = Spark.session()
    columns = ", ".join(f"50.0D + 10.0D * randn({j}) AS `{n}`" for j, n in enumerate(NAMES))
    frame = spark.sql(f"SELECT {columns} FROM range({ROWS})").cache()
    frame.count()
    frame.createOrReplaceTempView("input")
    emitted = strip_header(emit(model, {"dialect": "spark"})[0].content.decode())
    minimal = minimal_sql(plan, lambda x: f"CAST('{float(x)!r}' AS DOUBLE)")
    minimal = minimal.replace('"', "`")
    results = {}
    for name, query in (("emitted", emitted), ("hand-written minimal", minimal)):
        times = []
        for _ in range(args.repeat):
            start = time.perf_counter()
            spark.sql(wrap(query)).collect()
            times.append(time.perf_counter() - start)
        results[name] = statistics.median(times)
    print(f"spark {spark.version} local[2]: {ROWS:,} rows x {len(NAMES)} features, "
          f"median of {args.repeat}")
    for name, seconds in results.items():
        print(f"  {name:<22} {seconds:8.3f} s")
    print(f"  emitted / hand-written minimal = "
          f"{results['emitted'] / results['hand-written minimal']:.2f}x")


if __name__ == "__main__":
    main()
