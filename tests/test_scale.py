"""Scale: a 10,000-feature model and a categorical with 5,000 levels, emitted, built and run
on every target and compared with the reference. Time and artifact size are measured and
reported (never asserted)."""

from __future__ import annotations

import random
import time

import pytest

import models
import tally
from scorewright.errors import ScorewrightError
from scorewright.emit import emitter
from scorewright.model import CategoricalFeature, DesignColumn, FrozenModel, Head, NumericFeature
from scorewright.model import ScalingStep
from scorewright.plan import build_plan
from scorewright.verify.cases import random_rows
from scorewright.verify.compare import compare
from scorewright.verify.harness import oracle
from scorewright.verify.profiles import builtin_names, load_profile
from scorewright.verify.runners import runner

FIGURES: dict = {}


def many_levels_model(n_levels: int) -> FrozenModel:
    rng = random.Random(n_levels)
    levels = tuple(f"site-{i:05d}" for i in range(n_levels))
    feats = (NumericFeature("load_pct", 50.0, (ScalingStep("subtract", 50.0),
                                                ScalingStep("divide", 20.0))),
             CategoricalFeature("site", levels, None, None))
    design = (DesignColumn("load_pct"),) + tuple(DesignColumn("site", (lv,)) for lv in levels)
    coefs = (0.4,) + tuple(rng.gauss(0, 0.5) for _ in levels)
    return FrozenModel(f"levels_{n_levels}", feats, design,
                       Head("binary", "logit", (0, 1), (0.1,), (coefs,), 0.0),
                       {"scorewright_version": "test", "source": "scale test"}).sealed()


# A 10,000-column input table cannot exist in SQLite (2,000 columns) or PostgreSQL
# (1,600): the wide run must fail loudly with the engine's own reason (never a wrong
# answer); their long-layout profiles (sql-*-long) score the same model.
ENGINE_LIMITS = {"sql-sqlite": "too many columns", "sql-postgres": "at most 1600 columns"}

MODELS = {"10,000 numeric features": lambda: models.wide_model(10_000),
          "one categorical with 5,000 levels": lambda: many_levels_model(5_000)}


@pytest.mark.parametrize("profile_name", builtin_names())
@pytest.mark.parametrize("kind", sorted(MODELS))
def test_large_models_run_on_every_target(kind, profile_name, tmp_path, request):
    profile = load_profile(profile_name)
    lacks = profile.missing_requirements()
    assert not lacks, f"{profile_name} cannot run here: lacks {lacks}"
    wide = kind.startswith("10,000")
    model = MODELS[kind]()
    t0 = time.perf_counter()
    arts = emitter(profile.emitter)(model, dict(profile.emit))
    emitted = time.perf_counter() - t0
    for art in arts:
        (tmp_path / art.name).write_bytes(art.content)
    plan, rows, expected = oracle(model, profile.tolerance,
                                  random_rows(build_plan(model), 40, seed=3))
    options = profile.run_options
    if profile.runner == "sql" and options.get("dialect") == "postgres":
        options["dsn"] = request.getfixturevalue("postgres_dsn")
    t1 = time.perf_counter()
    if wide and profile_name in ENGINE_LIMITS:
        with pytest.raises(ScorewrightError, match=ENGINE_LIMITS[profile_name]):
            runner(profile.runner)(tmp_path, model, rows, options)
        tally.add(f"scale run: {kind} refused by the engine on {profile_name}: "
                  f"{ENGINE_LIMITS[profile_name]}", 1)
        return
    got = runner(profile.runner)(tmp_path, model, rows, options)
    ran = time.perf_counter() - t1
    result = compare(expected, got, profile.tolerance)
    size = sum(len(a.content) for a in arts)
    tally.add(f"scale run: {kind} on {profile_name}: emit {emitted:.1f} s, build+run "
              f"{ran:.1f} s, artifact {size / 1e6:.2f} MB", 1)
    assert result.ok, (result.max_ulps, result.reasons)
