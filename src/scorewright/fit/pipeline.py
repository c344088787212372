"""The scikit-learn pipeline `fit` trains, and the grid of penalty strengths it searches.

Numeric columns: median imputation, then standardization. Categorical columns:
most-frequent imputation, then one-hot encoding with unseen levels mapped to all
zeros. An unpenalized fit drops one reference level per categorical (the most
frequent, so its contrasts are the best determined); without that the indicator
columns and the intercept would be collinear and the coefficients not
identified. With a dropped reference, an unseen level scores as the reference.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import ScorewrightError
from .labels import log_link_power

PENALTIES = ("l2", "l1", "elasticnet", "none")
NEGATIVE_BINOMIAL = "negative-binomial"
ELASTICNET_MIX = 0.5  # share of the l1 part in an elastic-net penalty


@dataclass(frozen=True)
class Spec:
    model: str             # logistic, multinomial, linear, poisson, gamma, tweedie:POWER
    penalty: str           # l2, l1, elasticnet, none
    class_weight: str | None
    seed: int

    @property
    def strength_name(self) -> str:
        return "C" if self.model in ("logistic", "multinomial") else "alpha"

    @property
    def classifier(self) -> bool:
        return self.model in ("logistic", "multinomial")


def check_spec(spec: Spec) -> None:
    if spec.penalty not in PENALTIES:
        raise ScorewrightError(f"--penalty: expected one of {', '.join(PENALTIES)}, "
                               f"got {spec.penalty!r}")
    if spec.model == NEGATIVE_BINOMIAL and spec.penalty != "none":
        raise ScorewrightError(f"--penalty {spec.penalty} is not available for --model "
                               "negative-binomial (it is fitted unpenalized: --penalty none)")
    if log_link_power(spec.model) is not None and spec.penalty in ("l1", "elasticnet"):
        raise ScorewrightError(f"--penalty {spec.penalty} is not available for --model "
                               f"{spec.model} (use l2 or none)")
    if spec.class_weight is not None and not spec.classifier:
        raise ScorewrightError(f"--class-weight applies to classification, not --model "
                               f"{spec.model}")


def strength_grid(spec: Spec) -> list[float | None]:
    """Candidate strengths, weakest penalty last; [None] for an unpenalized fit."""
    if spec.penalty == "none" or spec.model == NEGATIVE_BINOMIAL:
        return [None]
    if spec.classifier:
        return [float(c) for c in np.logspace(-3, 3, 13)]        # C: inverse strength
    if log_link_power(spec.model) is not None:
        return [float(a) for a in np.logspace(-5, 1, 13)]
    if spec.penalty == "l2":
        return [float(a) for a in np.logspace(-3, 3, 13)]
    return [float(a) for a in np.logspace(-4, 1, 11)]


def reference_levels(schema, frame) -> list:
    """The most frequent level of each categorical column (ties: the first sorted)."""
    out = []
    for name in schema.categorical:
        counts = frame[name].dropna().value_counts()
        top = counts.max()
        out.append(sorted(level for level, n in counts.items() if n == top)[0])
    return out


def make_pipeline(schema, spec: Spec, strength, references=None):
    from sklearn.compose import ColumnTransformer
    from sklearn.impute import SimpleImputer
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import OneHotEncoder, StandardScaler

    parts = []
    if schema.numeric:
        parts.append(("numeric", Pipeline([
            ("impute", SimpleImputer(strategy="median")),
            ("standardize", StandardScaler())]), schema.numeric))
    if schema.categorical:
        drop = references if spec.penalty == "none" else None
        parts.append(("categorical", Pipeline([
            ("impute", SimpleImputer(strategy="most_frequent")),
            ("one_hot", OneHotEncoder(handle_unknown="ignore", drop=drop,
                                      sparse_output=False))]), schema.categorical))
    prep = ColumnTransformer(parts, remainder="drop")
    return Pipeline([("prepare", prep), ("estimate", _estimator(spec, strength))])


def _estimator(spec: Spec, strength):
    from sklearn import linear_model as lm

    weight = spec.class_weight
    if spec.classifier:
        if spec.penalty == "none":
            # Newton steps converge to machine precision, which the inference table needs.
            return lm.LogisticRegression(C=np.inf, solver="newton-cholesky", tol=1e-10,
                                         max_iter=200, class_weight=weight)
        if spec.penalty == "l2":
            return lm.LogisticRegression(C=strength, l1_ratio=0.0, solver="lbfgs",
                                         max_iter=2000, class_weight=weight)
        mix = 1.0 if spec.penalty == "l1" else ELASTICNET_MIX
        return lm.LogisticRegression(C=strength, l1_ratio=mix, solver="saga", max_iter=3000,
                                     tol=1e-4, class_weight=weight, random_state=spec.seed)
    if spec.model == NEGATIVE_BINOMIAL:
        return NegativeBinomialRegressor()
    power = log_link_power(spec.model)
    if power is not None:
        alpha = 0.0 if strength is None else strength
        if spec.model == "poisson":
            return lm.PoissonRegressor(alpha=alpha, solver="newton-cholesky", max_iter=300,
                                       tol=1e-10)
        if spec.model == "gamma":
            return lm.GammaRegressor(alpha=alpha, solver="newton-cholesky", max_iter=300,
                                     tol=1e-10)
        return lm.TweedieRegressor(power=power, link="log", alpha=alpha,
                                   solver="newton-cholesky", max_iter=300, tol=1e-10)
    if spec.penalty == "none":
        return lm.LinearRegression()
    if spec.penalty == "l2":
        return lm.Ridge(alpha=strength)
    if spec.penalty == "l1":
        return lm.Lasso(alpha=strength, max_iter=20000, random_state=spec.seed)
    return lm.ElasticNet(alpha=strength, l1_ratio=ELASTICNET_MIX, max_iter=20000,
                         random_state=spec.seed)


def design_names(pipeline, schema) -> list[str]:
    """Names of the design columns: a numeric feature's name, or feature=level."""
    names = []
    prep = pipeline.named_steps["prepare"]
    for part, trans, cols in prep.transformers_:
        if part == "numeric":
            names.extend(cols)
        elif part == "categorical":
            enc = trans.named_steps["one_hot"]
            drop = getattr(enc, "drop_idx_", None)
            for i, col in enumerate(cols):
                for j, level in enumerate(enc.categories_[i]):
                    if drop is not None and drop[i] is not None and j == int(drop[i]):
                        continue
                    names.append(f"{col}={level}")
    return names


def standardization(pipeline, schema):
    """(mean, scale) per numeric design column, in design order."""
    prep = pipeline.named_steps["prepare"]
    if "numeric" not in prep.named_transformers_:
        return np.zeros(0), np.ones(0)
    scaler = prep.named_transformers_["numeric"].named_steps["standardize"]
    return np.asarray(scaler.mean_, dtype=np.float64), np.asarray(scaler.scale_, dtype=np.float64)


class NegativeBinomialRegressor:
    """A negative binomial (NB2: variance mu + alpha mu^2) regression with the log link,
    fitted by statsmodels' discrete NegativeBinomial: maximum likelihood of the
    coefficients and alpha together (Newton's method). `predict` gives the mean
    exp(intercept_ + X coef_), per unit of exposure when fitted with an `offset` (the
    log of the exposure). The covariance of (intercept, coefficients) statsmodels
    reports is kept for the inference table. A scikit-learn regressor in every way
    `fit` and `freeze` use one (fit, predict, get_params, coef_, intercept_)."""

    def __init__(self, maxiter: int = 300):
        self.maxiter = maxiter

    def get_params(self, deep=True):
        return {"maxiter": self.maxiter}

    def set_params(self, **params):
        for k, v in params.items():
            setattr(self, k, v)
        return self

    def __sklearn_tags__(self):
        from sklearn.utils import RegressorTags, Tags, TargetTags

        return Tags(estimator_type="regressor", target_tags=TargetTags(required=True),
                    regressor_tags=RegressorTags())

    def fit(self, X, y, offset=None):
        import warnings

        import statsmodels.api as sm
        from sklearn.exceptions import ConvergenceWarning

        x = np.asarray(X, dtype=np.float64)
        exog = np.hstack([np.ones((len(x), 1)), x])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = sm.NegativeBinomial(np.asarray(y, dtype=np.float64), exog,
                                      offset=offset).fit(disp=0, method="newton",
                                                         maxiter=self.maxiter)
        params = np.asarray(res.params, dtype=np.float64)
        self.intercept_ = float(params[0])
        self.coef_ = params[1:-1].copy()
        self.alpha_ = float(params[-1])
        self.cov_ = np.asarray(res.cov_params(), dtype=np.float64)[:-1, :-1]
        self.n_features_in_ = x.shape[1]
        if not res.mle_retvals.get("converged", True):
            warnings.warn("negative binomial fit did not converge", ConvergenceWarning)
        return self

    def predict(self, X):
        return np.exp(self.intercept_ + np.asarray(X, dtype=np.float64) @ self.coef_)
