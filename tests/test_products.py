"""Interactions: PolynomialFeatures (degree 2 and 3, interaction_only, with or without the
bias column) over scaled numbers, one-hot indicators and missing indicators, and scalers
after it (scaled one-hot columns included). Each column is its factors multiplied in the
order scikit-learn's dense transform multiplies them, then its own steps. Checked against
scikit-learn itself and on the real runtimes of the targets that render the program."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import OneHotEncoder, PolynomialFeatures, StandardScaler

import scorewright
from scorewright.errors import ModelFileError, ScorewrightError
from scorewright.freeze import freeze_checked
from scorewright.model import canonical_sha256, parse_model
from scorewright.plan import build_plan
from scorewright.reference import score_row


def _frame(n=1000, seed=0):
    rng = np.random.default_rng(seed)
    x = pd.DataFrame({"load_pct": rng.uniform(0, 100, n), "ambient_c": rng.normal(20, 5, n),
                      "site": rng.choice(["north", "south", "east"], n)})
    x.loc[rng.random(n) < 0.1, "load_pct"] = np.nan
    y = ((np.nan_to_num(x.load_pct, nan=50) / 50 - 1) * (x.ambient_c - 20) / 5
         + (x.site == "north") + rng.logistic(size=n) * 0.3 > 0.5).astype(int)
    return x, y


def _columns(indicator=True):
    return ColumnTransformer([
        ("num", make_pipeline(SimpleImputer(strategy="median", add_indicator=indicator),
                              StandardScaler()), ["load_pct", "ambient_c"]),
        ("cat", OneHotEncoder(handle_unknown="ignore", sparse_output=False), ["site"])])


def _rows(frame):
    return [{k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in r.items()}
            for r in frame.to_dict("records")]


@pytest.mark.parametrize("degree, interaction_only, bias", [
    (2, False, True), (2, True, False), (3, False, False)])
def test_polynomial_features_freeze_and_agree(degree, interaction_only, bias):
    """The self-check holds the frozen model to predict_proba to 1e-12 on the data, rows
    with missing values and unseen sites among the derived ones; and here explicitly."""
    x, y = _frame()
    pipe = make_pipeline(_columns(), PolynomialFeatures(degree, interaction_only=interaction_only,
                                                        include_bias=bias),
                         StandardScaler(), LogisticRegression(max_iter=2000)).fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert checked.compared >= len(x)
    n_out = pipe[1].n_output_features_ - (1 if bias else 0)
    assert len(model.design) == n_out
    plan = build_plan(model)
    got = np.array([score_row(plan, r).probabilities[1] for r in _rows(x)])
    assert np.max(np.abs(got - pipe.predict_proba(x)[:, 1])) <= 1e-12


def test_product_values_are_scikit_learns_bit_for_bit():
    """Without a scaler after it, each product column is PolynomialFeatures' own value:
    the frozen margin is X @ coef + intercept with X scikit-learn's design, to 1e-12."""
    x, y = _frame()
    pipe = make_pipeline(_columns(), PolynomialFeatures(2, include_bias=False),
                         Ridge()).fit(x, y.astype(float))
    model, checked = freeze_checked(pipe, check_rows=x)
    plan = build_plan(model)
    got = np.array([score_row(plan, r).value for r in _rows(x)])
    np.testing.assert_allclose(got, pipe.predict(x), rtol=1e-12, atol=1e-12)


def test_a_scaler_after_one_hot_columns():
    """StandardScaler after the ColumnTransformer scales the one-hot columns too: each is a
    one-factor product (its indicator) with the scaler's steps; an unseen level takes the
    scaled value of 0, as scikit-learn gives it."""
    x, y = _frame()
    pipe = make_pipeline(_columns(), StandardScaler(), LogisticRegression()).fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    scaled = [c for c in model.design if c.product is not None]
    assert len(scaled) == 3 and all(len(c.product) == 1 for c in scaled)
    plan = build_plan(model)
    row = x.iloc[[5]].assign(site="west")  # unseen: all three indicators 0
    want = pipe.predict_proba(row)[0, 1]
    assert abs(score_row(plan, _rows(row)[0]).probabilities[1] - want) <= 1e-12


def test_a_degree_three_product_is_refused_in_single_precision():
    x, y = _frame()
    pipe = make_pipeline(_columns(), PolynomialFeatures(3, include_bias=False),
                         LogisticRegression(max_iter=2000)).fit(x, y)
    model = scorewright.freeze(pipe, check_rows=x)
    with pytest.raises(ScorewrightError, match="not scored in single precision"):
        build_plan(model, "float")


def _resealed(doc):
    doc["sha256"] = canonical_sha256(doc)
    return json.dumps(doc)


def test_model_file_holds_products_in_version_2():
    x, y = _frame()
    pipe = make_pipeline(_columns(), PolynomialFeatures(2, include_bias=False),
                         StandardScaler(), LogisticRegression(max_iter=2000)).fit(x, y)
    model = scorewright.freeze(pipe, check_rows=x)
    text = model.to_json()
    doc = json.loads(text)
    assert doc["format_version"] == 2
    product = next(c for c in doc["design"] if "product" in c and len(c["product"]) == 2)
    assert set(product) == {"feature", "product", "scaling"}
    assert parse_model(text).design == model.design
    for mutate, words in [
            (lambda d: product.update(product=[]), "needs a factor"),
            (lambda d: product["product"][0].pop("scaling", None)
             or product["product"][0].update(feature="load_pct"), "states its scaling"),
            (lambda d: product.update(feature="site"), "first factor's feature"),
            (lambda d: d.update(format_version=1), "needs format_version 2")]:
        doc = json.loads(text)
        product = next(c for c in doc["design"] if "product" in c and len(c["product"]) == 2)
        mutate(doc)
        with pytest.raises(ModelFileError, match=words):
            parse_model(_resealed(doc))


def test_products_verify_on_the_targets_that_render_the_program(tmp_path):
    from scorewright.verify.harness import build_targets

    x, y = _frame()
    pipe = make_pipeline(_columns(), PolynomialFeatures(2), StandardScaler(),
                         LogisticRegression(max_iter=2000)).fit(x, y)
    model = scorewright.freeze(pipe, check_rows=x)
    report = build_targets(model, tmp_path, data=None, n_random=300,
                           targets=["python", "c-double", "java", "c-float",
                                    "sql-sqlite", "sql-duckdb"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]


def test_onnx_renders_products_scaled_or_not(tmp_path):
    """Both graphs are bit-identical on onnxruntime (default optimizations) and the ONNX
    reference evaluator. With a scaler after PolynomialFeatures a product's scale is
    within 2^-24 of 1.0 (1.0000000000000007 here), which onnxruntime's optimizer would
    delete as a division by one (tests/test_onnx.py shows the runtime doing it)."""
    from scorewright.verify.harness import build_targets

    x, y = _frame()
    for scaler in ((), (StandardScaler(),)):
        model = scorewright.freeze(make_pipeline(_columns(), PolynomialFeatures(2), *scaler,
                                                 LogisticRegression(max_iter=2000)).fit(x, y),
                                   check_rows=x)
        assert any(c.product is not None and bool(c.scaling) == bool(scaler)
                   for c in model.design)
        report = build_targets(model, tmp_path / str(len(scaler)), data=None, n_random=300,
                               targets=["onnx-double", "onnx-double-reference",
                                        "onnx-float-reference", "sql-sqlite", "sql-duckdb"])
        assert report.ok, [(r.profile.name, r.message) for r in report.results]
