"""Offsets and exposure: statsmodels results fitted with offset= or exposure= freeze with the
column that holds it as an input added to the margin (the exposure through the program's
log), so every artifact outputs the expected count; the rule for a missing or non-positive
exposure is stated and checked. Against statsmodels' own predictions with the same offset."""

from __future__ import annotations

import subprocess
import sys
import warnings

import numpy as np
import pandas as pd
import pytest

sm = pytest.importorskip("statsmodels.api")
smf = pytest.importorskip("statsmodels.formula.api")

import scorewright  # noqa: E402
from scorewright.errors import ScorewrightError  # noqa: E402
from scorewright.freeze import freeze_checked  # noqa: E402
from scorewright.plan import build_plan  # noqa: E402
from scorewright.reference import score_row  # noqa: E402


def test_cancer_rates_with_population_exposure():
    """statsmodels' cancer data (counts and the population at risk): a Poisson rate model
    with exposure=population, frozen with exposure='population', agrees with
    results.predict(exposure=...) to 1e-10 relative on every row."""
    data = sm.datasets.cancer.load_pandas().data
    results = sm.GLM(data.cancer, np.ones((len(data), 1)), family=sm.families.Poisson(),
                     exposure=data.population).fit()
    model, checked = freeze_checked(results, check_rows=data[["population"]],
                                    exposure="population", feature_names=[])
    assert checked.compared >= len(data)
    plan = build_plan(model)
    got = np.array([score_row(plan, {"population": p}).value for p in data.population])
    want = results.predict(np.ones((len(data), 1)), exposure=data.population)
    np.testing.assert_allclose(got, want, rtol=1e-10)


def _claims(n=1500, seed=0):
    """Invented: equipment service contracts, claims per contract-year."""
    rng = np.random.default_rng(seed)
    d = pd.DataFrame({"region": rng.choice(["coast", "inland", "mountain"], n),
                      "power_kw": rng.gamma(4, 20, n), "years": rng.uniform(0.1, 2, n)})
    mu = d.years * np.exp(-2 + 0.005 * d.power_kw + (d.region == "coast") * 0.4)
    d["claims"] = rng.poisson(mu)
    return d


def test_formula_with_exposure_end_to_end(tmp_path):
    """The README's example: a formula with an exposure, frozen, built and verified."""
    from scorewright.verify.harness import build_targets

    d = _claims()
    results = smf.glm("claims ~ C(region) + np.log(power_kw)", data=d,
                      family=sm.families.Poisson(), exposure=d.years).fit()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(results, check_rows=d.drop(columns="claims"),
                                   exposure="years")
    assert model.provenance["inputs"]["exposure"] == "years"
    plan = build_plan(model)
    rows = d.drop(columns="claims").head(200)
    got = np.array([score_row(plan, r).value for r in rows.to_dict("records")])
    np.testing.assert_allclose(got, results.predict(rows, exposure=rows.years), rtol=1e-12)
    report = build_targets(model, tmp_path, data=None, n_random=300,
                           targets=["python", "c-double", "java-portable-exp", "c-cortex-m3"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]


def test_missing_or_non_positive_exposure_counts_as_one():
    d = _claims()
    results = smf.glm("claims ~ C(region) + power_kw", data=d,
                      family=sm.families.Poisson(), exposure=d.years).fit()
    model = scorewright.freeze(results, check_rows=d.drop(columns="claims"), exposure="years")
    plan = build_plan(model)
    row = d.drop(columns="claims").iloc[[3]]
    rate = np.asarray(results.predict(row, exposure=np.ones(1)))[0]
    for bad in (None, 0.0, -2.0, float("nan")):
        got = score_row(plan, dict(row.iloc[0], years=bad)).value
        assert abs(got - rate) <= 1e-12 * rate


def test_an_offset_on_arrays():
    d = _claims()
    x = sm.add_constant(d[["power_kw"]])
    results = sm.GLM(d.claims, x, family=sm.families.Poisson(),
                     offset=np.log(d.years)).fit()
    rows = d[["power_kw"]].assign(log_years=np.log(d.years))
    model, checked = freeze_checked(results, check_rows=rows, offset="log_years")
    assert checked.compared >= len(d)
    plan = build_plan(model)
    got = np.array([score_row(plan, r).value for r in rows.head(100).to_dict("records")])
    want = results.predict(x.head(100), offset=rows.log_years.head(100))
    np.testing.assert_allclose(got, want, rtol=1e-12)


@pytest.mark.parametrize("fit_with, given, words", [
    ("exposure", {}, "name the column that holds it"),
    (None, {"exposure": "years"}, "fitted without an exposure"),
    ("exposure", {"exposure": "power_kw"}, "already has a feature of that name"),
])
def test_offsets_are_named_or_refused_in_one_line(fit_with, given, words):
    d = _claims()
    kwargs = {"exposure": d.years} if fit_with else {}
    results = smf.glm("claims ~ power_kw", data=d, family=sm.families.Poisson(),
                      **kwargs).fit()
    with pytest.raises(ScorewrightError) as err:
        scorewright.freeze(results, **given)
    assert words in str(err.value) and "\n" not in str(err.value)


def test_cli_freezes_saved_results_with_an_exposure(tmp_path):
    d = _claims()
    results = smf.glm("claims ~ C(region) + power_kw", data=d,
                      family=sm.families.Poisson(), exposure=d.years).fit()
    saved = tmp_path / "claims.pickle"
    results.save(str(saved))
    out = tmp_path / "claims.json"
    run = subprocess.run([sys.executable, "-m", "scorewright.cli", "freeze", str(saved),
                          "-o", str(out), "--exposure", "years"],
                         capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    assert "years is the exposure" in run.stderr
    run = subprocess.run([sys.executable, "-m", "scorewright.cli", "freeze", str(saved),
                          "-o", str(tmp_path / "again.json")], capture_output=True, text=True)
    assert run.returncode == 2 and "--exposure COLUMN" in run.stderr
    assert "Traceback" not in run.stderr


def test_a_scikit_learn_rate_model_takes_its_exposure_at_freeze(tmp_path):
    """scikit-learn's PoissonRegressor fitted on rates with sample_weight = exposure (the
    count model's estimating equations): freeze(est, exposure=...) makes the exposure an
    input; the frozen model agrees with est.predict(x) * exposure (scikit-learn, the
    outside source) to 1e-12 through the self-check and here, and builds on CPython and
    SQLite. Rice's breast cancer counts with the population at risk (statsmodels ships
    the data set)."""
    from sklearn.linear_model import PoissonRegressor
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    from scorewright.verify.harness import build_targets

    d = sm.datasets.cancer.load_pandas().data
    x = pd.DataFrame({"population_k": d.population / 1000.0})
    est = make_pipeline(StandardScaler(), PoissonRegressor(alpha=0.0, tol=1e-12)).fit(
        x, d.cancer / d.population, poissonregressor__sample_weight=d.population)
    rows = x.assign(population=d.population)
    model, checked = freeze_checked(est, exposure="population", check_rows=rows)
    assert [f.name for f in model.features] == ["population_k", "population"]
    assert any("counts as 1" in r for r in checked.rules)
    plan = build_plan(model)
    got = np.array([score_row(plan, r).value for r in rows.to_dict("records")])
    want = est.predict(x) * d.population.to_numpy()
    np.testing.assert_allclose(got, want, rtol=1e-12)
    report = build_targets(model, tmp_path, targets=["python", "sql-sqlite"], data=None,
                           n_random=200)
    assert report.ok, [r.message for r in report.results]
    with pytest.raises(ScorewrightError, match="give one"):
        scorewright.freeze(est, exposure="population", offset="population_k")
