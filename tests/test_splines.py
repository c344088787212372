"""Splines: scikit-learn's SplineTransformer (every extrapolation, include_bias, degrees 1-3,
uniform and quantile knots) frozen as a spline step and basis columns, lowered into
comparisons, selections and arithmetic only (scipy's de Boor recursion on the interval the
knots select), so every target gets it. The outside sources: scikit-learn's own
SplineTransformer.transform (which evaluates scipy's BSpline) for the basis values, bit for
bit, and the fitted pipelines' predict_proba / predict to 1e-12 (the freeze self-check),
on every knot and one double either side, far outside the knots and on missing values."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, PoissonRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import PolynomialFeatures, SplineTransformer, StandardScaler

import scorewright
from scorewright.errors import ModelFileError, ScorewrightError
from scorewright.freeze import freeze_checked
from scorewright.model import canonical_sha256, parse_model
from scorewright.plan import build_plan
from scorewright.program import SCALAR, Const, _Builder, _lower_numeric
from scorewright.reference import encode_rows, score_matrix

RULES = ("error", "constant", "linear", "continue", "periodic")


def _frame(n=400, seed=0):
    rng = np.random.default_rng(seed)
    x = pd.DataFrame({"hour": rng.uniform(0, 24, n), "load_pct": rng.gamma(2.0, 15.0, n)})
    y = ((np.sin(x.hour / 24 * 2 * np.pi) + (x.load_pct - 30) / 20
          + rng.logistic(size=n)) > 0).astype(int)
    return x, y


def _pipeline(rule, degree, include_bias=True, missing="zeros"):
    return make_pipeline(ColumnTransformer([
        ("u", SplineTransformer(n_knots=5, degree=degree, extrapolation=rule,
                                include_bias=include_bias, handle_missing=missing),
         ["hour"]),
        ("q", SplineTransformer(n_knots=4, degree=degree, knots="quantile",
                                extrapolation=rule, include_bias=not include_bias,
                                handle_missing=missing), ["load_pct"])]),
        LogisticRegression(max_iter=2000))


def _edge_values(model, name):
    step = model.feature(name).scaling[0]
    lo, hi = step.spline_range()
    out = []
    for knot in step.knots:
        out += [knot, math.nextafter(knot, math.inf), math.nextafter(knot, -math.inf)]
    return out + [lo - 1e3 * (hi - lo), hi + 1e3 * (hi - lo), lo - 7.25, hi + 7.25]


def _basis_values(plan, name, raw):
    """The program's basis values of one spline input for raw values (its own lowering,
    run by the scalar op table)."""
    inp = next(i for i in plan.inputs if i.name == name)
    b = _Builder()
    _lower_numeric(b, inp)
    rows = []
    for x in raw:
        env = {}
        for op in b.ops:
            args = [a.value if isinstance(a, Const) else env[a] for a in op.args]
            env[op.dest] = x if op.op == "read_real" else SCALAR[op.op](*args)
        rows.append([env[v] if isinstance(v, str) else v.value for v in b.bases[inp.index]])
    return np.array(rows)


@pytest.mark.parametrize("rule", RULES)
@pytest.mark.parametrize("degree", (pytest.param(1, marks=pytest.mark.slow),
                                    pytest.param(2, marks=pytest.mark.slow), 3))
def test_basis_values_are_scipys_bits(rule, degree):
    """Each basis value the program computes equals SplineTransformer.transform's (scipy's
    BSpline) bit for bit: on every knot and one double either side, inside and far
    outside the knots (where scikit-learn can score them)."""
    x, y = _frame()
    for knots in ("uniform", "quantile"):
        st = SplineTransformer(n_knots=5, degree=degree, knots=knots, extrapolation=rule,
                               handle_missing="zeros").fit(x[["load_pct"]])
        model = scorewright.freeze(make_pipeline(st, LogisticRegression()).fit(
            x[["load_pct"]], y), check_rows=x[["load_pct"]])
        plan = build_plan(model)
        raw = np.array(_edge_values(model, "load_pct"))
        if rule == "error":
            lo, hi = model.features[0].scaling[0].spline_range()
            raw = raw[(raw >= lo) & (raw <= hi)]
        want = st.transform(pd.DataFrame({"load_pct": raw}))
        got = _basis_values(plan, "load_pct", raw)
        assert got.shape == want.shape
        assert np.array_equal(got, want), (knots, np.argwhere(got != want)[:3])


# the default tier: degree 3 with every rule, degree 2 with two; --runslow: all
AGREEMENT = [pytest.param(rule, degree, id=f"{degree}-{rule}", marks=() if degree == 3 or (
    degree == 2 and rule in ("linear", "periodic")) else pytest.mark.slow)
    for degree in (1, 2, 3) for rule in RULES]


@pytest.mark.parametrize("rule, degree", AGREEMENT)
def test_every_extrapolation_freezes_and_agrees_with_scikit_learn(rule, degree):
    """Degrees 1-3, uniform and quantile knots, with and without the bias column: the
    self-check holds predict_proba to 1e-12 on the data and on every knot and one double
    either side; far outside the knots too (where scikit-learn scores them)."""
    x, y = _frame()
    pipe = _pipeline(rule, degree, include_bias=degree != 2).fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert model.to_document()["format_version"] == 3
    assert checked.compared >= len(x)
    if rule != "error":  # scikit-learn raises outside the knots: test_error_rule
        far = pd.DataFrame({"hour": _edge_values(model, "hour")[-4:] * 2,
                            "load_pct": _edge_values(model, "load_pct")[-4:] * 2})
        plan = build_plan(model)
        got = score_matrix(plan, encode_rows(plan, far.to_dict("records")))["probabilities"]
        assert np.max(np.abs(got - pipe.predict_proba(far))) <= 1e-12


def test_error_rule_reads_outside_the_knots_as_missing():
    """scikit-learn's extrapolation='error' raises on a value outside the knots; the frozen
    model's stated rule treats it as missing (basis values 0.0, or the imputer's fill)."""
    x, y = _frame()
    pipe = _pipeline("error", 3).fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert checked.unscored > 0  # the outside rows the self-check derived
    assert any("outside its knots" in n for n in model.provenance["notes"])
    lo, hi = model.feature("hour").scaling[0].spline_range()
    with pytest.raises(ValueError, match="beyond the limits of the knots"):
        pipe.predict_proba(pd.DataFrame({"hour": [hi + 1.0], "load_pct": [30.0]}))
    plan = build_plan(model)
    rows = [{"hour": v, "load_pct": 30.0} for v in
            (None, math.nextafter(lo, -math.inf), math.nextafter(hi, math.inf), -1e300)]
    margins = score_matrix(plan, encode_rows(plan, rows))["margins"][:, 0]
    assert len(set(margins)) == 1
    inside = pd.DataFrame({"hour": [lo, hi], "load_pct": [30.0, 30.0]})
    got = score_matrix(plan, encode_rows(plan, inside.to_dict("records")))["probabilities"]
    assert np.max(np.abs(got - pipe.predict_proba(inside))) <= 1e-12


def test_an_imputer_a_scaler_and_a_poisson_head():
    """SimpleImputer before the spline (a missing value takes the fill), StandardScaler
    after it (each basis column scaled as scikit-learn scales it), a log-link head."""
    x, _ = _frame(seed=3)
    x.loc[x.index % 9 == 0, "load_pct"] = np.nan
    counts = np.random.default_rng(4).poisson(1 + x.hour / 12)
    pipe = make_pipeline(ColumnTransformer([
        ("h", SplineTransformer(n_knots=6, extrapolation="periodic"), ["hour"]),
        ("l", make_pipeline(SimpleImputer(strategy="median"),
                            SplineTransformer(n_knots=4, extrapolation="linear"),
                            StandardScaler()), ["load_pct"])]),
        PoissonRegressor(alpha=1e-3)).fit(x, counts)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert model.head.link == "log" and checked.compared >= len(x)
    assert all(c.scaling for c in model.design if c.feature == "load_pct")


def test_missing_without_an_imputer_gives_basis_zero():
    """handle_missing='zeros': scikit-learn's basis values of NaN are all 0.0; so are the
    frozen model's (the margin is the intercept when every input is missing)."""
    x, y = _frame()
    pipe = _pipeline("continue", 3).fit(x, y)
    model = scorewright.freeze(pipe, check_rows=x)
    plan = build_plan(model)
    out = score_matrix(plan, encode_rows(plan, [{"hour": None, "load_pct": math.nan}]))
    assert out["margins"][0, 0] == model.head.intercepts[0]
    nan = pd.DataFrame({"hour": [np.nan], "load_pct": [np.nan]})
    assert abs(out["probabilities"][0, 1] - pipe.predict_proba(nan)[0, 1]) <= 1e-12


@pytest.mark.parametrize("make, words", [
    (lambda: SplineTransformer(degree=4), "only degrees 1, 2, 3"),
    (lambda: SplineTransformer(degree=1, extrapolation="linear"), "give each column its own"),
    (lambda: make_pipeline(StandardScaler(), SplineTransformer()), "comes after scaling"),
    (lambda: make_pipeline(SplineTransformer(), PolynomialFeatures(2)), "or a spline"),
])
def test_what_is_not_frozen_is_refused_in_one_line(make, words):
    x, y = _frame()
    pipe = make_pipeline(ColumnTransformer([("p", make(), ["hour", "load_pct"])]),
                         LogisticRegression(max_iter=2000))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe.fit(x, y)
    with pytest.raises(ScorewrightError) as err:
        scorewright.freeze(pipe)
    assert words in str(err.value) and "\n" not in str(err.value)


def test_single_precision_targets_refuse_splines_in_one_line():
    x, y = _frame()
    model = scorewright.freeze(_pipeline("constant", 2).fit(x, y), check_rows=x)
    with pytest.raises(ScorewrightError, match="not scored in single precision"):
        build_plan(model, "float")


def _resealed(doc):
    doc["sha256"] = canonical_sha256(doc)
    return json.dumps(doc)


def test_model_file_holds_splines_in_version_3():
    x, y = _frame()
    model = scorewright.freeze(_pipeline("periodic", 3).fit(x, y), check_rows=x)
    doc = json.loads(model.to_json())
    assert doc["format_version"] == 3
    step = doc["features"][0]["scaling"][0]
    assert step["op"] == "spline" and step["degree"] == 3 and step["extrapolation"] == "periodic"
    assert doc["design"][0] == {"feature": "hour", "basis": 0, "scaling": []}
    again = parse_model(model.to_json())
    assert again.features == model.features and again.design == model.design
    for mutate, words in [
            (lambda d: d["features"][0]["scaling"][0]["knots"].reverse(), "increasing"),
            (lambda d: d["features"][0]["scaling"][0].update(degree=4), "degree"),
            (lambda d: d["features"][0]["scaling"][0].update(degree=True), "degree"),
            (lambda d: d["features"][0]["scaling"][0].update(extrapolation="wrap"),
             "extrapolation"),
            (lambda d: d["features"][0]["scaling"][0].update(knots=[0.0, 1.0, 2.0]),
             "too few"),
            (lambda d: d["features"][0]["scaling"].append({"op": "add", "value": 1.0}),
             "only step"),
            (lambda d: d["design"][0].update(basis=99), "basis index"),
            (lambda d: d["design"][1].update(basis=0), "in two columns"),
            (lambda d: d["design"][0].pop("basis"), "basis"),
            (lambda d: d.update(format_version=2), "needs format_version 3")]:
        bad = json.loads(model.to_json())
        mutate(bad)
        with pytest.raises(ModelFileError, match=words):
            parse_model(_resealed(bad))


def test_splines_verify_on_python(tmp_path):
    """Verify's edge rows hold every knot and one double either side, and rows far
    outside the knots; the random rows reach past both ends."""
    from scorewright.verify.harness import build_targets

    x, y = _frame()
    pipe = make_pipeline(ColumnTransformer([
        ("h", SplineTransformer(n_knots=6, extrapolation="periodic", knots="quantile"),
         ["hour"]),
        ("l", SplineTransformer(n_knots=4, degree=2, extrapolation="linear"), ["load_pct"])]),
        LogisticRegression(max_iter=2000)).fit(x, y)
    model = scorewright.freeze(pipe, check_rows=x)
    report = build_targets(model, tmp_path, data=None, n_random=150, targets=["python"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]


@pytest.mark.slow
@pytest.mark.parametrize("rule", RULES)
def test_splines_verify_on_every_target_family(rule, tmp_path, postgres_dsn):
    from scorewright.verify.harness import build_targets

    x, y = _frame()
    x.loc[x.index % 11 == 0, "load_pct"] = np.nan
    pipe = make_pipeline(ColumnTransformer([
        ("h", SplineTransformer(n_knots=6, degree=3, extrapolation=rule), ["hour"]),
        ("l", make_pipeline(SimpleImputer(), SplineTransformer(
            n_knots=4, degree=2, extrapolation=rule, knots="quantile", include_bias=False),
            StandardScaler()), ["load_pct"])]),
        LogisticRegression(max_iter=2000)).fit(x, y)
    model = scorewright.freeze(pipe, check_rows=x)
    report = build_targets(model, tmp_path, data=None, n_random=300,
                           targets=["python", "c-double", "c-double-portable-exp", "java",
                                    "onnx-double", "onnx-double-reference", "sql-sqlite",
                                    "sql-duckdb", "sql-duckdb-long", "sql-postgres",
                                    "sql-spark"],
                           options={"sql": {"dsn": postgres_dsn}})
    assert report.ok, [(r.profile.name, r.message) for r in report.results]
