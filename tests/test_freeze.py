"""Freezing fitted scikit-learn models: every supported component, checked against
scikit-learn's own predict_proba / predict / transform (the reference library)."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.compose import ColumnTransformer
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.impute import SimpleImputer
from sklearn.linear_model import (ElasticNet, GammaRegressor, Lasso, LinearRegression,
                                  LogisticRegression, PoissonRegressor, Ridge, SGDClassifier,
                                  TweedieRegressor)
from sklearn.neighbors import KNeighborsClassifier
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import (MaxAbsScaler, MinMaxScaler, OneHotEncoder,
                                   QuantileTransformer, RobustScaler, SplineTransformer,
                                   StandardScaler)

import scorewright
from scorewright.errors import ScorewrightError
from scorewright.plan import build_plan
from scorewright.reference import design_value, score_row
from scorewright.values import numeric_value

RNG = np.random.default_rng(3)
N = 500


def _frame():
    """Invented unit readings with gaps, text and integer categories."""
    X = pd.DataFrame({
        "oil_temp_c": RNG.normal(60, 8, N),
        "run_hours": RNG.uniform(0, 9000, N),
        "starts_per_day": RNG.poisson(12, N).astype(float),
        "coil": RNG.choice(["copper", "alu", "microchannel"], N),
        "shift": RNG.choice([1, 2, 3], N),
    })
    X.loc[RNG.uniform(size=N) < 0.1, "oil_temp_c"] = np.nan
    X.loc[RNG.uniform(size=N) < 0.05, "coil"] = np.nan
    signal = 0.08 * (X.oil_temp_c.fillna(60) - 60) + 0.0002 * (X.run_hours - 4500) \
        + 0.6 * (X.coil == "alu") - 0.4 * (X.shift == 3)
    return X, signal


NUM = ["oil_temp_c", "run_hours", "starts_per_day"]


def _prep(num_imputer="median", scaler=None, cat_imputer="most_frequent", encoder=None):
    return ColumnTransformer([
        ("num", make_pipeline(SimpleImputer(strategy=num_imputer),
                              scaler if scaler is not None else StandardScaler()), NUM),
        ("cat", make_pipeline(SimpleImputer(strategy=cat_imputer, fill_value="alu"),
                              encoder if encoder is not None else
                              OneHotEncoder(handle_unknown="ignore")), ["coil"]),
        ("shift", OneHotEncoder(handle_unknown="ignore"), ["shift"]),
    ])


CLASSIFIERS = {
    "logistic l2": lambda: make_pipeline(_prep(), LogisticRegression(max_iter=5000)),
    "logistic l1 saga": lambda: make_pipeline(
        _prep(), LogisticRegression(l1_ratio=1.0, solver="saga", C=0.5, max_iter=20000)),
    "logistic elasticnet": lambda: make_pipeline(
        _prep(), LogisticRegression(l1_ratio=0.5, solver="saga", C=0.5, max_iter=20000)),
    "logistic unpenalized": lambda: make_pipeline(_prep(), LogisticRegression(C=np.inf,
                                                                             max_iter=5000)),
    "logistic liblinear": lambda: make_pipeline(_prep(), LogisticRegression(solver="liblinear")),
    "sgd log_loss": lambda: make_pipeline(_prep(), SGDClassifier(loss="log_loss",
                                                                 random_state=0)),
    "imputer mean, scaler without mean": lambda: make_pipeline(
        _prep("mean", StandardScaler(with_mean=False)), LogisticRegression(max_iter=5000)),
    "scaler without std": lambda: make_pipeline(
        _prep("median", StandardScaler(with_std=False)), LogisticRegression(max_iter=5000)),
    "minmax clip, constant fill": lambda: make_pipeline(
        _prep("median", MinMaxScaler(clip=True), "constant"), LogisticRegression(max_iter=5000)),
    "minmax, no clip": lambda: make_pipeline(_prep("median", MinMaxScaler(feature_range=(-1, 2))),
                                            LogisticRegression(max_iter=5000)),
    "maxabs": lambda: make_pipeline(_prep("median", MaxAbsScaler()),
                                    LogisticRegression(max_iter=5000)),
    "robust": lambda: make_pipeline(_prep("median", RobustScaler(quantile_range=(10, 90))),
                                    LogisticRegression(max_iter=5000)),
    "onehot drop first": lambda: make_pipeline(
        _prep(encoder=OneHotEncoder(drop="first")), LogisticRegression(max_iter=5000)),
    "onehot drop if_binary": lambda: make_pipeline(
        _prep(encoder=OneHotEncoder(drop="if_binary", handle_unknown="ignore")),
        LogisticRegression(max_iter=5000)),
    "onehot infrequent": lambda: make_pipeline(
        _prep(encoder=OneHotEncoder(min_frequency=120, handle_unknown="infrequent_if_exist")),
        LogisticRegression(max_iter=5000)),
    "onehot handle_unknown error": lambda: make_pipeline(
        _prep(encoder=OneHotEncoder(handle_unknown="error")), LogisticRegression(max_iter=5000)),
}


@pytest.mark.parametrize("kind", sorted(CLASSIFIERS))
def test_binary_classifier_matches_scikit_learn(kind):
    X, signal = _frame()
    y = (signal + RNG.logistic(size=N) > 0).astype(int)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = CLASSIFIERS[kind]().fit(X, y)
    plan = build_plan(scorewright.freeze(est, name=kind))
    rows = X.to_dict("records")
    got = np.array([score_row(plan, r).probabilities for r in rows])
    np.testing.assert_allclose(got, est.predict_proba(X), rtol=0, atol=1e-12)
    labels = [plan.classes[score_row(plan, r).class_index] for r in rows]
    assert (np.array(labels) == est.predict(X)).all()


def test_multinomial_with_integer_and_text_labels():
    X, signal = _frame()
    bins = np.digitize(signal + RNG.logistic(size=N) * 0.5, [-0.5, 0.3])
    for y in (bins, np.array(["idle", "warn", "trip"])[bins]):
        est = make_pipeline(_prep(), LogisticRegression(max_iter=5000)).fit(X, y)
        plan = build_plan(scorewright.freeze(est))
        got = np.array([score_row(plan, r).probabilities for r in X.to_dict("records")])
        np.testing.assert_allclose(got, est.predict_proba(X), rtol=0, atol=1e-12)
        assert plan.classes == tuple(est.classes_.tolist())


REGRESSORS = {
    "linear": LinearRegression, "ridge": lambda: Ridge(alpha=2.0),
    "lasso": lambda: Lasso(alpha=0.05), "elasticnet": lambda: ElasticNet(alpha=0.05),
    "poisson": lambda: PoissonRegressor(alpha=1e-3, max_iter=1000),
    "gamma": lambda: GammaRegressor(alpha=1e-3, max_iter=1000),
    "tweedie log": lambda: TweedieRegressor(power=1.5, link="log", alpha=1e-3, max_iter=1000),
    "tweedie identity": lambda: TweedieRegressor(power=0, link="identity", alpha=1e-3),
}


@pytest.mark.parametrize("kind", sorted(REGRESSORS))
def test_regressor_matches_scikit_learn(kind):
    X, signal = _frame()
    y = np.exp(0.5 * signal) + RNG.uniform(0.1, 0.3, N)
    if kind == "poisson":
        y = RNG.poisson(np.exp(0.5 * signal + 1))
    est = make_pipeline(_prep(), REGRESSORS[kind]()).fit(X, y)
    model = scorewright.freeze(est)
    plan = build_plan(model)
    got = np.array([score_row(plan, r).value for r in X.to_dict("records")])
    want = est.predict(X)
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=0)
    assert model.head.link == ("identity" if kind in ("linear", "ridge", "lasso", "elasticnet",
                                                      "tweedie identity") else "log")


def test_frozen_scaling_reproduces_scikit_learn_transform_bit_for_bit():
    """Design values equal ColumnTransformer.transform exactly (same operation order)."""
    X, signal = _frame()
    y = (signal > 0).astype(int)
    for scaler in (StandardScaler(), MinMaxScaler(clip=True), MaxAbsScaler(), RobustScaler()):
        est = make_pipeline(_prep("median", scaler), LogisticRegression()).fit(X, y)
        plan = build_plan(scorewright.freeze(est))
        want = est[0].transform(X)[:, :3]
        for j, name in enumerate(NUM):
            inp = plan.inputs[list(plan.feature_names).index(name)]
            got = np.array([design_value(inp, numeric_value(v)) for v in X[name]])
            assert (got.view("u8") == want[:, j].view("u8")).all(), (type(scaler).__name__, name)


def test_numpy_arrays_get_positional_names_and_breast_cancer_matches():
    """Dataset shipped with scikit-learn, fitted on a bare array."""
    X, y = load_breast_cancer(return_X_y=True)
    est = make_pipeline(StandardScaler(), LogisticRegression(max_iter=5000)).fit(X, y)
    model = scorewright.freeze(est)
    assert [f.name for f in model.features][:2] == ["x0", "x1"]
    plan = build_plan(model)
    got = np.array([score_row(plan, dict(zip(plan.feature_names, r))).probabilities for r in X])
    np.testing.assert_allclose(got, est.predict_proba(X), rtol=0, atol=1e-12)
    named = scorewright.freeze(est, feature_names=[f"f{i}" for i in range(X.shape[1])])
    assert named.features[0].name == "f0"


def test_passthrough_and_drop_columns():
    X, y = load_diabetes(return_X_y=True, as_frame=True)
    ct = ColumnTransformer([("s", StandardScaler(), ["bmi", "bp"]), ("d", "drop", ["sex"])],
                           remainder="passthrough")
    est = make_pipeline(ct, Ridge()).fit(X, y)
    model = scorewright.freeze(est)
    assert "sex" not in [f.name for f in model.features]
    plan = build_plan(model)
    got = np.array([score_row(plan, r).value for r in X.to_dict("records")])
    np.testing.assert_allclose(got, est.predict(X), rtol=1e-12)


@pytest.mark.parametrize("build,needle", [
    (lambda: make_pipeline(StandardScaler(), SplineTransformer(), LogisticRegression()),
     "SplineTransformer at pipeline step 'splinetransformer' (position 1)"),
    (lambda: make_pipeline(StandardScaler(), KNeighborsClassifier()),
     "KNeighborsClassifier at pipeline step 'kneighborsclassifier' (position 1)"),
    (lambda: make_pipeline(StandardScaler(), QuantileTransformer(n_quantiles=50),
                           LogisticRegression()),
     "QuantileTransformer at pipeline step 'quantiletransformer' (position 1)"),
])
def test_unsupported_components_are_named_with_their_position(build, needle):
    X, signal = _frame()
    y = (signal > 0).astype(int)
    est = build().fit(X[NUM].fillna(0), y)
    with pytest.raises(ScorewrightError, match=needle.replace("(", r"\(").replace(")", r"\)")):
        scorewright.freeze(est)


def test_unfitted_estimator_is_refused():
    with pytest.raises(ScorewrightError, match="not fitted"):
        scorewright.freeze(LogisticRegression())
