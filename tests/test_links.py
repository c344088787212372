"""The probit and cloglog links: written once as lowerings into primitives, checked against
mpmath (the truth at 200 bits), scipy's normal CDF and statsmodels' own predictions, and
run on the real runtimes of every target that renders the scoring program."""

from __future__ import annotations

import json
import math
import warnings

import mpmath as mp
import numpy as np
import pytest

import scorewright
from scorewright import normal_tail, portable_exp
from scorewright.errors import ModelFileError, ScorewrightError
from scorewright.freeze.statsmodels import half_cut
from scorewright.freeze import freeze_checked
from scorewright.model import Head, canonical_sha256, parse_model
from scorewright.plan import FLOAT, build_plan
from scorewright.program import link_probability, lower, run_row

sm = pytest.importorskip("statsmodels.api")


def _margins(low, high, n, seed=0):
    rng = np.random.default_rng(seed)
    return np.concatenate([np.linspace(low, high, n), rng.uniform(low, high, n),
                           [0.0, 5e-324, -5e-324, 1e-300, low, high]])


def _relative(got, want):
    return abs(mp.mpf(got) - want) / want


def test_the_tail_coefficients_are_refitted_by_mpmath():
    """The committed Chebyshev coefficients are what `fit_coefficients` derives again."""
    assert normal_tail.fit_coefficients() == list(normal_tail.COEFFICIENTS)
    with mp.workprec(200):
        assert float.fromhex(normal_tail.INV_SQRT2) == float(1 / mp.sqrt(2))


@pytest.mark.parametrize("exp_kind", ["libm", "portable"])
def test_probit_is_the_normal_cdf_to_a_few_ulps(exp_kind):
    """Phi(m) = ncdf(m) from mpmath at 200 bits: relative error at most 8e-16 (measured
    5.3e-16, about 2.5 ULP) for every margin down to -37.5, where the tail is 4.6e-308."""
    with mp.workprec(200):
        worst = 0.0
        for m in _margins(-37.5, 37.5, 1500):
            worst = max(worst, _relative(link_probability("probit", float(m),
                                                          exp_kind=exp_kind),
                                         mp.ncdf(mp.mpf(float(m)))))
    assert worst <= 8e-16, float(worst)
    assert link_probability("probit", 0.0) == 0.5
    # beyond the clamp the probability stays at the last normal tail value
    assert link_probability("probit", -1e300) == link_probability("probit", -37.5) > 0.0
    assert link_probability("probit", 1e300) == 1.0


def test_probit_agrees_with_scipy_normal_cdf():
    """scipy.stats.norm.cdf (what statsmodels' Probit predicts with): within 2e-15
    relative for m >= -3; deeper in the tail scipy itself drifts (measured up to 2.4e-13
    relative near -37), and mpmath shows the difference is scipy's, not ours."""
    from scipy.stats import norm

    ms = _margins(-37.5, 8.0, 1500, seed=1)
    got = np.array([link_probability("probit", float(m)) for m in ms])
    want = norm.cdf(ms)
    rel = np.abs(got - want) / want
    assert np.all(rel[ms >= -3] <= 2e-15) and np.all(rel <= 5e-13)
    worst = int(np.argmax(rel))
    with mp.workprec(200):
        truth = mp.ncdf(mp.mpf(float(ms[worst])))
        assert _relative(got[worst], truth) < _relative(want[worst], truth) / 100


def test_probit_in_float_stays_within_float_rounding():
    """The float plan's constants (clamp 12.5, split 1.5 * 2^15) give the same function,
    here evaluated in double as the float targets' reference is: within 1e-14 (measured
    6.4e-15; the split makes ah * ah exact in float arithmetic, not in double)."""
    with mp.workprec(100):
        for m in _margins(-12.5, 12.5, 300):
            got = link_probability("probit", float(m), precision=FLOAT)
            want = mp.ncdf(mp.mpf(float(m)))
            assert _relative(got, want) <= 1e-14


def test_cloglog_is_one_minus_exp_of_minus_exp():
    """1 - exp(-exp(m)) from mpmath (as -expm1(-exp(m)), which keeps its digits):
    relative error at most 1e-15 (measured 5.3e-16) from m = -700 to the clamp at 6.5."""
    with mp.workprec(200):
        worst = 0.0
        for m in np.concatenate([_margins(-700.0, 6.5, 1000), _margins(-5.0, 1.0, 1000)]):
            want = -mp.expm1(-mp.exp(mp.mpf(float(m))))
            worst = max(worst, _relative(link_probability("cloglog", float(m)), want))
    assert worst <= 1e-15, float(worst)
    # the series and 1 - exp(-u) meet where u = 0.125 without a step
    m = math.log(0.125)
    below, above = (link_probability("cloglog", math.nextafter(m, d)) for d in (-1, 1))
    assert 0.0 <= above - below <= 1e-16


def test_the_cloglog_cut_is_probability_above_one_half():
    """The cut of the rule "probability > 0.5" as the program computes the probability;
    the symmetric links cut at 0.0, the sign of the margin, where p1 is exactly 0.5."""
    cut = half_cut("cloglog")
    assert abs(cut - math.log(math.log(2.0))) < 1e-15
    assert link_probability("cloglog", cut) <= 0.5 < link_probability(
        "cloglog", math.nextafter(cut, 1))
    for link in ("logit", "probit"):
        assert half_cut(link) == 0.0 and link_probability(link, 0.0) == 0.5
        assert link_probability(link, -1e-15) < 0.5 < link_probability(link, 1e-15)


def _spector():
    data = sm.datasets.spector.load_pandas()
    return data.endog, sm.add_constant(data.exog), data.exog


def test_spector_probit_matches_the_published_fit_and_predicts_alike():
    """Greene's Spector and Mazzeo data (statsmodels ships it): the published probit
    coefficients (Greene, Econometric Analysis, the PSI example; from memory, 4 places);
    the frozen model agrees with results.predict to 1e-12 on the data."""
    y, x, exog = _spector()
    results = sm.Probit(y, x).fit(disp=0)
    model, checked = freeze_checked(results, check_rows=exog)
    assert model.head.link == "probit" and model.head.cut == 0.0
    assert np.allclose(model.head.intercepts[0], -7.4523, atol=1e-4)
    assert np.allclose(model.head.coefficients[0], (1.6258, 0.0517, 1.4263), atol=1e-4)
    assert checked.compared >= len(exog)
    want = np.asarray(results.predict(x))
    got = np.array([link_probability("probit", m) for m in np.asarray(x) @ results.params])
    assert np.all(np.abs(got - want) <= 1e-12)


@pytest.mark.parametrize("link, name", [("probit", "Probit"), ("cloglog", "CLogLog"),
                                        ("cauchit", "Cauchy"), ("log", "Log")])
def test_glm_binomial_links_freeze_and_agree(link, name):
    y, x, exog = _spector()
    family = sm.families.Binomial(getattr(sm.families.links, name)())
    results = sm.GLM(y, x, family=family).fit()
    model, checked = freeze_checked(results, check_rows=exog)
    assert model.head.link == link and checked.compared >= len(exog)
    assert "Binomial" in model.provenance["source"]


def test_cauchit_is_the_cauchy_cdf_to_a_few_ulps():
    """1/2 + atan(m)/pi against mpmath at 200 bits, across the body and both tails (the
    far tail through atan(1/|m|), so no cancellation): within 2 ULP relative; the
    polynomial's coefficients are refitted by mpmath."""
    from scorewright.program import fit_atan_coefficients, ATAN_P

    assert [float.fromhex(c) for c in fit_atan_coefficients()] == list(ATAN_P)
    margins = list(_margins(-60.0, 60.0, 3000)) + [0.0, -0.0, 1e-300, -1e-300, 7 / 16,
                                                   11 / 16, 1.0, -1.0, 1e10, -1e10, 1e30,
                                                   -1e30, math.nextafter(1.0, 2.0)]
    worst = 0.0
    for m in margins:
        with mp.workprec(200):
            want = mp.mpf(0.5) + mp.atan(mp.mpf(m)) / mp.pi
        got = link_probability("cauchit", m)
        worst = max(worst, float(abs((mp.mpf(got) - want) / want)))
    assert worst <= 2 * 2.0 ** -52, worst / 2.0 ** -52


def _probit_model(link="probit"):
    y, x, exog = _spector()
    family = sm.families.Binomial(getattr(sm.families.links,
                                          {"probit": "Probit", "cloglog": "CLogLog",
                                           "cauchit": "Cauchy", "log": "Log"}[link])())
    return scorewright.freeze(sm.GLM(y, x, family=family).fit(), check_rows=exog)


def test_the_model_file_says_version_2_only_when_it_needs_to():
    """A probit model is written as format version 2; a logit model as version 1, so its
    file and sha256 are what 0.1.0 wrote; a version 1 file cannot carry probit."""
    text = _probit_model().to_json()
    doc = json.loads(text)
    assert doc["format_version"] == 2 and doc["head"]["link"] == "probit"
    assert parse_model(text).head.link == "probit"
    y, x, exog = _spector()
    logit = scorewright.freeze(sm.Logit(y, x).fit(disp=0), check_rows=exog)
    assert json.loads(logit.to_json())["format_version"] == 1
    doc["format_version"] = 1
    doc["sha256"] = canonical_sha256(doc)
    with pytest.raises(ModelFileError, match="needs format_version 2"):
        parse_model(json.dumps(doc))


@pytest.mark.parametrize("link", ["probit", "cloglog", "cauchit", "log"])
@pytest.mark.slow
def test_links_verify_on_the_targets_that_render_the_program(link, tmp_path):
    """Python and the portable-exp C and Java builds bit-identical with the reference;
    C with glibc's exp bit-identical too; firmware (newlib's exp) within its profile.
    (By default the probit, cloglog and cauchit links are held to their conformance
    vectors on a cheap profile of each kind: tests/test_conformance.py.)"""
    from scorewright.verify.harness import build_targets

    report = build_targets(_probit_model(link), tmp_path, data=None, n_random=300,
                           targets=["python", "c-double", "c-double-portable-exp",
                                    "java-portable-exp", "c-float", "c-cortex-m3",
                                    "onnx-double", "onnx-float-reference",
                                    "sql-sqlite", "sql-duckdb"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]



def test_head_accepts_the_new_links():
    assert Head("binary", "cloglog", (0, 1), (0.0,), ((1.0,),), half_cut("cloglog"))
    assert portable_exp.exp(0.0) == 1.0


def _inverse_probe() -> "FrozenModel":
    """An inverse-link model whose value is 1 / x of its one input."""
    from scorewright.model import DesignColumn, FrozenModel, NumericFeature
    head = Head("regression", "inverse", None, (0.0,), ((1.0,),), None)
    return FrozenModel("inverse_probe", (NumericFeature("cycle_seconds", None),),
                       (DesignColumn("cycle_seconds"),), head,
                       {"scorewright_version": "test", "source": "inverse probe"}).sealed()


def test_gamma_inverse_link_agrees_with_statsmodels():
    """The Scottish vote data (statsmodels ships it), a Gamma GLM with statsmodels'
    default (canonical) InversePower link: the frozen value agrees with predict to 1e-12;
    the file says format version 3 (a version 2 reader does not know the link)."""
    data = sm.datasets.scotland.load_pandas()
    x = data.exog[["COUTAX", "UNEMPF", "MOR", "ACT"]]
    x = (x - x.mean()) / x.std()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # statsmodels: the link does not respect the domain
        results = sm.GLM(data.endog, sm.add_constant(x), family=sm.families.Gamma()).fit()
    model = scorewright.freeze(results, check_rows=x)
    assert model.head.link == "inverse"
    assert json.loads(model.to_json())["format_version"] == 3
    plan = build_plan(model)
    program = lower(plan)
    want = np.asarray(results.predict(sm.add_constant(x)))
    got = np.array([run_row(program, r)["value"] for r in x.to_dict("records")])
    assert np.all(np.abs(got - want) <= 1e-12 * np.abs(want))


def test_the_inverse_link_near_zero_is_the_stated_value_on_every_target(tmp_path):
    """1 / m; a margin nearer zero than the smallest normal number divides by that number
    with the margin's sign (+0 and -0 as +): no target divides by zero, overflows or
    raises (PostgreSQL raises on both). Python, gcc, javac, onnxruntime, SQLite, DuckDB."""
    from scorewright.verify.harness import build_targets

    program = lower(build_plan(_inverse_probe()))
    tiny = 2.0 ** -1022
    for x, want in [(2.0, 0.5), (-4.0, -0.25), (0.0, 1 / tiny), (-0.0, 1 / tiny),
                    (5e-324, 1 / tiny), (-5e-324, -1 / tiny), (tiny, 1 / tiny),
                    (-tiny, -1 / tiny), (1e200, 1 / 1e200)]:
        assert run_row(program, {"cycle_seconds": x})["value"] == want, x
    rows = tmp_path / "rows.csv"
    grid = [0.0, -0.0, 5e-324, -5e-324, tiny, -tiny, math.nextafter(tiny, 0.0),
            math.nextafter(-tiny, 0.0), 1e-300, -1e-300, 1.0, -3.0, 7e307, -7e307]
    rows.write_text("cycle_seconds\n" + "".join(f"{v!r}\n" for v in grid))
    report = build_targets(_inverse_probe(), tmp_path / "out", data=rows, n_random=100,
                           targets=["python", "c-double", "java", "onnx-double",
                                    "sql-sqlite", "sql-duckdb"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]
    # Single precision is refused: a float margin's cancellation near the pole moves the
    # value without bound (the diabetes Gamma model's conformance rows did, by 8e8 ULP).
    with pytest.raises(ScorewrightError, match="inverse link .* not scored in single"):
        lower(build_plan(_inverse_probe(), "float"))


@pytest.mark.parametrize("link", ["cauchit", "log"])
def test_the_newer_links_verify_on_a_target_of_each_kind(link, tmp_path):
    """The cauchit and log-binomial links on CPython, gcc, SQLite and onnxruntime (every
    target under --runslow, above)."""
    from scorewright.verify.harness import build_targets

    report = build_targets(_probit_model(link), tmp_path, data=None, n_random=300,
                           targets=["python", "c-double", "sql-sqlite", "onnx-double"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]


def test_the_log_binomial_cut_and_its_ceiling():
    """A log-binomial model's p1 = exp(m) is 1 for a margin above 0 (statsmodels' exp(m)
    would exceed 1), and the cut is the largest margin with p1 <= 1/2 (near ln 1/2)."""
    assert link_probability("log", 0.5) == 1.0 and link_probability("log", -0.0) == 1.0
    assert link_probability("log", math.log(0.25)) == math.exp(math.log(0.25))
    cut = half_cut("log")
    assert link_probability("log", cut) <= 0.5 < link_probability("log", math.nextafter(cut, 1))
