"""Names and strings of any content flow safely into every target.

Property-based (hypothesis): feature names, category levels, class labels and model
names drawn from all of unicode and from a list of syntax breakers (quotes of every
kind, backslashes, comment markers, `;`, newlines, NUL, trigraphs, `#` at line
start, SQL and C keywords, names equal up to case, very long names). For each
generated model every built-in target's artifact is emitted, run in its real
runtime and compared with the reference evaluator, so an artifact that executed
anything a name says, or mis-parsed one, fails.

The default run takes one profile per emitter_key (tests/profile_tags.py: profiles of one
key render names the same way, so c-double stands for c-double-portable-exp and both
Cortex-M boards, onnx-double for onnx-double-reference), with fewer models where a run is
costly (Spark); every profile still runs the committed hostile model in the conformance
suite. `--runslow` runs every profile, with ten times as many models, drawn anew.
"""

from __future__ import annotations

import collections
import math

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import tally
from models import SINGLE_REFUSED
from profile_tags import params_one_per_emitter_key
from scorewright.emit import emitter
from scorewright.model import (NORMS, QUANTILE, QUANTILE_OUTPUTS, SPLINE, SPLINE_DEGREES,
                               SPLINE_EXTRAPOLATIONS, Calibration, Calibrator, CategoricalFeature,
                               DesignColumn, FrozenModel, Head, NumericFeature, ScalingStep,
                               parse_model)
from scorewright.plan import build_plan
from scorewright.errors import ScorewrightError
from scorewright.verify.compare import compare
from scorewright.verify.harness import oracle
from scorewright.verify.profiles import load_profile
from scorewright.verify.runners import runner

BREAKERS = ['"', "'", "`", "\u2019", "\u201c", "\\", "\\\\", "*/", "/*", "--", "#", ";", "\n",
            "\r\n", "\r", "\t", "\x00", "??=", "??/", "??'", "%s", "%n", "{{", "}}", "{%",
            "$$", "$1", "?", ":x", "@x", "[", "]", "\u2028", "\u0085", "\ufeff", "\x7f",
            "SELECT", "select", "DROP TABLE input;", "int", "return", "NULL", "null", "True",
            "def", "import os", "#include <stdio.h>", "#define x 1\n", "\\\n", "é", "É",
            "\U0001d518", "温度", "\u202e", " ", "x" * 300]
EXAMPLES = 128
# The default run's models per profile, by its cost tag (the draw is fixed; --runslow draws
# 1,280 new ones on every profile): 64, 16 on the compiled and server targets, and 8 on
# Spark and Java, whose every run is a JVM job of about 0.5-1.5 s (the default tier's 15
# minutes). Each SQL model runs twice (typed and text columns).
DEFAULT_EXAMPLES = {"low": 64, "medium": 16, "high": 8}

text = st.one_of(
    st.text(min_size=1, max_size=16),
    st.lists(st.sampled_from(BREAKERS), min_size=1, max_size=4).map("".join),
    st.builds(lambda a, b: a + b, st.sampled_from(BREAKERS), st.text(max_size=8)),
)


@st.composite
def _spline(draw):
    degree = draw(st.sampled_from(SPLINE_DEGREES))
    rule = draw(st.sampled_from(SPLINE_EXTRAPOLATIONS))
    n = 2 * degree + 2 + draw(st.integers(0, 3)) + (degree if rule == "periodic" else 0)
    start = draw(st.floats(-4, 4))
    steps = draw(st.lists(st.floats(0.125, 2.5), min_size=n - 1, max_size=n - 1))
    knots = [start]
    for d in steps:
        knots.append(knots[-1] + d)
    return ScalingStep(SPLINE, knots=tuple(knots), degree=degree, extrapolation=rule)


@st.composite
def _quantile(draw):
    n = draw(st.integers(2, 9))
    start = draw(st.floats(-4, 4))
    # repeated quantiles (a constant stretch of the training data) are drawn too
    steps = draw(st.lists(st.sampled_from([0.0, 0.25, 0.5, 1.5]), min_size=n - 1,
                          max_size=n - 1))
    q = [start]
    for d in steps:
        q.append(q[-1] + d)
    refs = tuple(j / (n - 1) for j in range(n))  # scikit-learn's linspace(0, 1, n)
    return ScalingStep(QUANTILE, quantiles=tuple(q), references=refs,
                       output=draw(st.sampled_from(QUANTILE_OUTPUTS)))


@st.composite
def _calibrator(draw):
    if draw(st.booleans()):
        return Calibrator("sigmoid", draw(st.floats(-3, 3)), draw(st.floats(-3, 3)))
    # thresholds 0.001 apart at least: closer ones can make a slope overflow, which the
    # model reader refuses (a fitted isotonic regression's thresholds are data values)
    xs = sorted(draw(st.sets(st.integers(-5000, 5000), min_size=1, max_size=6)))
    xs = [x / 1000 for x in xs]
    ys = sorted(draw(st.lists(st.floats(0, 1), min_size=len(xs), max_size=len(xs))))
    return Calibrator("isotonic", thresholds=tuple(xs), values=tuple(ys))


@st.composite
def hostile_models(draw):
    names = draw(st.lists(text, min_size=4, max_size=4, unique=True))
    if draw(st.booleans()):
        names[1] = names[0].swapcase() if names[0].swapcase() not in names else names[1]
    levels = draw(st.lists(text.filter(lambda s: s != ""), min_size=2, max_size=3,
                           unique=True))
    task = draw(st.sampled_from(["binary", "multiclass", "regression"]))
    n_out = 3 if task == "multiclass" else 1
    classes = None
    if task != "regression":
        classes = tuple(draw(st.lists(text, min_size=n_out if n_out > 1 else 2,
                                      max_size=n_out if n_out > 1 else 2, unique=True)))
    coef = st.floats(-3, 3, allow_nan=False, allow_infinity=False)
    # A third of the models carry format 2's term kinds: a log1p transform, a missing
    # indicator, a product, an encoded category, the probit or cloglog link (or format 4's
    # decision, or format 4's exposure, a fourth input, with the rate output beside the
    # count). A third carry formats 3 and 4's: a spline basis or a quantile step, a
    # normalized pair (a fourth input), and a calibrated head (sigmoid or isotonic, one to
    # three members), the cauchit or one-vs-rest link, or a log1p, sqrt or inverse link.
    kind = draw(st.sampled_from(["v1", "v2", "v3"]))
    v2, v3 = kind == "v2", kind == "v3"
    exposure = v2 and task == "regression" and draw(st.booleans())
    shape = draw(_spline() if draw(st.booleans()) else _quantile()) if v3 else None
    steps1 = (ScalingStep("log1p"),) if v2 else (shape,) if v3 else ()
    features = (
        NumericFeature(names[0], draw(st.one_of(st.none(), coef))),
        NumericFeature(names[1], None, steps1),
        CategoricalFeature(names[2], tuple(levels), None, None),
    )
    design = (DesignColumn(names[0]),)
    if v3 and shape.op == SPLINE:
        design += tuple(DesignColumn(names[1], basis=j, scaling=())
                        for j in range(shape.spline_columns()))
    else:
        design += (DesignColumn(names[1]),)
    design += tuple(DesignColumn(names[2], (lv,)) for lv in levels[1:])
    if v2:
        design += (DesignColumn(names[0], missing=(0.0, 1.0)),
                   DesignColumn(names[0], product=(
                       DesignColumn(names[0], scaling=()),
                       DesignColumn(names[2], (levels[0],))), scaling=()),
                   DesignColumn(names[2], encoded=(tuple(float(i) for i in range(len(levels))),
                                                   -1.0, -2.0)))
    if exposure:
        features += (NumericFeature(names[3], None, (ScalingStep("log"),), role="exposure"),)
        design += (DesignColumn(names[3]),)
    if v3:
        features += (NumericFeature(names[3], draw(st.one_of(st.none(), coef))),)
        pair = (DesignColumn(names[0], scaling=()), DesignColumn(names[3], scaling=()))
        norm = draw(st.sampled_from(NORMS))
        design += tuple(DesignColumn(pair[j].feature, normalized=(norm, pair, j), scaling=())
                        for j in range(2))
    n_design = len(design)
    link = "logit" if task == "binary" else ("softmax" if task == "multiclass" else "identity")
    if v2 and task == "binary":
        link = draw(st.sampled_from(["logit", "probit", "cloglog", "decision"]))
    elif v2 and task == "multiclass":
        link = draw(st.sampled_from(["softmax", "decision"]))
    elif exposure:
        link = "log"
    elif v3:
        link = draw(st.sampled_from({"binary": ["calibrated", "cauchit"],
                                     "multiclass": ["calibrated", "ovr_logit"],
                                     "regression": ["log1p", "sqrt", "inverse"]}[task]))
    calibration = None
    if link == "calibrated":
        members = draw(st.integers(1, 3))
        calibration = Calibration(members, tuple(draw(_calibrator())
                                                 for _ in range(members * n_out)))
        n_out *= members
    weights = tuple(tuple(draw(coef) for _ in range(n_design - exposure)) + (1.0,) * exposure
                    for _ in range(n_out))
    head = Head(task, link, classes, tuple(draw(coef) for _ in range(n_out)), weights,
                0.0 if task == "binary" and calibration is None else None, calibration)
    model = FrozenModel(draw(text), features, design, head,
                        {"scorewright_version": "test", "source": "hypothesis"}).sealed()
    # a drawn model is a valid model file (its own reader accepts what it writes)
    assert parse_model(model.to_json()) == model
    return model


def _rows(model):
    plan = build_plan(model)
    num0, num1, cat = (i.name for i in plan.inputs[:3])
    rows = []
    for level in list(plan.inputs[2].levels) + [None, "<not a level>"]:
        rows.append({num0: 1.25, num1: -0.5, cat: level})
    rows += [{num0: None, num1: math.nan, cat: None}, {num0: 1e308, num1: -1e308, cat: None}]
    shape = next((s for s in model.features[1].scaling if s.knots or s.quantiles), None)
    if shape is not None:  # a spline's knots or the quantiles, the points between, beyond
        points = shape.knots or shape.quantiles
        inner = [(a + b) / 2 for a, b in zip(points, points[1:])]
        beyond = [points[0] - 1.0, points[-1] + 1.0, 1e300]
        levels = list(plan.inputs[2].levels)
        for j, x in enumerate(list(points) + inner + beyond):
            rows.append({num0: x / 2, num1: x, cat: levels[j % len(levels)]})
    if len(plan.inputs) > 3:  # the exposure: ordinary, unusable (counts as 1) and extreme
        for row, value in zip(rows, [2.5, None, 0.0, -1.0, 1e300, 5e-324] * len(rows)):
            row[plan.inputs[3].name] = value
    return rows


def _kinds(model) -> set[str]:
    """The format 3 and 4 kinds a model holds, for the tally."""
    steps = {s.op for f in model.features for s in getattr(f, "scaling", ())}
    cal = model.head.calibration
    return ({op for op in (SPLINE, QUANTILE) if op in steps}
            | {"a norm" for c in model.design if c.normalized is not None}
            | ({f"{c.method} calibration" for c in cal.calibrators} if cal else set())
            | ({f"the {model.head.link} link"} if model.head.link in (
                "cauchit", "ovr_logit", "log1p", "sqrt", "inverse") else set()))


def _double_only(model) -> bool:
    """Whether the model holds a kind a single-precision target refuses."""
    cal = model.head.calibration
    return (any(s.op in (SPLINE, QUANTILE) for f in model.features
                for s in getattr(f, "scaling", ()))
            or any(c.normalized is not None for c in model.design)
            or model.head.link == "inverse"
            or (cal is not None and any(c.method == "isotonic" for c in cal.calibrators)))


def _nul_values_refused(profile, values, exc) -> bool:
    return (profile.runner == "sql" and profile.emit.get("dialect") == "postgres"
            and any("\x00" in str(v) for v in values) and "cannot hold NUL" in str(exc)
            and "\n" not in str(exc))


def _options(profile, request):
    opts = profile.run_options
    if profile.runner == "sql" and opts.get("dialect") == "postgres":
        opts["dsn"] = request.getfixturevalue("postgres_dsn")
    return opts


@pytest.mark.parametrize("profile_name", params_one_per_emitter_key())
def test_hostile_strings_reach_every_target_safely(profile_name, tmp_path_factory, request):
    profile = load_profile(profile_name)
    lacks = profile.missing_requirements()
    assert not lacks, f"{profile_name} cannot run here: lacks {lacks}"
    options = _options(profile, request)
    examples = EXAMPLES * 10 if request.config.getoption("--runslow") else \
        DEFAULT_EXAMPLES[profile.tags["cost"]]
    seen, refused, kinds = [], [], collections.Counter()

    # The CI run draws the same examples every time (a failure there is reproducible);
    # the opt-in long run draws new ones.
    slow = request.config.getoption("--runslow")
    @settings(max_examples=examples, deadline=None, database=None, derandomize=not slow,
              suppress_health_check=list(HealthCheck))
    @given(model=hostile_models())
    def check(model):
        where = tmp_path_factory.mktemp("hostile")
        try:
            plan, rows, expected = oracle(model, profile.tolerance, _rows(model))
        except ScorewrightError as exc:
            # splines, quantiles, norms, isotonic heads and the inverse link are scored in
            # double precision only: a float target refuses them in one line, its emitter too
            if profile.tolerance.precision == "float" and _double_only(model):
                assert SINGLE_REFUSED in str(exc) and "\n" not in str(exc), str(exc)
                with pytest.raises(ScorewrightError, match=SINGLE_REFUSED):
                    emitter(profile.emitter)(model, dict(profile.emit))
                refused.append("double only")
                return
            raise
        try:
            for art in emitter(profile.emitter)(model, dict(profile.emit)):
                (where / art.name).write_bytes(art.content)
            got = runner(profile.runner)(where, model, rows, dict(options))
        except ScorewrightError as exc:
            # onnx.reference drops trailing NULs of string constants; its runner refuses such
            # graphs in one line (onnxruntime runs them, and is checked like every target).
            nul = any(str(v).endswith("\x00") for v in model.features[2].levels)
            if nul and "cannot run this graph" in str(exc):
                refused.append("evaluator drops NULs")
                return
            # PostgreSQL text cannot hold NUL (a value, never a name): such a level cannot be
            # loaded and such a class label cannot be returned; both are refused in one line.
            # In the long layout feature names are values too (the feature column).
            values = list(model.features[2].levels) + list(model.head.classes or ())
            if profile.emit.get("layout") == "long":
                values += [f.name for f in model.features]
            if _nul_values_refused(profile, values, exc):
                refused.append("text cannot hold NUL")
                return
            raise
        result = compare(expected, got, profile.tolerance)
        assert result.ok, (repr(model.name), [f.name for f in model.features], result.reasons)
        seen.append(len(model.features) + len(model.features[2].levels) + 1
                    + len(model.head.classes or ()))
        kinds.update(_kinds(model))

    check()
    tally.add(f"hostile models through {profile_name}", len(seen))
    tally.add(f"hostile strings (names, levels, labels) through {profile_name}", sum(seen))
    for kind, n in sorted(kinds.items()):
        tally.add(f"hostile models with {kind} through {profile_name}", n)
    for why in sorted(set(refused)):
        tally.add(f"hostile models refused by {profile_name} ({why})", refused.count(why))
