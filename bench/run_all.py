"""The whole speed table of the README in one run.

    python bench/run_all.py [--quick] [--only c,sql,...] [--readme]

Each bench module times its variants side by side in one process on the same rows, after
checking the emitted variant's bits against the reference on those rows, and gives its
rows of the table (`results(quick)`): the target, the baseline, the median ratio, the
goal. This script runs them one after another (never two at once: they would time each
other), prints the table and, with --readme, rewrites the README's table between its
markers. --quick uses fewer rows and repeats (a smoke run; not for the README).
"""

from __future__ import annotations

import argparse
import importlib
import os
import platform
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
README = HERE.parent / "README.md"
BEGIN = "<!-- speed table: bench/run_all.py --readme -->"
END = "<!-- end of speed table -->"

# module -> what it measures; in the order of the table
MODULES = {
    "c": "bench_c",
    "sql": "bench_sql",
    "spark": "bench_sql_spark",
    "onnx": "bench_onnx",
    "python": "bench_python",
}


def _load(name: str):
    sys.path.insert(0, str(HERE))
    try:
        return importlib.import_module(name)
    finally:
        sys.path.remove(str(HERE))


def _met(row: dict) -> bool:
    return row["ratio"] >= row["goal"] if row.get("higher") else row["ratio"] <= row["goal"]


def table(rows: list[dict]) -> str:
    lines = ["| target | baseline | measured | goal | met | note |",
             "|---|---|---|---|---|---|"]
    for r in rows:
        sign = ">=" if r.get("higher") else "<="
        ratio = f"{r['ratio']:.0f}x" if r["ratio"] >= 100 else f"{r['ratio']:.2f}x"
        goal = f"{r['goal']:,.0f}x" if r["goal"] >= 100 else f"{r['goal']:g}x"
        lines.append(f"| {r['target']} | {r['baseline']} | {ratio} | {sign} {goal} | "
                     f"{'yes' if _met(r) else 'no'} | {r.get('note', '')} |")
    return "\n".join(lines)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer rows and repeats")
    ap.add_argument("--only", default="", help="comma-separated: " + ",".join(MODULES))
    ap.add_argument("--readme", action="store_true", help="rewrite the README's table")
    args = ap.parse_args(argv)
    chosen = [m for m in args.only.split(",") if m] or list(MODULES)
    unknown = [m for m in chosen if m not in MODULES]
    if unknown:
        print(f"error: unknown benchmark {unknown[0]!r} (known: {', '.join(MODULES)})",
              file=sys.stderr)
        return 2
    if args.readme and (args.quick or args.only):
        print("error: --readme needs the full run (no --quick, no --only)", file=sys.stderr)
        return 2
    rows: list[dict] = []
    for key in chosen:
        t0 = time.perf_counter()
        print(f"[run_all] {key} ...", file=sys.stderr, flush=True)
        got = _load(MODULES[key]).results(quick=args.quick)
        rows += got
        print(f"[run_all] {key}: {len(got)} rows in {time.perf_counter() - t0:.0f} s",
              file=sys.stderr, flush=True)
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    head = (f"Measured {time.strftime('%Y-%m-%d')} on {platform.machine()}, "
            f"{os.cpu_count()} cores, load average {load:.2f} at the end"
            f"{' (quick run)' if args.quick else ''}.")
    text = head + "\n\n" + table(rows)
    print(text)
    if args.readme:
        readme = README.read_text(encoding="utf-8")
        if BEGIN not in readme or END not in readme:
            print("error: the README has no speed-table markers", file=sys.stderr)
            return 2
        before, rest = readme.split(BEGIN, 1)
        _, after = rest.split(END, 1)
        README.write_text(before + BEGIN + "\n" + text + "\n" + END + after, encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
