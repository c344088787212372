"""Facts of the trade about the logistic curve (common practice), checked on the plan's
reference evaluator and on the emitted Python scorer."""

from __future__ import annotations

import importlib.util
import math

import pytest

from scorewright.emit import emitter
from scorewright.model import DesignColumn, FrozenModel, Head, NumericFeature
from scorewright.plan import build_plan
from scorewright.reference import score_row


def one_feature_model(theta0: float, theta1: float) -> FrozenModel:
    return FrozenModel(
        name="curve", features=(NumericFeature("x", None),), design=(DesignColumn("x"),),
        head=Head("binary", "logit", (0, 1), (theta0,), ((theta1,),), 0.0),
        provenance={"scorewright_version": "test", "source": "hand-written"}).sealed()


def p(model, x):
    return score_row(build_plan(model), {"x": x}).probabilities[1]


def test_sigmoid_of_zero_is_one_half():
    assert p(one_feature_model(0.0, 1.0), 0.0) == 0.5


@pytest.mark.parametrize("t", [0.1, 1.0, 3.7, 20.0, 36.5, 700.0, 1e6])
def test_sigmoid_is_symmetric(t):
    model = one_feature_model(0.0, 1.0)
    assert p(model, -t) == pytest.approx(1.0 - p(model, t), abs=2 ** -53)


@pytest.mark.parametrize("theta0,theta1", [(-3.0, 1.5), (2.0, -0.5), (-13.021, 2.826)])
def test_probability_is_one_half_at_minus_theta0_over_theta1(theta0, theta1):
    model = one_feature_model(theta0, theta1)
    x = -theta0 / theta1
    assert p(model, x) == pytest.approx(0.5, abs=1e-15)


def test_negative_slope_flips_the_curve():
    up, down = one_feature_model(0.5, 2.0), one_feature_model(0.5, -2.0)
    xs = [-3.0, -1.0, 0.0, 1.0, 3.0]
    assert [p(up, x) for x in xs] == sorted(p(up, x) for x in xs)
    assert [p(down, x) for x in xs] == sorted((p(down, x) for x in xs), reverse=True)
    for x in xs:
        assert p(down, x) == p(up, -x)  # mirror image about x = 0


def test_larger_slope_makes_the_transition_sharper():
    gentle, steep = one_feature_model(0.0, 0.5), one_feature_model(0.0, 5.0)
    for x in (0.5, 1.0, 2.0):
        assert p(steep, x) > p(gentle, x) > 0.5 > p(gentle, -x) > p(steep, -x)


def test_emitted_scorer_agrees_on_the_same_facts(tmp_path):
    model = one_feature_model(-3.0, 1.5)
    (art,) = emitter("python")(model, {})
    path = tmp_path / art.name
    path.write_bytes(art.content)
    spec = importlib.util.spec_from_file_location("curve", path)
    scorer = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(scorer)
    assert scorer.predict_proba({"x": 2.0}) == [0.5, 0.5]
    assert scorer.predict({"x": 2.0}) == 0  # margin 0 is not > cut 0
    assert scorer.predict({"x": math.nextafter(2.0, 3.0)}) == 1
    assert scorer.predict_proba({"x": 1e308})[1] == 1.0
    assert 0.0 < scorer.predict_proba({"x": -1e308})[1] < 1e-300
