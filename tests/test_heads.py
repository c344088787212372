"""Every linear head scikit-learn fits whose prediction is coef_ and intercept_ through a link:
the cross-validated and Bayesian regressors, robust and quantile regression, SGD, the
cross-validated logistic regression and linear discriminant analysis. Each is frozen and
held by the freeze self-check to scikit-learn's own predict / predict_proba to 1e-12, on
data sets scikit-learn ships (diabetes, iris, breast cancer)."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_diabetes, load_iris, load_wine
from sklearn.discriminant_analysis import LinearDiscriminantAnalysis
from sklearn.linear_model import (ARDRegression, BayesianRidge, ElasticNetCV, HuberRegressor,
                                  LassoCV, LogisticRegression, LogisticRegressionCV,
                                  QuantileRegressor, RidgeCV, SGDRegressor)
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from scorewright.freeze import freeze_checked
from scorewright.plan import build_plan
from scorewright.reference import score_row

REGRESSORS = [RidgeCV(), LassoCV(cv=3), ElasticNetCV(cv=3, l1_ratio=0.5), BayesianRidge(),
              ARDRegression(), HuberRegressor(max_iter=1000),
              QuantileRegressor(quantile=0.8, alpha=0.0, solver="highs"),
              SGDRegressor(random_state=0, max_iter=2000)]


@pytest.mark.parametrize("head", REGRESSORS, ids=lambda h: type(h).__name__)
def test_linear_regressors_freeze_and_agree(head):
    x, y = load_diabetes(return_X_y=True, as_frame=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe = make_pipeline(StandardScaler(), head).fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert model.head.task == "regression" and model.head.link == "identity"
    assert checked.compared >= len(x)
    plan = build_plan(model)
    got = np.array([score_row(plan, r).value for r in x.head(50).to_dict("records")])
    np.testing.assert_allclose(got, pipe.predict(x.head(50)), rtol=1e-12)


@pytest.mark.parametrize("head, data, task", [
    (LogisticRegressionCV(cv=3, l1_ratios=(0.0,)), load_iris, "multiclass"),
    (LogisticRegressionCV(cv=3, l1_ratios=(0.0,)), load_breast_cancer, "binary"),
    (LinearDiscriminantAnalysis(), load_iris, "multiclass"),
    (LinearDiscriminantAnalysis(solver="lsqr", shrinkage="auto"), load_breast_cancer,
     "binary"),
], ids=["logistic-cv-iris", "logistic-cv-cancer", "lda-iris", "lda-lsqr-cancer"])
def test_linear_classifiers_freeze_and_agree(head, data, task):
    """LDA's predict_proba is the sigmoid (two classes) or softmax of its
    decision_function, which is coef_ and intercept_: a logistic head."""
    x, y = data(return_X_y=True, as_frame=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe = make_pipeline(StandardScaler(), head).fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert model.head.task == task and checked.compared >= len(x)
    plan = build_plan(model)
    got = np.array([score_row(plan, r).probabilities for r in x.head(50).to_dict("records")])
    np.testing.assert_allclose(got, pipe.predict_proba(x.head(50)), rtol=0, atol=1e-12)


def test_transformed_target_log_exp_is_the_log_link():
    """TransformedTargetRegressor(func=np.log, inverse_func=np.exp) predicts exp of its
    regressor's prediction: frozen as the log link, held to its predict to 1e-12."""
    from sklearn.compose import TransformedTargetRegressor
    from sklearn.linear_model import Ridge

    x, y = load_diabetes(return_X_y=True, as_frame=True)
    pipe = make_pipeline(StandardScaler(), TransformedTargetRegressor(
        Ridge(), func=np.log, inverse_func=np.exp)).fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert model.head.link == "log" and checked.compared >= len(x)
    odd = make_pipeline(StandardScaler(), TransformedTargetRegressor(
        Ridge(), func=np.log10, inverse_func=np.exp, check_inverse=False)).fit(x, y)
    from scorewright.errors import ScorewrightError
    with pytest.raises(ScorewrightError, match="only func=np.log") as err:
        freeze_checked(odd)
    assert "\n" not in str(err.value) and "log10" in str(err.value)


@pytest.mark.parametrize("func, inverse, link, shift", [
    (np.log1p, np.expm1, "log1p", 0.0), (np.log1p, np.expm1, "log1p", -0.999),
    (np.sqrt, np.square, "sqrt", 0.0)], ids=["log1p", "log1p-near-zero", "sqrt"])
def test_transformed_target_log1p_and_sqrt(func, inverse, link, shift):
    """TransformedTargetRegressor(func=np.log1p, inverse_func=np.expm1) predicts expm1 of
    its regressor's prediction (the log1p link; near-zero targets put the margins near 0,
    where expm1 must not cancel), np.sqrt with np.square its square (the sqrt link): held
    to scikit-learn's predict to 1e-12 relative (the self-check), on the diabetes data
    scikit-learn ships."""
    from sklearn.compose import TransformedTargetRegressor
    from sklearn.linear_model import Ridge

    x, y = load_diabetes(return_X_y=True, as_frame=True)
    target = y / 1000.0 + shift if shift else y
    pipe = make_pipeline(StandardScaler(), TransformedTargetRegressor(
        Ridge(), func=func, inverse_func=inverse, check_inverse=False)).fit(x, target)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert model.head.link == link and checked.compared >= len(x)
    assert model.to_document()["format_version"] == 3
    plan = build_plan(model)
    got = np.array([score_row(plan, r).value for r in x.head(50).to_dict("records")])
    np.testing.assert_allclose(got, pipe.predict(x.head(50)), rtol=1e-12)


def test_expm1_lowering_against_mpmath():
    """The log1p link's expm1, written in primitives (no runtime exp): within 4 ULP of
    mpmath's expm1 at 200 bits, over the guarded range and near zero."""
    import random

    import mpmath as mp

    from scorewright.plan import DOUBLE, Plan
    from scorewright.program import lower, run_row

    def value(m):
        plan = Plan(name="l", stem="l", sha256="", task="regression", link="log1p",
                    classes=None, precision=DOUBLE, inputs=(), terms=(), intercepts=(m,),
                    cut=None)
        return run_row(lower(plan), {})["value"]

    rng = random.Random(5)
    xs = [rng.uniform(-1, 1) * 10 ** rng.uniform(-300, 2.85) for _ in range(600)]
    xs += [rng.uniform(-1.2, 1.2) for _ in range(600)] + [0.3465, -0.3466, 709.0, -708.0]
    with mp.workprec(200):
        for m in xs:
            if not -708.0 <= m <= 709.0:
                continue
            want = float(mp.expm1(mp.mpf(m)))
            assert abs(value(m) - want) <= 4 * math.ulp(want), m
    assert value(0.0) == 0.0 and value(1e-300) == 1e-300


@pytest.mark.parametrize("data", [pytest.param(load_iris, marks=pytest.mark.slow), load_wine],
                         ids=["iris", "wine"])
def test_one_vs_rest_logistic_is_normalised_sigmoids(data):
    """OneVsRestClassifier(LogisticRegression) predicts each class's sigmoid divided by
    their sum: frozen as the ovr_logit link and held to its predict_proba to 1e-12
    (absolute) and its predict, on data sets scikit-learn ships; two classes are a binary
    logistic head."""
    from sklearn.multiclass import OneVsRestClassifier

    x, y = data(return_X_y=True, as_frame=True)
    pipe = make_pipeline(StandardScaler(), OneVsRestClassifier(
        LogisticRegression(max_iter=2000))).fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert model.head.link == "ovr_logit" and checked.compared >= len(x)
    plan = build_plan(model)
    scores = [score_row(plan, r) for r in x.to_dict("records")]
    np.testing.assert_allclose([s.probabilities for s in scores], pipe.predict_proba(x),
                               rtol=0, atol=1e-12)
    assert [model.head.classes[s.class_index] for s in scores] == list(pipe.predict(x))
    two = make_pipeline(StandardScaler(), OneVsRestClassifier(LogisticRegression())).fit(
        x[y < 2], y[y < 2])
    assert freeze_checked(two, check_rows=x[y < 2])[0].head.link == "logit"


def test_new_links_verify_on_python(tmp_path):
    """The log1p link (expm1 in primitives) on the Python target (with the ovr_logit and
    sqrt links on every family under --runslow: test_new_links_verify_on_every_family)."""
    _verify_new_links(tmp_path, ["python"], only=1, n_random=60)


@pytest.mark.slow
def test_new_links_verify_on_every_family(tmp_path, postgres_dsn):
    _verify_new_links(tmp_path, ["python", "c-double", "c-double-portable-exp", "java",
                                 "onnx-double", "onnx-double-reference", "sql-sqlite",
                                 "sql-duckdb", "sql-postgres", "sql-spark"],
                      {"sql": {"dsn": postgres_dsn}})


def _verify_new_links(tmp_path, targets, options=None, only=None, n_random=200):
    from sklearn.compose import TransformedTargetRegressor
    from sklearn.linear_model import Ridge
    from sklearn.multiclass import OneVsRestClassifier

    from scorewright.verify.harness import build_targets

    x, y = load_wine(return_X_y=True, as_frame=True)
    heads = [OneVsRestClassifier(LogisticRegression(max_iter=2000))]
    xd, yd = load_diabetes(return_X_y=True, as_frame=True)
    for i, head in enumerate(heads + [
            TransformedTargetRegressor(Ridge(), func=np.log1p, inverse_func=np.expm1),
            TransformedTargetRegressor(Ridge(), func=np.sqrt, inverse_func=np.square)]):
        if only is not None and i != only:
            continue
        data = (x, y) if i == 0 else (xd, yd)
        pipe = make_pipeline(StandardScaler(), head).fit(*data)
        model, _ = freeze_checked(pipe, check_rows=data[0])
        report = build_targets(model, tmp_path / str(i), data=None, n_random=n_random,
                               targets=targets, options=options)
        assert report.ok, [(r.profile.name, r.message) for r in report.results]


CALIBRATED = [pytest.param(inner, data, id=f"{tag}-{inner}", marks=() if (tag, inner) in (
    ("binary", "LinearSVC"), ("wine", "RidgeClassifier")) else pytest.mark.slow)
    for inner in ("LinearSVC", "RidgeClassifier", "Perceptron", "SGDClassifier",
                  "LogisticRegression")
    for tag, data in (("binary", load_breast_cancer), ("wine", load_wine))]


@pytest.mark.parametrize("inner, data", CALIBRATED)
def test_sigmoid_calibration_over_a_linear_classifier(inner, data):
    """CalibratedClassifierCV(method='sigmoid', ensemble=False) of a linear classifier's
    decision function f: expit(-(a f + b)) per class (binary: that; multiclass: divided
    by their sum), held to scikit-learn's predict_proba to 1e-12 and its predict, with
    the calibrator around the pipeline and inside it (data sets scikit-learn ships)."""
    from sklearn import linear_model, svm
    from sklearn.calibration import CalibratedClassifierCV

    make = getattr(svm, inner, None) or getattr(linear_model, inner)
    x, y = data(return_X_y=True, as_frame=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        around = CalibratedClassifierCV(make_pipeline(StandardScaler(), make()),
                                        ensemble=False).fit(x, y)
        inside = make_pipeline(StandardScaler(), CalibratedClassifierCV(
            make(), ensemble=False)).fit(x, y)
    for pipe in (around, inside):
        model, checked = freeze_checked(pipe, check_rows=x)
        assert model.head.link == ("logit" if y.nunique() == 2 else "ovr_logit")
        assert checked.compared >= len(x)
        plan = build_plan(model)
        scores = [score_row(plan, r) for r in x.head(60).to_dict("records")]
        np.testing.assert_allclose([s.probabilities for s in scores],
                                   pipe.predict_proba(x.head(60)), rtol=0, atol=1e-12)
        assert [model.head.classes[s.class_index] for s in scores] == \
            list(pipe.predict(x.head(60)))


@pytest.mark.parametrize("make, words", [
    (lambda: _calibrated(estimator=make_pipeline(StandardScaler(), _svc()), ensemble=True,
                         cv=3), "whose transforms each fold fits anew"),
    (lambda: make_pipeline(StandardScaler(), _calibrated(method="temperature")),
     "only method='sigmoid' and 'isotonic'"),
], ids=["ensemble-over-a-pipeline", "temperature"])
def test_what_is_not_frozen_is_refused_in_one_line(make, words):
    from scorewright.errors import ScorewrightError

    x, y = load_breast_cancer(return_X_y=True, as_frame=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe = make().fit(x, y)
    with pytest.raises(ScorewrightError) as err:
        freeze_checked(pipe)
    assert words in str(err.value) and "\n" not in str(err.value)


def _calibrated(**kw):
    from sklearn.calibration import CalibratedClassifierCV
    from sklearn.svm import LinearSVC

    return CalibratedClassifierCV(**{"estimator": LinearSVC(), "ensemble": False, **kw})


def _svc():
    from sklearn.svm import LinearSVC

    return LinearSVC()
