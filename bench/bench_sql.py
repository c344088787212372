"""Benchmark: the emitted scoring query against the project's minimal expression of the
same model and a careful hand-written one, side by side in one process.

1,000,000 rows x 30 numeric features on DuckDB, 200,000 on SQLite and PostgreSQL
(a temporary server started here, jit off). Variants run round-robin after one warm
run each; a ratio is the median over repeats of the variant's time over the minimal
expression's time in the same round. Every query is wrapped in the same
`SELECT count(*), sum(probability)` so no rows travel to Python, except in the
"fetch + numpy" variant of the command line, which has to fetch them. Before
timing, the emitted query's margin and probability on every row are checked bit for
bit against the reference evaluator (reference.score_matrix) on the same rows.

- minimal: no guards, no missing handling, the plain logistic 1 / (1 + exp(-m));
- careful hand-written: NULL-aware (COALESCE of the scaled value to 0) and a stable
  sigmoid (exp of minus the margin's magnitude, then a CASE on its sign); it does
  not read NaN or infinities as missing, clamp absurd values, or read text columns.

(No "fences removed" variant: without its fences SQLite's query grew past 24 GB of
memory and PostgreSQL's ran 22x the minimal expression, each layer's expressions
copied into every use.)

Run: python bench/bench_sql.py [--repeat N] [--quick]
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
from scorewright.reference import score_matrix

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
        terms.append(f"{cast(term.weights[0])} * {_scaled(plan, term, cast)}")
    margin = " + ".join(terms) + f" + {cast(plan.intercepts[0])}"
    return f"SELECT {cast(1.0)} / ({cast(1.0)} + exp(-({margin}))) AS probability FROM input"


def _scaled(plan, term, cast, quote='"'):
    inp = plan.inputs[term.input]
    v = f"{quote}{inp.name}{quote}"
    for step in inp.steps:
        op = {"subtract": "-", "divide": "/", "multiply": "*", "add": "+"}[step.op]
        v = f"({v} {op} {cast(step.value)})"
    return v


def careful_sql(plan, cast, quote='"', fence=""):
    """A careful hand-written query: NULL-aware, stable sigmoid (see the docstring);
    `fence` keeps an engine from copying the margin into each of its three uses."""
    terms = [f"{cast(t.weights[0])} * COALESCE({_scaled(plan, t, cast, quote)}, {cast(0.0)})"
             for t in plan.terms]
    margin = " + ".join(terms) + f" + {cast(plan.intercepts[0])}"
    one = cast(1.0)
    return (f"SELECT CASE WHEN m >= {cast(0.0)} THEN {one} / ({one} + e) "
            f"ELSE e / ({one} + e) END AS probability FROM ("
            f"SELECT m, exp(-abs(m)) AS e FROM (SELECT {margin} AS m FROM input{fence}) AS a"
            f"{fence}) AS b")


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


def strip_header(sql):
    return "\n".join(line for line in sql.split("\n") if not line.startswith("--"))


def check_bits(plan, X, fetched, where):
    """fetched: rows of (first feature, second feature, margin, probability) from the
    emitted query, in any order; each must equal the reference bit for bit."""
    got = np.array(fetched, dtype=np.float64)
    want = score_matrix(plan, X)
    order_got = np.lexsort((got[:, 1], got[:, 0]))
    order_want = np.lexsort((X[:, 1], X[:, 0]))
    same_rows = np.array_equal(got[order_got, :2], X[order_want, :2])
    margin = want["margins"][order_want, 0]
    prob = want["probabilities"][order_want, 1]
    bad = (not same_rows or (got[order_got, 2].view(np.int64) != margin.view(np.int64)).any()
           or (got[order_got, 3].view(np.int64) != prob.view(np.int64)).any())
    if bad:
        raise SystemExit(f"{where}: the emitted query differs from the reference")


def interleaved(variants: dict, repeat: int) -> dict:
    """name -> [seconds per round], the variants run round-robin after a warm run each."""
    times = {name: [] for name in variants}
    for round_ in range(repeat + 1):
        for name, fn in variants.items():
            start = time.perf_counter()
            fn()
            if round_:
                times[name].append(time.perf_counter() - start)
    return times


def ratio(times: dict, name: str, base: str = "minimal") -> float:
    return statistics.median(a / b for a, b in zip(times[name], times[base]))


FENCES = {"sqlite": " LIMIT -1 OFFSET 0", "postgres": " OFFSET 0"}


def _queries(model, plan, dialect, cast):
    sql = strip_header(emit(model, {"dialect": dialect})[0].content.decode())
    careful = careful_sql(plan, cast, fence=FENCES.get(dialect, ""))
    return {"emitted": wrap(sql), "minimal": wrap(minimal_sql(plan, cast)),
            "careful hand-written": wrap(careful)}, sql


def bench_engine(dialect, model, plan, X, repeat, execute, cast, fetch_matrix=None):
    """Check the emitted query's bits, then time the variants; returns name -> times."""
    queries, sql = _queries(model, plan, dialect, cast)
    a, b = (f'"{n}"' for n in NAMES[:2])
    check_bits(plan, X, execute(f"SELECT {a}, {b}, margin, probability FROM "
                                f"({sql.rstrip().rstrip(';')}) AS q"), dialect)
    variants = {name: (lambda q=q: execute(q)) for name, q in queries.items()}
    if fetch_matrix is not None:
        variants["fetch + numpy"] = lambda: numpy_score(plan, fetch_matrix())
    return interleaved(variants, repeat)


def report(dialect, rows, repeat, times):
    print(f"\n{dialect}: {rows:,} rows x {N_FEATURES} features, median of {repeat} "
          "interleaved rounds; the emitted query bit-identical to the reference on every row")
    for name, t in times.items():
        print(f"  {name:<22} {statistics.median(t):8.3f} s   {ratio(times, name):5.2f}x minimal")


def duckdb_times(model, plan, rows, repeat, fetch=False):
    import duckdb
    con = duckdb.connect()
    X = data(rows)
    frame = pd.DataFrame(X, columns=NAMES)  # noqa: F841 (read by name in the query)
    con.execute("CREATE TABLE input AS SELECT * FROM frame")
    columns = ", ".join(f'"{n}"' for n in NAMES)
    fetch_matrix = (lambda: np.column_stack(list(
        con.execute(f"SELECT {columns} FROM input").fetchnumpy().values()))) if fetch else None
    return bench_engine("duckdb", model, plan, X, repeat, lambda q: con.execute(q).fetchall(),
                        lambda x: f"CAST('{float(x)!r}' AS DOUBLE)", fetch_matrix)


def sqlite_times(model, plan, rows, repeat, fetch=False):
    import sqlite3
    lite = sqlite3.connect(":memory:")
    X = data(rows)
    columns = ", ".join(f'"{n}"' for n in NAMES)
    lite.execute(f"CREATE TABLE input ({', '.join(f'{c} REAL' for c in columns.split(', '))})")
    lite.executemany(f"INSERT INTO input VALUES ({', '.join('?' * N_FEATURES)})", X.tolist())
    fetch_matrix = (lambda: np.array(lite.execute(f"SELECT {columns} FROM input").fetchall())
                    ) if fetch else None
    return bench_engine("sqlite", model, plan, X, repeat, lambda q: lite.execute(q).fetchall(),
                        lambda x: repr(float(x)), fetch_matrix)


def postgres_times(model, plan, rows, repeat, fetch=False):
    import psycopg
    from scorewright.verify.postgres import TemporaryServer
    columns = ", ".join(f'"{n}"' for n in NAMES)
    with tempfile.TemporaryDirectory() as tmp, TemporaryServer(Path(tmp) / "pg") as server:
        with psycopg.connect(server.dsn, autocommit=True) as pg:
            X = data(rows)
            pg.execute(f"CREATE TABLE input ("
                       f"{', '.join(f'{c} DOUBLE PRECISION' for c in columns.split(', '))})")
            with pg.cursor().copy(f"COPY input ({columns}) FROM STDIN") as copy:
                for row in X.tolist():
                    copy.write_row(row)
            pg.execute("VACUUM ANALYZE input")
            pg.execute("SET jit = off")
            fetch_matrix = (lambda: np.array(pg.execute(f"SELECT {columns} FROM input")
                                             .fetchall())) if fetch else None
            return bench_engine("postgres", model, plan, X, repeat,
                                lambda q: pg.execute(q).fetchall(),
                                lambda x: f"CAST('{float(x)!r}' AS DOUBLE PRECISION)",
                                fetch_matrix)


ENGINES = (("duckdb", duckdb_times, "DuckDB, 1M x 30", 1.2),
           ("sqlite", sqlite_times, "SQLite, 200k x 30", 1.5),
           ("postgres", postgres_times, "PostgreSQL, 200k x 30, jit off", 1.5))
# What bounds each (measured by hand with variants of the emitted query, 2026-12-03).
BOUNDS = {
    "duckdb": "the ordinary-row test (a sum of 30 magnitudes) and its CASE: the same "
              "margin with that test by hand 1.31x",
    "sqlite": "the per-value type test of the any-type read (bare columns: 1.9x) and the "
              "rowid join back",
    "postgres": "the any-type read (bare columns: 2.9x), and the OFFSET 0 fences: only "
                "layer 0 runs in the parallel workers, the margin and exp in the leader "
                "(Gather 0.54 s of 0.92 s); without fences each layer is copied into its "
                "uses (22x)",
}


def results(quick: bool = False) -> list[dict]:
    """The goal rows of issue 20 for DuckDB, SQLite and PostgreSQL (Spark:
    bench_sql_spark.results)."""
    model = fitted_model()
    plan = build_plan(model)
    repeat = 3 if quick else 7
    out = []
    for dialect, times_of, target, goal in ENGINES:
        # the goal's rows even when quick (a fifth of them weighs the query's planning
        # more: DuckDB 2.6x at 200,000 rows), fewer rounds
        rows = ROWS[dialect]
        times = times_of(model, plan, rows, repeat)
        note = (f"{rows:,} rows, median of {repeat} interleaved rounds, bit-identical to the "
                f"reference; careful hand-written query "
                f"{ratio(times, 'careful hand-written'):.2f}x minimal; bound: {BOUNDS[dialect]}")
        out.append({"target": target, "baseline": "minimal expression",
                    "ratio": round(ratio(times, "emitted"), 2), "goal": goal, "note": note})
    return out


def main():
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--quick", action="store_true", help="a fifth of the rows, 3 rounds")
    args = parser.parse_args()
    model = fitted_model()
    plan = build_plan(model)
    repeat = 3 if args.quick else args.repeat
    for dialect, times_of, _, goal in ENGINES:
        rows = ROWS[dialect] // (5 if args.quick else 1)
        times = times_of(model, plan, rows, repeat, fetch=True)
        report(dialect, rows, repeat, times)
        e = ratio(times, "emitted")
        print(f"  goal: emitted <= {goal}x minimal: {'met' if e <= goal else 'not met'}")


if __name__ == "__main__":
    main()
