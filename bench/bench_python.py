"""Single-row latency: the emitted Python scorer vs hand-written Python and scikit-learn.

    python bench/bench_python.py [--repeats 15] [--quick]

The model is the compressor fault model of the tests (seven numeric channels, median
imputation and standardization; two categorical inputs, most-frequent imputation and
one-hot with unseen levels ignored; a binary logistic regression). Side by side in this
one process, on the same rows, interleaved, median over repeats of the per-call time:

- minimal: a loop over the fitted arrays with no missing-value handling and the naive
  sigmoid 1 / (1 + exp(-s)): the floor of plain Python;
- hand-written: the same loop with the scorer's missing-value handling for the values a
  program passes (None, NaN and +-inf take the imputed value; a missing level its
  imputed level, an unseen level nothing) and a stable sigmoid: what a careful person
  writes by hand from the fitted arrays;
- emitted: the scorer's predict_proba(row) (it also reads text, bools, ints);
- scikit-learn: Pipeline.predict_proba on a one-row frame.

Before timing, the emitted scorer's probabilities are checked bit for bit against the
frozen model's reference (scorewright's program interpreter) on the benchmark rows and
edge rows. Goals (issue "Exact and fast"): emitted / hand-written <= 1.3; scikit-learn /
emitted >= 1,500.
"""

from __future__ import annotations

import argparse
import importlib.util
import math
import statistics
import sys
import tempfile
import time
import warnings
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))

import models  # noqa: E402

from scorewright.emit import emitter  # noqa: E402
from scorewright.plan import build_plan  # noqa: E402
from scorewright.program import lower, run_row  # noqa: E402


def hand_written(est):
    """The two hand loops, from the fitted arrays of the pipeline."""
    ct, lr = est[0], est[-1]
    num_pipe = ct.named_transformers_["num"]
    cat_pipe = ct.named_transformers_["cat"]
    num_names = list(ct.transformers_[0][2])
    cat_names = list(ct.transformers_[1][2])
    fill = num_pipe[0].statistics_
    mean, scale = num_pipe[1].mean_, num_pipe[1].scale_
    coef = lr.coef_[0]
    intercept = float(lr.intercept_[0])
    numeric = tuple((n, float(f), float(m), float(s), float(c))
                    for n, f, m, s, c in zip(num_names, fill, mean, scale, coef))
    cats, k = [], len(num_names)
    cat_fill = cat_pipe[0].statistics_
    for name, levels, level_fill in zip(cat_names, cat_pipe[1].categories_, cat_fill):
        table = {str(v): float(coef[k + j]) for j, v in enumerate(levels)}
        cats.append((name, table, table[str(level_fill)]))
        k += len(levels)
    cats = tuple(cats)
    exp = math.exp

    def minimal(row):
        s = intercept
        for name, _f, m, sc, c in numeric:
            s += c * ((row[name] - m) / sc)
        for name, table, _d in cats:
            s += table.get(row[name], 0.0)
        p = 1.0 / (1.0 + exp(-s))
        return [1.0 - p, p]

    def careful(row):
        s = intercept
        for name, f, m, sc, c in numeric:
            v = row.get(name)
            if v is None or v - v != 0.0:      # None, NaN, +-inf
                v = f
            s += c * ((v - m) / sc)
        for name, table, missing in cats:
            v = row.get(name)
            s += missing if v is None or v == "" else table.get(v, 0.0)
        if s >= 0.0:
            p = 1.0 / (1.0 + exp(-s))
        else:
            e = exp(s)
            p = e / (1.0 + e)
        return [1.0 - p, p]

    return minimal, careful


def per_call(fns: dict, rows: list, repeats: int, calls: int) -> dict:
    """Median seconds per call of each function, interleaved over repeats."""
    times = {k: [] for k in fns}
    n = len(rows)
    for _ in range(repeats):
        for key, (fn, m) in fns.items():
            reps = max(1, calls // m)
            t0 = time.perf_counter()
            for i in range(reps):
                fn(rows[i % n])
            times[key].append((time.perf_counter() - t0) / reps)
    return {k: statistics.median(v) for k, v in times.items()}


def _scorer(model):
    (art,) = emitter("python")(model, {})
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / art.name
        path.write_bytes(art.content)
        spec = importlib.util.spec_from_file_location("bench_scorer", path)
        scorer = importlib.util.module_from_spec(spec)
        spec.loader.exec_module(scorer)
    return scorer


def results(quick: bool = False, repeats: int | None = None) -> list[dict]:
    warnings.simplefilter("ignore")
    tm = models.build("fault_binary")
    scorer = _scorer(tm.model)
    program = lower(build_plan(tm.model))
    frame = tm.frame.head(200)
    text = set(frame.select_dtypes(exclude="number").columns)
    rows = [{k: (None if v != v else v) if k in text else float(v) for k, v in r.items()}
            for r in frame.to_dict("records")]
    edges = [dict(rows[0], discharge_temp_c=x) for x in
             (None, math.nan, math.inf, -math.inf, 1e308, -1e308, 5e-324, -0.0)]
    edges += [dict(rows[1], refrigerant=v) for v in (None, "", "unseen", "R290")]
    for row in rows + edges:
        want = run_row(program, row)
        got = scorer.predict_proba(row)
        if got != [want["probability_0"], want["probability_1"]]:
            raise SystemExit(f"emitted scorer differs from the reference on {row!r}")
    minimal, careful = hand_written(tm.estimator)
    for row in rows:
        got, hand = scorer.predict_proba(row)[1], careful(row)[1]
        if abs(got - hand) > 1e-12:
            raise SystemExit(f"the hand-written loop disagrees ({hand!r} vs {got!r})")
    repeats = repeats or (5 if quick else 15)
    calls = 5000 if quick else 20000
    frame_rows = [frame.iloc[[i]] for i in range(20)]
    fns = {
        "minimal": (minimal, 1),
        "hand-written": (careful, 1),
        "emitted": (scorer.predict_proba, 1),
        "scikit-learn": (lambda r, it=iter(range(10**9)): tm.estimator.predict_proba(
            frame_rows[next(it) % 20]), 200),
    }
    t = per_call(fns, rows, repeats, calls)
    note = (f"fault_binary, one row per call, medians of {repeats}; minimal "
            f"{t['minimal'] * 1e6:.2f} us, hand-written {t['hand-written'] * 1e6:.2f} us, "
            f"emitted {t['emitted'] * 1e6:.2f} us, scikit-learn {t['scikit-learn'] * 1e6:.0f} us")
    return [
        {"target": "Python, one row", "baseline": "hand-written loop, same missing handling",
         "ratio": t["emitted"] / t["hand-written"], "goal": 1.3, "note": note,
         "times": t},
        {"target": "Python, one row", "baseline": "scikit-learn / emitted (higher is better)",
         "ratio": t["scikit-learn"] / t["emitted"], "goal": 1500.0, "higher": True,
         "note": f"minimal loop / emitted: {t['minimal'] / t['emitted']:.2f}"},
    ]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=None)
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args()
    res = results(args.quick, args.repeats)
    t = res[0]["times"]
    for key in ("minimal", "hand-written", "emitted", "scikit-learn"):
        print(f"{key:>14}: {t[key] * 1e6:9.2f} us per row (median)")
    print(f"emitted / hand-written: {res[0]['ratio']:.2f}  (goal <= 1.3)")
    print(f"emitted / minimal:      {t['emitted'] / t['minimal']:.2f}")
    print(f"scikit-learn / emitted: {res[1]['ratio']:.0f}x  (goal >= 1,500x)")


if __name__ == "__main__":
    main()
