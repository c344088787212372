"""Linear classifiers with a decision function and no probabilities, frozen as "decision"
heads: their margins and their class alone.

The source is scikit-learn itself (its LinearClassifierMixin): every check holds the
frozen model to the fitted estimator's decision_function (1e-12 relative to the margin's
terms) and to its predict exactly, on data sets scikit-learn ships (breast cancer, iris,
wine) and on small integer data where a Perceptron's weights are integers, so margins of
exactly 0 and exact ties between classes occur, and scikit-learn's own rule (classes_[1]
where decision_function > 0; np.argmax, the first largest, otherwise) decides them.
"""

from __future__ import annotations

import dataclasses
import json
import shutil
import subprocess
import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer, load_iris, load_wine
from sklearn.linear_model import (
    PassiveAggressiveClassifier,
    Perceptron,
    RidgeClassifier,
    RidgeClassifierCV,
    SGDClassifier,
)
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import LinearSVC

from scorewright.describe import describe_model
from scorewright.errors import ScorewrightError
from scorewright.freeze import freeze_checked
from scorewright.freeze.self_check import FreezeMismatch, check_model
from scorewright.model import Head, load_model, parse_model
from scorewright.plan import build_plan
from scorewright.reference import encode_rows, margin_scale, score_matrix
from scorewright.verify.cases import edge_rows

KINDS = {
    "ridge": lambda: RidgeClassifier(),
    "ridge-cv": lambda: RidgeClassifierCV(),
    "linear-svc": lambda: LinearSVC(),
    "linear-svc-crammer-singer": lambda: LinearSVC(multi_class="crammer_singer"),
    "perceptron": lambda: Perceptron(random_state=0),
    "passive-aggressive": lambda: PassiveAggressiveClassifier(random_state=0),
    "sgd-hinge": lambda: SGDClassifier(loss="hinge", random_state=0),
    "sgd-squared-hinge": lambda: SGDClassifier(loss="squared_hinge", random_state=0),
    "sgd-perceptron": lambda: SGDClassifier(loss="perceptron", random_state=0),
    "sgd-modified-huber": lambda: SGDClassifier(loss="modified_huber", random_state=0),
}


def _fit(make, data):
    x, y = data(return_X_y=True, as_frame=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # convergence warnings of the few-epoch fits
        return make_pipeline(StandardScaler(), make()).fit(x, y), x


def _against_source(model, est, x):
    """The frozen margins and classes against scikit-learn's decision_function and
    predict on the same rows."""
    plan = build_plan(model)
    matrix = encode_rows(plan, x.to_dict("records"))
    out = score_matrix(plan, matrix)
    source = np.asarray(est.decision_function(x), dtype=np.float64).reshape(len(x), -1)
    scale = margin_scale(plan, matrix)
    assert np.all(np.abs(out["margins"] - source) <= 1e-12 * np.maximum(scale, np.abs(source)))
    assert [model.head.classes[k] for k in out["class_index"]] == list(est.predict(x))
    assert "probabilities" not in out


@pytest.mark.parametrize("kind", list(KINDS))
@pytest.mark.parametrize("data, task", [(load_breast_cancer, "binary"),
                                        (load_iris, "multiclass")], ids=["cancer", "iris"])
def test_each_decision_classifier_freezes_as_its_decision_function(kind, data, task):
    est, x = _fit(KINDS[kind], data)
    model, checked = freeze_checked(est, check_rows=x)
    assert (model.head.task, model.head.link) == (task, "decision")
    assert checked.compared >= len(x) and checked.boundary == 0
    _against_source(model, est, x)


def _integer_data(n_classes: int, seed: int = 7):
    """Small integer readings: a Perceptron (learning rate 1, no regularization) fitted
    on them has integer weights, so its margins are exact integers."""
    rng = np.random.default_rng(seed)
    x = pd.DataFrame(rng.integers(-3, 4, size=(300, 3)).astype(float), columns=["a", "b", "c"])
    score = x["a"] + 2 * x["b"] - x["c"]
    y = np.digitize(score, [-1.5, 1.5][:n_classes - 1]) if n_classes > 2 else \
        (score > 0).astype(int)
    return x, pd.Series(y, name="y")


def _grid():
    """Every integer row in [-6, 6]^3."""
    r = np.arange(-6.0, 7.0)
    return pd.DataFrame(np.array(np.meshgrid(r, r, r)).reshape(3, -1).T, columns=["a", "b", "c"])


def _integer_perceptron(n_classes: int):
    x, y = _integer_data(n_classes)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        est = Perceptron(max_iter=5, tol=None, random_state=0).fit(x, y)
    model, _ = freeze_checked(est, check_rows=x)
    return est, x, model


def test_a_margin_of_exactly_zero_gives_the_first_class_as_scikit_learn():
    """scikit-learn's binary predict: classes_[1] where decision_function > 0, so a margin
    of exactly 0 (or -0.0) gives classes_[0]."""
    est, _, model = _integer_perceptron(2)
    assert all(float(v).is_integer() for v in np.ravel(est.coef_))
    x = _grid()
    source = est.decision_function(x)
    zero = x[source == 0.0]
    assert len(zero) > 0  # rows on the boundary
    _against_source(model, est, zero)
    assert set(est.predict(zero)) == {est.classes_[0]}
    # and the frozen program's own rule on -0.0, checked on the scalar and numpy tables
    plan = build_plan(dataclasses.replace(model, head=dataclasses.replace(
        model.head, intercepts=(-0.0,), coefficients=((0.0, 0.0, 0.0),))))
    out = score_matrix(plan, encode_rows(plan, [{"a": 1.0, "b": 2.0, "c": -1.0}]))
    assert str(out["margins"][0, 0]) in ("0.0", "-0.0") and out["class_index"][0] == 0


def test_an_exact_tie_gives_the_first_largest_class_as_numpys_argmax():
    est, _, model = _integer_perceptron(3)
    x = _grid()
    source = est.decision_function(x)
    top = np.sort(source, axis=1)
    tied = x[top[:, -1] == top[:, -2]]
    assert len(tied) > 0
    _against_source(model, est, tied)
    assert list(est.predict(tied)) == list(est.classes_[np.argmax(source[top[:, -1] ==
                                                                        top[:, -2]], axis=1)])


def test_verify_edge_rows_reach_the_boundary_and_the_ties():
    """verify's edge rows hold a margin of exactly 0 (binary) and an exact tie between
    two classes (multiclass), and scikit-learn's predict agrees with the frozen class
    on every edge row it can score (no missing values in the row)."""
    for n_classes in (2, 3):
        est, _, model = _integer_perceptron(n_classes)
        plan = build_plan(model)
        rows = [r for _, r in edge_rows(plan)
                if all(isinstance(v, float) and np.isfinite(v) for v in r.values())]
        out = score_matrix(plan, encode_rows(plan, rows))
        m = out["margins"]
        if n_classes == 2:
            assert (m[:, 0] == 0.0).any()
        else:
            top = np.sort(m, axis=1)
            assert (top[:, -1] == top[:, -2]).any()
        frame = pd.DataFrame(rows, columns=["a", "b", "c"])
        with np.errstate(over="ignore"):  # the input guards' rows: 1e300-sized products
            assert list(est.predict(frame)) == [model.head.classes[k] for k in out["class_index"]]


def test_the_self_check_refuses_a_decision_model_that_differs():
    est, x = _fit(KINDS["ridge"], load_iris)
    model, _ = freeze_checked(est, check_rows=x)
    h = model.head
    rows = list(map(list, h.coefficients))
    rows[1][0] = rows[1][0] * (1 + 1e-9)
    wrong = dataclasses.replace(model, head=dataclasses.replace(
        h, coefficients=tuple(map(tuple, rows)))).sealed()
    with pytest.raises(FreezeMismatch, match="decision function 1"):
        check_model(est, wrong, x)
    # a class the source does not predict: every margin the same but the order of classes
    swapped = dataclasses.replace(model, head=dataclasses.replace(
        h, classes=(h.classes[1], h.classes[0], h.classes[2]))).sealed()
    with pytest.raises(FreezeMismatch, match="class: source"):
        check_model(est, swapped, x)


def test_modified_huber_is_frozen_decision_only():
    """SGDClassifier(loss='modified_huber') has a predict_proba, (clip(f, -1, 1) + 1) / 2
    normalized; its predict is the decision rule on f, which is what is frozen. Where two
    margins clip to 1, predict_proba's largest probability does not name predict's class
    (scikit-learn's own outputs, on iris)."""
    est, x = _fit(KINDS["sgd-modified-huber"], load_iris)
    model, _ = freeze_checked(est, check_rows=x)
    assert model.head.link == "decision"
    proba_class = est.classes_[np.argmax(est.predict_proba(x), axis=1)]
    assert (proba_class != est.predict(x)).any()
    _against_source(model, est, x)


def test_the_model_file_says_decision_in_format_version_4(tmp_path):
    est, x = _fit(KINDS["linear-svc"], load_wine)
    model, _ = freeze_checked(est, check_rows=x)
    path = tmp_path / "svc.json"
    model.write(path)
    doc = json.loads(path.read_text())
    assert doc["format_version"] == 4 and doc["head"]["link"] == "decision"
    again = load_model(path)
    assert again == model
    doc["format_version"] = 3
    path.write_text(json.dumps(doc))
    with pytest.raises(ScorewrightError, match="the decision link needs format_version 4"):
        load_model(path)
    text = describe_model(model)
    assert "link decision" in text and "no probabilities" in text
    assert "the class of the largest margin (the first on ties)" in text


def test_a_multilabel_ridge_classifier_is_refused_in_one_line():
    x, y = load_breast_cancer(return_X_y=True, as_frame=True)
    est = make_pipeline(StandardScaler(), RidgeClassifier()).fit(x, np.c_[y, 1 - y])
    with pytest.raises(ScorewrightError) as err:
        freeze_checked(est)
    assert "is multilabel" in str(err.value) and "\n" not in str(err.value)


# ---------------------------------------------------------------- every target

DEFAULT_TARGETS = ["python", "c-double", "java", "onnx-double", "sql-duckdb"]
EVERY_TARGET = ["python", "c-double", "c-float", "c-double-portable-exp", "c-cortex-m3",
                "c-cortex-m4f", "java", "java-portable-exp", "onnx-double", "onnx-float",
                "onnx-double-reference", "onnx-float-reference", "sql-sqlite",
                "sql-sqlite-long", "sql-duckdb", "sql-duckdb-long", "sql-postgres",
                "sql-postgres-long", "sql-spark", "sql-spark-long"]


def _verify(tmp_path, targets, options=None, n_random=60):
    from scorewright.verify.harness import build_targets

    for n_classes in (2, 3):
        _est, _x, model = _integer_perceptron(n_classes)
        report = build_targets(model, tmp_path / str(n_classes), targets=targets,
                               n_random=n_random, options=options, progress=None)
        assert report.ok, [(r.profile.name, r.message) for r in report.results]
        assert {r.status for r in report.results} == {"pass"}, \
            [(r.profile.name, r.status, r.message) for r in report.results]


def test_decision_heads_verify_on_one_profile_of_each_family(tmp_path):
    """The Perceptron's margins (exact zeros and ties among them) on Python, C, Java,
    ONNX (onnxruntime) and SQL (DuckDB), each in its real runtime against the reference."""
    _verify(tmp_path, DEFAULT_TARGETS)


@pytest.mark.slow
def test_decision_heads_verify_on_every_profile(tmp_path, postgres_dsn):
    _verify(tmp_path, EVERY_TARGET, {"sql": {"dsn": postgres_dsn}}, n_random=300)


@pytest.mark.slow
def test_wine_decision_heads_verify_on_every_profile(tmp_path, postgres_dsn):
    from scorewright.verify.harness import build_targets

    for kind in ("ridge", "linear-svc"):
        for data in (load_breast_cancer, load_wine):
            est, x = _fit(KINDS[kind], data)
            model, _ = freeze_checked(est, check_rows=x)
            report = build_targets(model, tmp_path / f"{kind}-{data.__name__}",
                                   targets=EVERY_TARGET, n_random=200,
                                   options={"sql": {"dsn": postgres_dsn}}, progress=None)
            assert report.ok, [(r.profile.name, r.message) for r in report.results]


def test_c_batch_gives_the_margins_bits(tmp_path):
    """The C batch scorer of a decision head writes its margins (the decision function),
    bit for bit the program's, on edge rows and counts that end mid-block."""
    from test_c_batch import COUNTS, _matrix

    from scorewright.emit import emitter
    from scorewright.emit.c import driver_source
    from scorewright.program import lower, run_matrix

    assert shutil.which("gcc"), "the C batch tests need gcc"
    for n_classes in (2, 3):
        _, _, model = _integer_perceptron(n_classes)
        plan = build_plan(model)
        data = _matrix(plan)
        want = run_matrix(lower(plan), data)
        want = np.stack([want[f"margin_{k}"] for k in range(plan.n_outputs)], axis=1)
        d = tmp_path / str(n_classes)
        d.mkdir()
        for art in emitter("c")(model, {"prefix": "s"}):
            (d / art.name).write_bytes(art.content)
        (d / "driver.c").write_text(driver_source(model, "s"), encoding="ascii")
        subprocess.run(["gcc", "-std=c99", "-O2", "-ffp-contract=off", "-Wall", "-Wextra",
                        "-Werror", "-I", str(d), "-o", str(d / "driver"), str(d / "driver.c"),
                        str(d / "s.c"), "-lm"], check=True)
        count = COUNTS[-1]
        (d / "rows.bin").write_bytes(data[:count].tobytes())
        out = subprocess.run([str(d / "driver"), "--batch", str(d / "rows.bin")],
                             capture_output=True, text=True, check=True).stdout
        got = np.array([[float.fromhex(v) for v in line.split()] for line in out.splitlines()])
        assert got.shape == (count, plan.n_outputs)
        assert (got.view(np.uint64) == want[:count].view(np.uint64)).all()
        header = (d / "s.h").read_text()
        assert "_probabilit" not in header and "_probabilit" not in (d / "s.c").read_text()


def test_a_hand_written_decision_head_loads_and_scores():
    """A head written by hand (no estimator): two classes tied on every row give the
    first of them, as np.argmax does."""
    _est, x, model = _integer_perceptron(3)
    h = model.head
    rows = (h.coefficients[0], h.coefficients[1], h.coefficients[1])
    tied = dataclasses.replace(model, head=Head("multiclass", "decision", h.classes,
                                                (h.intercepts[0], 5.0, 5.0), rows, None))
    tied = parse_model(tied.sealed().to_json())  # through the strict reader
    plan = build_plan(tied)
    out = score_matrix(plan, encode_rows(plan, x.to_dict("records")))
    m = out["margins"]
    assert (m[:, 1] == m[:, 2]).all()
    np.testing.assert_array_equal(out["class_index"], np.argmax(m, axis=1))
    assert (out["class_index"] != 2).all()


def test_tie_rows_of_a_model_with_categories():
    """The tie rows move a numeric input; a categorical input's term is passed over."""
    from sklearn.compose import ColumnTransformer
    from sklearn.preprocessing import OneHotEncoder

    x, y = load_iris(return_X_y=True, as_frame=True)
    x["band"] = np.where(x.index % 3 == 0, "a", "b")
    est = make_pipeline(ColumnTransformer([
        ("band", OneHotEncoder(), ["band"]),
        ("num", StandardScaler(), list(x.columns[:4]))]), RidgeClassifier()).fit(x, y)
    model, _ = freeze_checked(est, check_rows=x)
    names = [name for name, _ in edge_rows(build_plan(model))]
    assert sum("near a tie" in n for n in names) >= 4
    _against_source(model, est, x)


@pytest.mark.slow  # three command-line processes: several seconds
def test_the_cli_freezes_shows_and_emits_a_decision_head(tmp_path):
    """freeze (a pickled LinearSVC), show and emit through the command line."""
    import pickle
    import sys

    x, y = load_iris(return_X_y=True, as_frame=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        (tmp_path / "svc.pkl").write_bytes(pickle.dumps(LinearSVC().fit(x, y)))

    import os
    from pathlib import Path

    import scorewright

    # this tree's scorewright, whatever the working directory
    env = {**os.environ, "PYTHONPATH": str(Path(scorewright.__file__).parents[1])}

    def run(*args):
        return subprocess.run([sys.executable, "-m", "scorewright.cli", *args],
                              capture_output=True, text=True, cwd=tmp_path, env=env, check=False)

    frozen = run("freeze", "svc.pkl", "-o", "svc.json")
    assert frozen.returncode == 0, frozen.stderr
    shown = run("show", "svc.json")
    assert "link decision" in shown.stdout and "no probabilities" in shown.stdout
    emitted = run("emit", "svc.json", "--target", "python", "-o", "out")
    assert emitted.returncode == 0, emitted.stderr
    scorer = (tmp_path / "out" / "linearsvc.py").read_text()
    assert "def decision_function" in scorer and "def predict_proba" not in scorer
