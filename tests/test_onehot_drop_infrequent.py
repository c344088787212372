"""OneHotEncoder dropping a category while grouping infrequent ones: the frozen model's
probabilities against scikit-learn's own (OneHotEncoder.transform then
LogisticRegression.predict_proba, the reference library) for frequent, infrequent,
dropped, unseen and missing levels, under every drop mode, infrequent setting and
handle_unknown."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.compose import ColumnTransformer
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import OneHotEncoder

import scorewright
from scorewright.errors import ScorewrightError
from scorewright.plan import build_plan
from scorewright.reference import score_row

# counts: a 30, b 20, c 12, d 3, e 2, NaN 8 (a level to scikit-learn; without it, unseen)
_COUNTS = {"a": 30, "b": 20, "c": 12, "d": 3, "e": 2, None: 8}


def _frame(missing=True):
    rng = np.random.default_rng(7)
    zone = [np.nan if z is None else z for z, n in _COUNTS.items() if missing or z is not None
            for _ in range(n)]
    n = len(zone)
    X = pd.DataFrame({"temp": rng.normal(size=n), "zone": pd.Series(zone, dtype=object)})
    effect = {"a": 0.0, "b": 1.0, "c": -1.0, "d": 2.0, "e": -2.0, None: 0.5}
    y = (X["temp"] + X["zone"].map(lambda z: effect[None if pd.isna(z) else z])
         + rng.normal(size=n) > 0.3).astype(int)
    return X, y


def _pipeline(enc):
    return make_pipeline(ColumnTransformer([("z", enc, ["zone"])], remainder="passthrough"),
                         LogisticRegression(max_iter=2000))


DROPS = ["first", "if_binary", ["b"], ["c"], [np.nan]]
# min_frequency=10: d, e infrequent (the missing value, 8, too); =15 groups c as well;
# max_categories=2 keeps a alone (b, c... and missing grouped)
GROUPINGS = [dict(min_frequency=10), dict(min_frequency=5), dict(max_categories=2),
             dict(max_categories=4, min_frequency=3)]
UNKNOWN = ["error", "ignore", "infrequent_if_exist", "warn"]


def _fit(drop, grouping, handle_unknown, missing):
    X, y = _frame(missing)
    enc = OneHotEncoder(drop=drop, handle_unknown=handle_unknown, **grouping)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            est = _pipeline(enc).fit(X, y)
        except (ValueError, AttributeError):  # scikit-learn refuses to drop an infrequent level
            return None, X
    return est, X


# the default tier: every drop mode and handle_unknown, two groupings, with a NaN level;
# the rest under --runslow
_CASES = [pytest.param(d, g, u, m, marks=() if m and g in GROUPINGS[:2] and (
              u in ("ignore", "infrequent_if_exist") or d == "first") else pytest.mark.slow)
          for d in DROPS for g in GROUPINGS for u in UNKNOWN for m in (True, False)]


@pytest.mark.parametrize("drop,grouping,handle_unknown,missing", _CASES)
def test_drop_with_infrequent_grouping_scores_as_scikit_learn(drop, grouping, handle_unknown,
                                                              missing):
    est, X = _fit(drop, grouping, handle_unknown, missing)
    if est is None:
        pytest.skip("scikit-learn refuses to drop an infrequent level (or an absent NaN)")
    rows = pd.DataFrame({"temp": [0.1, -0.2, 0.3, 0.4, -0.5, 0.6, 0.7],
                         "zone": pd.Series(["a", "b", "c", "d", "e", np.nan, "zzz"],
                                           dtype=object)})
    if handle_unknown == "error":  # scikit-learn raises on an unseen level
        rows = rows.iloc[:6] if missing else rows.iloc[:5]
    model = scorewright.freeze(est, check_rows=X)  # the freeze self-check
    plan = build_plan(model)
    got = np.array([score_row(plan, {"temp": t, "zone": None if pd.isna(z) else z}).probabilities
                    for t, z in zip(rows["temp"], rows["zone"])])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        want = est.predict_proba(rows)  # scikit-learn: OneHotEncoder.transform, then the model
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)


def test_the_infrequent_column_beside_a_nan_column_verifies_on_python_and_sqlite(tmp_path):
    """A frequent NaN level with its own column, 'b' dropped, d and e grouped, unseen levels
    joining the group: the group's column is its indicator times "present"."""
    from scorewright.verify.harness import build_targets

    X, y = _frame(True)
    enc = OneHotEncoder(drop=["b"], min_frequency=5, handle_unknown="infrequent_if_exist")
    est = _pipeline(enc).fit(X, y)
    model = scorewright.freeze(est, check_rows=X)
    assert any(c.product for c in model.design)
    report = build_targets(model, tmp_path, data=None, n_random=200,
                           targets=["python", "sql-sqlite"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]


def _refusal(zone, **kw):
    X = pd.DataFrame({"temp": np.linspace(-1, 1, len(zone)), "zone": pd.Series(zone,
                                                                               dtype=object)})
    y = (np.arange(len(zone)) % 3 == 0).astype(int)
    est = _pipeline(OneHotEncoder(**kw)).fit(X, y)
    with pytest.raises(ScorewrightError) as err:
        scorewright.freeze(est, check_rows=X)
    assert "\n" not in str(err.value)
    return str(err.value)


def test_an_infrequent_group_of_the_missing_value_alone_with_unseen_levels_is_refused():
    """Unseen levels join a group holding only NaN (scikit-learn's transform): the frozen
    model reads a missing value as unseen and has no level for that group."""
    msg = _refusal(["a"] * 30 + ["b"] * 20 + [np.nan] * 3, min_frequency=5,
                   handle_unknown="infrequent_if_exist")
    assert "OneHotEncoder at pipeline step 'columntransformer' (position 0) > transformer 'z'" \
        in msg and "column 0" in msg and "handle_unknown='ignore'" in msg


def test_only_the_missing_value_column_left_after_the_drop_is_refused():
    msg = _refusal(["a"] * 30 + [np.nan] * 10, drop="first")
    assert "OneHotEncoder at" in msg and "only the missing value's column" in msg
