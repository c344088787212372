"""The emitted C batch scorer vs a hand-written C loop vs a memory-read floor, in one binary.

The model: median imputation, standardization and a binary logistic regression over
30 numeric sensor channels of a refrigeration compressor (invented data, fixed
seed). The hand loop is what one would write by hand from the fitted arrays: fill
NaN, subtract the mean, divide by the scale, multiply-accumulate, 1/(1+exp(-s)),
with none of the plan's guards. The floor only sums every input value. All three
are compiled at -O2 into the same program and timed interleaved on the same rows;
the ratios are of medians.

    python bench/bench_c.py [--rows 1000000] [--repeats 11] [--cc gcc]
"""

from __future__ import annotations

import argparse
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

N_FEATURES = 30

MAIN = r"""
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <time.h>
#include "bench.h"

#define NF %(nf)d
static const double mean[NF] = {%(mean)s};
static const double scale[NF] = {%(scale)s};
static const double coef[NF] = {%(coef)s};
static const double fill[NF] = {%(fill)s};
static const double intercept = %(intercept)s;

/* What one writes by hand from the fitted arrays. */
__attribute__((noinline))
static void hand_loop(const double *rows, size_t n, double *out)
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

/* The floor: read every input value once. */
__attribute__((noinline))
static double read_floor(const double *rows, size_t n)
{
    double s0 = 0.0, s1 = 0.0, s2 = 0.0, s3 = 0.0;
    size_t i;
    for (i = 0; i + 4 <= n * NF; i += 4) {
        s0 += rows[i]; s1 += rows[i + 1]; s2 += rows[i + 2]; s3 += rows[i + 3];
    }
    return s0 + s1 + s2 + s3;
}

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static int cmp(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

int main(int argc, char **argv)
{
    size_t n = (size_t)atol(argv[2]), i;
    int repeats = atoi(argv[3]), r;
    double *rows = malloc(n * NF * sizeof(double));
    double *out = malloc(n * sizeof(double));
    double *t_emit = malloc(repeats * sizeof(double));
    double *t_hand = malloc(repeats * sizeof(double));
    double *t_floor = malloc(repeats * sizeof(double));
    double sink = 0.0, gap = 0.0;
    FILE *f = fopen(argv[1], "rb");
    if (!f || fread(rows, sizeof(double) * NF, n, f) != n) return 2;
    fclose(f);
    for (r = 0; r < repeats; r++) {
        double t0 = now();
        sink += read_floor(rows, n);
        t_floor[r] = now() - t0;
        t0 = now();
        bench_predict_batch(rows, n, out);
        t_emit[r] = now() - t0;
        sink += out[n / 2];
        t0 = now();
        hand_loop(rows, n, out);
        t_hand[r] = now() - t0;
        sink += out[n / 3];
    }
    /* The two scorers agree (the hand loop differs only in summation order and guards). */
    bench_predict_batch(rows, n, out);
    {
        double *again = malloc(n * sizeof(double));
        hand_loop(rows, n, again);
        for (i = 0; i < n; i++) gap = fmax(gap, fabs(out[i] - again[i]));
        free(again);
    }
    qsort(t_emit, repeats, sizeof(double), cmp);
    qsort(t_hand, repeats, sizeof(double), cmp);
    qsort(t_floor, repeats, sizeof(double), cmp);
    printf("%%.6f %%.6f %%.6f %%g %%g\n", t_emit[repeats / 2], t_hand[repeats / 2],
           t_floor[repeats / 2], gap, sink);
    return 0;
}
"""


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


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--repeats", type=int, default=11)
    parser.add_argument("--cc", default="gcc")
    args = parser.parse_args()
    est, model, centres, spreads = fitted_model()
    imputer, scaler, logit = est[0], est[1], est[2]

    def literals(values):
        return ", ".join(float(v).hex() for v in values)

    rng = np.random.default_rng(1)
    rows = centres + spreads * rng.normal(size=(args.rows, N_FEATURES))
    rows[rng.uniform(size=rows.shape) < 0.01] = np.nan
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        for art in emitter("c")(model, {"prefix": "bench"}):
            (work / art.name).write_bytes(art.content)
        (work / "main.c").write_text(MAIN % {
            "nf": N_FEATURES, "mean": literals(scaler.mean_), "scale": literals(scaler.scale_),
            "coef": literals(logit.coef_[0]), "fill": literals(imputer.statistics_),
            "intercept": float(logit.intercept_[0]).hex()})
        (work / "rows.bin").write_bytes(rows.astype("<f8").tobytes())
        exe = work / "bench"
        subprocess.run([args.cc, "-std=gnu99", "-O2", "-ffp-contract=off", "-I", str(work),
                        "-o", str(exe), str(work / "main.c"), str(work / "bench.c"), "-lm"],
                       check=True)
        out = subprocess.run([str(exe), str(work / "rows.bin"), str(args.rows),
                              str(args.repeats)], capture_output=True, text=True, check=True)
    t_emit, t_hand, t_floor, gap, _ = (float(x) for x in out.stdout.split())
    print(f"{args.rows} rows x {N_FEATURES} numeric features, {args.cc} -O2, "
          f"median of {args.repeats}")
    print(f"  read floor      {t_floor * 1e3:8.1f} ms")
    print(f"  emitted batch   {t_emit * 1e3:8.1f} ms   {t_emit / t_floor:5.2f} x floor")
    print(f"  hand-written    {t_hand * 1e3:8.1f} ms   {t_hand / t_floor:5.2f} x floor")
    print(f"  emitted / hand  {t_emit / t_hand:5.2f}")
    print(f"  max |p_emitted - p_hand| = {gap:.3g}")


if __name__ == "__main__":
    main()
