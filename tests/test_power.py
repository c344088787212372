"""Power transforms: scikit-learn's PowerTransformer (Yeo-Johnson and Box-Cox, with and
without standardize) frozen as a format-3 step with its fitted lambda, lowered into the
program's own log, log1p and expm1 (primitives only, so every target computes the same
bits). The outside source: scikit-learn's PowerTransformer.transform (scipy's yeojohnson
and boxcox) to 1e-13 relative, and the fitted pipelines' predict_proba / predict to 1e-12
(the freeze self-check), on the data, on missing values and far from it."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import PowerTransformer

import scorewright
from scorewright.errors import ModelFileError
from scorewright.freeze import freeze_checked
from scorewright.model import canonical_sha256, parse_model
from scorewright.plan import build_plan
from scorewright.reference import design_value, encode_rows, score_matrix


def _frame(n=500, seed=0):
    rng = np.random.default_rng(seed)
    x = pd.DataFrame({"balance": rng.lognormal(6, 1.5, n), "arrears": 1.0 / rng.uniform(
        0.02, 1, n) + 2.0, "drift": rng.normal(0, 3, n)})
    x.loc[rng.random(n) < 0.05, "balance"] = np.nan
    y = ((np.log(x.balance.fillna(400)) - 6 + x.drift / 3 + rng.logistic(size=n)) > 0)
    return x, y.astype(int)


def _pipeline(method, standardize=True):
    cols = ["balance", "arrears"] + (["drift"] if method == "yeo-johnson" else [])
    return make_pipeline(SimpleImputer(strategy="median"),
                         PowerTransformer(method=method, standardize=standardize),
                         LogisticRegression(max_iter=3000)), cols


@pytest.mark.parametrize("method, standardize", [("yeo-johnson", True), ("box-cox", True),
                                                 pytest.param("yeo-johnson", False,
                                                              marks=pytest.mark.slow),
                                                 pytest.param("box-cox", False,
                                                              marks=pytest.mark.slow)])
def test_power_transforms_freeze_and_agree_with_scikit_learn(method, standardize):
    x, y = _frame()
    pipe, cols = _pipeline(method, standardize)
    pipe.fit(x[cols], y)
    model, checked = freeze_checked(pipe, check_rows=x[cols])
    assert checked.compared >= len(x) and model.to_document()["format_version"] == 3
    plan = build_plan(model)
    far = pd.DataFrame({"balance": [1e-12, 1e9, 0.5], "arrears": [1e-9, 1e7, 2.0],
                        "drift": [-1e3, 1e3, 0.0]})[cols]
    got = score_matrix(plan, encode_rows(plan, far.to_dict("records")))["probabilities"]
    assert np.max(np.abs(got - pipe.predict_proba(far))) <= 1e-12
    # each design value against PowerTransformer.transform (scipy's functions)
    pt = pipe[1]
    raw = np.array([[v, w, 0.5][:len(cols)] for v, w in
                    ((0.25, 0.5), (1.0, 2.0), (3.5, 7.0), (1e3, 1e4), (1e6, 3e5))])
    want = pt.transform(pd.DataFrame(raw, columns=cols))
    for j, inp in enumerate(plan.inputs):
        got = np.array([design_value(inp, v) for v in raw[:, j]])
        np.testing.assert_allclose(got, want[:, j], rtol=1e-13, atol=1e-15)


def test_yeo_johnson_on_both_sides_of_zero():
    """Negative values take the 2 - lambda branch (scipy's yeojohnson): held to
    PowerTransformer.transform on both sides of zero and at zero itself."""
    x, _ = _frame()
    pt = PowerTransformer(standardize=False).fit(x[["drift"]])
    model = scorewright.freeze(make_pipeline(pt, Ridge()).fit(x[["drift"]], x.drift * 2),
                               check_rows=x[["drift"]])
    (inp,) = build_plan(model).inputs
    raw = np.array([-1e3, -7.5, -1.0, -1e-300, -0.0, 0.0, 1e-300, 1.0, 7.5, 1e3])
    want = pt.transform(pd.DataFrame({"drift": raw}))[:, 0]
    got = np.array([design_value(inp, v) for v in raw])
    np.testing.assert_allclose(got, want, rtol=1e-13, atol=1e-300)


def test_box_cox_rules_outside_its_domain():
    """scikit-learn refuses a Box-Cox input <= 0; the frozen model treats it as missing
    (the imputer's fill). With a negative lambda, x^lambda grows without bound near 0: a
    positive x below the guard's point scores as that point (a stated rule)."""
    x, _ = _frame()
    pipe = make_pipeline(SimpleImputer(strategy="median"), PowerTransformer(method="box-cox"),
                         Ridge()).fit(x[["arrears"]], np.log(x.arrears))
    model = scorewright.freeze(pipe, check_rows=x[["arrears"]])
    lam = model.features[0].scaling[0].value
    assert lam < 0
    with pytest.raises(ValueError, match="strictly positive"):
        pipe.predict(pd.DataFrame({"arrears": [0.0]}))
    assert any("<= 0" in n for n in model.provenance["notes"])
    plan = build_plan(model)
    (inp,) = plan.inputs
    assert design_value(inp, 0.0) == design_value(inp, None) == design_value(inp, -3.0)
    assert design_value(inp, 1e-300) == design_value(inp, 5e-324)


def test_model_file_holds_power_steps_in_version_3():
    x, y = _frame()
    pipe, cols = _pipeline("box-cox")
    model = scorewright.freeze(pipe.fit(x[cols], y), check_rows=x[cols])
    doc = json.loads(model.to_json())
    assert doc["features"][0]["scaling"][0]["op"] == "box_cox"
    assert parse_model(model.to_json()).features == model.features

    def resealed(d):
        d["sha256"] = canonical_sha256(d)
        return json.dumps(d)

    for mutate, words in [
            (lambda d: d.update(format_version=2), "needs format_version 3"),
            (lambda d: d["features"][0]["scaling"].reverse(), "must be the first step"),
            (lambda d: d["features"][0]["missing"].update(value=-1.0), "outside the domain"),
            (lambda d: d["features"][0]["scaling"][0].update(value="x"), "expected a number")]:
        bad = json.loads(model.to_json())
        mutate(bad)
        with pytest.raises(ModelFileError, match=words):
            parse_model(resealed(bad))


@pytest.mark.slow
def test_power_transforms_verify_on_python(tmp_path):
    """The Python target alone (every family: the test below); both under --runslow (the
    default tier holds the transform and the predictions to scikit-learn above)."""
    from scorewright.verify.harness import build_targets

    x, y = _frame()
    pipe, cols = _pipeline("yeo-johnson")
    model = scorewright.freeze(pipe.fit(x[cols], y), check_rows=x[cols])
    report = build_targets(model, tmp_path, data=None, n_random=100, targets=["python"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]


@pytest.mark.slow
@pytest.mark.parametrize("method", ["yeo-johnson", "box-cox"])
def test_power_transforms_verify_on_every_family(method, tmp_path, postgres_dsn):
    from scorewright.verify.harness import build_targets

    x, y = _frame()
    pipe, cols = _pipeline(method)
    model = scorewright.freeze(pipe.fit(x[cols], y), check_rows=x[cols])
    report = build_targets(model, tmp_path, data=None, n_random=300,
                           targets=["python", "c-double", "c-double-portable-exp", "java",
                                    "onnx-double", "onnx-double-reference", "sql-sqlite",
                                    "sql-duckdb", "sql-postgres", "sql-spark"],
                           options={"sql": {"dsn": postgres_dsn}})
    assert report.ok, [(r.profile.name, r.message) for r in report.results]
    assert math.isfinite(model.features[0].scaling[0].value)
