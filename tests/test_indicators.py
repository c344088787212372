"""Missingness as a predictor: SimpleImputer(add_indicator=True) and MissingIndicator, scaled
or not, sharing their input with its value; each indicator a two-valued term of the scoring
program (its contribution when the input is present and when it is missing). Checked against
scikit-learn itself and on the real runtimes of the targets that render the program."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.compose import ColumnTransformer
from sklearn.impute import MissingIndicator, SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import MinMaxScaler, OneHotEncoder, StandardScaler

import scorewright
from scorewright.errors import ModelFileError, ScorewrightError
from scorewright.freeze import freeze_checked
from scorewright.model import canonical_sha256, parse_model
from scorewright.plan import build_plan
from scorewright.reference import score_row


def _frame(n=800, seed=0):
    rng = np.random.default_rng(seed)
    x = pd.DataFrame({"suction_bar": rng.normal(3, 0.5, n),
                      "runtime_h": rng.lognormal(5, 1, n),
                      "defrost_min": rng.gamma(2, 10, n),
                      "site": rng.choice(["north", "south", "east"], n)})
    gone = rng.random(n) < 0.15
    x.loc[gone, "suction_bar"] = np.nan
    x.loc[rng.random(n) < 0.1, "runtime_h"] = np.nan
    x.loc[rng.random(n) < 0.2, "defrost_min"] = np.nan
    y = ((np.nan_to_num(x.suction_bar, nan=2.0) - 3) + gone * 1.5
         + rng.logistic(size=n) * 0.5 > 0).astype(int)
    return x, y


def _pipeline(head=None):
    ct = ColumnTransformer([
        ("num", make_pipeline(SimpleImputer(strategy="mean", add_indicator=True),
                              StandardScaler()), ["suction_bar", "runtime_h"]),
        ("flag", MissingIndicator(), ["runtime_h", "defrost_min"]),
        ("cat", OneHotEncoder(handle_unknown="ignore"), ["site"])])
    return make_pipeline(ct, head or LogisticRegression())


def _rows(frame):
    return [{k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in r.items()}
            for r in frame.to_dict("records")]


def test_indicators_freeze_and_agree_with_scikit_learn():
    """The self-check holds the frozen model to predict_proba to 1e-12 on the data (a
    seventh of it missing somewhere); and here explicitly. defrost_min reaches the model
    only through its indicator."""
    x, y = _frame()
    pipe = _pipeline().fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert checked.compared >= len(x)
    pairs = [(c.feature, c.missing) for c in model.design if c.missing is not None]
    assert [f for f, _ in pairs] == ["suction_bar", "runtime_h", "runtime_h", "defrost_min"]
    assert pairs[2][1] == (0.0, 1.0) and pairs[3][1] == (0.0, 1.0)
    plan = build_plan(model)
    want = pipe.predict_proba(x)[:, 1]
    got = np.array([score_row(plan, r).probabilities[1] for r in _rows(x)])
    assert np.max(np.abs(got - want)) <= 1e-12


def test_a_scaled_indicator_takes_scikit_learns_own_values():
    """The pair (present, missing) is what the fitted ColumnTransformer outputs for the
    indicator column, bit for bit (StandardScaler's (0 - mean) / scale and (1 - mean) /
    scale, in its order)."""
    x, y = _frame()
    pipe = _pipeline().fit(x, y)
    model = scorewright.freeze(pipe, check_rows=x)
    ct = pipe[0]
    present = x.iloc[[0]].assign(suction_bar=3.0)
    absent = x.iloc[[0]].assign(suction_bar=np.nan)
    column = 2  # suction_bar's indicator: after the two imputed columns
    want = (ct.transform(present)[0, column], ct.transform(absent)[0, column])
    assert model.design[column].missing == want


def test_minmax_scaled_indicators_and_a_regression_head():
    x, y = _frame(seed=3)
    target = np.nan_to_num(x.runtime_h, nan=100.0) / 100 + x.suction_bar.isna()
    pipe = make_pipeline(
        ColumnTransformer([("num", make_pipeline(
            SimpleImputer(strategy="median", add_indicator=True), MinMaxScaler((-1, 1))),
            ["suction_bar", "runtime_h"])]), Ridge()).fit(x, target)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert checked.compared >= len(x)
    assert {c.missing for c in model.design if c.missing is not None} == {(-1.0, 1.0)}


@pytest.mark.parametrize("make, words", [
    (lambda: ColumnTransformer([("cat", make_pipeline(
        SimpleImputer(strategy="most_frequent", add_indicator=True), OneHotEncoder()),
        ["site"])]), "OneHotEncoder"),
    (lambda: make_pipeline(SimpleImputer(), MissingIndicator(features="all")),
     "follows an imputer"),
])
def test_what_is_not_frozen_is_refused_in_one_line(make, words):
    x, y = _frame()
    x = x.assign(site=x.site.where(x.index % 7 != 0, None))
    cols = ["site"] if words == "OneHotEncoder" else ["suction_bar"]
    pipe = make_pipeline(ColumnTransformer([("p", make(), cols)]), LogisticRegression())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pipe.fit(x, y)
    with pytest.raises(ScorewrightError) as err:
        scorewright.freeze(pipe)
    assert words in str(err.value) and "\n" not in str(err.value)


def _resealed(doc):
    doc["sha256"] = canonical_sha256(doc)
    return json.dumps(doc)


def test_model_file_holds_indicators_in_version_2():
    x, y = _frame()
    model = scorewright.freeze(_pipeline().fit(x, y), check_rows=x)
    doc = json.loads(model.to_json())
    assert doc["format_version"] == 2
    assert doc["design"][4] == {"feature": "runtime_h", "missing": [0.0, 1.0]}
    assert parse_model(model.to_json()).design == model.design
    bad = json.loads(model.to_json())
    bad["format_version"] = 1
    with pytest.raises(ModelFileError, match="missing indicator of feature 'suction_bar' needs"):
        parse_model(_resealed(bad))
    bad = json.loads(model.to_json())
    bad["design"][4]["levels"] = ["north"]
    with pytest.raises(ModelFileError, match="not both"):
        parse_model(_resealed(bad))
    bad = json.loads(model.to_json())
    bad["design"][4]["missing"] = [0.0]
    with pytest.raises(ModelFileError, match="value when present, value when missing"):
        parse_model(_resealed(bad))


def test_indicators_verify_on_the_targets_that_render_the_program(tmp_path):
    from scorewright.verify.harness import build_targets

    x, y = _frame()
    model = scorewright.freeze(_pipeline().fit(x, y), check_rows=x)
    report = build_targets(model, tmp_path, data=None, n_random=300,
                           targets=["python", "c-double", "java", "c-float",
                                    "onnx-double", "onnx-float-reference",
                                    "sql-sqlite", "sql-duckdb"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]
