"""Bins: scikit-learn's KBinsDiscretizer (ordinal, onehot, onehot-dense; uniform, quantile
and kmeans edges) frozen as a bins step, lowered into comparisons and selections only (so
every target gets it); a value exactly on an edge falls in the bin above it, as
KBinsDiscretizer's searchsorted(side="right") puts it. Checked against scikit-learn itself,
on every edge and one double either side, and on the real runtimes of the targets that
render the scoring program."""

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
from sklearn.preprocessing import KBinsDiscretizer, StandardScaler

import scorewright
from scorewright.errors import ModelFileError, ScorewrightError
from scorewright.freeze import freeze_checked
from scorewright.model import canonical_sha256, parse_model
from scorewright.plan import build_plan
from scorewright.reference import score_row


def _frame(n=1000, seed=0):
    rng = np.random.default_rng(seed)
    x = pd.DataFrame({"age_months": rng.integers(0, 240, n).astype(float),
                      "load_pct": rng.uniform(0, 100, n),
                      "ambient_c": rng.normal(20, 5, n)})
    x.loc[rng.random(n) < 0.1, "load_pct"] = np.nan
    y = ((x.age_months > 120).astype(int) + (np.nan_to_num(x.load_pct, nan=50) > 70)
         + rng.logistic(size=n) > 1).astype(int)
    return x, y


def _pipeline(head=None):
    ct = ColumnTransformer([
        ("age", KBinsDiscretizer(n_bins=5, encode="onehot", strategy="quantile",
                                 quantile_method="averaged_inverted_cdf"), ["age_months"]),
        ("load", make_pipeline(SimpleImputer(strategy="median"),
                               KBinsDiscretizer(n_bins=4, encode="ordinal", strategy="uniform"),
                               StandardScaler()), ["load_pct"]),
        ("amb", KBinsDiscretizer(n_bins=3, encode="onehot-dense", strategy="kmeans"),
         ["ambient_c"])])
    return make_pipeline(ct, head or LogisticRegression())


def _rows(frame):
    return [{k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in r.items()}
            for r in frame.to_dict("records")]


def test_bins_freeze_and_agree_with_scikit_learn():
    x, y = _frame()
    pipe = _pipeline().fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert checked.compared >= len(x)
    edges = [f.scaling[0].edges for f in model.features]
    assert [len(e) for e in edges] == [4, 3, 2]
    plan = build_plan(model)
    got = np.array([score_row(plan, r).probabilities[1] for r in _rows(x)])
    assert np.max(np.abs(got - pipe.predict_proba(x)[:, 1])) <= 1e-12


def test_every_edge_and_one_double_either_side_agree():
    """On an edge the value is in the bin above (searchsorted, side right); one double
    below, in the bin below: the frozen model agrees with predict_proba on each."""
    x, y = _frame()
    pipe = _pipeline().fit(x, y)
    model = scorewright.freeze(pipe, check_rows=x)
    plan = build_plan(model)
    base = x.iloc[[0]].fillna(50.0)
    rows = []
    for feat in model.features:
        for e in feat.scaling[0].edges:
            for v in (e, math.nextafter(e, math.inf), math.nextafter(e, -math.inf)):
                rows.append(base.assign(**{feat.name: v}))
    frame = pd.concat(rows, ignore_index=True)
    want = pipe.predict_proba(frame)[:, 1]
    got = np.array([score_row(plan, r).probabilities[1] for r in _rows(frame)])
    assert np.max(np.abs(got - want)) <= 1e-12
    # and the bins themselves: the edge opens the upper bin
    kb = pipe[0].named_transformers_["age"]
    e = model.features[0].scaling[0].edges[1]
    assert kb.transform(pd.DataFrame({"age_months": [e]})).toarray()[0].argmax() == 2
    assert kb.transform(pd.DataFrame({"age_months": [math.nextafter(e, 0)]})
                        ).toarray()[0].argmax() == 1


def test_a_poisson_head_on_bins():
    x, _ = _frame(seed=2)
    counts = np.random.default_rng(3).poisson(1 + (x.age_months > 100))
    pipe = _pipeline(PoissonRegressor(alpha=1e-3)).fit(x, counts)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert model.head.link == "log" and checked.compared >= len(x)


def test_a_missing_value_without_an_imputer_contributes_nothing():
    """scikit-learn cannot bin NaN; the frozen rule: a missing one-hot binned value takes
    no bin (no contribution), as a missing category with no level does."""
    x, y = _frame()
    model = scorewright.freeze(_pipeline().fit(x, y), check_rows=x)
    plan = build_plan(model)
    row = _rows(x.iloc[[1]])[0]
    missing = score_row(plan, dict(row, age_months=None)).margins[0]
    term = model.head.coefficients[0][:5]
    present = score_row(plan, row).margins[0]
    bin_of = sum(e <= row["age_months"] for e in model.features[0].scaling[0].edges)
    assert math.isclose(present - term[bin_of], missing, rel_tol=0, abs_tol=1e-12)


@pytest.mark.parametrize("make, words", [
    (lambda: make_pipeline(StandardScaler(), KBinsDiscretizer(n_bins=3)),
     "comes after scaling"),
    (lambda: make_pipeline(KBinsDiscretizer(n_bins=3, encode="onehot-dense"),
                           StandardScaler()), "KBinsDiscretizer's one-hot columns"),
    (lambda: KBinsDiscretizer(n_bins=3, encode="ordinal", dtype=np.float32), "dtype"),
])
def test_what_is_not_frozen_is_refused_in_one_line(make, words):
    x, y = _frame()
    pipe = make_pipeline(ColumnTransformer([("p", make(), ["ambient_c"])]),
                         LogisticRegression())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe.fit(x, y)
    with pytest.raises(ScorewrightError) as err:
        scorewright.freeze(pipe)
    assert words in str(err.value) and "\n" not in str(err.value)


def _resealed(doc):
    doc["sha256"] = canonical_sha256(doc)
    return json.dumps(doc)


def test_model_file_holds_bins_in_version_2():
    x, y = _frame()
    model = scorewright.freeze(_pipeline().fit(x, y), check_rows=x)
    doc = json.loads(model.to_json())
    assert doc["format_version"] == 2
    assert doc["features"][0]["scaling"][0]["op"] == "bins"
    assert doc["design"][0] == {"feature": "age_months", "levels": [0]}
    assert parse_model(model.to_json()).features == model.features
    for mutate, words in [
            (lambda d: d["features"][0]["scaling"][0]["edges"].reverse(), "increasing"),
            (lambda d: d["design"][0].update(levels=[7]), "integers from 0 to 4"),
            (lambda d: d["features"][1]["scaling"].reverse(), "bins must be the first step"),
            (lambda d: d.update(format_version=1), "bins transform of feature")]:
        bad = json.loads(model.to_json())
        mutate(bad)
        with pytest.raises(ModelFileError, match=words):
            parse_model(_resealed(bad))


def test_bins_verify_on_the_targets_that_render_the_program(tmp_path):
    """Python, C, Java, float C (edges rounded to the floats it compares with) and ONNX;
    verify's edge rows hold every edge and one double either side."""
    from scorewright.verify.harness import build_targets

    x, y = _frame()
    model = scorewright.freeze(_pipeline().fit(x, y), check_rows=x)
    report = build_targets(model, tmp_path, data=None, n_random=300,
                           targets=["python", "c-double", "java", "c-float",
                                    "onnx-double", "onnx-float-reference",
                                    "sql-sqlite", "sql-duckdb"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]
