"""The comparison verify relies on: ULP distance and stated tolerances."""

from __future__ import annotations

import math

import numpy as np

from scorewright.verify.compare import Tolerance, compare, ulp_distance
from scorewright.verify.runners import RunOutput


def test_ulp_distance_basics():
    assert ulp_distance([0.0], [-0.0])[0] == 0
    assert ulp_distance([1.0], [math.nextafter(1.0, 2.0)])[0] == 1
    assert ulp_distance([5e-324], [-5e-324])[0] == 2
    assert ulp_distance([math.nan], [math.nan])[0] == 0
    assert ulp_distance([math.nan], [1.0])[0] == math.inf
    assert ulp_distance([1.0], [float(np.nextafter(np.float32(1.0), np.float32(2.0)))],
                        "float")[0] == 1


def _regression(link, want, got, tol):
    expected = {"margins": np.array([[want]]), "value": np.array([want]), "cut": None,
                "link": link}
    return compare(expected, RunOutput("test", np.array([[got]]), value=np.array([got])), tol)


def test_identity_value_near_zero_is_held_to_the_margin_bound():
    """A float target's identity-link value after cancellation: 1e-9 vs 6e-8 is 283 float
    ULPs but within the stated 3e-5 absolute margin bound; a log-link value is not."""
    tol = Tolerance(precision="float", margin_ulps=64, margin_abs=3e-5, value_ulps=128,
                    value_rel=1.6e-5)
    assert _regression("identity", 1e-9, 6.1e-8, tol).ok
    assert not _regression("log", 1e-9, 6.1e-8, tol).ok
    assert not _regression("identity", 1.0, 1.001, tol).ok


def test_exact_target_fails_on_one_ulp():
    tol = Tolerance()
    assert _regression("identity", 0.3, 0.3, tol).ok
    assert not _regression("identity", 0.3, math.nextafter(0.3, 1.0), tol).ok
