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

import math

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import tally
from profile_tags import params_one_per_emitter_key
from scorewright.emit import emitter
from scorewright.model import (CategoricalFeature, DesignColumn, FrozenModel, Head, NumericFeature,
                               ScalingStep)
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
    # half the models carry format 2's term kinds: a log1p transform, a missing indicator,
    # a product, an encoded category, the probit or cloglog link (or format 4's decision,
    # or format 4's exposure, a fourth input, with the rate output beside the count)
    v2 = draw(st.booleans())
    exposure = v2 and task == "regression" and draw(st.booleans())
    features = (
        NumericFeature(names[0], draw(st.one_of(st.none(), coef))),
        NumericFeature(names[1], None, (ScalingStep("log1p"),) if v2 else ()),
        CategoricalFeature(names[2], tuple(levels), None, None),
    )
    design = (DesignColumn(names[0]), DesignColumn(names[1])) + tuple(
        DesignColumn(names[2], (lv,)) for lv in levels[1:])
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
    n_design = len(design)
    link = "logit" if task == "binary" else ("softmax" if task == "multiclass" else "identity")
    if v2 and task == "binary":
        link = draw(st.sampled_from(["logit", "probit", "cloglog", "decision"]))
    elif v2 and task == "multiclass":
        link = draw(st.sampled_from(["softmax", "decision"]))
    elif exposure:
        link = "log"
    weights = tuple(tuple(draw(coef) for _ in range(n_design - exposure)) + (1.0,) * exposure
                    for _ in range(n_out))
    head = Head(task, link, classes, tuple(draw(coef) for _ in range(n_out)), weights,
                0.0 if task == "binary" else None)
    model = FrozenModel(draw(text), features, design, head,
                        {"scorewright_version": "test", "source": "hypothesis"}).sealed()
    return model


def _rows(model):
    plan = build_plan(model)
    num0, num1, cat = (i.name for i in plan.inputs[:3])
    rows = []
    for level in list(plan.inputs[2].levels) + [None, "<not a level>"]:
        rows.append({num0: 1.25, num1: -0.5, cat: level})
    rows += [{num0: None, num1: math.nan, cat: None}, {num0: 1e308, num1: -1e308, cat: None}]
    if len(plan.inputs) > 3:  # the exposure: ordinary, unusable (counts as 1) and extreme
        for row, value in zip(rows, [2.5, None, 0.0, -1.0, 1e300, 5e-324] * len(rows)):
            row[plan.inputs[3].name] = value
    return rows


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
    seen, refused = [], []

    # The CI run draws the same examples every time (a failure there is reproducible);
    # the opt-in long run draws new ones.
    slow = request.config.getoption("--runslow")
    @settings(max_examples=examples, deadline=None, database=None, derandomize=not slow,
              suppress_health_check=list(HealthCheck))
    @given(model=hostile_models())
    def check(model):
        where = tmp_path_factory.mktemp("hostile")
        plan, rows, expected = oracle(model, profile.tolerance, _rows(model))
        try:
            for art in emitter(profile.emitter)(model, dict(profile.emit)):
                (where / art.name).write_bytes(art.content)
            got = runner(profile.runner)(where, model, rows, dict(options))
        except ScorewrightError as exc:
            # onnx.reference drops trailing NULs of string constants; its runner refuses such
            # graphs in one line (onnxruntime runs them, and is checked like every target).
            nul = any(str(v).endswith("\x00") for v in model.features[2].levels)
            if nul and "cannot run this graph" in str(exc):
                refused.append(1)
                return
            # PostgreSQL text cannot hold NUL (a value, never a name): such a level cannot be
            # loaded and such a class label cannot be returned; both are refused in one line.
            # In the long layout feature names are values too (the feature column).
            values = list(model.features[2].levels) + list(model.head.classes or ())
            if profile.emit.get("layout") == "long":
                values += [f.name for f in model.features]
            if _nul_values_refused(profile, values, exc):
                refused.append(1)
                return
            raise
        result = compare(expected, got, profile.tolerance)
        assert result.ok, (repr(model.name), [f.name for f in model.features], result.reasons)
        seen.append(len(model.features) + len(model.features[2].levels) + 1
                    + len(model.head.classes or ()))

    check()
    tally.add(f"hostile models through {profile_name}", len(seen))
    tally.add(f"hostile strings (names, levels, labels) through {profile_name}", sum(seen))
    if refused:
        why = "text cannot hold NUL" if profile.runner == "sql" else "evaluator drops NULs"
        tally.add(f"hostile models refused by {profile_name} ({why})", len(refused))
