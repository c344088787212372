"""Freeze proves itself against the source model: scikit-learn's own predict_proba /
predict (the reference library) against the frozen model's reference evaluator.

Also the freezing faults the check exists for: boolean columns (scikit-learn reads a
bool as 0/1), OneHotEncoder(handle_unknown='warn') (scikit-learn >= 1.6 sends unseen
levels to the infrequent group), unsupported statsmodels results, and None against NaN in a text
column (scikit-learn's SimpleImputer imputes NaN only)."""

from __future__ import annotations

import csv
import importlib.util
import io
import pickle
import subprocess
import sys
import warnings
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, PoissonRegressor
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler

import scorewright
from scorewright import reference
from scorewright.cli import cli
from scorewright.describe import describe_model
from scorewright.emit import emitter
from scorewright.errors import ScorewrightError
from scorewright.freeze import freeze_checked
from scorewright.freeze.self_check import FreezeMismatch, check_model
from scorewright.freeze.sklearn import freeze_estimator
from scorewright.plan import build_plan
from scorewright.reference import score_row
from scorewright.values import numeric_value
from scorewright.verify.runners import runner

N = 200


def _quiet(fn, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return fn(*args, **kwargs)


# ---------------------------------------------------------------- booleans

def _flag_frame(seed=4):
    """Invented pump readings: a bool defrost flag (numeric, standardized), a bool
    door-alarm category (one-hot: categories [False, True]) and a pressure."""
    rng = np.random.default_rng(seed)
    X = pd.DataFrame({
        "pressure_kpa": rng.normal(300, 40, N),
        "defrost_on": rng.random(N) < 0.3,
        "door_alarm": rng.random(N) < 0.4,
    })
    margin = (0.02 * (X.pressure_kpa - 300) + 2.5 * X.defrost_on - 1.8 * X.door_alarm)
    y = (rng.random(N) < 1 / (1 + np.exp(-margin))).astype(int)
    return X, y


def _flag_pipeline():
    X, y = _flag_frame()
    prep = ColumnTransformer([
        ("num", StandardScaler(), ["pressure_kpa", "defrost_on"]),
        ("cat", OneHotEncoder(handle_unknown="ignore"), ["door_alarm"]),
    ])
    return make_pipeline(prep, LogisticRegression()).fit(X, y), X


def _import_scorer(model, tmp_path):
    (art,) = emitter("python")(model, {})
    path = tmp_path / art.name
    path.write_bytes(art.content)
    spec = importlib.util.spec_from_file_location(f"scorer_{abs(hash(path))}", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module, path


def test_bool_columns_score_as_scikit_learn_reads_them(tmp_path):
    """The Python scorer read True/False as missing (numeric) and unseen (categorical)."""
    est, X = _flag_pipeline()
    model = scorewright.freeze(est, name="pump", check_rows=X)
    assert model.feature("defrost_on").boolean           # the check rows' bool dtype
    assert not model.feature("pressure_kpa").boolean
    assert model.feature("door_alarm").levels == (0, 1)  # categories [False, True]
    scorer, path = _import_scorer(model, tmp_path)
    rows = X.to_dict("records")
    assert isinstance(rows[0]["defrost_on"], bool)
    got = np.array([scorer.predict_proba(r) for r in rows])
    np.testing.assert_allclose(got, est.predict_proba(X), rtol=0, atol=1e-12)
    assert [scorer.predict(r) for r in rows] == list(est.predict(X))
    # numpy's bool scalars (no subclass of bool) read the same way
    np_rows = [{k: (np.bool_(v) if isinstance(v, bool) else v) for k, v in r.items()}
               for r in rows[:20]]
    assert [scorer.margin(r) for r in np_rows] == [scorer.margin(r) for r in rows[:20]]
    # as text from a CSV: the words true/false (any case) for the boolean feature
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(list(X.columns))
    for i, r in enumerate(rows[:40]):
        word = (("True", "TRUE", "true")[i % 3] if r["defrost_on"]
                else (" False", "false")[i % 2])
        writer.writerow([repr(r["pressure_kpa"]), word, int(r["door_alarm"])])
    proc = subprocess.run([sys.executable, "-I", "-S", str(path)], input=buf.getvalue(),
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    scored = list(csv.DictReader(io.StringIO(proc.stdout)))
    want = est.predict_proba(X.iloc[:40])[:, 1]
    have = np.array([float(s["probability"]) for s in scored])
    np.testing.assert_allclose(have, want, rtol=0, atol=1e-12)


def test_show_says_a_feature_was_fitted_on_booleans():
    est, X = _flag_pipeline()
    text = describe_model(scorewright.freeze(est, check_rows=X))
    line = next(l for l in text.splitlines() if l.startswith("  'defrost_on'"))
    assert "fitted on booleans (true/false read as 1/0)" in line
    other = next(l for l in text.splitlines() if l.startswith("  'pressure_kpa'"))
    assert "booleans" not in other


def test_boolean_words_only_for_a_boolean_feature():
    assert numeric_value(True) == 1.0 and numeric_value(False) == 0.0
    assert numeric_value(np.True_) == 1.0
    assert numeric_value(" TRUE ", boolean=True) == 1.0
    assert numeric_value("false", boolean=True) == 0.0
    assert numeric_value("true") is None          # a plain numeric feature: not a number
    assert numeric_value("yes", boolean=True) is None
    assert numeric_value("1", boolean=True) == 1.0


def test_onnx_runner_feeds_booleans_as_doubles(tmp_path):
    """onnxruntime, fed by the runner, gives scikit-learn's probabilities for bool rows."""
    est, X = _flag_pipeline()
    model = scorewright.freeze(est, name="pump", check_rows=X)
    (art,) = emitter("onnx")(model, {})
    (tmp_path / art.name).write_bytes(art.content)
    rows = X.to_dict("records")
    rows_text = [dict(r, defrost_on=str(r["defrost_on"]).lower()) for r in rows]
    for feed in (rows, rows_text):
        out = runner("onnx")(tmp_path, model, feed, {"evaluator": "onnxruntime"})
        np.testing.assert_allclose(out.probabilities, est.predict_proba(X), rtol=0,
                                   atol=1e-12)


def test_the_check_catches_booleans_read_as_missing(monkeypatch):
    """With the old rule (a bool is missing), the self-check refuses the model."""
    est, X = _flag_pipeline()
    model = freeze_estimator(est)

    def old_rule(value, boolean=False):
        return None if isinstance(value, (bool, np.bool_)) else numeric_value(value, boolean)

    monkeypatch.setattr(reference, "numeric_value", old_rule)
    with pytest.raises(FreezeMismatch, match="data row 1 "):
        check_model(est, model, X)


# ---------------------------------------------------------------- handle_unknown='warn'

def _zone_frame(seed=7):
    rng = np.random.default_rng(seed)
    n = 600
    zone = rng.choice(["aisle", "dock", "blast", "rare-a", "rare-b"], n,
                      p=[0.35, 0.3, 0.27, 0.04, 0.04])
    temp = rng.normal(0, 1, n)
    margin = 0.8 * temp + np.where(np.isin(zone, ["rare-a", "rare-b"]), 2.0, -0.5)
    y = (rng.random(n) < 1 / (1 + np.exp(-margin))).astype(int)
    return pd.DataFrame({"temp": temp, "zone": zone}), y


@pytest.mark.parametrize("min_frequency", [40, None])
def test_handle_unknown_warn_sends_unseen_levels_where_scikit_learn_does(min_frequency):
    """scikit-learn >= 1.6 (OneHotEncoder.transform): 'warn' transforms as
    'infrequent_if_exist': an unseen level joins the infrequent group, and with no
    infrequent group its indicators are all zero."""
    X, y = _zone_frame()
    enc = OneHotEncoder(handle_unknown="warn", min_frequency=min_frequency)
    est = make_pipeline(ColumnTransformer([("z", enc, ["zone"])], remainder="passthrough"),
                        LogisticRegression()).fit(X, y)
    model = scorewright.freeze(est, check_rows=X)
    unseen = pd.DataFrame({"temp": [-1.0, 0.0, 2.0], "zone": ["quay", "roof", "yard"]})
    plan = build_plan(model)
    got = np.array([score_row(plan, r).probabilities for r in unseen.to_dict("records")])
    want = _quiet(est.predict_proba, unseen)
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)
    feat = model.feature("zone")
    assert feat.unknown_level == ("rare-a" if min_frequency else None)


def test_the_check_catches_unseen_levels_frozen_as_zeros():
    """The frozen model of the old rule ('warn' as all-zero indicators) is refused."""
    X, y = _zone_frame()
    enc = OneHotEncoder(handle_unknown="warn", min_frequency=40)
    est = make_pipeline(ColumnTransformer([("z", enc, ["zone"])], remainder="passthrough"),
                        LogisticRegression()).fit(X, y)
    model = freeze_estimator(est)
    wrong = replace(model, features=tuple(
        replace(f, unknown_level=None) if f.name == "zone" else f for f in model.features))
    with pytest.raises(FreezeMismatch, match="derived row"):
        check_model(est, wrong.sealed(), X)


# ---------------------------------------------------------------- a wrong freeze is refused

def _poisson():
    rng = np.random.default_rng(11)
    X = pd.DataFrame({"load": rng.uniform(0, 1, 300), "site": rng.choice(["n", "s"], 300)})
    y = rng.poisson(np.exp(0.5 + X.load))
    prep = ColumnTransformer([("n", StandardScaler(), ["load"]),
                              ("c", OneHotEncoder(handle_unknown="ignore"), ["site"])])
    return make_pipeline(prep, PoissonRegressor()).fit(X, y), X


def _nudged(monkeypatch, factor):
    """Freeze with the first coefficient off by `factor` (a deliberately wrong freeze)."""
    freeze_package = sys.modules["scorewright.freeze"]  # the attribute is the function
    real = freeze_package.freeze_estimator

    def wrong(*args, **kwargs):
        model = real(*args, **kwargs)
        coefs = list(model.head.coefficients)
        row = list(coefs[0])
        row[0] = row[0] * factor
        coefs[0] = tuple(row)
        return replace(model, head=replace(model.head, coefficients=tuple(coefs))).sealed()

    monkeypatch.setattr(freeze_package, "freeze_estimator", wrong)


def test_a_wrong_coefficient_is_refused_in_the_api(monkeypatch):
    est, X = _flag_pipeline()
    _nudged(monkeypatch, 1 + 1e-9)
    with pytest.raises(FreezeMismatch, match=r"data row 1 \(pressure_kpa="):
        scorewright.freeze(est, check_rows=X)
    with pytest.raises(FreezeMismatch, match="derived row"):  # no rows: derived rows find it
        scorewright.freeze(est)


def test_a_wrong_value_is_refused_relative(monkeypatch):
    est, X = _poisson()
    scorewright.freeze(est, check_rows=X)  # the true freeze passes
    _nudged(monkeypatch, 1 + 1e-9)
    with pytest.raises(FreezeMismatch, match="source .* frozen"):
        scorewright.freeze(est, check_rows=X)


def test_cli_refuses_a_wrong_freeze_and_writes_nothing(tmp_path, monkeypatch):
    est, X = _flag_pipeline()
    pkl = tmp_path / "pump.pkl"
    pkl.write_bytes(pickle.dumps(est))
    data = tmp_path / "rows.csv"
    X.to_csv(data, index=False)
    out = tmp_path / "pump.json"
    good = CliRunner().invoke(cli, ["freeze", str(pkl), "-o", str(out), "--check-data",
                                    str(data)])
    assert good.exit_code == 0, good.output
    # 200 rows and 9 derived; a missing pressure is not scored (no imputer: scikit-learn
    # raises), so it is skipped and said so
    assert ("self-check: the frozen model scores 209 rows (9 derived from the model) like "
            "the source estimator (within 1e-12); 1 row the source estimator cannot score "
            "was skipped") in good.stdout
    assert scorewright.load_model(out).feature("defrost_on").boolean  # CSV True/False: bool
    out.unlink()
    _nudged(monkeypatch, 1 + 1e-9)
    bad = CliRunner().invoke(cli, ["freeze", str(pkl), "-o", str(out), "--check-data",
                                   str(data)])
    assert bad.exit_code == 2
    lines = bad.stderr.strip().splitlines()
    assert lines[-1].startswith("error: self-check failed: ") and "data row 1 " in lines[-1]
    assert "Traceback" not in bad.output and not out.exists()


def test_cli_check_data_needs_the_model_columns(tmp_path):
    est, X = _flag_pipeline()
    pkl = tmp_path / "pump.pkl"
    pkl.write_bytes(pickle.dumps(est))
    data = tmp_path / "rows.csv"
    X.drop(columns=["door_alarm"]).to_csv(data, index=False)
    out = tmp_path / "pump.json"
    result = CliRunner().invoke(cli, ["freeze", str(pkl), "-o", str(out), "--check-data",
                                      str(data)])
    assert result.exit_code == 2 and not out.exists()
    assert "no column 'door_alarm'" in result.stderr.strip().splitlines()[-1]


# ---------------------------------------------------------------- None against NaN

def test_none_and_nan_in_a_text_column_are_named_not_failed():
    """scikit-learn's SimpleImputer (sklearn/utils/_mask.py, _get_mask) finds NaN in an
    object column but not None; the source then reads None as an unseen level."""
    rng = np.random.default_rng(5)
    X = pd.DataFrame({"temp": rng.normal(0, 1, 300),
                      "gas": pd.Series(rng.choice(["R404A", "R134a", "R717"], 300),
                                       dtype=object)})
    X.loc[::17, "gas"] = np.nan
    y = (rng.random(300) < 1 / (1 + np.exp(-(X.temp + (X.gas == "R717"))))).astype(int)
    prep = ColumnTransformer([
        ("n", StandardScaler(), ["temp"]),
        ("c", make_pipeline(SimpleImputer(strategy="most_frequent"),
                            OneHotEncoder(handle_unknown="ignore")), ["gas"])])
    est = make_pipeline(prep, LogisticRegression()).fit(X, y)
    with_none = X.copy()
    with_none["gas"] = with_none["gas"].astype(object)
    with_none.loc[::17, "gas"] = None
    # the source model itself: None and NaN score differently
    assert not np.allclose(est.predict_proba(with_none), est.predict_proba(X))
    model, result = freeze_checked(est, check_rows=with_none)
    (note,) = result.notes
    assert "None in text column 'gas' differently from NaN" in note
    fill = model.feature("gas").fill
    assert f"'gas' missing takes the level {fill!r}" in note
    with pytest.warns(UserWarning, match="SimpleImputer imputes NaN but not None"):
        scorewright.freeze(est, check_rows=with_none)


# ---------------------------------------------------------------- statsmodels

def _statsmodels_result():
    """A multinomial logit, which freeze does not take (tests/test_statsmodels.py has the
    results it takes)."""
    import statsmodels.api as sm

    data = sm.datasets.anes96.load_pandas().data  # ships with statsmodels
    exog = sm.add_constant(data[["logpopul", "selfLR", "age"]])
    return sm.MNLogit(data["PID"], exog).fit(disp=0, maxiter=200)


def test_unsupported_statsmodels_results_are_refused_plainly():
    with pytest.raises(ScorewrightError, match=r"^statsmodels MNLogit is not supported; "
                                               "freeze takes Logit"):
        scorewright.freeze(_statsmodels_result())


def test_cli_refuses_unsupported_statsmodels_in_one_line(tmp_path):
    pkl = tmp_path / "mnlogit.pkl"
    pkl.write_bytes(pickle.dumps(_statsmodels_result()))
    out = tmp_path / "m.json"
    result = CliRunner().invoke(cli, ["freeze", str(pkl), "-o", str(out)])
    assert result.exit_code == 2 and not out.exists()
    last = result.stderr.strip().splitlines()[-1]
    assert last.startswith("error: statsmodels MNLogit is not supported") and \
        "not fitted" not in last


def test_check_rows_the_source_cannot_score_are_an_error_not_a_pass(tmp_path):
    """Rows of the wrong shape prove nothing: say so instead of passing vacuously."""
    est, X = _flag_pipeline()
    wrong = X.assign(pressure_kpa="high")  # text where the scaler needs numbers
    with pytest.raises(ScorewrightError, match=r"scores none of the 200 rows given to check "
                                               r"\(ValueError: "):
        scorewright.freeze(est, check_rows=wrong)


def test_values_near_zero_are_measured_against_their_terms(monkeypatch):
    """scikit-learn's LinearRegression predicts with a matrix product (its own summation
    order); a value near zero cancels terms of size ~10, so its rounding is relative to
    the terms. Rows built to predict ~0 pass; a coefficient off by 1e-9 still fails."""
    from sklearn.linear_model import LinearRegression

    rng = np.random.default_rng(0)
    X = pd.DataFrame(rng.normal(50, 10, (2000, 12)), columns=[f"t{i}" for i in range(12)])
    y = (X.values - 50) @ rng.normal(0, 3, 12)
    est = make_pipeline(StandardScaler(), LinearRegression()).fit(X, y)
    near_zero = X.iloc[:300].copy()
    slope = est.predict(near_zero.assign(t0=near_zero.t0 + 1)) - est.predict(near_zero)
    near_zero["t0"] = near_zero.t0 - est.predict(near_zero) / slope
    assert np.median(np.abs(est.predict(near_zero))) < 1e-9
    model, result = freeze_checked(est, check_rows=near_zero)
    assert result.compared == 300 + result.derived
    _nudged(monkeypatch, 1 + 1e-9)
    with pytest.raises(FreezeMismatch, match="data row 1 "):
        scorewright.freeze(est, check_rows=near_zero)


def test_log_link_margins_beyond_the_guard_are_not_compared():
    """Past -708 the frozen log link clamps its exp argument (the plan's guard, so no
    target underflows to a subnormal); scikit-learn's exp underflows to 0 there. Such
    rows are counted, not failed."""
    rng = np.random.default_rng(2)
    X = pd.DataFrame({"load": rng.normal(0, 1, 400)})
    y = rng.poisson(np.exp(0.2 + 2.0 * X.load))
    est = make_pipeline(StandardScaler(), PoissonRegressor(alpha=0.0)).fit(X, y)
    far = pd.DataFrame({"load": [-500.0, -1000.0, 0.5]})
    assert est.predict(far)[1] < 1e-300
    _, result = freeze_checked(est, check_rows=far)
    assert result.guarded >= 2 and "exp guard" in result.summary()
