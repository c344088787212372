"""Encoded categories: OrdinalEncoder (unknown_value, encoded_missing_value, an imputer and a
scaler after it) and TargetEncoder (binary, continuous and multiclass targets, missing as a
fitted category or not) frozen as encoded columns: a value per level, one for an unseen
level and one for a missing value. Checked against scikit-learn itself, including unseen
and missing rows, and on the real runtimes of the targets that render the program."""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.model_selection import KFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import OrdinalEncoder, StandardScaler, TargetEncoder

import scorewright
from scorewright.errors import ModelFileError, ScorewrightError
from scorewright.freeze import freeze_checked
from scorewright.model import canonical_sha256, parse_model
from scorewright.plan import build_plan
from scorewright.reference import score_row


def _frame(n=1200, seed=0):
    rng = np.random.default_rng(seed)
    x = pd.DataFrame({"grade": rng.choice(["A", "B", "C", "D"], n),
                      "region": rng.choice([f"r{i}" for i in range(8)], n),
                      "load": rng.normal(0, 1, n)})
    x.loc[rng.random(n) < 0.05, "grade"] = np.nan
    x.loc[rng.random(n) < 0.05, "region"] = np.nan
    y = ((x.grade.fillna("B") < "C").astype(int) + x.region.isin(["r1", "r2"]) + x.load
         + rng.logistic(size=n) * 0.5 > 1).astype(int)
    return x, y


def _pipeline(head=None):
    ct = ColumnTransformer([
        ("g", make_pipeline(OrdinalEncoder(handle_unknown="use_encoded_value", unknown_value=-1),
                            SimpleImputer(strategy="median"), StandardScaler()), ["grade"]),
        ("r", TargetEncoder(cv=KFold(5)), ["region"]),
        ("l", "passthrough", ["load"])])
    return make_pipeline(ct, head or LogisticRegression())


def _rows(frame):
    return [{k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in r.items()}
            for r in frame.to_dict("records")]


def test_encoders_freeze_and_agree_with_scikit_learn():
    x, y = _frame()
    pipe = _pipeline().fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert checked.compared >= len(x)
    grade, region = model.design[0].encoded, model.design[1].encoded
    ct = pipe[0]
    # the encodings are scikit-learn's own transformed values, bit for bit
    probe = pd.DataFrame({"grade": ["A", "Z", np.nan], "region": ["r3", "r99", np.nan],
                          "load": [0.0, 0.0, 0.0]})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        out = ct.transform(probe)
    assert (grade[0][0], grade[1], grade[2]) == tuple(out[:, 0])
    assert (region[0][3], region[1], region[2]) == tuple(out[:, 1])
    plan = build_plan(model)
    probe_rows = _rows(probe)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        want = pipe.predict_proba(probe)[:, 1]
    got = [score_row(plan, r).probabilities[1] for r in probe_rows]
    assert np.max(np.abs(np.array(got) - want)) <= 1e-12


def test_multiclass_target_encoding_gives_a_column_per_class():
    x, _ = _frame()
    y = np.random.default_rng(1).integers(0, 3, len(x))
    pipe = make_pipeline(ColumnTransformer([("r", TargetEncoder(cv=KFold(5)),
                                             ["region", "grade"])]),
                         LogisticRegression()).fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert [c.feature for c in model.design] == ["region"] * 3 + ["grade"] * 3
    assert checked.compared >= len(x)


def test_continuous_target_encoding():
    x, _ = _frame()
    y = x.load * 2 + x.region.isin(["r1"]).astype(float)
    pipe = make_pipeline(ColumnTransformer([("r", TargetEncoder(cv=KFold(5)), ["region"]),
                                            ("l", "passthrough", ["load"])]), Ridge()).fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert checked.compared >= len(x)


def test_an_unseen_level_under_handle_unknown_error_is_stated():
    """scikit-learn raises on an unseen level (handle_unknown='error'); the frozen model
    gives it design value 0.0, and the self-check counts such rows as unscored."""
    x, y = _frame()
    pipe = make_pipeline(ColumnTransformer([
        ("g", make_pipeline(OrdinalEncoder(), SimpleImputer()), ["grade"]),
        ("l", "passthrough", ["load"])]), LogisticRegression()).fit(x, y)
    model, checked = freeze_checked(pipe, check_rows=x)
    assert model.design[0].encoded[1] == 0.0 and checked.unscored >= 1


def _resealed(doc):
    doc["sha256"] = canonical_sha256(doc)
    return json.dumps(doc)


def test_model_file_holds_encodings_in_version_2():
    x, y = _frame()
    model = scorewright.freeze(_pipeline().fit(x, y), check_rows=x)
    text = model.to_json()
    doc = json.loads(text)
    assert doc["format_version"] == 2 and set(doc["design"][0]["encoded"]) == {
        "values", "unseen", "missing"}
    assert parse_model(text).design == model.design
    for mutate, words in [
            (lambda d: d["design"][0]["encoded"]["values"].pop(), "one value per level"),
            (lambda d: d["design"][0].update(levels=["A"]), "no levels or missing"),
            (lambda d: d.update(format_version=1), "needs format_version 2")]:
        doc = json.loads(text)
        mutate(doc)
        with pytest.raises(ModelFileError, match=words):
            parse_model(_resealed(doc))


def test_encoders_verify_on_the_targets_that_render_the_program(tmp_path):
    from scorewright.verify.harness import build_targets

    x, y = _frame()
    model = scorewright.freeze(_pipeline().fit(x, y), check_rows=x)
    report = build_targets(model, tmp_path, data=None, n_random=300,
                           targets=["python", "c-double", "java", "c-float",
                                    "onnx-double", "onnx-float-reference",
                                    "sql-sqlite", "sql-duckdb"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]



def test_a_missing_value_the_fit_never_saw_is_encoded_as_unseen():
    """OrdinalEncoder gives encoded_missing_value only to a missing value it saw in the
    fit; otherwise a missing value is an unknown category (unknown_value), as here."""
    x, y = _frame()
    x = x.assign(grade=x.grade.fillna("B"))
    pipe = make_pipeline(ColumnTransformer([
        ("g", OrdinalEncoder(handle_unknown="use_encoded_value", unknown_value=-1,
                             encoded_missing_value=-2), ["grade"]),
        ("l", "passthrough", ["load"])]), LogisticRegression()).fit(x, y)
    model, _ = freeze_checked(pipe, check_rows=x)
    assert model.design[0].encoded[1:] == (-1.0, -1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        probe = pd.DataFrame({"grade": pd.Series([None], dtype=object), "load": [0.0]})
        assert pipe[0].transform(probe)[0, 0] == -1


def test_equal_tables_of_one_input_compile_once_in_c(tmp_path):
    """An input's level indicator and its encoding may give equal contribution tables
    (found by tests/test_hostile_names.py: a one-hot column and an ordinal code of the
    same category, both weight 1). The C file holds one table for both; gcc, with unused
    constants an error, compiles it and the artifacts agree with the reference."""
    from scorewright.model import (CategoricalFeature, DesignColumn, FrozenModel, Head,
                                   NumericFeature)
    from scorewright.verify.harness import build_targets

    model = FrozenModel(
        "grade_twice", (NumericFeature("load", None),
                        CategoricalFeature("grade", ("A", "B"), None, None)),
        (DesignColumn("load"), DesignColumn("grade", ("B",)),
         DesignColumn("grade", encoded=((0.0, 1.0), -1.0, -2.0))),
        Head("regression", "identity", None, (0.0,), ((0.5, 1.0, 1.0),), None),
        {"source": "test"}).sealed()
    report = build_targets(model, tmp_path, data=None, n_random=100,
                           targets=["c-double", "java", "python", "sql-sqlite"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]
