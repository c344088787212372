"""Every linear head scikit-learn fits whose prediction is coef_ and intercept_ through a link:
the cross-validated and Bayesian regressors, robust and quantile regression, SGD, the
cross-validated logistic regression and linear discriminant analysis. Each is frozen and
held by the freeze self-check to scikit-learn's own predict / predict_proba to 1e-12, on
data sets scikit-learn ships (diabetes, iris, breast cancer)."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from sklearn.datasets import load_breast_cancer, load_diabetes, load_iris
from sklearn.discriminant_analysis import LinearDiscriminantAnalysis
from sklearn.linear_model import (ARDRegression, BayesianRidge, ElasticNetCV, HuberRegressor,
                                  LassoCV, LogisticRegressionCV, QuantileRegressor, RidgeCV,
                                  SGDRegressor)
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
        Ridge(), func=np.sqrt, inverse_func=np.square)).fit(x, y)
    from scorewright.errors import ScorewrightError
    with pytest.raises(ScorewrightError, match="only func=np.log"):
        freeze_checked(odd)
