"""CalibratedClassifierCV frozen as a calibrated head (format version 4): method='isotonic'
and ensemble=True, binary and multiclass, over LogisticRegression and LinearSVC.

Against scikit-learn itself: its predict_proba (to 1e-12 on real data; bit for bit where
the decision values reach the calibrators exactly) and its predict, on data sets
scikit-learn ships (breast cancer, wine) and on made-up rows. Against the runtimes: each
model built and verified on one profile of each target family."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from sklearn.calibration import CalibratedClassifierCV
from sklearn.datasets import load_breast_cancer, load_wine
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import LinearSVC

from scorewright.errors import ModelFileError, ScorewrightError
from scorewright.freeze import freeze_checked
from scorewright.freeze.self_check import FreezeMismatch
from scorewright.model import canonical_sha256, format_version, parse_model
from scorewright.plan import build_plan
from scorewright.reference import encode_rows, score_matrix, score_row

INNER = {"LogisticRegression": lambda: LogisticRegression(max_iter=5000),
         "LinearSVC": lambda: LinearSVC()}


def _fit(estimator, x, y):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return estimator.fit(x, y)


def _identity_calibrated(method: str, n_classes: int, ensemble: bool, inner: str):
    """A calibrated classifier whose decision values are the inputs themselves: each
    fold's estimator is fitted, calibrated, then given identity coefficients and zero
    intercepts, so scikit-learn's decision_function (a product with 1.0, plus 0.0) and
    the frozen margin (1.0 times the input, plus 0.0) are the input, exactly."""
    rng = np.random.default_rng(7)
    n_inputs = 1 if n_classes == 2 else n_classes
    x = rng.normal(size=(240, n_inputs)) * 3.0
    y = (x.argmax(axis=1) if n_classes > 2 else (x[:, 0] > 0).astype(int))
    flip = rng.random(len(y)) < 0.25
    y = np.where(flip, rng.integers(0, n_classes, len(y)), y)
    cc = _fit(CalibratedClassifierCV(INNER[inner](), method=method, ensemble=ensemble, cv=3),
              x, y)
    for member in cc.calibrated_classifiers_:
        member.estimator.coef_ = np.eye(n_inputs)
        member.estimator.intercept_ = np.zeros(n_inputs)
    return cc


def _edge_inputs(cc) -> np.ndarray:
    """Every isotonic threshold, one double either side, far beyond both ends, and random
    values, each as every input at once (the calibrators of all classes meet it)."""
    values = [0.0, -0.0, 1e6, -1e6, 1e300, -1e300]
    for member in cc.calibrated_classifiers_:
        for cal in member.calibrators:
            for t in getattr(cal, "X_thresholds_", ()):
                values += [float(t), math.nextafter(t, math.inf), math.nextafter(t, -math.inf)]
    values += list(np.random.default_rng(3).normal(size=200) * 4.0)
    return np.array(values)


@pytest.mark.parametrize("method, n_classes, ensemble, inner", [
    ("isotonic", 2, True, "LogisticRegression"), ("isotonic", 3, True, "LinearSVC"),
    ("isotonic", 2, False, "LinearSVC"), ("isotonic", 9, False, "LinearSVC"),
    ("sigmoid", 2, True, "LinearSVC"),
    pytest.param("isotonic", 4, False, "LogisticRegression", marks=pytest.mark.slow),
    pytest.param("isotonic", 9, True, "LinearSVC", marks=pytest.mark.slow),
    pytest.param("sigmoid", 3, True, "LinearSVC", marks=pytest.mark.slow),
])
def test_calibrated_probabilities_are_scikit_learns_bits(method, n_classes, ensemble, inner):
    """Where the decision values reach the calibrators exactly, the frozen probabilities
    are scikit-learn's predict_proba bit for bit (isotonic: numpy's interp at every
    threshold, one double either side and beyond both ends; numpy's sum, 8 terms and
    more pairwise, for 9 classes; the mean over the folds in scikit-learn's order), and
    the class is its predict (on ties too: isotonic flat segments tie exactly). The
    sigmoid is scipy's expit against the program's stable sigmoid: within 2^-52."""
    cc = _identity_calibrated(method, n_classes, ensemble, inner)
    model, _ = freeze_checked(cc)
    assert model.head.link == "calibrated" and format_version(model) == 4
    n_inputs = 1 if n_classes == 2 else n_classes
    values = _edge_inputs(cc)
    x = np.repeat(values[:, None], n_inputs, axis=1)
    # each input also alone at the value, the others far below (one class's calibrator
    # at its edge while the others sit at their lowest)
    for k in range(1, n_inputs):
        alone = np.full((len(values), n_inputs), -1e6)
        alone[:, k] = values
        x = np.vstack([x, alone])
    plan = build_plan(model)
    names = [f.name for f in model.features]
    out = score_matrix(plan, encode_rows(plan, [dict(zip(names, r)) for r in x.tolist()]))
    source = cc.predict_proba(x)   # scikit-learn, the source model
    if method == "isotonic":
        assert np.array_equal(out["probabilities"][:, -1], source[:, -1])
        if n_classes > 2:
            assert np.array_equal(out["probabilities"], source)
    else:
        np.testing.assert_allclose(out["probabilities"], source, rtol=0, atol=2.0 ** -52)
    assert list(np.asarray(model.head.classes)[out["class_index"]]) == list(cc.predict(x))
    # the reference's two op tables agree (scalar rows against the numpy matrix)
    for r in x[::37].tolist():
        row = score_row(plan, dict(zip(names, r)))
        assert row.probabilities == tuple(score_matrix(
            plan, encode_rows(plan, [dict(zip(names, r))]))["probabilities"][0])


def test_binary_probability_zero_is_one_minus_the_positive_class():
    """A binary target outputs p1 alone and every binary head's p0 is 1 - p1; scikit-
    learn's mean of the folds' p0 may differ from it in the last bit (within 1e-12)."""
    cc = _identity_calibrated("isotonic", 2, True, "LogisticRegression")
    model, _ = freeze_checked(cc)
    plan = build_plan(model)
    x = _edge_inputs(cc)[:, None]
    out = score_matrix(plan, encode_rows(plan, [{"x0": v} for v in x[:, 0]]))
    p = out["probabilities"]
    assert np.array_equal(p[:, 0], 1.0 - p[:, 1])
    np.testing.assert_allclose(p, cc.predict_proba(x), rtol=0, atol=1e-15)


def test_edge_rows_meet_every_isotonic_threshold():
    """Verify's edge rows put each decision value on each isotonic threshold and one
    double either side (exactly here, where the margin is the input), and beyond both
    ends."""
    from scorewright.verify.cases import edge_rows

    cc = _identity_calibrated("isotonic", 3, True, "LinearSVC")
    model, _ = freeze_checked(cc)
    plan = build_plan(model)
    rows = [r for _, r in edge_rows(plan)]
    margins = score_matrix(plan, encode_rows(plan, rows))["margins"]
    for k, cal in enumerate(model.head.calibration.calibrators):
        got = set(margins[:, k].tolist())
        for t in cal.thresholds:
            assert {t, math.nextafter(t, math.inf), math.nextafter(t, -math.inf)} <= got
        assert margins[:, k].min() < cal.thresholds[0] and margins[:, k].max() > \
            cal.thresholds[-1]


DATA = {"binary": load_breast_cancer, "wine": load_wine}
REAL = [pytest.param(data, inner, method, ensemble, id=f"{data}-{inner}-{method}-"
                     f"{'ensemble' if ensemble else 'single'}",
                     marks=() if (data, inner, method, ensemble) in (
                         ("binary", "LogisticRegression", "isotonic", True),
                         ("wine", "LinearSVC", "isotonic", False)) else pytest.mark.slow)
        for data in DATA for inner in INNER for method in ("isotonic", "sigmoid")
        for ensemble in (True, False)]


@pytest.mark.parametrize("data, inner, method, ensemble", REAL)
def test_calibrated_pipelines_agree_with_scikit_learn(data, inner, method, ensemble):
    """Around the pipeline (ensemble=False) or inside it: the freeze self-check holds the
    frozen model to predict_proba (1e-12) and predict on every row of the data set, and
    so does this test (breast cancer and wine, shipped with scikit-learn)."""
    x, y = DATA[data](return_X_y=True, as_frame=True)
    cal = CalibratedClassifierCV(INNER[inner](), method=method, ensemble=ensemble, cv=3)
    pipes = [make_pipeline(StandardScaler(), cal)]
    if not ensemble:
        pipes.append(CalibratedClassifierCV(make_pipeline(StandardScaler(), INNER[inner]()),
                                            method=method, ensemble=False, cv=3))
    for pipe in pipes:
        _fit(pipe, x, y)
        model, checked = freeze_checked(pipe, check_rows=x)
        assert checked.compared >= len(x)
        want = "calibrated" if (method, ensemble) != ("sigmoid", False) else \
            ("logit" if y.nunique() == 2 else "ovr_logit")
        assert model.head.link == want
        plan = build_plan(model)
        out = score_matrix(plan, encode_rows(plan, x.to_dict("records")))
        np.testing.assert_allclose(out["probabilities"], pipe.predict_proba(x), rtol=0,
                                   atol=1e-12)
        assert list(np.asarray(model.head.classes)[out["class_index"]]) == \
            list(pipe.predict(x))


def test_the_self_check_holds_the_class_to_predict():
    """A source whose predict disagrees with its own probabilities (tampered here) is
    refused: the class is compared, not only the probabilities."""
    x, y = load_wine(return_X_y=True, as_frame=True)
    pipe = _fit(make_pipeline(StandardScaler(), CalibratedClassifierCV(
        LogisticRegression(max_iter=5000), method="isotonic", cv=3)), x, y)
    honest = pipe.predict
    pipe.predict = lambda rows: np.roll(honest(rows), 1)
    with pytest.raises(FreezeMismatch, match="does not predict the source estimator's class"):
        freeze_checked(pipe, check_rows=x)


_MODELS: dict = {}


def _model_doc(method="isotonic"):
    """A wine ensemble of 2 folds over LinearSVC (fitted once per method)."""
    if method not in _MODELS:
        x, y = load_wine(return_X_y=True, as_frame=True)
        pipe = _fit(make_pipeline(StandardScaler(), CalibratedClassifierCV(
            LinearSVC(), method=method, cv=2)), x, y)
        _MODELS[method] = freeze_checked(pipe)[0]
    model = _MODELS[method]
    return model, json.loads(model.to_json())


def test_a_calibrated_model_file_round_trips_and_is_checked():
    model, doc = _model_doc()
    again = parse_model(model.to_json())
    assert again == model and again.sha256 == model.sha256
    assert doc["format_version"] == 4
    assert doc["head"]["calibration"]["members"] == 2
    assert len(doc["head"]["calibration"]["calibrators"]) == 6


def _resealed(doc):
    doc["sha256"] = canonical_sha256(doc)
    return json.dumps(doc)


@pytest.mark.parametrize("edit, words", [
    (lambda d: d.update(format_version=3), "the calibrated head needs format_version 4"),
    (lambda d: d["head"]["calibration"].update(members=3), "head.calibration.calibrators"),
    (lambda d: d["head"].pop("calibration"), "missing key 'calibration'"),
    (lambda d: d["head"].update(cut=0.0), "head.cut"),
    (lambda d: d["head"]["calibration"]["calibrators"][0].update(method="spline"),
     "calibrators[0].method"),
    (lambda d: d["head"]["calibration"]["calibrators"][1]["thresholds"].reverse(),
     "calibrators[1].thresholds: expected increasing"),
    (lambda d: d["head"]["calibration"]["calibrators"][2]["values"].pop(),
     "calibrators[2].values: expected one value per threshold"),
    (lambda d: d["head"]["calibration"]["calibrators"][0].update(
        thresholds=[0.0, 5e-324], values=[0.0, 1.0]), "too close for a finite slope"),
], ids=["version", "members", "no-calibration", "cut", "method", "order", "values", "slope"])
def test_a_damaged_calibrated_model_file_is_refused_in_one_line(edit, words):
    _, doc = _model_doc()
    edit(doc)
    with pytest.raises(ModelFileError) as err:
        parse_model(_resealed(doc))
    assert words in str(err.value) and "\n" not in str(err.value)


def test_single_precision_refuses_an_isotonic_calibrator_in_one_line():
    model, _ = _model_doc()
    with pytest.raises(ScorewrightError, match="not scored in single precision"):
        build_plan(model, "float")
    sigmoid, _ = _model_doc("sigmoid")
    build_plan(sigmoid, "float")


def _wine_ensemble(method="isotonic", inner="LogisticRegression", data="wine"):
    x, y = DATA[data](return_X_y=True, as_frame=True)
    pipe = _fit(make_pipeline(StandardScaler(), CalibratedClassifierCV(
        INNER[inner](), method=method, cv=3)), x, y)
    model, _ = freeze_checked(pipe, check_rows=x)
    return model, x


def _build(tmp_path, model, x, targets, options=None):
    from scorewright.verify.harness import build_targets

    report = build_targets(model, tmp_path, data=None, n_random=120, targets=targets,
                           options=options)
    assert report.ok, [(r.profile.name, r.message) for r in report.results]
    assert all(r.status == "pass" for r in report.results)


def test_a_calibrated_ensemble_verifies_on_python_and_sqlite(tmp_path):
    """A multiclass isotonic ensemble (2 folds: 6 decision values) built and verified, bit
    for bit, on the Python and SQLite targets (every family under --runslow)."""
    model, _ = _model_doc()
    _build(tmp_path, model, None, ["python", "sql-sqlite"])


@pytest.mark.slow
@pytest.mark.parametrize("method, inner, data", [
    ("isotonic", "LogisticRegression", "wine"), ("isotonic", "LinearSVC", "binary"),
    ("sigmoid", "LinearSVC", "wine"), ("sigmoid", "LogisticRegression", "binary")])
def test_calibrated_ensembles_verify_on_every_family(tmp_path, postgres_dsn, method, inner,
                                                      data):
    model, x = _wine_ensemble(method, inner, data)
    targets = ["python", "c-double", "c-double-portable-exp", "java", "onnx-double",
               "onnx-double-reference", "sql-sqlite", "sql-sqlite-long", "sql-duckdb",
               "sql-duckdb-long", "sql-postgres", "sql-spark", "c-cortex-m4f"]
    if method == "sigmoid":
        targets += ["c-float", "onnx-float"]
    _build(tmp_path, model, x, targets, {"sql": {"dsn": postgres_dsn}})


def test_show_describes_each_fold_and_its_calibrator():
    from scorewright.describe import describe_model

    model, _ = freeze_checked(_identity_calibrated("isotonic", 2, True, "LinearSVC"))
    text = describe_model(model)
    assert "calibrated 3 fold(s), isotonic" in text and "cut " not in text
    assert text.count("isotonic calibrator of") == 3


@pytest.mark.slow
def test_a_calibrated_head_of_many_thresholds_verifies_on_every_family(tmp_path, postgres_dsn):
    """Five folds of three classes, about 70 isotonic thresholds each (a thousand in all):
    the selections are a balanced tree (SQLite's parser nests about 100 levels) and the
    Java link is cut into methods (64 KB of bytecode a method)."""
    from sklearn.datasets import make_classification

    x, y = make_classification(n_samples=30000, n_features=8, n_informative=5, n_classes=3,
                               random_state=0)
    cc = _fit(CalibratedClassifierCV(LinearSVC(), method="isotonic", cv=5), x, y)
    model, _ = freeze_checked(cc, check_rows=x[:2000])
    assert sum(len(c.thresholds) for c in model.head.calibration.calibrators) > 900
    _build(tmp_path, model, None, ["python", "c-double", "java", "onnx-double", "sql-sqlite",
                                   "sql-duckdb", "sql-postgres", "sql-spark"],
           {"sql": {"dsn": postgres_dsn}})
