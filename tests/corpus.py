"""A practitioner corpus: pipelines of the kinds credit-risk, insurance-pricing, marketing and
equipment teams fit, on invented data of four scenarios (no real people or companies).

Each entry is (name, fitted estimator, the frame it was fitted on). Twenty-one pipeline
shapes (transforms, bins, splines, quantiles, norms, interactions, missing indicators,
encoders, every linear head, decision-function classifiers, isotonic calibration over
folds) times the four scenarios give 84 pipelines; `build(name)` is cached per process.
"""

from __future__ import annotations

import warnings
from functools import lru_cache

import numpy as np
import pandas as pd


def _scenario(kind: str, n: int = 900):
    """Invented data: a skewed amount, a count, a bounded score, two categories, missing
    values, and a binary, a count and a positive target."""
    seed = {"credit": 1, "pricing": 2, "marketing": 3, "equipment": 4}[kind]
    rng = np.random.default_rng(seed)
    amount = {"credit": "balance", "pricing": "sum_insured", "marketing": "spend_90d",
              "equipment": "runtime_h"}[kind]
    x = pd.DataFrame({
        amount: rng.lognormal(7, 1.2, n),
        "events": rng.poisson(3, n).astype(float),
        "score": rng.uniform(0, 100, n),
        "band": rng.choice(["a", "b", "c", "d"], n, p=(0.4, 0.3, 0.2, 0.1)),
        "region": rng.choice([f"r{i}" for i in range(6)], n),
    })
    x.loc[rng.random(n) < 0.06, amount] = np.nan
    x.loc[rng.random(n) < 0.04, "score"] = np.nan
    x.loc[rng.random(n) < 0.03, "band"] = np.nan
    signal = (0.4 * (np.log1p(x[amount].fillna(1000.0)) - 7) + 0.2 * (x.events - 3)
              - 0.02 * (x.score.fillna(50) - 50) + (x.band == "d") * 0.8
              + x.region.isin(["r1", "r4"]) * 0.3)
    binary = (signal + rng.logistic(size=n) > 0).astype(int)
    count = rng.poisson(np.exp(0.5 + 0.5 * signal.clip(-3, 3)))
    positive = rng.gamma(2.0, np.exp(3 + 0.3 * signal.clip(-3, 3)) / 2.0)
    three = np.digitize(signal + rng.logistic(size=n), [-0.7, 0.7])
    return x, amount, {"binary": binary, "count": count, "positive": positive,
                       "three": three}


def _shapes(amount: str):
    from sklearn import compose, discriminant_analysis as da, impute, linear_model as lm
    from sklearn import pipeline as pl, preprocessing as pp, svm
    from sklearn.calibration import CalibratedClassifierCV
    from sklearn.model_selection import KFold

    def cols(*parts, remainder="drop"):
        return compose.ColumnTransformer(list(parts), remainder=remainder)

    num_logged = ("amt", pl.make_pipeline(impute.SimpleImputer(strategy="median"),
                                          pp.FunctionTransformer(np.log1p),
                                          pp.StandardScaler()), [amount])
    num_plain = ("num", pl.make_pipeline(impute.SimpleImputer(), pp.StandardScaler()),
                 ["events", "score"])
    cats = ("cat", pl.make_pipeline(impute.SimpleImputer(strategy="most_frequent"),
                                    pp.OneHotEncoder(handle_unknown="ignore")),
            ["band", "region"])
    return {
        "log_logistic": ("binary", lambda: pl.make_pipeline(
            cols(num_logged, num_plain, cats), lm.LogisticRegression(max_iter=3000))),
        "bins_logistic": ("binary", lambda: pl.make_pipeline(
            cols(("b", pl.make_pipeline(impute.SimpleImputer(), pp.KBinsDiscretizer(
                n_bins=5, encode="onehot", quantile_method="averaged_inverted_cdf")),
                [amount, "score"]), cats), lm.LogisticRegression(max_iter=3000))),
        "ordinal_bins_poisson": ("count", lambda: pl.make_pipeline(
            cols(("b", pl.make_pipeline(impute.SimpleImputer(), pp.KBinsDiscretizer(
                n_bins=4, encode="ordinal", strategy="uniform"), pp.StandardScaler()),
                ["score"]), num_logged, cats), lm.PoissonRegressor(alpha=1e-3))),
        "interactions_logistic": ("binary", lambda: pl.make_pipeline(
            cols(num_logged, num_plain), pp.PolynomialFeatures(2, interaction_only=True,
                                                               include_bias=False),
            lm.LogisticRegression(max_iter=3000))),
        "poly_scaled_ridge": ("positive", lambda: pl.make_pipeline(
            cols(num_plain, cats), pp.PolynomialFeatures(2), pp.StandardScaler(with_mean=False),
            lm.Ridge(alpha=1.0))),
        "indicator_logistic": ("binary", lambda: pl.make_pipeline(
            cols(("num", pl.make_pipeline(impute.SimpleImputer(add_indicator=True),
                                          pp.StandardScaler()), [amount, "score"]), cats),
            lm.LogisticRegression(max_iter=3000))),
        "missing_indicator_shared": ("binary", lambda: pl.make_pipeline(
            cols(num_logged, ("flag", impute.MissingIndicator(), [amount, "score"]),
                 num_plain, cats), lm.LogisticRegression(max_iter=3000))),
        "ordinal_linear": ("positive", lambda: pl.make_pipeline(
            cols(("ord", pl.make_pipeline(pp.OrdinalEncoder(
                handle_unknown="use_encoded_value", unknown_value=-1),
                impute.SimpleImputer(), pp.StandardScaler()), ["band", "region"]),
                num_plain), lm.LinearRegression())),
        "target_encoded_logistic": ("binary", lambda: pl.make_pipeline(
            cols(("te", pp.TargetEncoder(cv=KFold(5)), ["band", "region"]), num_logged),
            lm.LogisticRegression(max_iter=3000))),
        "target_encoded_multinomial": ("three", lambda: pl.make_pipeline(
            cols(("te", pp.TargetEncoder(cv=KFold(5)), ["region"]), num_plain,
                 ("cat", pp.OneHotEncoder(handle_unknown="ignore"), ["band"])),
            lm.LogisticRegression(max_iter=3000))),
        "sqrt_gamma": ("positive", lambda: pl.make_pipeline(
            cols(("sq", pl.make_pipeline(impute.SimpleImputer(),
                                         pp.FunctionTransformer(np.sqrt),
                                         pp.StandardScaler()), ["events", "score"]), cats),
            lm.GammaRegressor(alpha=1e-3, max_iter=1000))),
        "tweedie_logged": ("positive", lambda: pl.make_pipeline(
            cols(num_logged, num_plain, cats),
            lm.TweedieRegressor(power=1.5, link="log", alpha=1e-3, max_iter=1000))),
        "logistic_cv": ("binary", lambda: pl.make_pipeline(
            cols(num_logged, num_plain, cats),
            lm.LogisticRegressionCV(cv=3, l1_ratios=(0.0,), max_iter=3000))),
        "lda": ("three", lambda: pl.make_pipeline(
            cols(num_logged, num_plain), da.LinearDiscriminantAnalysis())),
        "splines_logistic": ("binary", lambda: pl.make_pipeline(
            cols(("sp", pl.make_pipeline(impute.SimpleImputer(), pp.SplineTransformer(
                n_knots=5, degree=3, extrapolation="linear")), ["score"]),
                 ("ev", pp.SplineTransformer(n_knots=4, degree=2, knots="quantile",
                                             extrapolation="constant",
                                             handle_missing="zeros"), ["events"]),
                 num_logged, cats), lm.LogisticRegression(max_iter=3000))),
        "isotonic_folds_svc": ("three", lambda: pl.make_pipeline(
            cols(num_logged, num_plain, cats), CalibratedClassifierCV(
                svm.LinearSVC(), method="isotonic", cv=3))),
        "huber_log_target": ("positive", lambda: pl.make_pipeline(
            cols(num_logged, num_plain, cats), compose.TransformedTargetRegressor(
                lm.HuberRegressor(max_iter=2000), func=np.log, inverse_func=np.exp))),
        "ridge_classifier_decision": ("binary", lambda: pl.make_pipeline(
            cols(num_logged, num_plain, cats), lm.RidgeClassifier(alpha=1.0))),
        "linear_svc_three": ("three", lambda: pl.make_pipeline(
            cols(num_logged, num_plain, cats), svm.LinearSVC(C=0.5))),
        "quantile_logistic": ("binary", lambda: pl.make_pipeline(
            cols(("qn", pl.make_pipeline(impute.SimpleImputer(strategy="median"),
                                         pp.QuantileTransformer(
                                             n_quantiles=30, output_distribution="normal")),
                  [amount, "score"]),
                 ("qu", pl.make_pipeline(impute.SimpleImputer(),
                                         pp.QuantileTransformer(n_quantiles=20)), ["events"]),
                 cats),
            lm.LogisticRegression(max_iter=3000))),
        "normalized_ridge": ("positive", lambda: pl.make_pipeline(
            cols(("nz", pl.make_pipeline(impute.SimpleImputer(), pp.StandardScaler(),
                                         pp.Normalizer()), [amount, "events", "score"]),
                 cats), lm.Ridge(alpha=1.0))),
    }


SCENARIOS = ("credit", "pricing", "marketing", "equipment")
# Shapes added after the first eighteen come last, batch by batch and scenario by scenario,
# so the default tier's sample of pipelines to build (tests/test_corpus.py, by position)
# stays the same for every earlier pipeline.
LATER = (("quantile_logistic", "normalized_ridge"), ("isotonic_folds_svc",))
NAMES = tuple(f"{scenario}-{shape}" for scenario in SCENARIOS
              for shape in _shapes("amount") if all(shape not in b for b in LATER)) + tuple(
    f"{scenario}-{shape}" for batch in LATER for scenario in SCENARIOS for shape in batch)


@lru_cache(maxsize=None)
def build(name: str):
    scenario, shape = name.split("-", 1)
    x, amount, targets = _scenario(scenario)
    target, make = _shapes(amount)[shape]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = make().fit(x, targets[target])
    return est, x
