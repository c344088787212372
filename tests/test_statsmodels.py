"""Freezing statsmodels results: every frozen model agrees with `results.predict` to 1e-12
(the freeze self-check, and explicitly here) on data sets statsmodels ships, and builds
into targets that verify agrees with; what cannot be frozen yet is refused in one line
naming the term or the link."""

from __future__ import annotations

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
from scorewright.reference import encode_rows, score_matrix  # noqa: E402
from scorewright.verify.harness import build_targets  # noqa: E402


def _frozen_outputs(model, frame):
    plan = build_plan(model)
    records = [{k: (None if isinstance(v, float) and np.isnan(v) else v)
                for k, v in row.items()} for row in frame.to_dict("records")]
    out = score_matrix(plan, encode_rows(plan, records))
    return out["probabilities"][:, 1] if plan.task == "binary" else out["value"]


def _agree(results, model, frame, exog=None):
    want = np.asarray(results.predict(frame if exog is None else exog), dtype=np.float64)
    got = _frozen_outputs(model, frame)
    assert np.all(np.abs(got - want) <= 1e-12 * np.maximum(1.0, np.abs(want)))


def test_spector_logit_matches_the_published_fit_and_predicts_alike():
    """Greene's Spector and Mazzeo data (statsmodels ships it): the published logit
    coefficients (Greene, Econometric Analysis, the PSI example; from memory, 4 places)."""
    data = sm.datasets.spector.load_pandas()
    results = sm.Logit(data.endog, sm.add_constant(data.exog)).fit(disp=0)
    model, checked = freeze_checked(results, check_rows=data.exog)
    assert model.head.task == "binary" and model.head.link == "logit"
    assert np.allclose(model.head.intercepts[0], -13.0213, atol=1e-4)
    assert np.allclose(model.head.coefficients[0], (2.8261, 0.0952, 2.3787), atol=1e-4)
    assert [f.name for f in model.features] == ["GPA", "TUCE", "PSI"]
    assert checked.compared >= len(data.exog)
    _agree(results, model, data.exog, sm.add_constant(data.exog))


def test_longley_ols_matches_the_certified_values():
    """NIST StRD's Longley data (statsmodels ships it), fitted on arrays with
    add_constant: the certified coefficients (NIST, from memory, 7 significant digits)."""
    data = sm.datasets.longley.load_pandas()
    results = sm.OLS(data.endog, sm.add_constant(data.exog)).fit()
    model, _ = freeze_checked(results, check_rows=data.exog)
    certified = (15.06187227, -0.03581917929, -2.020229804, -1.033226867, -0.05110410565,
                 1829.151465)
    assert np.allclose(model.head.coefficients[0], certified, rtol=1e-7)
    assert np.isclose(model.head.intercepts[0], -3482258.634, rtol=1e-9)
    _agree(results, model, data.exog, sm.add_constant(data.exog))


FAIR = ("affairs ~ C(rate_marriage, Treatment(reference=3)) + standardize(age) "
        "+ center(yrs_married) + C(religious, Sum) + occupation")


def test_formula_poisson_with_codings_and_stateful_transforms():
    """Fair's affairs data (statsmodels ships it), a Poisson GLM through a patsy formula:
    a treatment coding with its reference level, a sum coding, standardize and center,
    each read from the formula's design information."""
    data = sm.datasets.fair.load_pandas().data
    results = smf.glm(FAIR, data=data, family=sm.families.Poisson()).fit()
    model, checked = freeze_checked(results, check_rows=data)
    assert model.head.link == "log"
    assert any("unseen level" in n for n in checked.notes)
    age = model.feature("age")
    assert [s.op for s in age.scaling] == ["subtract", "divide"]
    religious = model.feature("religious")
    assert religious.levels == (1, 2, 3, 4)
    _agree(results, model, data)


@pytest.mark.parametrize("family", ["gamma", "tweedie", "negbin", "gaussian-log", "binomial"])
def test_glm_families_agree_with_predict(family):
    """The Scottish vote data (statsmodels ships it) for the positive-valued families; the
    Spector data for the binomial."""
    if family == "binomial":
        data = sm.datasets.spector.load_pandas()
        y, x = data.endog, data.exog
        fam = sm.families.Binomial()
    else:
        data = sm.datasets.scotland.load_pandas()
        y, x = data.endog, data.exog[["COUTAX", "UNEMPF", "MOR", "ACT"]]
        log = sm.families.links.Log()
        fam = {"gamma": sm.families.Gamma(log), "tweedie": sm.families.Tweedie(log, var_power=1.5),
               "negbin": sm.families.NegativeBinomial(log, alpha=0.5),
               "gaussian-log": sm.families.Gaussian(log)}[family]
    x = (x - x.mean()) / x.std()
    results = sm.GLM(y, sm.add_constant(x), family=fam).fit()
    model, _ = freeze_checked(results, check_rows=x)
    _agree(results, model, x, sm.add_constant(x))


def test_discrete_negative_binomial_leaves_alpha_out():
    rng = np.random.default_rng(5)
    x = pd.DataFrame({"door_openings": rng.uniform(0, 40, 400),
                      "ambient_c": rng.normal(22, 4, 400)})
    mu = np.exp(0.2 + 0.03 * x.door_openings - 0.05 * (x.ambient_c - 22))
    y = rng.negative_binomial(2, 2 / (2 + mu))
    results = sm.NegativeBinomial(y, sm.add_constant(x)).fit(disp=0)
    model, _ = freeze_checked(results, check_rows=x)
    assert len(model.head.coefficients[0]) == 2
    _agree(results, model, x, sm.add_constant(x))


def _fair():
    return sm.datasets.fair.load_pandas().data


@pytest.mark.parametrize("make, words", [
    (lambda: smf.glm("affairs ~ np.log(age) + age", data=_fair(),
                     family=sm.families.Poisson()).fit(), "different transforms"),
    (lambda: smf.glm("affairs ~ C(occupation > 3)", data=_fair(),
                     family=sm.families.Poisson()).fit(), "'C(occupation > 3)'"),
    (lambda: smf.glm("affairs ~ cc(age, df=4)", data=_fair(),
                     family=sm.families.Poisson()).fit(), "'cc(age, df=4)'"),
    (lambda: smf.glm("affairs ~ np.exp(age / 10)", data=_fair(),
                     family=sm.families.Poisson()).fit(), "'np.exp(age / 10)'"),
    (lambda: sm.GLM(sm.datasets.spector.load_pandas().endog,
                    sm.add_constant(sm.datasets.spector.load_pandas().exog),
                    family=sm.families.Binomial(sm.families.links.LogLog())).fit(),
     "LogLog link"),
    (lambda: sm.GLM(sm.datasets.scotland.load_pandas().endog,
                    sm.add_constant(sm.datasets.scotland.load_pandas().exog[["COUTAX"]]
                                    .pipe(lambda x: (x - x.mean()) / x.std())),
                    family=sm.families.InverseGaussian()).fit(),
     "InverseSquared link"),
    (lambda: sm.GLM(_fair().affairs, sm.add_constant(_fair()[["age"]]),
                    family=sm.families.Poisson(), exposure=_fair().yrs_married).fit(),
     "exposure"),
])
def test_what_cannot_be_frozen_is_refused_in_one_line(make, words):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        results = make()
    with pytest.raises(ScorewrightError) as err:
        scorewright.freeze(results)
    assert words in str(err.value) and "\n" not in str(err.value)


INTERACTIONS = [
    "affairs ~ age * yrs_married + I(age ** 2)",
    "affairs ~ C(religious):age + C(rate_marriage) * educ",
    "affairs ~ C(religious):C(occupation)",
    "affairs ~ C(religious, Sum) * np.log(age) + center(yrs_married):C(children)",
    "affairs ~ C(religious, Treatment(reference=3)) + C(occupation) * educ",
    # a three-way interaction: 47 design columns, the self-check's longest (--runslow)
    pytest.param("affairs ~ C(religious) * C(occupation, Sum) * age", marks=pytest.mark.slow),
    "affairs ~ 0 + C(occupation):C(religious):yrs_married + I(educ ** 3)",
]


@pytest.fixture(params=["patsy", "formulaic"])
def engine(request):
    """Each formula engine statsmodels can use (both installed by the tests)."""
    import statsmodels.formula

    pytest.importorskip(request.param)
    options = statsmodels.formula.options
    before = options.formula_engine
    options.formula_engine = request.param
    yield request.param
    options.formula_engine = before


@pytest.mark.parametrize("formula", INTERACTIONS)
def test_formula_interactions_and_powers_agree_with_predict(formula, engine):
    """Fair's affairs data (statsmodels ships it): interactions of numerical and
    categorical factors under treatment and sum codings, with and without main effects
    (the engine then codes some factors in full rank), and I(x ** k), through patsy and
    through formulaic. Each agrees with statsmodels' predict to 1e-12, through the freeze
    self-check (which adds rows with missing values and unseen levels: formulaic scores
    an unseen level, and the frozen model agrees with it there too) and explicitly here."""
    if engine == "formulaic":
        formula = formula.replace(", Sum)", ", contr.sum)")
    data = _fair()
    data = data.assign(children=data.children.round())
    results = smf.glm(formula, data=data, family=sm.families.Poisson()).fit()
    model, checked = freeze_checked(results, check_rows=data)
    assert checked.compared >= len(data)
    _agree(results, model, data)


def test_frozen_formula_model_builds_and_verifies(tmp_path):
    """From statsmodels results to artifacts that agree on the real runtimes."""
    data = _fair()
    results = smf.glm(FAIR, data=data, family=sm.families.Poisson()).fit()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(results, check_rows=data.head(200))
    report = build_targets(model, tmp_path, targets=["python", "c-double", "sql-sqlite",
                                                     "onnx-double"], data=None)
    assert report.ok, [r.message for r in report.results]


def _builds(formula, data, tmp_path):
    """The formula's frozen model on CPython, gcc, SQLite, DuckDB and onnxruntime."""
    results = smf.glm(formula, data=data, family=sm.families.Poisson()).fit()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(results, check_rows=data.head(200))
    report = build_targets(model, tmp_path, targets=["python", "c-double", "sql-sqlite",
                                                     "sql-duckdb", "onnx-double"], data=None)
    assert report.ok, [r.message for r in report.results]


def test_a_formula_with_interactions_builds_and_verifies(tmp_path):
    """Products of levels and numbers from a formula, on the real runtimes."""
    _builds(INTERACTIONS[3], _fair().assign(children=lambda d: d.children.round()), tmp_path)


def test_cli_freezes_saved_results(tmp_path):
    from click.testing import CliRunner

    from scorewright.cli import cli

    data = sm.datasets.spector.load_pandas()
    results = sm.Logit(data.endog, sm.add_constant(data.exog)).fit(disp=0)
    results.save(str(tmp_path / "spector.pickle"))
    out = CliRunner().invoke(cli, ["freeze", str(tmp_path / "spector.pickle"),
                                   "-o", str(tmp_path / "m.json")])
    assert out.exit_code == 0, out.output
    assert scorewright.load_model(tmp_path / "m.json").head.intercepts[0] == \
        float(results.params["const"])


BS = ["affairs ~ bs(age, df=4) + educ",
      "affairs ~ bs(yrs_married, knots=[3, 8, 15], include_intercept=True) - 1",
      "affairs ~ bs(age, df=3, degree=1) + bs(educ, df=5, degree=2) + C(religious)",
      "affairs ~ cr(age, df=4, constraints='center') + educ"]


@pytest.mark.parametrize("formula", BS)
def test_patsy_splines_agree_with_predict(formula):
    """patsy's bs() (degrees 1 to 3, df or explicit knots, with and without its
    intercept column) and cr() (a natural cubic regression spline with its centering
    constraint) on Fair's affairs data (statsmodels ships it): the frozen spline,
    re-expressed on distinct knots, agrees with statsmodels' predict to 1e-12 through the
    self-check and here, boundary knots included; outside them bs's term adds nothing
    (patsy raises) and cr continues linearly, as patsy does."""
    data = _fair()
    results = smf.glm(formula, data=data, family=sm.families.Poisson()).fit()
    model, checked = freeze_checked(results, check_rows=data)
    assert any("spline" == getattr(f, "scaling", (None,))[0].op for f in model.features
               if getattr(f, "scaling", ()))
    _agree(results, model, data)
    name = formula.split("(", 1)[1].split(",")[0]
    lo, hi = data[name].min(), data[name].max()
    edge = data.head(2).assign(**{name: [lo, hi]})
    _agree(results, model, edge)
    outside = data.head(2).assign(**{name: [lo - 7.0, hi + 9.0]})
    if "cr(" in formula:
        _agree(results, model, outside)
    else:
        missing = data.head(2).assign(**{name: [None, None]})
        assert list(_frozen_outputs(model, outside)) == list(_frozen_outputs(model, missing))


def test_a_patsy_spline_builds_and_verifies(tmp_path):
    _builds(BS[0], _fair(), tmp_path)


@pytest.mark.parametrize("formula", [
    "affairs ~ bs(age, df=4) + educ",
    "affairs ~ bs(age, df=5, degree=2, extrapolation='extend') + C(religious)",
    "affairs ~ bs(yrs_married, knots=[3, 8, 15], include_intercept=True, "
    "extrapolation='clip') - 1",
])
def test_formulaic_b_splines_agree_with_predict(formula):
    """formulaic's bs() (its basis_spline, evaluated by formulaic itself when freezing) with
    its extrapolations 'raise' (no score: the term adds nothing), 'extend' (the end
    polynomials) and 'clip' (the boundary values): agreement with statsmodels' predict to
    1e-12, outside the knots too where formulaic scores."""
    import statsmodels.formula

    pytest.importorskip("formulaic")
    options = statsmodels.formula.options
    before = options.formula_engine
    options.formula_engine = "formulaic"
    try:
        data = _fair()
        results = smf.glm(formula, data=data, family=sm.families.Poisson()).fit()
        model, checked = freeze_checked(results, check_rows=data)
        _agree(results, model, data)
        if "extrapolation" in formula:
            name = formula.split("(", 1)[1].split(",")[0]
            lo, hi = data[name].min(), data[name].max()
            _agree(results, model, data.head(2).assign(**{name: [lo - 5.0, hi + 5.0]}))
    finally:
        options.formula_engine = before
