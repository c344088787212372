"""The test models every target is checked with, fitted on data from outside the project.

Sources: iris, wine and diabetes ship with scikit-learn (`sklearn.datasets`);
the Spector and Mazzeo program-effectiveness data ships with statsmodels
(`statsmodels.api.datasets.spector`); the compressor readings are the project's
own invented demo data (fixed seed, known true coefficients).

Each entry gives the fitted scikit-learn estimator, the frame it was fitted on,
and the frozen model. `build(name)` is cached per process.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
import pandas as pd

import scorewright
from scorewright.demo_data import compressor_readings
from scorewright.model import FrozenModel

NUMERIC = ["discharge_temp_c", "suction_pressure_kpa", "motor_current_a", "vibration_mm_s",
           "hours_since_service", "ambient_temp_c", "door_open_min_per_h"]
CATEGORICAL = ["refrigerant", "site_zone"]


@dataclass(frozen=True)
class TestModel:
    name: str
    estimator: object
    frame: pd.DataFrame       # the inputs it was fitted on (feature columns only)
    target: pd.Series
    model: FrozenModel


def _sk():
    from sklearn import compose, impute, linear_model, pipeline, preprocessing
    return compose, impute, linear_model, pipeline, preprocessing


def _readings(n=1500):
    return compressor_readings(n=n, seed=20261201)


def _scaled_and_one_hot(categorical: list[str]):
    """The readings' numeric columns median-imputed and standardized, `categorical` one-hot
    with unseen levels ignored."""
    compose, impute, _, pl, pp = _sk()
    return compose.ColumnTransformer([
        ("num", pl.make_pipeline(impute.SimpleImputer(strategy="median"),
                                 pp.StandardScaler()), NUMERIC),
        ("cat", pp.OneHotEncoder(handle_unknown="ignore"), categorical),
    ])


def fault_binary() -> TestModel:
    """Imputation, standardization and one-hot categories, binary logistic (the demo's shape)."""
    compose, impute, lm, pl, pp = _sk()
    df = _readings()
    X, y = df[NUMERIC + CATEGORICAL], df["fault_30d"]
    prep = compose.ColumnTransformer([
        ("num", pl.make_pipeline(impute.SimpleImputer(strategy="median"),
                                 pp.StandardScaler()), NUMERIC),
        ("cat", pl.make_pipeline(impute.SimpleImputer(strategy="most_frequent"),
                                 pp.OneHotEncoder(handle_unknown="ignore")), CATEGORICAL),
    ])
    est = pl.make_pipeline(prep, lm.LogisticRegression(max_iter=5000)).fit(X, y)
    return TestModel("fault_binary", est, X, y, scorewright.freeze(est, name="fault_binary"))


def fault_type_multinomial() -> TestModel:
    """Multinomial logistic over four fault types, with categorical inputs."""
    compose, impute, lm, pl, pp = _sk()
    df = _readings()
    X, y = df[NUMERIC + CATEGORICAL], df["fault_type"]
    prep = compose.ColumnTransformer([
        ("num", pl.make_pipeline(impute.SimpleImputer(strategy="mean"),
                                 pp.StandardScaler()), NUMERIC),
        ("cat", pl.make_pipeline(impute.SimpleImputer(strategy="constant", fill_value="R404A"),
                                 pp.OneHotEncoder(handle_unknown="ignore", drop="first")),
         ["refrigerant"]),
    ], remainder="drop")
    est = pl.make_pipeline(prep, lm.LogisticRegression(max_iter=5000, C=0.5)).fit(X, y)
    return TestModel("fault_type", est, X, y, scorewright.freeze(est, name="fault_type"))


def iris_multinomial() -> TestModel:
    from sklearn.datasets import load_iris
    _, _, lm, pl, pp = _sk()
    X, y = load_iris(return_X_y=True, as_frame=True)
    est = pl.make_pipeline(pp.StandardScaler(), lm.LogisticRegression(max_iter=5000)).fit(X, y)
    return TestModel("iris", est, X, y, scorewright.freeze(est, name="iris"))


def wine_multinomial() -> TestModel:
    from sklearn.datasets import load_wine
    _, _, lm, pl, pp = _sk()
    X, y = load_wine(return_X_y=True, as_frame=True)
    est = pl.make_pipeline(pp.RobustScaler(), lm.LogisticRegression(max_iter=5000, C=0.3)).fit(X, y)
    return TestModel("wine", est, X, y, scorewright.freeze(est, name="wine"))


def alarms_poisson() -> TestModel:
    """Log-link count model: alarms per week."""
    compose, impute, lm, pl, pp = _sk()
    df = _readings()
    X, y = df[NUMERIC + ["site_zone"]], df["alarms_per_week"]
    prep = compose.ColumnTransformer([
        ("num", pl.make_pipeline(impute.SimpleImputer(strategy="median"),
                                 pp.StandardScaler()), NUMERIC),
        ("cat", pp.OneHotEncoder(handle_unknown="ignore"), ["site_zone"]),
    ])
    est = pl.make_pipeline(prep, lm.PoissonRegressor(alpha=1e-4, max_iter=1000)).fit(X, y)
    return TestModel("alarms_poisson", est, X, y, scorewright.freeze(est, name="alarms_poisson"))


def diabetes_ridge() -> TestModel:
    from sklearn.datasets import load_diabetes
    _, _, lm, pl, pp = _sk()
    X, y = load_diabetes(return_X_y=True, as_frame=True)
    est = pl.make_pipeline(pp.MinMaxScaler(clip=True), lm.Ridge(alpha=0.5)).fit(X, y)
    return TestModel("diabetes_ridge", est, X, y, scorewright.freeze(est, name="diabetes_ridge"))


def spector_logit() -> TestModel:
    """Unpenalized logit on the Spector and Mazzeo data shipped with statsmodels."""
    import statsmodels.api as sm
    _, _, lm, _, _ = _sk()
    data = sm.datasets.spector.load_pandas()
    X, y = data.exog[["GPA", "TUCE", "PSI"]], data.endog
    est = lm.LogisticRegression(C=np.inf, tol=1e-12, max_iter=100000).fit(X, y)
    return TestModel("spector", est, X, y, scorewright.freeze(est, name="spector"))


def mixed_scalers() -> TestModel:
    """No imputer (missing numeric -> design value 0), MaxAbs and Robust scaling, integer
    categories with drop='first', an infrequent-category group, and a passthrough column."""
    compose, _, lm, pl, pp = _sk()
    rng = np.random.default_rng(5)
    n = 800
    X = pd.DataFrame({
        "load_pct": rng.uniform(10, 100, n),
        "defrost_cycles": rng.poisson(3, n).astype(float),
        "shift_code": rng.choice([1, 2, 3], n),
        "fan_model": rng.choice(["FA", "FB", "FC", "FD", "FE"], n, p=(0.5, 0.3, 0.15, 0.03, 0.02)),
        "age_years": rng.uniform(0, 15, n),
    })
    logit = 0.03 * (X.load_pct - 50) + 0.2 * X.defrost_cycles - 0.5 * (X.shift_code == 3) \
        + 0.8 * (X.fan_model == "FC") + 0.1 * X.age_years - 1.0
    y = (rng.uniform(size=n) < 1 / (1 + np.exp(-logit))).astype(int)
    prep = compose.ColumnTransformer([
        ("mx", pp.MaxAbsScaler(), ["load_pct"]),
        ("rb", pp.RobustScaler(), ["defrost_cycles"]),
        ("shift", pp.OneHotEncoder(drop="first", handle_unknown="ignore"), ["shift_code"]),
        ("fan", pp.OneHotEncoder(min_frequency=30, handle_unknown="infrequent_if_exist"),
         ["fan_model"]),
    ], remainder="passthrough")
    est = pl.make_pipeline(prep, lm.LogisticRegression(max_iter=5000)).fit(X, y)
    return TestModel("mixed_scalers", est, X, y, scorewright.freeze(est, name="mixed_scalers"))


def hostile_names() -> TestModel:
    """Feature names, levels, labels and a model name that try to break out of every target's
    syntax: quotes, comment markers, semicolons, backslashes, newlines, keywords, unicode."""
    compose, impute, lm, pl, pp = _sk()
    rng = np.random.default_rng(11)
    n = 400
    names = ['a"b', "it's; DROP TABLE t; --", "*/ #define x", "x\\y\nz", "SELECT", "select",
             "Ümlaut ñ 温度"]
    X = pd.DataFrame({names[0]: rng.normal(size=n), names[1]: rng.normal(size=n),
                      names[2]: rng.normal(size=n), names[3]: rng.normal(size=n),
                      names[4]: rng.normal(size=n), names[5]: rng.normal(size=n),
                      names[6]: rng.choice(["o'k", 'q"t', "*/", "--", "\\", "é\n"], n)})
    X.iloc[::9, 0] = np.nan
    y = np.where(X[names[0]].fillna(0) + X[names[4]] - X[names[5]] > 0, "yes'\"", "no */ --")
    prep = compose.ColumnTransformer([
        ("num", pl.make_pipeline(impute.SimpleImputer(), pp.StandardScaler()), names[:6]),
        ("cat", pp.OneHotEncoder(handle_unknown="ignore"), [names[6]]),
    ])
    est = pl.make_pipeline(prep, lm.LogisticRegression(max_iter=5000)).fit(X, y)
    return TestModel("hostile", est, X, pd.Series(y),
                     scorewright.freeze(est, name="hostile'; DROP TABLE x; --*/"))


def compressor_terms() -> TestModel:
    """Format version 2's term kinds in one model (the compressor readings): a log1p
    transform, missing indicators, a one-hot binned feature, an ordinal encoding, and the
    products of two scaled readings (PolynomialFeatures)."""
    compose, impute, lm, pl, pp = _sk()
    df = _readings()
    X = df[NUMERIC + CATEGORICAL]
    y = df["fault_30d"]
    prep = compose.ColumnTransformer([
        ("hours", pl.make_pipeline(impute.SimpleImputer(strategy="median", add_indicator=True),
                                   pp.FunctionTransformer(np.log1p), pp.StandardScaler()),
         ["hours_since_service"]),
        ("poly", pl.make_pipeline(impute.SimpleImputer(), pp.StandardScaler(),
                                  pp.PolynomialFeatures(2, include_bias=False)),
         ["discharge_temp_c", "motor_current_a"]),
        ("bins", pl.make_pipeline(impute.SimpleImputer(),
                                  pp.KBinsDiscretizer(n_bins=4, encode="onehot-dense",
                                                      strategy="uniform")),
         ["ambient_temp_c"]),
        ("zone", pp.OrdinalEncoder(handle_unknown="use_encoded_value", unknown_value=-1,
                                   encoded_missing_value=-2), ["site_zone"]),
        ("rest", pl.make_pipeline(impute.SimpleImputer(), pp.StandardScaler()),
         ["suction_pressure_kpa", "vibration_mm_s"]),
    ])
    est = pl.make_pipeline(prep, lm.LogisticRegression(max_iter=5000)).fit(X, y)
    return TestModel("compressor_terms", est, X, y,
                     scorewright.freeze(est, name="compressor_terms", check_rows=X))


def spector_probit() -> TestModel:
    """The probit link (format version 2): Greene's Spector data, statsmodels' Probit."""
    import statsmodels.api as sm

    data = sm.datasets.spector.load_pandas()
    X, y = data.exog[["GPA", "TUCE", "PSI"]], data.endog
    from scorewright.freeze.statsmodels import ResultsSource

    results = sm.Probit(y, sm.add_constant(X)).fit(disp=0)
    model = scorewright.freeze(results, name="spector_probit", check_rows=X)
    return TestModel("spector_probit", _Classifier(ResultsSource(results, model)), X, y, model)


def compressor_shapes() -> TestModel:
    """Format version 3's term kinds in one model (the compressor readings): B-splines with
    linear and periodic extrapolation, Yeo-Johnson and Box-Cox power transforms."""
    compose, impute, lm, pl, pp = _sk()
    df = _readings()
    X = df[NUMERIC + CATEGORICAL]
    y = df["fault_30d"]
    prep = compose.ColumnTransformer([
        ("temp", pl.make_pipeline(impute.SimpleImputer(), pp.SplineTransformer(
            n_knots=5, degree=3, extrapolation="linear")), ["discharge_temp_c"]),
        ("ambient", pl.make_pipeline(impute.SimpleImputer(), pp.SplineTransformer(
            n_knots=4, degree=2, extrapolation="periodic")), ["ambient_temp_c"]),
        ("yj", pl.make_pipeline(impute.SimpleImputer(strategy="median"),
                                pp.PowerTransformer(method="yeo-johnson")),
         ["vibration_mm_s", "door_open_min_per_h"]),
        ("bc", pl.make_pipeline(impute.SimpleImputer(strategy="median"),
                                pp.PowerTransformer(method="box-cox")),
         ["hours_since_service"]),
        ("rest", pl.make_pipeline(impute.SimpleImputer(), pp.StandardScaler()),
         ["suction_pressure_kpa", "motor_current_a"]),
        ("cat", pp.OneHotEncoder(handle_unknown="ignore"), ["refrigerant"]),
    ])
    est = pl.make_pipeline(prep, lm.LogisticRegression(max_iter=5000)).fit(X, y)
    return TestModel("compressor_shapes", est, X, y,
                     scorewright.freeze(est, name="compressor_shapes", check_rows=X))


def fault_type_ovr() -> TestModel:
    """One-vs-rest logistic models over the four fault types (the ovr_logit link of format
    version 3: each class's sigmoid divided by their sum)."""
    from sklearn.multiclass import OneVsRestClassifier

    _, _, lm, pl, _ = _sk()
    df = _readings()
    X, y = df[NUMERIC + CATEGORICAL], df["fault_type"]
    est = pl.make_pipeline(_scaled_and_one_hot(["site_zone"]),
                           OneVsRestClassifier(lm.LogisticRegression(max_iter=5000)))
    est.fit(X, y)
    return TestModel("fault_type_ovr", est, X, y,
                     scorewright.freeze(est, name="fault_type_ovr", check_rows=X))


def _spector_glm(name: str, link) -> TestModel:
    """A binomial GLM on Greene's Spector data (statsmodels ships it) with another link."""
    import statsmodels.api as sm
    from scorewright.freeze.statsmodels import ResultsSource

    data = sm.datasets.spector.load_pandas()
    X, y = data.exog[["GPA", "TUCE", "PSI"]], data.endog
    results = sm.GLM(y, sm.add_constant(X), family=sm.families.Binomial(link=link)).fit()
    model = scorewright.freeze(results, name=name, check_rows=X)
    return TestModel(name, _Classifier(ResultsSource(results, model)), X, y, model)


def spector_cauchit() -> TestModel:
    """The cauchit link (format version 3): the Cauchy CDF of the margin."""
    import statsmodels.api as sm
    return _spector_glm("spector_cauchit", sm.families.links.Cauchy())


def spector_cloglog() -> TestModel:
    """The complementary log-log link (format version 2)."""
    import statsmodels.api as sm
    return _spector_glm("spector_cloglog", sm.families.links.CLogLog())


def diabetes_gamma_inverse() -> TestModel:
    """The inverse link (format version 3): a Gamma GLM of the diabetes progression score
    (scikit-learn ships the data) with statsmodels' canonical InversePower link."""
    import statsmodels.api as sm
    from sklearn.datasets import load_diabetes
    from scorewright.freeze.statsmodels import ResultsSource

    X, y = load_diabetes(return_X_y=True, as_frame=True)
    X = X[["bmi", "bp", "s5"]]
    results = sm.GLM(y, sm.add_constant(X), family=sm.families.Gamma()).fit()
    model = scorewright.freeze(results, name="diabetes_gamma_inverse", check_rows=X)
    return TestModel("diabetes_gamma_inverse", ResultsSource(results, model), X, y, model)


def diabetes_log1p() -> TestModel:
    """The log1p link (format version 3): a ridge fitted on log1p of the diabetes score,
    predicting expm1 of its margin (TransformedTargetRegressor)."""
    from sklearn.compose import TransformedTargetRegressor
    from sklearn.datasets import load_diabetes
    _, _, lm, _, _ = _sk()
    X, y = load_diabetes(return_X_y=True, as_frame=True)
    est = TransformedTargetRegressor(lm.Ridge(alpha=0.1), func=np.log1p,
                                     inverse_func=np.expm1).fit(X, y)
    return TestModel("diabetes_log1p", est, X, y,
                     scorewright.freeze(est, name="diabetes_log1p", check_rows=X))


def fault_type_decision() -> TestModel:
    """A decision head (format version 4): RidgeClassifier over the four fault types, its
    margins and class with no probabilities."""
    _, _, lm, pl, _ = _sk()
    df = _readings()
    X, y = df[NUMERIC + CATEGORICAL], df["fault_type"]
    est = pl.make_pipeline(_scaled_and_one_hot(CATEGORICAL),
                           lm.RidgeClassifier(alpha=1.0)).fit(X, y)
    return TestModel("fault_type_decision", est, X, y,
                     scorewright.freeze(est, name="fault_type_decision", check_rows=X))


def committee_exposure() -> TestModel:
    """An exposure (format version 4: the feature's role): a Poisson GLM of bills per House
    committee with the committee's size as the exposure, through a formula (statsmodels
    ships the data); the artifacts output the expected count and the rate."""
    import statsmodels.api as sm
    import statsmodels.formula.api as smf
    from scorewright.freeze.statsmodels import ResultsSource

    d = sm.datasets.committee.load_pandas().data
    results = smf.glm("BILLS104 ~ SUBS + STAFF + PRESTIGE + np.log1p(BILLS103)", data=d,
                      family=sm.families.Poisson(), exposure=d.SIZE).fit()
    X = d.drop(columns=["BILLS104"])
    model = scorewright.freeze(results, name="committee_exposure", check_rows=X,
                               exposure="SIZE")
    return TestModel("committee_exposure", ResultsSource(results, model), X, d.BILLS104, model)


def compressor_quantiles() -> TestModel:
    """Format version 4's design kinds (the compressor readings): QuantileTransformer with
    normal and uniform output, and an l2 Normalizer over three imputed, scaled readings."""
    compose, impute, lm, pl, pp = _sk()
    df = _readings()
    X, y = df[NUMERIC + CATEGORICAL], df["fault_30d"]
    prep = compose.ColumnTransformer([
        ("qn", pl.make_pipeline(impute.SimpleImputer(strategy="median"), pp.QuantileTransformer(
            n_quantiles=40, output_distribution="normal")), ["vibration_mm_s"]),
        ("qu", pl.make_pipeline(impute.SimpleImputer(), pp.QuantileTransformer(
            n_quantiles=25)), ["hours_since_service"]),
        ("nz", pl.make_pipeline(impute.SimpleImputer(), pp.StandardScaler(), pp.Normalizer()),
         ["discharge_temp_c", "suction_pressure_kpa", "motor_current_a"]),
        ("cat", pp.OneHotEncoder(handle_unknown="ignore"), ["site_zone"]),
    ])
    est = pl.make_pipeline(prep, lm.LogisticRegression(max_iter=5000)).fit(X, y)
    return TestModel("compressor_quantiles", est, X, y,
                     scorewright.freeze(est, name="compressor_quantiles", check_rows=X))


def fault_calibrated() -> TestModel:
    """A calibrated head (format version 4): CalibratedClassifierCV over a LinearSVC,
    isotonic, the three folds' probabilities averaged (ensemble=True)."""
    from sklearn.calibration import CalibratedClassifierCV
    from sklearn.svm import LinearSVC

    _, _, _, pl, _ = _sk()
    df = _readings()
    X, y = df[NUMERIC + CATEGORICAL], df["fault_30d"]
    est = pl.make_pipeline(_scaled_and_one_hot(["site_zone"]), CalibratedClassifierCV(
        LinearSVC(C=0.5), method="isotonic", cv=3, ensemble=True)).fit(X, y)
    return TestModel("fault_calibrated", est, X, y,
                     scorewright.freeze(est, name="fault_calibrated", check_rows=X))

class _Classifier:
    """statsmodels results as a scikit-learn classifier (predict_proba; predict: the class
    of probability above 0.5), for the tests that compare with one."""

    def __init__(self, source):
        self.source = source
        self.classes_ = np.array([0, 1])
        self.feature_names_in_ = source.feature_names_in_

    def predict_proba(self, frame):
        return self.source.predict_proba(frame)

    def predict(self, frame):
        return (self.source.predict(frame) > 0.5).astype(int)


BUILDERS = {
    "fault_binary": fault_binary,
    "fault_type": fault_type_multinomial,
    "iris": iris_multinomial,
    "wine": wine_multinomial,
    "alarms_poisson": alarms_poisson,
    "diabetes_ridge": diabetes_ridge,
    "spector": spector_logit,
    "mixed_scalers": mixed_scalers,
    "hostile": hostile_names,
    "compressor_terms": compressor_terms,
    "spector_probit": spector_probit,
}
BUILDERS_OF_FORMAT_2 = len(BUILDERS)
BUILDERS |= {
    "compressor_shapes": compressor_shapes,
    "fault_type_ovr": fault_type_ovr,
    "spector_cauchit": spector_cauchit,
    "spector_cloglog": spector_cloglog,
    "diabetes_gamma_inverse": diabetes_gamma_inverse,
    "diabetes_log1p": diabetes_log1p,
    "fault_type_decision": fault_type_decision,
    "committee_exposure": committee_exposure,
    "compressor_quantiles": compressor_quantiles,
    "fault_calibrated": fault_calibrated,
}


# Format version 3's splines, power transforms, log1p and inverse links, and format 4's
# quantiles, norms and isotonic calibrators, are scored in double precision only: a single-precision target
# refuses the model in one line, and that refusal is what it is held to.
DOUBLE_ONLY = {"compressor_shapes", "diabetes_log1p", "diabetes_gamma_inverse",
               "compressor_quantiles", "fault_calibrated"}
SINGLE_REFUSED = "not scored in single precision"  # the words of each refusal


# The models the per-target suites walk one by one (ONNX graph checks, firmware images in
# both precisions); the format 3 models after them are held to their conformance vectors
# on every profile, boards included, and refused in one line by the single-precision ones.
WALKED = tuple(BUILDERS)[:BUILDERS_OF_FORMAT_2]


@lru_cache(maxsize=None)
def build(name: str) -> TestModel:
    return BUILDERS[name]()


def wide_model(n: int, prefix: str = "sensor", spread: float = 0.02) -> FrozenModel:
    """An invented all-numeric binary model of n standardized features (seeded by n):
    the shape that tests how far each target scales."""
    import random

    from scorewright.model import DesignColumn, Head, NumericFeature, ScalingStep

    rng = random.Random(n)
    width = max(3, len(str(n - 1)))
    feats = tuple(NumericFeature(f"{prefix}_{i:0{width}d}", rng.uniform(-1, 1),
                                 (ScalingStep("subtract", rng.uniform(-5, 5)),
                                  ScalingStep("divide", rng.uniform(0.5, 3.0))))
                  for i in range(n))
    head = Head("binary", "logit", ("ok", "fault"), (-0.3,),
                (tuple(rng.gauss(0, spread) for _ in range(n)),), 0.0)
    return FrozenModel(f"wide_{n}", feats, tuple(DesignColumn(f.name) for f in feats), head,
                       {"scorewright_version": "test", "source": "scale test"}).sealed()


def many_levels_model(n_levels: int) -> FrozenModel:
    """An invented binary model of one load reading and one categorical of n_levels sites
    (seeded by n_levels): the shape that tests how far each target scales in levels."""
    import random

    from scorewright.model import (CategoricalFeature, DesignColumn, Head, NumericFeature,
                                   ScalingStep)

    rng = random.Random(n_levels)
    levels = tuple(f"site-{i:05d}" for i in range(n_levels))
    feats = (NumericFeature("load_pct", 50.0, (ScalingStep("subtract", 50.0),
                                                ScalingStep("divide", 20.0))),
             CategoricalFeature("site", levels, None, None))
    design = (DesignColumn("load_pct"),) + tuple(DesignColumn("site", (lv,)) for lv in levels)
    coefs = (0.4,) + tuple(rng.gauss(0, 0.5) for _ in levels)
    return FrozenModel(f"levels_{n_levels}", feats, design,
                       Head("binary", "logit", (0, 1), (0.1,), (coefs,), 0.0),
                       {"scorewright_version": "test", "source": "scale test"}).sealed()
