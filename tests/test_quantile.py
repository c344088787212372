"""QuantileTransformer (uniform and normal output) and Normalizer (l2, l1, max) in
scikit-learn pipelines: a format-4 quantile step and normalized design columns, lowered
into the program's primitives (numpy's interp, the AS 241 inverse normal CDF on the
program's own log, numpy's summation orders for the norms), so every target computes the
same bits. The outside sources: scikit-learn's QuantileTransformer.transform and
Normalizer.transform (bit for bit where numpy computes them; scipy's ndtri to 1e-12
relative), the pipelines' predict_proba / predict to 1e-12 (the freeze self-check),
mpmath's erfinv for the inverse normal CDF, and each target's real runtime (verify)."""

from __future__ import annotations

import json
import math
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import Normalizer, QuantileTransformer, StandardScaler

import scorewright
from scorewright.describe import describe_model
from scorewright.errors import ModelFileError, ScorewrightError
from scorewright.freeze import freeze_checked
from scorewright.model import QUANTILE_CLIP, Head, canonical_sha256, parse_model
from scorewright.plan import build_plan
from scorewright.program import ndtri
from scorewright.reference import encode_rows, score_matrix

FAMILIES = ["python", "c-double", "java", "onnx-double", "sql-duckdb", "sql-sqlite"]


def _frame(n=400, seed=3):
    rng = np.random.default_rng(seed)
    x = pd.DataFrame({
        "load": rng.lognormal(2, 1, n),
        "cycles": np.round(rng.exponential(3, n)),   # repeated values: repeated quantiles
        "temp": rng.normal(40, 8, n), "current": rng.normal(12, 3, n),
        "vib": rng.normal(0, 2, n), "hum": rng.uniform(-1, 1, n)})
    x.loc[rng.random(n) < 0.05, "load"] = np.nan
    x.loc[rng.random(n) < 0.05, "temp"] = np.nan
    signal = np.log(x.load.fillna(7)) - 2 + x.cycles / 3 - 1 + x.vib / 2
    return x, (signal + rng.logistic(size=n) > 0).astype(int), signal


def _pipeline(kind: str, head=None):
    """One transformer mode in a ColumnTransformer (after an imputer), a linear head."""
    if kind in ("uniform", "normal"):
        trans = make_pipeline(SimpleImputer(strategy="median"),
                              QuantileTransformer(n_quantiles=40, output_distribution=kind))
        cols = ["load", "cycles", "vib"]
    else:
        trans = make_pipeline(SimpleImputer(strategy="median"), StandardScaler(),
                              Normalizer(norm=kind))
        cols = ["temp", "current", "vib", "hum"]
    ct = ColumnTransformer([("t", trans, cols)])
    return make_pipeline(ct, head or LogisticRegression(max_iter=2000)), cols


def _unit_heads(model):
    """Per design column, the model with a regression head that outputs that column's
    design value alone (1.0 * value + 0.0: the value's bits)."""
    n = len(model.design)
    for j in range(n):
        row = tuple(1.0 if i == j else 0.0 for i in range(n))
        yield replace(model, head=Head("regression", "identity", None, (0.0,), (row,), None))


def _design(model, frame) -> np.ndarray:
    cols = []
    for unit in _unit_heads(model):
        plan = build_plan(unit)
        cols.append(score_matrix(plan, encode_rows(plan, frame.to_dict("records")))["value"])
    return np.stack(cols, axis=1)


# ---------------------------------------------------------------- the inverse normal CDF

def test_inverse_normal_cdf_against_mpmath_and_scipy():
    """AS 241 in the program's primitives against mpmath's erfinv (sqrt(2) erfinv(2p - 1),
    at 40 digits) over the probabilities the quantile step uses, [QUANTILE_CLIP,
    1 - QUANTILE_CLIP]: within 1e-15 relative (measured: at most 6.6e-16 over 45,000
    points); against scipy's ndtri (what scikit-learn calls) within 1e-12."""
    import mpmath as mp
    from scipy.special import ndtri as scipy_ndtri

    ps = np.concatenate([np.geomspace(QUANTILE_CLIP, 0.5, 150),
                         np.linspace(QUANTILE_CLIP, 1 - QUANTILE_CLIP, 150),
                         [0.075, math.nextafter(0.075, 1), 0.925, 0.5, 1 - QUANTILE_CLIP]])
    ps = np.concatenate([ps, 1 - ps])
    worst = 0.0
    with mp.workdps(40):
        for p in ps:
            got = ndtri(float(p))
            want = mp.sqrt(2) * mp.erfinv(2 * mp.mpf(float(p)) - 1)
            if want != 0:
                worst = max(worst, float(abs((got - want) / want)))
            assert got == pytest.approx(scipy_ndtri(p), rel=1e-12, abs=0)
    assert worst < 1e-15
    assert ndtri(0.5) == 0.0 and ndtri(0.25) == -ndtri(0.75)


# ---------------------------------------------------------------- design values

@pytest.mark.parametrize("output", ["uniform", "normal"])
def test_quantile_values_match_scikit_learn(output):
    """Each design value against QuantileTransformer.transform (scikit-learn): every
    quantile, one double either side, the normal output's bounds, both ends and far
    beyond them. Uniform: bit for bit (the same numpy interp operations); normal: 1e-12
    relative (scipy's ndtri against AS 241)."""
    x, _, _ = _frame()
    data = x[["cycles", "vib"]].to_numpy()
    qt = QuantileTransformer(n_quantiles=40, output_distribution=output).fit(data)
    model = scorewright.freeze(make_pipeline(qt, Ridge()).fit(data, x.vib), check_rows=data)
    raw = []
    for q in qt.quantiles_.T:
        col = [v for e in q for v in (e, np.nextafter(e, np.inf), np.nextafter(e, -np.inf))]
        col += [q[0] - 1e-7, q[0] + 1e-7, q[-1] - 1e-7, q[-1] + 1e-7, q[0] - 1e9, q[-1] + 1e9,
                -1e300, 1e300, 0.0]
        raw.append(col)
    width = max(map(len, raw))
    raw = np.array([c + [c[0]] * (width - len(c)) for c in raw]).T
    want = qt.transform(raw)
    got = _design(model, pd.DataFrame(raw, columns=["x0", "x1"]))
    assert len(set(qt.quantiles_[:, 0])) < 40   # the repeated-quantile rule is exercised
    if output == "uniform":
        assert np.array_equal(got, want)
    else:
        np.testing.assert_allclose(got, want, rtol=1e-12, atol=0)
        assert got.min() == pytest.approx(ndtri(QUANTILE_CLIP)) == -got.max()


@pytest.mark.parametrize("norm", ["l2", "l1", "max"])
@pytest.mark.parametrize("width", [3, 20])
def test_normalizer_values_match_scikit_learn_bit_for_bit(norm, width):
    """Each design value against Normalizer.transform (scikit-learn) on a C-ordered array,
    bit for bit: its einsum (l2), pairwise sum (l1) or max; a zero row and rows whose norm
    is just below and above 10 eps (taken as 1, its _handle_zeros_in_scale); 20 columns
    take numpy's blocks of 8."""
    rng = np.random.default_rng(width)
    data = rng.standard_normal((300, width)) * np.exp(rng.uniform(-8, 8, (300, width)))
    data[0] = 0.0
    data[1] = 1e-16
    data[2, :] = 0.0
    data[2, 0] = 2.3e-15
    data[3, :] = 0.0
    data[3, -1] = -2.2e-15
    nz = Normalizer(norm=norm).fit(data)
    pipe = make_pipeline(nz, Ridge()).fit(data, data[:, 0] > 0)
    model = scorewright.freeze(pipe, check_rows=data)
    got = _design(model, pd.DataFrame(data, columns=[f"x{i}" for i in range(width)]))
    want = nz.transform(np.ascontiguousarray(data))
    assert np.array_equal(got, want)
    assert np.array_equal(got[0], np.zeros(width))


# ---------------------------------------------------------------- pipelines

@pytest.mark.parametrize("kind", ["uniform", "normal", "l2", "l1", "max"])
def test_pipelines_freeze_and_agree_with_scikit_learn(kind):
    """Each mode in a ColumnTransformer before a logistic head: the freeze self-check holds
    the frozen model to predict_proba (scikit-learn) within 1e-12 on the data, missing
    values and derived edge rows; far rows and a zero-norm row checked here too."""
    x, y, _ = _frame()
    pipe, cols = _pipeline(kind)
    pipe.fit(x[cols], y)
    model, checked = freeze_checked(pipe, check_rows=x[cols])
    assert checked.compared >= len(x) and model.to_document()["format_version"] == 4
    far = pd.DataFrame({c: [0.0, 1e12, -1e12, np.nan] for c in cols})
    plan = build_plan(model)
    got = score_matrix(plan, encode_rows(plan, far.to_dict("records")))["probabilities"]
    np.testing.assert_allclose(got, pipe.predict_proba(far), rtol=0, atol=1e-12)


def test_a_regression_head_agrees_relative():
    """A Ridge head: values to 1e-12 relative (predict, scikit-learn)."""
    x, _, signal = _frame()
    pipe, cols = _pipeline("normal", Ridge())
    pipe.fit(x[cols], signal)
    model, checked = freeze_checked(pipe, check_rows=x[cols])
    assert checked.compared >= len(x)
    plan = build_plan(model)
    got = score_matrix(plan, encode_rows(plan, x[cols].to_dict("records")))["value"]
    np.testing.assert_allclose(got, pipe.predict(x[cols]), rtol=1e-12)


def test_show_describes_quantiles_and_norms():
    x, y, _ = _frame()
    ct = ColumnTransformer([("q", QuantileTransformer(n_quantiles=20,
                                                      output_distribution="normal"), ["vib"]),
                            ("n", Normalizer("l1"), ["current", "hum"])])
    pipe = make_pipeline(ct, LogisticRegression()).fit(x, y)
    text = describe_model(scorewright.freeze(pipe, check_rows=x))
    assert "quantile (normal output; 20 quantiles from" in text
    assert "'current' / l1 norm of (current, hum)" in text


def test_refusals_name_the_component():
    x, y, _ = _frame()
    x = x.fillna(0.0)
    cases = [
        (make_pipeline(StandardScaler(), QuantileTransformer(n_quantiles=10),
                       LogisticRegression()),
         ("QuantileTransformer at pipeline step 'quantiletransformer' (position 1) comes "
          "after scaling")),
        (make_pipeline(Normalizer(), QuantileTransformer(n_quantiles=10),
                       LogisticRegression()), "takes Normalizer's columns"),
        (make_pipeline(Normalizer(), Normalizer(), LogisticRegression()),
         "not a plain numeric value"),
    ]
    for est, words in cases:
        est.fit(x[["vib", "hum"]], y)
        with pytest.raises(ScorewrightError, match=words.replace("(", r"\(").replace(")",
                                                                                    r"\)")):
            scorewright.freeze(est)


def test_single_precision_targets_refuse_them_in_one_line():
    x, y, _ = _frame()
    for kind in ("normal", "l2"):
        pipe, cols = _pipeline(kind)
        model = scorewright.freeze(pipe.fit(x[cols], y), check_rows=x[cols])
        with pytest.raises(ScorewrightError, match="not scored in single precision"):
            build_plan(model, "float")


# ---------------------------------------------------------------- the model file

def test_model_file_holds_them_in_version_4():
    x, y, _ = _frame()
    pipe, cols = _pipeline("normal")
    model = scorewright.freeze(pipe.fit(x[cols], y), check_rows=x[cols])
    doc = json.loads(model.to_json())
    step = doc["features"][0]["scaling"][0]
    assert step["op"] == "quantile" and step["output"] == "normal"
    assert parse_model(model.to_json()) == model

    def resealed(d):
        d["sha256"] = canonical_sha256(d)
        return json.dumps(d)

    for mutate, words in [
            (lambda d: d.update(format_version=3), "needs format_version 4"),
            (lambda d: d["features"][0]["scaling"][0].update(output="gaussian"), "output"),
            (lambda d: d["features"][0]["scaling"][0]["references"].reverse(),
             "non-decreasing"),
            (lambda d: d["features"][0]["scaling"][0]["quantiles"].pop(), "one per quantile"),
            (lambda d: d["features"][0]["scaling"][0]["references"].__setitem__(-1, 1.5),
             "from 0 to 1"),
            (lambda d: d["features"][0]["scaling"].insert(0, {"op": "add", "value": 1.0}),
             "must be the first step")]:
        bad = json.loads(model.to_json())
        mutate(bad)
        with pytest.raises(ModelFileError, match=words):
            parse_model(resealed(bad))
    pipe, cols = _pipeline("l2")
    model = scorewright.freeze(pipe.fit(x[cols], y), check_rows=x[cols])
    assert parse_model(model.to_json()) == model
    for mutate, words in [
            (lambda d: d.update(format_version=3), "needs format_version 4"),
            (lambda d: d["design"][0]["normalize"].update(norm="l3"), "norm"),
            (lambda d: d["design"][0]["normalize"].update(position=9), "position"),
            (lambda d: d["design"][0].update(feature="hum"), "feature"),
            (lambda d: d["design"][0]["normalize"]["columns"].clear(), "needs a column")]:
        bad = json.loads(model.to_json())
        mutate(bad)
        with pytest.raises(ModelFileError, match=words):
            parse_model(resealed(bad))


# ---------------------------------------------------------------- every target

def _all_modes():
    """One pipeline with every mode: quantile uniform and normal, and an l2, l1 and max
    Normalizer, each over its own columns (after imputation and scaling)."""
    x, y, _ = _frame()
    rng = np.random.default_rng(11)
    for c in ("a", "b", "c", "d"):
        x[c] = rng.normal(0, 5, len(x))
    imp = SimpleImputer(strategy="median")
    ct = ColumnTransformer([
        ("u", make_pipeline(imp, QuantileTransformer(n_quantiles=25)), ["load"]),
        ("n", QuantileTransformer(n_quantiles=25, output_distribution="normal"), ["cycles"]),
        ("l2", make_pipeline(imp, StandardScaler(), Normalizer("l2")), ["temp", "current"]),
        ("l1", Normalizer("l1"), ["vib", "hum", "a"]),
        ("mx", make_pipeline(Normalizer("max"), StandardScaler()), ["b", "c", "d"])])
    cols = ["load", "cycles", "temp", "current", "vib", "hum", "a", "b", "c", "d"]
    pipe = make_pipeline(ct, LogisticRegression(max_iter=3000)).fit(x[cols], y)
    return pipe, x[cols]


@pytest.mark.slow
def test_every_mode_verifies_on_python(tmp_path):
    """The Python target alone (every family: the test below)."""
    from scorewright.verify.harness import build_targets

    pipe, x = _all_modes()
    model, _ = freeze_checked(pipe, check_rows=x)
    report = build_targets(model, tmp_path, data=None, n_random=100, targets=["python"],
                           progress=None)
    assert report.ok, [(r.profile.name, r.message) for r in report.results]


@pytest.mark.slow
def test_every_mode_verifies_on_one_profile_of_each_family(tmp_path):
    from scorewright.verify.harness import build_targets

    pipe, x = _all_modes()
    model, _ = freeze_checked(pipe, check_rows=x)
    report = build_targets(model, tmp_path, data=None, n_random=300,
                           targets=FAMILIES + ["onnx-double-reference"], progress=None)
    assert report.ok, [(r.profile.name, r.message) for r in report.results]


@pytest.mark.slow
@pytest.mark.parametrize("kind", ["uniform", "normal", "l2", "l1", "max"])
def test_each_mode_verifies_on_every_double_profile(kind, tmp_path, postgres_dsn):
    from scorewright.verify.harness import build_targets

    x, y, _ = _frame()
    pipe, cols = _pipeline(kind)
    model, _ = freeze_checked(pipe.fit(x[cols], y), check_rows=x[cols])
    report = build_targets(model, tmp_path, data=None, n_random=300,
                           targets=FAMILIES + ["c-double-portable-exp", "java-portable-exp",
                                               "onnx-double-reference", "sql-duckdb-long",
                                               "sql-sqlite-long", "sql-postgres",
                                               "sql-postgres-long", "sql-spark",
                                               "sql-spark-long"],
                           options={"sql": {"dsn": postgres_dsn}}, progress=None)
    assert report.ok, [(r.profile.name, r.message) for r in report.results]


@pytest.mark.slow
def test_the_c_batch_scorer_gives_the_programs_bits(tmp_path):
    """The C batch scorer's block passes (gcc -O2 and -O3 -march=native) against the
    program's numpy interpreter, bit for bit, on every quantile and one double either side,
    a zero-norm row and random rows, in counts that end mid-block."""
    import shutil
    import subprocess

    from scorewright.emit import c_batch, emitter
    from scorewright.emit.c import driver_source
    from scorewright.program import lower, run_matrix

    assert shutil.which("gcc"), "the C batch test needs gcc"
    pipe, x = _all_modes()
    model = scorewright.freeze(pipe, check_rows=x)
    plan = build_plan(model)
    names = list(plan.feature_names)
    rows = [dict(zip(names, [0.0] * len(names)))]
    for feat in model.features:
        for step in feat.scaling:
            for q in step.quantiles or ():
                for v in (q, np.nextafter(q, np.inf), np.nextafter(q, -np.inf)):
                    rows.append(dict(x.iloc[0].to_dict(), **{feat.name: v}))
    rows += x.to_dict("records")[:200]
    data = encode_rows(plan, rows)
    want = run_matrix(lower(plan), data)["probability_1"]
    for art in emitter("c")(model, {"prefix": "s"}):
        (tmp_path / art.name).write_bytes(art.content)
    (tmp_path / "driver.c").write_text(driver_source(model, "s"), encoding="ascii")
    for flags in (["-O2"], ["-O3", "-march=native"]):
        exe = tmp_path / "driver"
        subprocess.run(["gcc", "-std=c99", *flags, "-ffp-contract=off", "-I", str(tmp_path),
                        "-o", str(exe), str(tmp_path / "driver.c"), str(tmp_path / "s.c"),
                        "-lm"], check=True)
        for count in (1, c_batch.BATCH_BLOCK + 1, len(data)):
            path = tmp_path / f"rows{count}.bin"
            path.write_bytes(np.ascontiguousarray(data[:count], dtype="<f8").tobytes())
            out = subprocess.run([str(exe), "--batch", str(path)], capture_output=True,
                                 text=True, check=True).stdout
            got = np.array([float.fromhex(line.split()[0]) for line in out.splitlines()])
            assert np.array_equal(got.view(np.uint64), want[:count].view(np.uint64))


@pytest.mark.slow
def test_every_mode_verifies_on_the_boards(tmp_path):
    """The firmware profiles (qemu boards, double precision in software or libgcc)."""
    from scorewright.verify.harness import build_targets

    pipe, x = _all_modes()
    model, _ = freeze_checked(pipe, check_rows=x)
    report = build_targets(model, tmp_path, data=None, n_random=100,
                           targets=["c-cortex-m3", "c-cortex-m4f"], progress=None)
    assert report.ok, [(r.profile.name, r.message) for r in report.results]


@pytest.mark.parametrize("output", ["uniform", "normal"])
def test_default_quantile_count_runs_on_sqlite(output, tmp_path):
    """scikit-learn's default 1,000 quantiles on SQLite (the real engine, the standard
    library's): the step's selection trees nest as deep as its SQL gets, and SQLite's
    parser stack overflowed on 100 quantiles before a CASE counted double in the
    emitter's depth. Bit for bit against the program on every tenth quantile, one double
    either side, and values outside the quantiles."""
    from scorewright.emit import emitter
    from scorewright.verify.runners import sql as sql_runner

    rng = np.random.default_rng(5)
    x = pd.DataFrame({"load": rng.lognormal(2, 1, 1500)})
    y = (np.log(x.load) - 2 + rng.logistic(size=1500) > 0).astype(int)
    pipe = make_pipeline(QuantileTransformer(output_distribution=output),
                         LogisticRegression()).fit(x, y)
    model, _ = freeze_checked(pipe, check_rows=x)
    q = pipe[0].quantiles_[::10, 0]
    values = np.concatenate([q, np.nextafter(q, -np.inf), np.nextafter(q, np.inf),
                             [-1.0, 0.0, 1e6, q[-1] + 1.0]])
    rows = [{"load": float(v)} for v in values]
    art = emitter("sql")(model, {"dialect": "sqlite"})[0]
    (tmp_path / art.name).write_bytes(art.content)
    got = sql_runner.run(tmp_path, model, rows, {"dialect": "sqlite"})
    want = score_matrix(build_plan(model), encode_rows(build_plan(model), rows))
    assert np.array_equal(got.probabilities.view(np.uint64),
                          want["probabilities"].view(np.uint64))


@pytest.mark.parametrize("output", ["uniform", "normal"])
def test_a_constant_column_transforms_as_scikit_learn_does(output, tmp_path):
    """All quantiles one value (a constant training column): scikit-learn's transform gives
    the bottom reference below it and the top one above (numpy's interp at its ends), and
    "uniform" 0.0 on it; the program gave 0.5 below it in "uniform" (the freeze self-check
    refused such a model). Held here to QuantileTransformer.transform bit for bit, with a
    weight of 1 on the column so the value is the transform, then verified on the
    targets."""
    from scorewright.verify.harness import build_targets

    x = pd.DataFrame({"setpoint": np.full(60, 3.0), "load": np.arange(60.0)})
    pipe = make_pipeline(QuantileTransformer(n_quantiles=20, output_distribution=output),
                         Ridge()).fit(x, np.arange(60.0))
    pipe[-1].coef_ = np.array([1.0, 0.0])
    pipe[-1].intercept_ = 0.0
    probe = pd.DataFrame({"setpoint": [-1e9, 2.0, 3.0 - 1e-7, np.nextafter(3.0, 0), 3.0,
                                       np.nextafter(3.0, 4), 3.0 + 1e-7, 4.0, 1e9],
                          "load": 10.0})
    model, _ = freeze_checked(pipe, check_rows=probe)
    plan = build_plan(model)
    got = score_matrix(plan, encode_rows(plan, probe.to_dict("records")))["value"]
    want = pipe[0].transform(probe)[:, 0]
    assert np.array_equal(got, want), (got, want)
    report = build_targets(model, tmp_path, data=None, n_random=100,
                           targets=["python", "c-double", "sql-sqlite", "onnx-double"])
    assert report.ok, [(r.profile.name, r.message) for r in report.results]


def _default_quantiles_model(output: str, n_quantiles: int = 1000):
    """Two columns through scikit-learn's QuantileTransformer (its default 1,000 quantiles)
    into a logistic regression."""
    rng = np.random.default_rng(11)
    x = pd.DataFrame({"load": rng.lognormal(2, 1, 3000), "temp": rng.normal(5, 3, 3000)})
    y = (np.log(x.load) - 2 + 0.3 * x.temp - 1.5 + rng.logistic(size=3000) > 0).astype(int)
    pipe = make_pipeline(QuantileTransformer(n_quantiles=n_quantiles,
                                             output_distribution=output),
                         LogisticRegression()).fit(x, y)
    model, _ = freeze_checked(pipe, check_rows=x)
    return model, x


def test_a_quantile_step_costs_the_same_operations_at_any_quantile_count():
    """The step finds its piece with one bucket and three lookups (program.py's
    _lower_interp): the program of a model of 1,000 quantiles a column is as long as one
    of 50, where a tree of selections over every piece took about 10,000 operations a
    column."""
    from scorewright.program import lower

    lengths = {}
    for n in (50, 1000):
        model, _ = _default_quantiles_model("normal", n)
        program = lower(build_plan(model))
        assert sum(op.op == "bucket" for op in program.ops) == 4  # two interps a column
        lengths[n] = len(program.ops)
    assert lengths[1000] == lengths[50] < 500, lengths


def test_default_quantile_count_verifies_on_java_and_c(tmp_path):
    """Two columns of 1,000 quantiles: javac refused the old lowering's margin method
    ("code too large", the 64 KB limit of a method) past about 150 quantiles a column, and
    gcc took a minute over its C. Built and verified on the real compilers, bit for bit."""
    from scorewright.verify.harness import build_targets

    model, x = _default_quantiles_model("uniform")
    report = build_targets(model, tmp_path, data=None, n_random=100,
                           targets=["java", "c-double"], progress=None)
    assert report.ok, [(r.profile.name, r.message) for r in report.results]
