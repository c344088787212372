"""Transforms (log, log1p, sqrt) as a numeric feature's first step: the log written once in
primitives (so every target computes the same bits), checked against mpmath; frozen from
scikit-learn's FunctionTransformer and statsmodels formulas, checked against those
libraries' own predictions; verified on the real runtimes of the targets that render the
scoring program."""

from __future__ import annotations

import json
import math
import random
import warnings

import mpmath as mp
import numpy as np
import pandas as pd
import pytest
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, PoissonRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import FunctionTransformer, MaxAbsScaler, StandardScaler

import scorewright
from scorewright.errors import ModelFileError, ScorewrightError
from scorewright.freeze import freeze_checked
from scorewright.model import canonical_sha256, parse_model
from scorewright.plan import build_plan
from scorewright.program import (LOG_R, SCALAR, Const, _Builder, _lower_log, _lower_log1p,
                                 fit_log_coefficients, run_row)
from scorewright.reference import program_of, score_row


def _run(lowering, x, single=False):
    """One lowering run by the scalar op table (what every target computes)."""
    b = _Builder()
    out = lowering(b, Const(x), single)
    env = {}
    for op in b.ops:
        args = [a.value if isinstance(a, Const) else env[a] for a in op.args]
        env[op.dest] = SCALAR[op.op](*args)
    return env[out] if isinstance(out, str) else out.value


def _ulps(got, want) -> float:
    return float(abs(mp.mpf(got) - want) / mp.mpf(math.ulp(float(want))))


def test_log_coefficients_are_refitted_by_mpmath():
    assert [float.fromhex(c) for c in fit_log_coefficients()] == list(LOG_R)


def test_log_is_within_one_ulp_of_mpmath():
    """Over every binade of the doubles, subnormals included (measured 0.74 ULP)."""
    rng = random.Random(2)
    xs = ([2.0 ** rng.uniform(-1074, 1023) for _ in range(3000)]
          + [rng.uniform(0.5, 2.0) for _ in range(3000)]
          + [5e-324, 2.0 ** -1022, 0.5, 1.0, 2.0, math.sqrt(2.0), 1e300, 1 - 2 ** -53,
             1 + 2 ** -52])
    with mp.workprec(200):
        worst = 0.0
        for x in xs:
            want = mp.log(mp.mpf(x))
            got = _run(_lower_log, x)
            if want == 0:
                assert got == 0.0
                continue
            worst = max(worst, _ulps(got, want))
    assert worst <= 1.0, worst


def test_log1p_is_within_three_ulps_of_mpmath():
    """log(u) * (x / (u - 1)) with u = 1 + x (measured 2.2 ULP), x itself where u is 1."""
    rng = random.Random(3)
    xs = ([rng.uniform(-1, 1) * 10 ** rng.uniform(-20, 0) for _ in range(3000)]
          + [2.0 ** rng.uniform(-60, 996) for _ in range(1000)]
          + [-1 + 2 ** -53, -0.5, 1e-300, -1e-300, 0.0, 5e-324])
    with mp.workprec(200):
        worst = 0.0
        for x in xs:
            want = mp.log1p(mp.mpf(x))
            got = _run(_lower_log1p, x)
            if want == 0:
                assert got == 0.0
                continue
            worst = max(worst, _ulps(got, want))
    assert worst <= 3.0, worst


def test_float_log_reaches_float_subnormals():
    """The float plan's log: scaled by float's exponent range (2^-126, 2^23 for
    subnormals), evaluated here in double as the float targets' reference is."""
    for x in (float(np.float32(1e-45)), float(np.float32(1e-40)), 2.0 ** -126, 1e36, 3.0):
        assert abs(_run(_lower_log, x, True) - math.log(x)) <= 4e-16 * abs(math.log(x))


def _frame(n=600, seed=0):
    rng = np.random.default_rng(seed)
    x = pd.DataFrame({"runtime_h": rng.lognormal(5, 1, n),
                      "door_openings": rng.poisson(20, n).astype(float) + 1.0,
                      "coil_area": rng.gamma(3, 2, n)})
    x.loc[rng.random(n) < 0.05, "runtime_h"] = np.nan
    logit = (np.log1p(x.runtime_h.fillna(150)) - 5 + 0.1 * (x.door_openings - 20)
             - 0.3 * (np.sqrt(x.coil_area) - 2.4))
    y = (logit + rng.logistic(size=n) > 0).astype(int)
    return x, y


def _pipeline(head=None):
    ct = ColumnTransformer([
        ("runtime", make_pipeline(SimpleImputer(strategy="median"),
                                  FunctionTransformer(np.log1p), StandardScaler()),
         ["runtime_h"]),
        ("doors", make_pipeline(FunctionTransformer(np.log), StandardScaler()),
         ["door_openings"]),
        ("coil", FunctionTransformer(np.sqrt), ["coil_area"])])
    return make_pipeline(ct, head or LogisticRegression())


def _rows(frame):
    return [{k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in r.items()}
            for r in frame.to_dict("records")]


def test_function_transformers_freeze_and_agree_with_scikit_learn():
    """The freeze self-check holds the frozen model to predict_proba to 1e-12, on the data
    and on derived rows (domain edges among them); and here once more, explicitly."""
    x, y = _frame()
    pipe = _pipeline().fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert [f.scaling[0].op for f in model.features] == ["log1p", "log", "sqrt"]
    assert checked.compared >= len(x)
    assert any("runtime_h's values <= -1" in r for r in checked.rules)
    plan = build_plan(model)
    want = pipe.predict_proba(x)[:, 1]
    got = np.array([score_row(plan, r).probabilities[1] for r in _rows(x)])
    assert np.max(np.abs(got - want)) <= 1e-12


def test_a_value_outside_the_domain_scores_as_missing():
    """The stated rule, checked against scikit-learn: runtime_h = -5 (log1p undefined)
    scores as scikit-learn scores runtime_h missing (the imputer's median, then log1p)."""
    x, y = _frame()
    pipe = _pipeline().fit(x, y)
    plan = build_plan(scorewright.freeze(pipe, check_rows=x))
    row = x.iloc[[3]].copy()
    row["runtime_h"] = np.nan
    want = pipe.predict_proba(row)[0, 1]
    base = _rows(x.iloc[[3]])[0]
    for bad in (-5.0, -1.0):
        got = score_row(plan, dict(base, runtime_h=bad)).probabilities[1]
        assert abs(got - want) <= 1e-12
    # door_openings has no imputer: a value <= 0 is missing, design value 0.0
    assert score_row(plan, dict(base, door_openings=0.0)) == score_row(
        plan, dict(base, door_openings=None))


def test_a_poisson_head_with_transforms_agrees():
    x, _ = _frame(seed=4)
    counts = np.random.default_rng(5).poisson(np.exp(0.3 * np.log(x.door_openings)))
    pipe = _pipeline(PoissonRegressor(alpha=1e-4)).fit(x, counts)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert model.head.link == "log" and checked.compared >= len(x)


@pytest.mark.parametrize("make, words", [
    (lambda: make_pipeline(FunctionTransformer(np.cbrt), LogisticRegression()),
     "FunctionTransformer(cbrt)"),
    (lambda: make_pipeline(MaxAbsScaler(), FunctionTransformer(np.log1p),
                           LogisticRegression()), "comes after scaling"),
    (lambda: make_pipeline(FunctionTransformer(np.log, kw_args={"out": None}),
                           LogisticRegression()), "without kw_args"),
])
def test_other_functions_are_refused_in_one_line(make, words):
    x, y = _frame()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe = make().fit(x.fillna(1.0), y)
    with pytest.raises(ScorewrightError) as err:
        scorewright.freeze(pipe)
    assert words in str(err.value) and "\n" not in str(err.value)


def test_statsmodels_formula_transforms_agree():
    """np.log, np.sqrt and np.log1p in a patsy formula (the Fair data statsmodels ships),
    held to results.predict to 1e-12 by the freeze self-check."""
    sm = pytest.importorskip("statsmodels.api")
    smf = pytest.importorskip("statsmodels.formula.api")
    data = sm.datasets.fair.load_pandas().data
    results = smf.glm("affairs ~ np.log(age) + np.sqrt(yrs_married) + np.log1p(children)"
                      " + C(religious)", data=data, family=sm.families.Poisson()).fit()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model, checked = freeze_checked(results, check_rows=data.head(300))
    assert checked.compared >= 300
    ops = {f.name: f.scaling[0].op for f in model.features if getattr(f, "scaling", ())}
    assert ops == {"age": "log", "yrs_married": "sqrt", "children": "log1p"}


def _resealed(doc):
    doc["sha256"] = canonical_sha256(doc)
    return json.dumps(doc)


def test_model_file_holds_transforms_in_version_2():
    x, y = _frame()
    model = scorewright.freeze(_pipeline().fit(x, y), check_rows=x)
    doc = json.loads(model.to_json())
    assert doc["format_version"] == 2
    assert doc["features"][0]["scaling"][0] == {"op": "log1p"}
    assert parse_model(model.to_json()).features == model.features
    bad = json.loads(model.to_json())
    bad["format_version"] = 1
    with pytest.raises(ModelFileError, match="log1p transform of feature 'runtime_h' needs"):
        parse_model(_resealed(bad))
    bad = json.loads(model.to_json())
    bad["features"][0]["scaling"].reverse()
    with pytest.raises(ModelFileError, match="must be the first step"):
        parse_model(_resealed(bad))
    bad = json.loads(model.to_json())
    bad["features"][0]["missing"]["value"] = -3.0
    with pytest.raises(ModelFileError, match="outside the domain of log1p"):
        parse_model(_resealed(bad))


def test_transforms_verify_on_the_targets_that_render_the_program(tmp_path):
    """Python, C (glibc and portable exp), Java, float C and Cortex-M3 firmware; the log is
    the program's, so the margins are bit-identical on every one of them."""
    from scorewright.verify.harness import build_targets

    x, y = _frame()
    model = scorewright.freeze(_pipeline().fit(x, y), check_rows=x)
    report = build_targets(model, tmp_path, data=None, n_random=300,
                           targets=["python", "c-double", "c-double-portable-exp",
                                    "java-portable-exp", "c-float", "c-cortex-m3",
                                    "onnx-double", "onnx-float-reference",
                                    "sql-sqlite", "sql-duckdb"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]



def test_a_missing_transform_input_is_never_compared():
    """Every input missing: no comparison meets a missing value (the Python target's None
    would raise), every output finite."""
    x, y = _frame()
    plan = build_plan(scorewright.freeze(_pipeline().fit(x, y), check_rows=x))
    out = run_row(program_of(plan), {"runtime_h": None, "door_openings": None,
                                     "coil_area": None})
    assert all(math.isfinite(v) for v in out.values())
