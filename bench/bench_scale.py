"""Benchmark: how far each target scales. A wide all-numeric model (default 10,000
features) and one categorical of many levels (default 5,000) are emitted, built and run
on every built-in target profile (or those named) over random rows, compared with the
reference evaluator, and timed. Prints the README's scale table (emit time, build + run
time, artifact size per profile and model size) and the engines' limits.

The models are the test suite's (tests/models.py: wide_model, many_levels_model); the
test suite checks the same paths past each emitter's layer boundaries on every run,
and at these sizes with --runslow, but never asserts a time.

Run: python bench/bench_scale.py [--features N] [--levels N] [--rows N] [--target NAME ...]
The table goes to stdout; Spark's progress and log lines go to stderr (2>/dev/null).
The full default run takes about 30 minutes on a 2-core machine (the 10,000-feature
model on SQLite long, DuckDB, Spark and two Cortex-M cross-builds take minutes each).
"""

from __future__ import annotations

import argparse
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

import models  # noqa: E402  (tests/models.py)
from scorewright.emit import emitter  # noqa: E402
from scorewright.emit.c import ROW_PART_TERMS  # noqa: E402
from scorewright.emit.sql_dialects import DIALECTS  # noqa: E402
from scorewright.errors import ScorewrightError  # noqa: E402
from scorewright.plan import build_plan  # noqa: E402
from scorewright.verify.cases import random_rows  # noqa: E402
from scorewright.verify.compare import compare  # noqa: E402
from scorewright.verify.harness import oracle  # noqa: E402
from scorewright.verify.profiles import builtin_names, load_profile  # noqa: E402
from scorewright.verify.runners import runner  # noqa: E402


def measure(profile, model, n_rows: int, workdir: Path, dsn: str | None) -> dict:
    """Emit, build and run one model on one profile: times, size, and whether it agrees."""
    t0 = time.perf_counter()
    arts = emitter(profile.emitter)(model, dict(profile.emit))
    emitted = time.perf_counter() - t0
    workdir.mkdir(parents=True)
    for art in arts:
        (workdir / art.name).write_bytes(art.content)
    _, rows, expected = oracle(model, profile.tolerance,
                               random_rows(build_plan(model), n_rows, seed=3))
    options = profile.run_options
    if dsn is not None:
        options["dsn"] = dsn
    t1 = time.perf_counter()
    try:
        got = runner(profile.runner)(workdir, model, rows, options)
    except ScorewrightError as exc:
        return {"emit": emitted, "run": time.perf_counter() - t1, "size": _size(arts),
                "result": f"refused: {str(exc)[:90]}"}
    ran = time.perf_counter() - t1
    result = compare(expected, got, profile.tolerance)
    return {"emit": emitted, "run": ran, "size": _size(arts),
            "result": "agrees" if result.ok else f"DISAGREES (max ULP {result.max_ulps})"}


def _size(arts) -> int:
    return sum(len(a.content) for a in arts)


def engine_limits(dsn: str | None) -> list[str]:
    """The limits that decide where each engine stops or an emitter splits a sum, asked of
    the engines themselves where they can say."""
    con = sqlite3.connect(":memory:")
    lines = [f"SQLite {sqlite3.sqlite_version}: at most "
             f"{con.getlimit(sqlite3.SQLITE_LIMIT_COLUMN):,} columns a table, expressions "
             f"{con.getlimit(sqlite3.SQLITE_LIMIT_EXPR_DEPTH):,} deep"]
    import duckdb

    duck = duckdb.connect()
    depth = duck.execute("SELECT current_setting('max_expression_depth')").fetchone()[0]
    lines.append(f"DuckDB {duckdb.__version__}: expressions {depth:,} deep; no column limit "
                 "met at 10,000")
    if dsn is not None:
        import psycopg

        with psycopg.connect(dsn, autocommit=True) as pg:
            version = pg.execute("SHOW server_version").fetchone()[0]
            stack = pg.execute("SHOW max_stack_depth").fetchone()[0]
            cols = ", ".join(f"c{i} double precision" for i in range(1_601))
            try:
                pg.execute(f"CREATE TEMPORARY TABLE probe ({cols})")
                said = "a 1,601-column table was accepted"
            except psycopg.Error as exc:
                said = str(exc).strip().splitlines()[0]
        lines.append(f"PostgreSQL {version}: {said}; max_stack_depth {stack}; a row must fit "
                     "one 8 kB page (about 1,000 double columns)")
    from scorewright.verify.runners.sql import Spark

    if Spark._session is not None:  # started by a Spark profile above
        heap = Spark._session.conf.get("spark.driver.memory")
        lines.append(f"Spark {Spark._session.version} (local): the verify session's driver "
                     f"heap is {heap} (1 GB and 2 GB ran out at 10,000 features)")
    for name, d in sorted(DIALECTS.items()):
        join = f", {d.terms_per_join:,} per join" if d.terms_per_join else ""
        lines.append(f"emit/sql {name}: {d.terms_per_layer:,} terms per layer{join}")
    lines.append(f"emit/c: the row scorer is cut into functions of {ROW_PART_TERMS} terms")
    return lines


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--features", type=int, default=10_000)
    ap.add_argument("--levels", type=int, default=5_000)
    ap.add_argument("--rows", type=int, default=40)
    ap.add_argument("--target", action="append", choices=builtin_names(),
                    help="a built-in profile (repeatable; default: every one)")
    args = ap.parse_args(argv)
    profiles = [load_profile(n) for n in (args.target or builtin_names())]
    kinds = {f"{args.features:,} numeric features": models.wide_model(args.features),
             f"one categorical, {args.levels:,} levels": models.many_levels_model(args.levels)}

    with tempfile.TemporaryDirectory(prefix="scorewright-bench-scale-") as tmp:
        server = None
        if any(p.tags.get("needs_server") for p in profiles):
            from scorewright.verify.postgres import TemporaryServer

            server = TemporaryServer(Path(tmp) / "pg")
            server.start()
        try:
            dsn = server.dsn if server else None
            print(f"Scale, {args.rows} random rows per run (emit; build + run; artifact size)\n")
            print("| model | target | emit | build + run | artifact | result |")
            print("|---|---|---|---|---|---|")
            for kind, model in kinds.items():
                for p in profiles:
                    m = measure(p, model, args.rows, Path(tmp) / model.name / p.name,
                                dsn if p.tags.get("needs_server") else None)
                    print(f"| {kind} | {p.name} | {m['emit']:.1f} s | {m['run']:.1f} s | "
                          f"{m['size'] / 1e6:.2f} MB | {m['result']} |", flush=True)
            print("\nEngine limits\n")
            for line in engine_limits(dsn):
                print(f"- {line}")
        finally:
            if server is not None:
                server.stop()
    return 0


if __name__ == "__main__":
    sys.exit(main())
