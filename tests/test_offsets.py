"""Offsets and exposure: statsmodels results fitted with offset= or exposure= freeze with the
column that holds it as an input added to the margin (the exposure through the program's
log), marked as the offset or exposure (format version 4), so every artifact outputs the
expected count and the rate (the margin without it); the rule for a missing or non-positive
exposure is stated and checked. Against statsmodels' own predictions with the same offset,
and with exposure 1 / offset 0 for the rate."""

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
from scorewright.reference import encode_rows, score_matrix, score_row  # noqa: E402


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
    # the compiled targets take the rate test's model below (and the slow tier's)
    report = build_targets(model, tmp_path, data=None, n_random=300, targets=["python"])
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
    rate = np.array([score_row(plan, r).rate for r in rows.to_dict("records")])
    np.testing.assert_allclose(rate, est.predict(x), rtol=1e-12)  # scikit-learn's rate
    report = build_targets(model, tmp_path, targets=["python", "sql-sqlite"], data=None,
                           n_random=200)
    assert report.ok, [r.message for r in report.results]
    with pytest.raises(ScorewrightError, match="give one"):
        scorewright.freeze(est, exposure="population", offset="population_k")


# ---------------------------------------------------------------- the rate beside the count

def _committee(attr: str):
    """statsmodels' committee data (bills per House committee, 104th Congress; the package
    ships it): a Poisson model of bills with the committee's size as the exposure (or
    log(size) as the offset), through a formula."""
    d = sm.datasets.committee.load_pandas().data
    d = d.assign(log_size=np.log(d.SIZE))
    kwargs = {"exposure": d.SIZE} if attr == "exposure" else {"offset": d.log_size}
    results = smf.glm("BILLS104 ~ SUBS + STAFF + PRESTIGE + np.log1p(BILLS103)", data=d,
                      family=sm.families.Poisson(), **kwargs).fit()
    column = "SIZE" if attr == "exposure" else "log_size"
    rows = d.drop(columns=["BILLS104", "log_size" if attr == "exposure" else "SIZE"])
    return results, rows, column


def _statsmodels_count_and_rate(results, rows, attr, column):
    """statsmodels 0.15 GLM.predict (generalized_linear_model.py): given exog, the linear
    predictor is exog @ params + offset + log(exposure); the rate is asked with exposure 1
    (or offset 0)."""
    count = results.predict(rows, **{attr: rows[column]})
    unit = np.ones(len(rows)) if attr == "exposure" else np.zeros(len(rows))
    return np.asarray(count), np.asarray(results.predict(rows, **{attr: unit}))


@pytest.mark.parametrize("attr", ["exposure", "offset"])
def test_count_and_rate_agree_with_statsmodels(attr):
    results, rows, column = _committee(attr)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model, checked = freeze_checked(results, check_rows=rows, **{attr: column})
    assert checked.compared >= len(rows)
    doc = model.to_document()
    assert doc["format_version"] == 4
    assert [f.get("role") for f in doc["features"]] == [None] * 4 + [attr]
    plan = build_plan(model)
    scores = [score_row(plan, r) for r in rows.to_dict("records")]
    count, rate = _statsmodels_count_and_rate(results, rows, attr, column)
    np.testing.assert_allclose([s.value for s in scores], count, rtol=1e-12)
    np.testing.assert_allclose([s.rate for s in scores], rate, rtol=1e-12)
    matrix = score_matrix(plan, encode_rows(plan, rows.to_dict("records")))
    assert matrix["rate"].tobytes() == np.array([s.rate for s in scores]).tobytes()


@pytest.mark.parametrize("fit", ["poisson", "negativebinomial"])
def test_discrete_count_models_give_the_rate_too(fit):
    """statsmodels' discrete Poisson and NegativeBinomial (NB2) with an exposure: their
    predict (discrete_model.py, the same rule as GLM's: log(exposure) added to exog @
    params) with the exposure and with exposure 1, against the count and the rate."""
    d = sm.datasets.committee.load_pandas().data
    results = getattr(smf, fit)("BILLS104 ~ SUBS + STAFF", data=d, exposure=d.SIZE).fit(
        disp=0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(results, check_rows=d, exposure="SIZE")
    plan = build_plan(model)
    scores = [score_row(plan, r) for r in d.to_dict("records")]
    count, rate = _statsmodels_count_and_rate(results, d, "exposure", "SIZE")
    np.testing.assert_allclose([s.value for s in scores], count, rtol=1e-12)
    np.testing.assert_allclose([s.rate for s in scores], rate, rtol=1e-12)


@pytest.mark.parametrize("opt", [["-O2"], pytest.param(["-O3", "-march=native"],
                                                         marks=pytest.mark.slow)])
def test_the_c_batch_scorer_writes_the_count_and_the_rate(opt, tmp_path):
    """The batch function writes each row's value and rate, the program's bits (run_matrix)
    on every edge exposure and the data rows, in counts that end mid-block."""
    import shutil

    from scorewright.emit import c_batch, emitter
    from scorewright.emit.c import driver_source
    from scorewright.program import lower, run_matrix

    assert shutil.which("gcc"), "the C batch test needs gcc"
    results, rows, column = _committee("exposure")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(results, exposure=column)
    plan = build_plan(model)
    data = encode_rows(plan, rows.to_dict("records"))
    edges = (0.0, -0.0, -3.0, np.nan, np.inf, -np.inf, 5e-324, 1e-300, 1e308, 1.5, 1.0)
    data = np.vstack([data] + [np.append(data[i % len(data), :-1], e)
                               for i, e in enumerate(edges)])
    want = run_matrix(lower(plan), data)
    want = np.stack([want["value"], want["rate"]], axis=1)
    for art in emitter("c")(model, {"prefix": "s"}):
        (tmp_path / art.name).write_bytes(art.content)
    (tmp_path / "driver.c").write_text(driver_source(model, "s"), encoding="ascii")
    exe = tmp_path / "driver"
    subprocess.run(["gcc", "-std=c99", *opt, "-ffp-contract=off", "-Wall", "-Wextra", "-Werror",
                    "-I", str(tmp_path), "-o", str(exe), str(tmp_path / "driver.c"),
                    str(tmp_path / "s.c"), "-lm"], check=True)
    for count in (1, c_batch.BATCH_BLOCK + 1, len(data)):
        path = tmp_path / "rows.bin"
        path.write_bytes(np.ascontiguousarray(data[:count], dtype="<f8").tobytes())
        out = subprocess.run([str(exe), "--batch", str(path)], capture_output=True, text=True,
                             check=True).stdout
        got = np.array([[float.fromhex(x) for x in line.split()] for line in out.splitlines()])
        assert got.shape == (count, 2)
        assert (got.view(np.uint64) == want[:count].view(np.uint64)).all()


def test_the_rate_on_a_target_of_each_family(tmp_path):
    """Built and verified: python, c-double, java, onnx-double, DuckDB and SQLite (the
    slow tier adds PostgreSQL, Spark, the long layouts, float and the firmware), on the
    committee rows, edge rows (exposure 0, negative, NaN, +-inf, subnormal, huge) and
    random rows; two artifacts' rates also against statsmodels on the data rows."""
    from scorewright.verify.harness import build_targets
    from scorewright.verify.runners import runner

    results, rows, column = _committee("exposure")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(results, check_rows=rows, exposure=column)
    data = tmp_path / "committee.csv"
    rows.to_csv(data, index=False)
    targets = ["python", "c-double", "java", "onnx-double", "sql-duckdb", "sql-sqlite"]
    report = build_targets(model, tmp_path / "out", targets=targets, data=data, n_random=100)
    assert report.ok, [(r.profile.name, r.message) for r in report.results]
    assert all(r.comparison.max_ulps.get("predicted_rate") is not None
               for r in report.results), "every target compared the rate"
    count, rate = _statsmodels_count_and_rate(results, rows, "exposure", column)
    for name in ("python", "sql-sqlite"):
        got = runner(name.split("-")[0] if name == "python" else "sql")(
            tmp_path / "out" / name, model, rows.to_dict("records"),
            {"dialect": "sqlite"} if name == "sql-sqlite" else {})
        np.testing.assert_allclose(got.value, count, rtol=1e-12)
        np.testing.assert_allclose(got.rate, rate, rtol=1e-12)


def test_unusable_exposure_gives_the_rate_as_the_count():
    """The stated rule (offsets.rule): an exposure that is missing, not positive or not
    finite counts as 1, so the count is the rate, bit for bit; a usable one multiplies
    the rate (to 1e-12: the count's margin adds log(exposure) before the link)."""
    results, rows, column = _committee("exposure")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(results, exposure=column)
    plan = build_plan(model)
    base = rows.iloc[0].to_dict()
    for bad in (None, 0.0, -0.0, -3.0, float("nan"), float("inf"), float("-inf"), "", "x"):
        s = score_row(plan, dict(base, SIZE=bad))
        assert s.value == s.rate and s.rate > 0, bad
    for good in (1.0, 0.5, 40.0, 1e-300, 5e-324):
        s = score_row(plan, dict(base, SIZE=good))
        assert s.rate == score_row(plan, dict(base, SIZE=None)).rate
        if good >= 1e-300:
            assert abs(s.value - s.rate * good) <= 1e-12 * s.rate * good, good
    huge = score_row(plan, dict(base, SIZE=1e308))
    assert np.isfinite(huge.value) and huge.rate == s.rate


def test_an_earlier_offset_model_scores_as_before_without_a_rate():
    """A file of an earlier version whose offset is an ordinary feature (provenance names it): it
    loads unchanged (same sha256), scores the same count bit for bit as the version 4 file
    of the same fit, and has no rate; provenance is never read for semantics."""
    import json

    from scorewright.model import canonical_sha256, parse_model
    from scorewright.program import lower

    results, rows, column = _committee("exposure")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(results, exposure=column)
    doc = json.loads(model.to_json())
    for f in doc["features"]:
        f.pop("role", None)
    doc["format_version"] = 2  # as scorewright wrote it before: the lowest that holds it
    doc["sha256"] = canonical_sha256(doc)
    old = parse_model(json.dumps(doc))
    assert old.sha256 == doc["sha256"] and old.to_document() == doc
    assert "value" in lower(build_plan(old)).outputs and "rate" not in lower(
        build_plan(old)).outputs
    for r in rows.to_dict("records") + [dict(rows.iloc[0], SIZE=0.0)]:
        new, was = score_row(build_plan(model), r), score_row(build_plan(old), r)
        assert was.rate is None and struct_bits(was.value) == struct_bits(new.value)
    from scorewright.describe import describe_model
    assert "no rate; freeze the results again" in describe_model(old)
    assert "predicted_rate, the value without the exposure" in describe_model(model)


def struct_bits(x: float) -> bytes:
    return np.float64(x).tobytes()


@pytest.mark.parametrize("change, words", [
    (lambda d: d["features"][-1].update(role="weight"), "role: expected 'offset' or"),
    (lambda d: d["features"][-1].update(role="offset"), "an offset has no fill, no clip"),
    (lambda d: d["head"]["coefficients"][0].__setitem__(-1, 0.5), "is 1"),
    (lambda d: d["head"].update(link="identity"), "an exposure needs the log link"),
    (lambda d: d.update(format_version=3), "needs format_version 4"),
    (lambda d: d["features"][0].update(role="offset"), "one offset or exposure at most"),
])
def test_a_role_the_file_cannot_hold_is_one_line(change, words):
    import json

    from scorewright.errors import ModelFileError
    from scorewright.model import canonical_sha256, parse_model

    results, rows, column = _committee("exposure")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(results, exposure=column)
    doc = json.loads(model.to_json())
    change(doc)
    doc["sha256"] = canonical_sha256(doc)
    with pytest.raises(ModelFileError) as err:
        parse_model(json.dumps(doc))
    assert words in str(err.value) and "\n" not in str(err.value)


def test_the_self_check_refuses_a_wrong_rate():
    """The self-check compares the rate too: a source whose count is right but whose rate
    is not is refused, naming the rate."""
    from scorewright.freeze.self_check import FreezeMismatch, check_model
    from scorewright.freeze.statsmodels import ResultsSource

    results, rows, column = _committee("exposure")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(results, exposure=column)

    class Skewed(ResultsSource):
        def predict(self, frame):
            out = super().predict(frame)
            return out * np.array([1.0, 1.0 + 1e-9])

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(FreezeMismatch, match="the rate: source"):
            check_model(Skewed(results, model), model, rows)


@pytest.mark.slow
def test_the_rate_on_spark_and_the_long_layouts(tmp_path, request):
    from scorewright.verify.harness import build_targets

    results, rows, column = _committee("offset")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = scorewright.freeze(results, check_rows=rows, offset=column)
    request.getfixturevalue("spark")
    options = {"sql": {"dsn": request.getfixturevalue("postgres_dsn")}}
    report = build_targets(model, tmp_path, n_random=200, options=options, targets=[
        "sql-postgres", "sql-spark", "sql-spark-long", "sql-duckdb-long", "sql-sqlite-long",
        "sql-postgres-long", "c-float", "c-double-portable-exp", "java-portable-exp",
        "onnx-float", "onnx-double-reference", "c-cortex-m3", "c-cortex-m4f"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]
