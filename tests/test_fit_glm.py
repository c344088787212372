"""`fit --model gamma | tweedie[:POWER]`: log-link GLMs for claim sizes and pure premiums
(invented service-contract data), unpenalized fits checked against statsmodels' GLM with the
same family and link (an independent IRLS fit of the same likelihood)."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

sm = pytest.importorskip("statsmodels.api")
smf = pytest.importorskip("statsmodels.formula.api")

from scorewright.model import load_model  # noqa: E402
from scorewright.plan import build_plan  # noqa: E402
from scorewright.reference import score_row  # noqa: E402


@pytest.fixture(scope="module")
def claims(tmp_path_factory):
    rng = np.random.default_rng(0)
    n = 1500
    d = pd.DataFrame({"power_kw": rng.gamma(4, 20, n),
                      "region": rng.choice(["coast", "inland", "mountain"], n)})
    mu = np.exp(5 + 0.005 * d.power_kw + (d.region == "coast") * 0.3)
    d["claim_size"] = rng.gamma(2.0, mu / 2.0)
    d["cost"] = np.where(rng.random(n) < 0.6, 0.0, d.claim_size)
    path = tmp_path_factory.mktemp("claims") / "claims.csv"
    d.to_csv(path, index=False)
    return d, path


def _fit(path, out, label, model, drop):
    run = subprocess.run([sys.executable, "-m", "scorewright.cli", "fit", str(path),
                          "--label", label, "--model", model, "--penalty", "none",
                          "--drop", drop, "--test-fraction", "0", "--cv", "2", "-o", str(out)],
                         capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    return load_model(out), run.stdout


@pytest.mark.parametrize("model, label, drop, family", [
    ("gamma", "claim_size", "cost", lambda: sm.families.Gamma(sm.families.links.Log())),
    ("tweedie:1.5", "cost", "claim_size",
     lambda: sm.families.Tweedie(var_power=1.5, link=sm.families.links.Log())),
])
def test_log_link_glms_match_statsmodels(claims, tmp_path, model, label, drop, family):
    d, path = claims
    frozen, out = _fit(path, tmp_path / "m.json", label, model, drop)
    assert frozen.head.link == "log" and "log link" in out
    results = smf.glm(f"{label} ~ power_kw + C(region)", data=d, family=family()).fit(
        tol=1e-12, maxiter=200)
    plan = build_plan(frozen)
    rows = d[["power_kw", "region"]].head(300)
    got = np.array([score_row(plan, r).value for r in rows.to_dict("records")])
    np.testing.assert_allclose(got, results.predict(rows), rtol=1e-6)


def test_a_gamma_label_must_be_positive(claims, tmp_path):
    _, path = claims
    run = subprocess.run([sys.executable, "-m", "scorewright.cli", "fit", str(path),
                          "--label", "cost", "--model", "gamma", "-o", str(tmp_path / "x.json")],
                         capture_output=True, text=True)
    assert run.returncode == 2 and "needs positive values" in run.stderr
    assert "Traceback" not in run.stderr


@pytest.fixture(scope="module")
def cancer(tmp_path_factory):
    """Rice's breast cancer counts by county with the population at risk (statsmodels
    ships the data set); `population_k` is the population in thousands, as a feature."""
    d = sm.datasets.cancer.load_pandas().data
    d = d.assign(population_k=d.population / 1000.0)
    path = tmp_path_factory.mktemp("cancer") / "cancer.csv"
    d.to_csv(path, index=False)
    return d, path


def _fit_args(path, out, *args):
    run = subprocess.run([sys.executable, "-m", "scorewright.cli", "fit", str(path),
                          "--test-fraction", "0", "--cv", "2", "-o", str(out), *args],
                         capture_output=True, text=True)
    return run


def test_a_poisson_rate_model_with_an_exposure_matches_statsmodels(cancer, tmp_path):
    """A Poisson rate model with the population as exposure: statsmodels' GLM with
    exposure= frozen agrees with its predict (with the exposure) to 1e-10; `fit
    --exposure` fits the same model (scikit-learn on the rate with weights e, an
    independent solver: 1e-6) and its frozen model outputs the expected count."""
    import scorewright

    d, path = cancer
    x = sm.add_constant(d[["population_k"]])
    results = sm.GLM(d.cancer, x, family=sm.families.Poisson(),
                     exposure=d.population).fit(tol=1e-13, maxiter=100)
    frozen_sm = scorewright.freeze(results, exposure="population", check_rows=d)
    plan = build_plan(frozen_sm)
    want = np.asarray(results.predict(x, exposure=d.population))
    got = np.array([score_row(plan, r).value for r in d.to_dict("records")])
    np.testing.assert_allclose(got, want, rtol=1e-10)
    run = _fit_args(path, tmp_path / "m.json", "--label", "cancer", "--model", "poisson",
                    "--penalty", "none", "--exposure", "population")
    assert run.returncode == 0, run.stderr
    assert "outputs the expected count" in run.stdout
    frozen = load_model(tmp_path / "m.json")
    assert [f.name for f in frozen.features] == ["population_k", "population"]
    plan = build_plan(frozen)
    got = np.array([score_row(plan, r).value for r in d.to_dict("records")])
    np.testing.assert_allclose(got, want, rtol=1e-6)
    # the stated rule: a missing or non-positive exposure counts as 1 (the rate)
    row = d.iloc[0].to_dict()
    rate = score_row(plan, dict(row, population=1.0)).value
    for odd in (None, 0.0, -5.0, float("nan")):
        assert score_row(plan, dict(row, population=odd)).value == rate
    # the rate beside the count: statsmodels' predict with exposure 1, to the fit's 1e-6
    assert "and the rate (predicted_rate)" in run.stdout
    rates = np.array([score_row(plan, r).rate for r in d.to_dict("records")])
    np.testing.assert_allclose(rates, results.predict(x, exposure=np.ones(len(d))), rtol=1e-6)


def test_an_offset_is_the_log_of_an_exposure(cancer, tmp_path):
    d, path = cancer
    d = d.assign(log_population=np.log(d.population))
    path = tmp_path / "offset.csv"
    d.to_csv(path, index=False)
    run = _fit_args(path, tmp_path / "m.json", "--label", "cancer", "--model", "poisson",
                    "--penalty", "none", "--offset", "log_population", "--drop", "population")
    assert run.returncode == 0, run.stderr
    x = sm.add_constant(d[["population_k"]])
    results = sm.GLM(d.cancer, x, family=sm.families.Poisson(),
                     offset=d.log_population).fit(tol=1e-13, maxiter=100)
    plan = build_plan(load_model(tmp_path / "m.json"))
    got = np.array([score_row(plan, r).value for r in d.to_dict("records")])
    np.testing.assert_allclose(got, results.predict(x, offset=d.log_population), rtol=1e-6)


def test_weights_match_statsmodels_frequency_weights(claims, tmp_path):
    """--weights: scikit-learn's sample_weight; statsmodels' freq_weights give the same
    point estimates (an independent IRLS fit)."""
    d, _ = claims
    d = d.assign(policies=np.random.default_rng(3).integers(1, 5, len(d)).astype(float))
    path = tmp_path / "weighted.csv"
    d.to_csv(path, index=False)
    run = _fit_args(path, tmp_path / "m.json", "--label", "claim_size", "--model", "gamma",
                    "--penalty", "none", "--drop", "cost", "--weights", "policies")
    assert run.returncode == 0, run.stderr
    results = smf.glm("claim_size ~ power_kw + C(region)", data=d,
                      family=sm.families.Gamma(sm.families.links.Log()),
                      freq_weights=d.policies).fit(tol=1e-12, maxiter=200)
    frozen = load_model(tmp_path / "m.json")
    assert "policies" not in [f.name for f in frozen.features]
    plan = build_plan(frozen)
    rows = d[["power_kw", "region"]].head(300)
    got = np.array([score_row(plan, r).value for r in rows.to_dict("records")])
    np.testing.assert_allclose(got, results.predict(rows), rtol=1e-6)


@pytest.mark.parametrize("args, words", [
    (["--label", "cancer", "--model", "linear", "--exposure", "population"],
     "--exposure applies to a count"),
    (["--label", "cancer", "--model", "poisson", "--exposure", "nowhere"],
     "no column named 'nowhere'"),
    (["--label", "cancer", "--model", "poisson", "--exposure", "population",
      "--offset", "population_k"], "give one"),
    (["--label", "cancer", "--model", "poisson", "--weights", "cancer"], "is the label"),
])
def test_exposure_offset_and_weights_errors_are_one_line(cancer, tmp_path, args, words):
    _, path = cancer
    run = _fit_args(path, tmp_path / "m.json", *args)
    assert run.returncode == 2 and words in run.stderr, run.stderr
    assert "Traceback" not in run.stderr and not (tmp_path / "m.json").exists()


def test_a_count_label_is_fitted_as_poisson_by_default(cancer, tmp_path):
    """Whole numbers of zero or more (a count) default to Poisson, never a linear
    regression (which predicts negative counts); other numbers stay linear."""
    d, path = cancer
    run = _fit_args(path, tmp_path / "m.json", "--label", "cancer")
    assert run.returncode == 0, run.stderr
    assert "Poisson regression" in run.stdout and load_model(tmp_path / "m.json").head.link == "log"
    d = d.assign(cancer=d.cancer - 2.0)  # negative values: not a count
    path = tmp_path / "shifted.csv"
    d.to_csv(path, index=False)
    run = _fit_args(path, tmp_path / "n.json", "--label", "cancer")
    assert run.returncode == 0, run.stderr
    assert "linear regression" in run.stdout


@pytest.mark.parametrize("model, label, family, exposure", [
    ("poisson", "cancer", lambda: sm.families.Poisson(), "population"),
    ("gamma", "claim_size", lambda: sm.families.Gamma(sm.families.links.Log()), None),
    ("tweedie:1.5", "cost", lambda: sm.families.Tweedie(var_power=1.5,
                                                         link=sm.families.links.Log()), None),
    ("linear", "claim_size", None, None),
])
def test_inference_matches_statsmodels_for_every_family(claims, cancer, tmp_path, model,
                                                         label, family, exposure):
    """Standard errors, statistics, p-values and 95% intervals of an unpenalized fit equal
    statsmodels' (GLM with the same family and log link, its default scale: 1 for
    Poisson, Pearson's chi-square over the residual df otherwise; OLS with t intervals
    for the linear model); Rice's cancer counts with the population as exposure, and the
    claims data."""
    import json

    d, path = cancer if label == "cancer" else claims
    args = ["--label", label, "--model", model, "--penalty", "none"]
    if exposure:
        args += ["--exposure", exposure]
    else:
        args += ["--drop", "cost" if label == "claim_size" else "claim_size"]
    run = _fit_args(path, tmp_path / "m.json", *args)
    assert run.returncode == 0, run.stderr
    rows = json.loads((tmp_path / "m.json").read_text())["provenance"]["metrics"]["coefficients"]
    ours = {r["term"]: r for r in rows}
    if label == "cancer":
        x = sm.add_constant(d[["population_k"]])
        ref = sm.GLM(d.cancer, x, family=family(), exposure=d.population).fit(tol=1e-13)
        names = {"intercept": "const", "population_k": "population_k"}
    else:
        formula = f"{label} ~ power_kw + C(region, Treatment(reference='{_top(d.region)}'))"
        ref = (smf.ols(formula, data=d).fit() if family is None else
               smf.glm(formula, data=d, family=family()).fit(tol=1e-13, maxiter=200))
        names = {"intercept": "Intercept", "power_kw": "power_kw"}
        for level in d.region.unique():
            if level != _top(d.region):
                names[f"region={level}"] = (f"C(region, Treatment(reference='{_top(d.region)}'))"
                                            f"[T.{level}]")
    stat = "t" if model == "linear" else "z"
    for ours_name, sm_name in names.items():
        mine = ours[ours_name]
        assert mine["estimate"] == pytest.approx(ref.params[sm_name], rel=1e-6, abs=1e-9)
        assert mine["se"] == pytest.approx(ref.bse[sm_name], rel=1e-5)
        assert mine[stat] == pytest.approx(ref.tvalues[sm_name], rel=1e-5, abs=1e-6)
        assert mine["p_value"] == pytest.approx(ref.pvalues[sm_name], rel=1e-4, abs=1e-12)
        low, high = ref.conf_int().loc[sm_name]
        assert mine["ci_low"] == pytest.approx(low, rel=1e-5, abs=1e-9)
        assert mine["ci_high"] == pytest.approx(high, rel=1e-5, abs=1e-9)


def _top(series):
    """The most frequent level (ties: the first sorted): fit's reference level."""
    counts = series.value_counts()
    return sorted(level for level, n in counts.items() if n == counts.max())[0]


def test_negative_binomial_matches_statsmodels(tmp_path):
    """--model negative-binomial: NB2 with the log link, coefficients, alpha and the
    inference table equal statsmodels' NegativeBinomial on the raw columns (the fit runs on
    standardized ones; the maximum is the same); the RAND health insurance experiment's
    doctor-visit counts (statsmodels ships the data set; its first 3,000 rows)."""
    import json

    d = sm.datasets.randhie.load_pandas().data.head(3000)
    path = tmp_path / "randhie.csv"
    d.to_csv(path, index=False)
    run = _fit_args(path, tmp_path / "m.json", "--label", "mdvis", "--model",
                    "negative-binomial")
    assert run.returncode == 0, run.stderr
    doc = json.loads((tmp_path / "m.json").read_text())
    x = sm.add_constant(d.drop(columns="mdvis"))
    ref = sm.NegativeBinomial(d.mdvis, x).fit(disp=0, method="newton", maxiter=300)
    assert doc["provenance"]["created"]["nb2_alpha"] == pytest.approx(ref.params["alpha"],
                                                                       rel=1e-6)
    ours = {r["term"]: r for r in doc["provenance"]["metrics"]["coefficients"]}
    for term, mine in ours.items():
        name = "const" if term == "intercept" else term
        assert mine["estimate"] == pytest.approx(ref.params[name], rel=1e-6, abs=1e-10)
        assert mine["se"] == pytest.approx(ref.bse[name], rel=1e-5)
        assert mine["p_value"] == pytest.approx(ref.pvalues[name], rel=1e-4, abs=1e-300)
    plan = build_plan(load_model(tmp_path / "m.json"))
    rows = d.drop(columns="mdvis").head(200)
    got = np.array([score_row(plan, r).value for r in rows.to_dict("records")])
    np.testing.assert_allclose(got, ref.predict(x.head(200)), rtol=1e-7)
    run = _fit_args(path, tmp_path / "n.json", "--label", "mdvis", "--model",
                    "negative-binomial", "--penalty", "l2")
    assert run.returncode == 2 and "--penalty none" in run.stderr


def test_negative_binomial_takes_an_exposure_as_its_offset(cancer, tmp_path):
    """With --exposure the negative binomial model is fitted with the offset log(e), as
    statsmodels' NegativeBinomial(exposure=e) is, and outputs the expected count."""
    d, path = cancer
    run = _fit_args(path, tmp_path / "m.json", "--label", "cancer", "--model",
                    "negative-binomial", "--exposure", "population")
    assert run.returncode == 0, run.stderr
    x = sm.add_constant(d[["population_k"]])
    ref = sm.NegativeBinomial(d.cancer, x, exposure=d.population).fit(disp=0, method="newton",
                                                                      maxiter=300)
    plan = build_plan(load_model(tmp_path / "m.json"))
    got = np.array([score_row(plan, r).value for r in d.to_dict("records")])
    np.testing.assert_allclose(got, ref.predict(x, exposure=d.population), rtol=1e-6)
