"""The emitted C batch scorer vs hand-written C loops vs a memory-read floor, in one binary.

The model: median imputation, standardization and a binary logistic regression over
30 numeric sensor channels of a refrigeration compressor (invented data, fixed
seed). Every loop below is linked into one program and timed interleaved, repeat
by repeat, on the same rows (a few edge rows among them: NaN, +-inf, +-1e308, a
subnormal, -0.0); a ratio is the median over repeats of (time / the floor's time
in the same repeat), the floor compiled with the same flags as the loop:

- the memory-read floor: sum every input value once (four running sums);
- a minimal hand loop: what one writes from the fitted arrays (fill NaN, subtract
  the mean, divide by the scale, multiply-accumulate, 1/(1+exp(-s))), no guard;
- a careful hand loop: the same, but NaN- and infinity-aware (a non-finite value
  takes the fill) with the stable sigmoid (exp of -|s| only);
- the emitted batch scorers: libm's exp at -O2 (the portable build's baseline),
  the portable exp at -O3 -march=native, and the two other crossings.

Before any timing, the program checks every emitted scorer's output on all rows
bit for bit against the reference (`program.run_matrix` on the same rows, with
the same exp); a scorer that differs in one bit stops the benchmark. The hand
loops are not exact (no guards, another order); their largest difference from
the reference is printed.

    python bench/bench_c.py [--rows 1000000] [--repeats 11] [--cc gcc] [--quick]

`results(quick)` gives the two goal rows for bench/run_all.py (quick: 3 repeats).
"""

from __future__ import annotations

import argparse
import dataclasses
import statistics
import subprocess
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

import scorewright
from scorewright.emit import emitter
from scorewright.plan import build_plan
from scorewright.program import lower, run_matrix

N_FEATURES = 30
O2 = ["-O2"]
O3 = ["-O3", "-march=native"]
# (name, exp, flags): every emitted scorer in the program; the first two are the goals
VARIANTS = (
    ("emitted -O2 libm", "libm", O2),
    ("emitted -O3 native portable", "portable", O3),
    ("emitted -O2 portable", "portable", O2),
    ("emitted -O3 native libm", "libm", O3),
)
# (target, the emitted scorer, the careful hand loop of the same flags, goal, what bounds it)
GOALS = (
    ("C batch, 1M x 30, -O2, libm exp", "emitted -O2 libm", "hand careful -O2", 2.5,
     "bound: the terms in SSE2 (2 lanes at -O2), then a scalar libm exp call a row"),
    ("C batch, -O3 -march=native, portable exp", "emitted -O3 native portable",
     "hand careful -O3 native", 1.6,
     "the terms pass alone is near the floor; the ordered sums and the link add the rest"),
)

HAND = r"""
#include <math.h>
#include <stddef.h>
#include "fitted.h"

#define CAT_(a, b) a##b
#define CAT(a, b) CAT_(a, b)

/* The floor: read every input value once. */
double CAT(read_floor, SUFFIX)(const double *rows, size_t n)
{
    double s0 = 0.0, s1 = 0.0, s2 = 0.0, s3 = 0.0;
    size_t i;
    for (i = 0; i + 4 <= n * NF; i += 4) {
        s0 += rows[i]; s1 += rows[i + 1]; s2 += rows[i + 2]; s3 += rows[i + 3];
    }
    return s0 + s1 + s2 + s3;
}

/* What one writes by hand from the fitted arrays. */
void CAT(hand_minimal, SUFFIX)(const double *rows, size_t n, double *out)
{
    size_t i;
    int j;
    for (i = 0; i < n; i++) {
        const double *x = rows + i * NF;
        double s = intercept;
        for (j = 0; j < NF; j++) {
            double v = x[j];
            if (isnan(v)) v = fill[j];
            s += coef[j] * ((v - mean[j]) / scale[j]);
        }
        out[i] = 1.0 / (1.0 + exp(-s));
    }
}

/* The same with care: a non-finite value takes the fill, and the stable sigmoid. */
void CAT(hand_careful, SUFFIX)(const double *rows, size_t n, double *out)
{
    size_t i;
    int j;
    for (i = 0; i < n; i++) {
        const double *x = rows + i * NF;
        double s = intercept, e;
        for (j = 0; j < NF; j++) {
            double v = x[j];
            v = isfinite(v) ? v : fill[j];
            s += coef[j] * ((v - mean[j]) / scale[j]);
        }
        e = exp(-fabs(s));
        out[i] = s >= 0.0 ? 1.0 / (1.0 + e) : e / (1.0 + e);
    }
}
"""

MAIN = r"""
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include "fitted.h"
%(includes)s

double read_floor_o2(const double *rows, size_t n);
double read_floor_o3(const double *rows, size_t n);
void hand_minimal_o2(const double *rows, size_t n, double *out);
void hand_minimal_o3(const double *rows, size_t n, double *out);
void hand_careful_o2(const double *rows, size_t n, double *out);
void hand_careful_o3(const double *rows, size_t n, double *out);

typedef void (*scorer)(const double *, size_t, double *);
static const scorer emitted[] = {%(emitted)s};
static const int exact_ref[] = {%(refs)s};  /* 0: libm reference, 1: portable */
static const char *const emitted_names[] = {%(names)s};
static const scorer hand[] = {hand_minimal_o2, hand_careful_o2, hand_minimal_o3, hand_careful_o3};
static const char *const hand_names[] = {"hand minimal -O2", "hand careful -O2",
                                         "hand minimal -O3 native", "hand careful -O3 native"};
#define N_EMITTED ((int)(sizeof emitted / sizeof emitted[0]))
#define EDGE_ROWS %(edge_rows)d

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static double *load(const char *path, size_t count)
{
    double *p = malloc(count * sizeof(double) + 8);
    FILE *f = fopen(path, "rb");
    if (p == NULL || f == NULL || fread(p, sizeof(double), count, f) != count) exit(2);
    fclose(f);
    return p;
}

int main(int argc, char **argv)
{
    size_t n = (size_t)atol(argv[1]), i;
    int repeats = atoi(argv[2]), r, v;
    double *rows = load("rows.bin", n * NF);
    double *ref[2] = {load("ref_libm.bin", n), load("ref_portable.bin", n)};
    double *out = malloc(n * sizeof(double) + 8), sink = 0.0, t0;
    (void)argc;
    /* every emitted scorer, bit for bit, on all rows and on a count that ends mid-block */
    for (v = 0; v < N_EMITTED; v++) {
        size_t bad = 0;
        emitted[v](rows, n - 5, out);
        for (i = 0; i < n - 5; i++) bad += memcmp(&out[i], &ref[exact_ref[v]][i], 8) != 0;
        emitted[v](rows, n, out);
        for (i = 0; i < n; i++) bad += memcmp(&out[i], &ref[exact_ref[v]][i], 8) != 0;
        printf("check\t%%s\t%%zu\n", emitted_names[v], bad);
    }
    for (v = 0; v < 4; v++) {
        /* the ordinary rows (the edge rows, first, are where a hand loop goes wrong) */
        double gap = 0.0;
        size_t wrong = 0;
        hand[v](rows, n, out);
        for (i = 0; i < EDGE_ROWS; i++) wrong += !(fabs(out[i] - ref[0][i]) < 1e-9);
        for (i = EDGE_ROWS; i < n; i++) gap = fmax(gap, fabs(out[i] - ref[0][i]));
        printf("gap\t%%s\t%%g\t%%zu\n", hand_names[v], gap, wrong);
    }
    for (r = 0; r < repeats; r++) {
        t0 = now(); sink += read_floor_o2(rows, n);
        printf("time\t%%d\tfloor -O2\t%%.9f\n", r, now() - t0);
        t0 = now(); sink += read_floor_o3(rows, n);
        printf("time\t%%d\tfloor -O3 native\t%%.9f\n", r, now() - t0);
        for (v = 0; v < N_EMITTED; v++) {
            t0 = now(); emitted[v](rows, n, out);
            printf("time\t%%d\t%%s\t%%.9f\n", r, emitted_names[v], now() - t0);
            sink += out[n / 2];
        }
        for (v = 0; v < 4; v++) {
            t0 = now(); hand[v](rows, n, out);
            printf("time\t%%d\t%%s\t%%.9f\n", r, hand_names[v], now() - t0);
            sink += out[n / 3];
        }
    }
    printf("sink\t%%g\n", sink);
    return 0;
}
"""


# The first 2 * len(EDGE) rows: each value in every column, then in one column.
EDGE = (np.nan, np.inf, -np.inf, 1e308, -1e308, 5e-324, -0.0, 1e300)


def fitted_model():
    rng = np.random.default_rng(30)
    n = 6000
    names = [f"probe_{j:02d}_temp_c" for j in range(N_FEATURES)]
    centres = rng.uniform(-30.0, 90.0, N_FEATURES)
    spreads = rng.uniform(0.5, 12.0, N_FEATURES)
    X = pd.DataFrame(centres + spreads * rng.normal(size=(n, N_FEATURES)), columns=names)
    true = rng.normal(0.0, 0.4, N_FEATURES)
    logit = ((X - centres) / spreads).to_numpy() @ true - 1.0
    y = (rng.uniform(size=n) < 1.0 / (1.0 + np.exp(-logit))).astype(int)
    X = X.mask(rng.uniform(size=X.shape) < 0.01)
    est = make_pipeline(SimpleImputer(strategy="median"), StandardScaler(),
                        LogisticRegression(max_iter=5000)).fit(X, y)
    return est, scorewright.freeze(est, name="bench"), centres, spreads


def bench_rows(n: int, centres, spreads) -> np.ndarray:
    rng = np.random.default_rng(1)
    rows = centres + spreads * rng.normal(size=(n, N_FEATURES))
    rows[rng.uniform(size=rows.shape) < 0.01] = np.nan
    for i, value in enumerate(EDGE):
        rows[i, :] = value
        rows[len(EDGE) + i, i % N_FEATURES] = value
    return rows


def _fitted_header(est) -> str:
    imputer, scaler, logit = est[0], est[1], est[2]

    def array(name, values):
        return f"static const double {name}[NF] = {{{', '.join(float(v).hex() for v in values)}}};"

    return "\n".join([
        "#define NF %d" % N_FEATURES,
        array("mean", scaler.mean_), array("scale", scaler.scale_),
        array("coef", logit.coef_[0]), array("fill", imputer.statistics_),
        f"static const double intercept = {float(logit.intercept_[0]).hex()};", ""])


def measure(rows: int = 1_000_000, repeats: int = 11, cc: str = "gcc") -> dict:
    """Build the one program, check the bits, time; the raw figures."""
    est, model, centres, spreads = fitted_model()
    data = bench_rows(rows, centres, spreads)
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        (work / "rows.bin").write_bytes(data.astype("<f8").tobytes())
        for kind in ("libm", "portable"):
            plan = dataclasses.replace(build_plan(model, "double"), exp_kind=kind)
            want = run_matrix(lower(plan), data)["probability_1"]
            (work / f"ref_{kind}.bin").write_bytes(want.astype("<f8").tobytes())
        (work / "fitted.h").write_text(_fitted_header(est))
        (work / "hand.c").write_text(HAND)
        objects = []
        base = [cc, "-std=c99", "-ffp-contract=off", "-I", str(work), "-c"]
        for suffix, flags in (("_o2", O2), ("_o3", O3)):
            obj = work / f"hand{suffix}.o"
            subprocess.run([*base, *flags, f"-DSUFFIX={suffix}", "-o", str(obj),
                            str(work / "hand.c")], check=True)
            objects.append(obj)
        prefixes = []
        for v, (name, exp, flags) in enumerate(VARIANTS):
            prefix = f"bench{v}"
            options = {"prefix": prefix, **({"portable_exp": True} if exp == "portable" else {})}
            for art in emitter("c")(model, options):
                (work / art.name).write_bytes(art.content)
            obj = work / f"{prefix}.o"
            subprocess.run([*base, *flags, "-Wall", "-Wextra", "-Werror", "-o", str(obj),
                            str(work / f"{prefix}.c")], check=True)
            objects.append(obj)
            prefixes.append(prefix)
        (work / "main.c").write_text(MAIN % {
            "includes": "\n".join(f'#include "{p}.h"' for p in prefixes),
            "emitted": ", ".join(f"{p}_predict_batch" for p in prefixes),
            "refs": ", ".join("1" if exp == "portable" else "0" for _, exp, _ in VARIANTS),
            "names": ", ".join(f'"{name}"' for name, _, _ in VARIANTS),
            "edge_rows": 2 * len(EDGE)})
        exe = work / "bench"
        subprocess.run([cc, "-std=gnu99", "-O2", "-I", str(work), "-o", str(exe),
                        str(work / "main.c"), *map(str, objects), "-lm"], check=True)
        proc = subprocess.run([str(exe), str(rows), str(repeats)], cwd=work,
                              capture_output=True, text=True, check=True)
    checks, gaps, times = {}, {}, {}
    for line in proc.stdout.splitlines():
        parts = line.split("\t")
        if parts[0] == "check":
            checks[parts[1]] = int(parts[2])
        elif parts[0] == "gap":
            gaps[parts[1]] = (float(parts[2]), int(parts[3]))
        elif parts[0] == "time":
            times.setdefault(parts[2], {})[int(parts[1])] = float(parts[3])
    wrong = {name: bad for name, bad in checks.items() if bad}
    if wrong:
        raise SystemExit(f"emitted scorer(s) differ from the reference: {wrong}")
    return {"rows": rows, "repeats": repeats, "cc": cc, "checks": checks, "gaps": gaps,
            "times": times}


def _floor_of(name: str) -> str:
    return "floor -O3 native" if "-O3" in name else "floor -O2"


def ratio(raw: dict, name: str, base: str | None = None) -> float:
    """The median over repeats of time / the baseline's time in the same repeat."""
    times = raw["times"]
    base = base or _floor_of(name)
    return statistics.median(times[name][r] / times[base][r] for r in times[name])


def results(quick: bool = False) -> list[dict]:
    # the rows must outgrow the caches (1M x 30 doubles: 240 MB), quick or not
    raw = measure(rows=1_000_000, repeats=3 if quick else 11)
    out = []
    for target, name, hand, goal, bound in GOALS:
        floor = _floor_of(name)
        note = (f"{raw['rows']:,} rows, median of {raw['repeats']} interleaved repeats, "
                f"bit-identical to the reference; floor "
                f"{statistics.median(raw['times'][floor].values()) * 1e3:.1f} ms; careful "
                f"hand loop {ratio(raw, hand):.2f}x; {bound}")
        out.append({"target": target, "baseline": "memory-read floor",
                    "ratio": round(ratio(raw, name), 2), "goal": goal, "note": note})
    return out


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=11)
    parser.add_argument("--cc", default="gcc")
    parser.add_argument("--quick", action="store_true", help="3 repeats")
    args = parser.parse_args()
    if args.quick:
        args.repeats = 3
    raw = measure(args.rows, args.repeats, args.cc)
    print(f"{args.rows:,} rows x {N_FEATURES} numeric features, {args.cc}, -ffp-contract=off, "
          f"median of {args.repeats} interleaved repeats (ratio: median of per-repeat ratios "
          f"to the floor built with the same flags)")
    for name in ("floor -O2", "floor -O3 native"):
        print(f"  {name:30s} {statistics.median(raw['times'][name].values()) * 1e3:8.2f} ms")
    for name in raw["times"]:
        if name.startswith("floor"):
            continue
        ms = statistics.median(raw["times"][name].values()) * 1e3
        if name in raw["checks"]:
            exact = "bit-identical on every row"
        else:
            gap, wrong = raw["gaps"][name]
            exact = (f"max |p - reference| {gap:.2g} on ordinary rows; "
                     f"{wrong} of {2 * len(EDGE)} edge rows wrong")
        print(f"  {name:30s} {ms:8.2f} ms  {ratio(raw, name):5.2f}x floor   {exact}")
    print("goals:")
    for target, name, _, goal, _ in GOALS:
        r = ratio(raw, name)
        print(f"  {target:45s} {r:5.2f}x floor  (goal <= {goal}x: "
              f"{'met' if r <= goal else 'not met'})")


if __name__ == "__main__":
    main()
