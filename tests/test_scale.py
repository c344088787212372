"""Scale: wide models and many-level categoricals, emitted, built and run on every target
and compared with the reference.

The default run takes each profile past its emitter's layer boundaries (SQL: the
dialect's terms per layer and per join, plus one; C: the row scorer's parts) and
the engines' column limits; the slow tier (--runslow) runs the 10,000-feature model and
the 5,000-level categorical on every profile. Tests assert behaviour only: time and
artifact size are measured by `python bench/bench_scale.py`."""

from __future__ import annotations

import pytest

import models
import tally
from scorewright.errors import ScorewrightError
from scorewright.emit import emitter
from scorewright.emit.sql_dialects import DIALECTS
from scorewright.plan import build_plan
from scorewright.verify.cases import random_rows
from scorewright.verify.compare import compare
from scorewright.verify.harness import oracle
from scorewright.verify.profiles import builtin_names, load_profile
from scorewright.verify.runners import runner

# A 10,000-column input table cannot exist in SQLite (2,000 columns) or PostgreSQL
# (1,600): the wide run must fail loudly with the engine's own reason (never a wrong
# answer); their long-layout profiles (sql-*-long) score the same model.
ENGINE_LIMITS = {"sql-sqlite": "too many columns", "sql-postgres": "at most 1600 columns"}

MODELS = {"10,000 numeric features": lambda: models.wide_model(10_000),
          "one categorical with 5,000 levels": lambda: models.many_levels_model(5_000)}


def past_the_boundaries(profile) -> int:
    """Terms that take the profile's emitter past its layer boundary: the SQL dialect's terms
    per layer plus one (SQLite 901; 251 elsewhere, where Spark turns to one aggregate());
    251 is past the C row scorer's parts (2 x 64 terms) too. Spark's long layout joins
    blocks of 1,000 terms: one run past that takes over a minute here, so it is crossed in
    the slow tier (10,000 features) only."""
    if profile.emitter != "sql":
        return 251
    return max(251, DIALECTS[profile.emit["dialect"]].terms_per_layer + 1)


# n numeric features are n terms; n levels are one term (a table of n weights).
BOUNDARY_MODELS = {"numeric features": lambda n: models.wide_model(n, prefix="edge"),
                   "categorical levels": models.many_levels_model}


# The two slowest pairs (a wide model on the long layouts of Spark and SQLite, 10-12 s each
# here) run under --runslow; their wide layouts and their many-level models run by default.
SLOW_PAIRS = {("numeric features", "sql-spark-long"), ("numeric features", "sql-sqlite-long")}


@pytest.mark.parametrize("kind,profile_name", [
    pytest.param(kind, name, marks=pytest.mark.slow if (kind, name) in SLOW_PAIRS else ())
    for name in builtin_names() for kind in sorted(BOUNDARY_MODELS)])
def test_models_past_the_layer_boundaries_run_on_every_target(kind, profile_name, tmp_path,
                                                              request):
    """Every profile (its runtime too: a board's flash and stack, Spark's planner), with a
    model just past the size where its emitter splits a sum, and a categorical of as many
    levels."""
    profile = load_profile(profile_name)
    lacks = profile.missing_requirements()
    assert not lacks, f"{profile_name} cannot run here: lacks {lacks}"
    n = past_the_boundaries(profile)
    model = BOUNDARY_MODELS[kind](n)
    tmp_path.mkdir(exist_ok=True)
    for art in emitter(profile.emitter)(model, dict(profile.emit)):
        (tmp_path / art.name).write_bytes(art.content)
    plan, rows, expected = oracle(model, profile.tolerance,
                                  random_rows(build_plan(model), 20, seed=4))
    options = profile.run_options
    if profile.tags["needs_server"]:
        options["dsn"] = request.getfixturevalue("postgres_dsn")
    got = runner(profile.runner)(tmp_path, model, rows, options)
    result = compare(expected, got, profile.tolerance)
    assert result.ok, (result.max_ulps, result.reasons)
    tally.add("scale: models just past a layer boundary, run on a target and agreeing", 1)


@pytest.mark.parametrize("profile_name", sorted(ENGINE_LIMITS))
def test_a_table_wider_than_the_engine_allows_is_refused_with_its_reason(profile_name,
                                                                          tmp_path, request):
    """2,100 features: past SQLite's 2,000 columns and PostgreSQL's 1,600. The wide
    layout fails loudly with the engine's own reason (never a wrong answer); the long
    layout scores the same model (tests/test_sql_layouts.py)."""
    profile = load_profile(profile_name)
    model = models.wide_model(2_100)
    for art in emitter(profile.emitter)(model, dict(profile.emit)):
        (tmp_path / art.name).write_bytes(art.content)
    rows = random_rows(build_plan(model), 3, seed=3)
    options = profile.run_options
    if profile.tags["needs_server"]:
        options["dsn"] = request.getfixturevalue("postgres_dsn")
    with pytest.raises(ScorewrightError, match=ENGINE_LIMITS[profile_name]):
        runner(profile.runner)(tmp_path, model, rows, options)


@pytest.mark.slow
@pytest.mark.parametrize("profile_name", builtin_names())
@pytest.mark.parametrize("kind", sorted(MODELS))
def test_large_models_run_on_every_target(kind, profile_name, tmp_path, request):
    profile = load_profile(profile_name)
    lacks = profile.missing_requirements()
    assert not lacks, f"{profile_name} cannot run here: lacks {lacks}"
    wide = kind.startswith("10,000")
    model = MODELS[kind]()
    for art in emitter(profile.emitter)(model, dict(profile.emit)):
        (tmp_path / art.name).write_bytes(art.content)
    plan, rows, expected = oracle(model, profile.tolerance,
                                  random_rows(build_plan(model), 40, seed=3))
    options = profile.run_options
    if profile.tags["needs_server"]:
        options["dsn"] = request.getfixturevalue("postgres_dsn")
    if wide and profile_name in ENGINE_LIMITS:
        with pytest.raises(ScorewrightError, match=ENGINE_LIMITS[profile_name]):
            runner(profile.runner)(tmp_path, model, rows, options)
        tally.add(f"scale run: {kind} refused by the engine on {profile_name}: "
                  f"{ENGINE_LIMITS[profile_name]}", 1)
        return
    got = runner(profile.runner)(tmp_path, model, rows, options)
    result = compare(expected, got, profile.tolerance)
    tally.add(f"scale run: {kind} on {profile_name}", 1)
    assert result.ok, (result.max_ulps, result.reasons)
