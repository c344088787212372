"""Benchmark: the emitted scoring query against a hand-written minimal expression of the
same model and against fetching the rows into Python and scoring them with numpy.

1,000,000 rows x 30 numeric features on DuckDB, 200,000 on SQLite and PostgreSQL
(a temporary server started here). Each variant is timed side by side in this one
process; the script prints medians and their ratios. Every query is wrapped in the
same `SELECT count(*), sum(probability)` so no rows travel to Python except in the
numpy variant, which has to fetch them.

Run: python bench/bench_sql.py [--repeat N]
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

import scorewright
from scorewright.emit.sql import emit
from scorewright.plan import build_plan

N_FEATURES = 30
ROWS = {"duckdb": 1_000_000, "sqlite": 200_000, "postgres": 200_000}
NAMES = [f"sensor_{j:02d}" for j in range(N_FEATURES)]


def fitted_model():
    """A standardized logistic regression on invented compressor sensor readings."""
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler
    import pandas as pd

    rng = np.random.default_rng(7)
    X = pd.DataFrame(rng.normal(50, 10, (4000, N_FEATURES)), columns=NAMES)
    truth = rng.normal(0, 0.05, N_FEATURES)
    y = (rng.uniform(size=len(X)) < 1 / (1 + np.exp(-(X.values - 50) @ truth))).astype(int)
    est = make_pipeline(StandardScaler(), LogisticRegression(max_iter=2000)).fit(X, y)
    return scorewright.freeze(est, name="bench_sensors")


def data(n):
    return np.random.default_rng(11).normal(50, 10, (n, N_FEATURES))


def minimal_sql(plan, cast):
    """The shortest correct-for-ordinary-rows expression: no guards, no missing handling."""
    terms = []
    for term in plan.terms:
        inp = plan.inputs[term.input]
        v = f'"{inp.name}"'
        for step in inp.steps:
            op = {"subtract": "-", "divide": "/", "multiply": "*", "add": "+"}[step.op]
            v = f"({v} {op} {cast(step.value)})"
        terms.append(f"{cast(term.weights[0])} * {v}")
    margin = " + ".join(terms) + f" + {cast(plan.intercepts[0])}"
    return f"SELECT {cast(1.0)} / ({cast(1.0)} + exp(-({margin}))) AS probability FROM input"


def numpy_score(plan, X):
    m = np.full(len(X), plan.intercepts[0])
    for term in plan.terms:
        inp = plan.inputs[term.input]
        v = X[:, inp.index]
        for step in inp.steps:
            v = {"subtract": np.subtract, "divide": np.divide, "multiply": np.multiply,
                 "add": np.add}[step.op](v, step.value)
        m = m + term.weights[0] * v
    return 1.0 / (1.0 + np.exp(-m))


def wrap(query):
    return f"SELECT count(*), sum(probability) FROM ({query.rstrip().rstrip(';')}) AS q"


def median_time(fn, repeat):
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def strip_header(sql):
    return "\n".join(line for line in sql.split("\n") if not line.startswith("--"))


def bench(dialect, model, plan, repeat, execute, fetch_matrix, cast):
    sql = strip_header(emit(model, {"dialect": dialect})[0].content.decode())
    variants = {
        "emitted": lambda: execute(wrap(sql)),
        "hand-written minimal": lambda: execute(wrap(minimal_sql(plan, cast))),
        "fetch + numpy": lambda: numpy_score(plan, fetch_matrix()),
    }
    fence = " OFFSET 0" if dialect == "postgres" else " LIMIT -1 OFFSET 0"
    if dialect != "duckdb":
        variants["emitted, fences removed"] = lambda: execute(wrap(sql.replace(fence, "")))
    results = {name: median_time(fn, repeat) for name, fn in variants.items()}
    print(f"\n{dialect}: {ROWS[dialect]:,} rows x {N_FEATURES} features, median of {repeat}")
    for name, seconds in results.items():
        print(f"  {name:<26} {seconds:8.3f} s")
    e = results["emitted"]
    print(f"  emitted / hand-written minimal = {e / results['hand-written minimal']:.2f}x")
    print(f"  fetch + numpy / emitted        = {results['fetch + numpy'] / e:.2f}x")
    if "emitted, fences removed" in results:
        print(f"  fences removed / emitted       = {results['emitted, fences removed'] / e:.2f}x")


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    model = fitted_model()
    plan = build_plan(model)
    columns = ", ".join(f'"{n}"' for n in NAMES)

    import duckdb
    con = duckdb.connect()
    X = data(ROWS["duckdb"])
    con.execute(f"CREATE TABLE input ({', '.join(f'{c} DOUBLE' for c in columns.split(', '))})")
    frame = pd.DataFrame(X, columns=NAMES)
    con.execute("INSERT INTO input SELECT * FROM frame")
    bench("duckdb", model, plan, args.repeat, lambda q: con.execute(q).fetchall(),
          lambda: np.column_stack(list(con.execute(f"SELECT {columns} FROM input")
                                       .fetchnumpy().values())),
          lambda x: f"CAST('{float(x)!r}' AS DOUBLE)")

    import sqlite3
    lite = sqlite3.connect(":memory:")
    X = data(ROWS["sqlite"])
    lite.execute(f"CREATE TABLE input ({', '.join(f'{c} REAL' for c in columns.split(', '))})")
    lite.executemany(f"INSERT INTO input VALUES ({', '.join('?' * N_FEATURES)})", X.tolist())
    bench("sqlite", model, plan, args.repeat, lambda q: lite.execute(q).fetchall(),
          lambda: np.array(lite.execute(f"SELECT {columns} FROM input").fetchall()),
          lambda x: repr(float(x)))

    import psycopg
    from scorewright.verify.postgres import TemporaryServer
    with tempfile.TemporaryDirectory() as tmp, TemporaryServer(Path(tmp) / "pg") as server:
        with psycopg.connect(server.dsn, autocommit=True) as pg:
            X = data(ROWS["postgres"])
            pg.execute(f"CREATE TABLE input ("
                       f"{', '.join(f'{c} DOUBLE PRECISION' for c in columns.split(', '))})")
            with pg.cursor().copy(f"COPY input ({columns}) FROM STDIN") as copy:
                for row in X.tolist():
                    copy.write_row(row)
            pg.execute("VACUUM ANALYZE input")
            bench("postgres", model, plan, args.repeat, lambda q: pg.execute(q).fetchall(),
                  lambda: np.array(pg.execute(f"SELECT {columns} FROM input").fetchall()),
                  lambda x: f"CAST('{float(x)!r}' AS DOUBLE PRECISION)")


if __name__ == "__main__":
    main()
