"""Comparing a runtime's outputs with the reference evaluator's, in ULPs and absolute terms.

ULP distance counts the doubles (or floats, for a single-precision target)
between two values; +0.0 and -0.0 are 0 apart, NaN is infinitely far from
anything but NaN.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


def ulp_distance(a, b, precision: str = "double") -> np.ndarray:
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    if precision == "float":
        with np.errstate(over="ignore"):
            ia = _ordered(a.astype(np.float32).view(np.int32).astype(np.int64), 32)
            ib = _ordered(b.astype(np.float32).view(np.int32).astype(np.int64), 32)
    else:
        ia = _ordered(a.view(np.int64), 64)
        ib = _ordered(b.view(np.int64), 64)
    # Python ints: the difference of two int64 can overflow int64.
    dist = np.array([abs(int(x) - int(y)) for x, y in zip(ia.ravel(), ib.ravel())],
                    dtype=np.float64).reshape(a.shape)
    nan_a, nan_b = np.isnan(a), np.isnan(b)
    dist[nan_a != nan_b] = np.inf
    dist[nan_a & nan_b] = 0.0
    return dist


def _ordered(bits: np.ndarray, width: int) -> np.ndarray:
    low = -(1 << (width - 1))
    bits = bits.astype(object)
    return np.where(bits < 0, low - bits, bits)


# The rule compare() applies, in words, for the agreement report and the console.
RULE = ("A row passes when each of its outputs is within the target's stated ULP bound or "
        "within its stated absolute bound (relative, for predicted values): either one "
        "suffices. A class decision that differs is excused when the reference margin lies "
        "within the stated margin tolerance of the decision cut (multiclass: of the "
        "runner-up class's margin).")
MAXIMA = ("The max ULP and max abs figures are maxima over all rows, taken separately: a "
          "float target can show billions of ULPs where an output is near 0 (a tiny absolute "
          "difference) and a large absolute difference on a huge margin (a few ULPs); each "
          "row passed on one bound or the other.")


@dataclass
class Tolerance:
    """What a target promises: an output passes if within `*_ulps` OR within `*_abs`."""

    margin_ulps: float = 0.0
    margin_abs: float = 0.0
    probability_ulps: float = 0.0
    probability_abs: float = 0.0
    value_ulps: float = 0.0
    value_rel: float = 0.0
    precision: str = "double"
    exp: str = "libm"  # the exp of the reference the target is compared with (plan.exp_kind)

    @classmethod
    def from_table(cls, table: dict) -> "Tolerance":
        known = set(cls.__dataclass_fields__)
        unknown = [k for k in table if k not in known]
        if unknown:
            from ..errors import ScorewrightError
            raise ScorewrightError(f"[tolerance]: unknown key {unknown[0]!r}")
        return cls(**table)


@dataclass
class Comparison:
    rows: int
    max_ulps: dict = field(default_factory=dict)   # output -> max ULP distance
    max_abs: dict = field(default_factory=dict)    # output -> max absolute difference
    label_mismatches: int = 0
    failing_rows: list = field(default_factory=list)  # row indices, first ones
    reasons: dict = field(default_factory=dict)    # row index -> what disagreed
    failing_count: int = 0

    @property
    def ok(self) -> bool:
        return not self.failing_rows


def compare(expected: dict, got, tol: Tolerance, limit: int = 20) -> Comparison:
    """expected: reference.score_matrix output; got: a RunOutput. A decision-only output
    (no margins) is compared on its class decisions alone."""
    n = expected["margins"].shape[0]
    result = Comparison(rows=n)
    bad: dict[int, list[str]] = {}
    decisions_only = got.margins is None

    def check(name, want, have, ulps_ok, abs_ok, rel=0.0):
        want = np.asarray(want, dtype=np.float64)
        have = np.asarray(have, dtype=np.float64)
        if have.shape != want.shape:
            for r in range(n):
                bad.setdefault(r, []).append(f"{name}: shape {have.shape} != {want.shape}")
            result.max_ulps[name] = float("inf")
            return
        ulps = ulp_distance(want, have, tol.precision)
        with np.errstate(invalid="ignore", over="ignore"):
            diff = np.abs(want - have)
            diff = np.where(np.isnan(want) & np.isnan(have), 0.0, diff)
            diff = np.where(np.isnan(diff), np.inf, diff)
            scale = np.maximum(np.abs(want), np.finfo(np.float64).tiny)
            passed = (ulps <= ulps_ok) | (diff <= abs_ok) | (diff <= rel * scale)
        result.max_ulps[name] = float(ulps.max()) if ulps.size else 0.0
        result.max_abs[name] = float(diff.max()) if diff.size else 0.0
        rows_bad = ~passed.reshape(n, -1).all(axis=1)
        for r in np.flatnonzero(rows_bad):
            bad.setdefault(int(r), []).append(name)

    if not decisions_only:
        check("margin", expected["margins"], got.margins, tol.margin_ulps, tol.margin_abs)
    if "probabilities" in expected and not decisions_only:
        check("probability", expected["probabilities"], got.probabilities,
              tol.probability_ulps, tol.probability_abs)
    if "class_index" in expected:
        labels_exp = expected["class_index"]
        labels_got = np.asarray(got.class_index)
        mismatch = labels_exp != labels_got if labels_got.shape == labels_exp.shape else \
            np.ones(n, dtype=bool)
        excused = _near_decision(expected, tol)
        result.label_mismatches = int(mismatch.sum())
        for r in np.flatnonzero(mismatch & ~excused):
            bad.setdefault(int(r), []).append("predicted_class")
    if "value" in expected and not decisions_only:
        # An identity-link value is the margin itself: a margin near 0 after cancellation
        # is held to the margin's absolute bound, as the margin is.
        value_abs = tol.margin_abs if expected.get("link") == "identity" else 0.0
        check("predicted_value", expected["value"], got.value, tol.value_ulps, value_abs,
              tol.value_rel)
    if "rate" in expected and not decisions_only:
        # the rate is the value of the margin without the offset: held to the value's bound
        value_abs = tol.margin_abs if expected.get("link") == "identity" else 0.0
        check("predicted_rate", expected["rate"], got.rate, tol.value_ulps, value_abs,
              tol.value_rel)
    result.failing_rows = sorted(bad)[:limit]
    result.reasons = {r: bad[r] for r in result.failing_rows}
    result.failing_count = len(bad)
    return result


def _near_decision(expected: dict, tol: Tolerance) -> np.ndarray:
    """Rows whose decision is within the target's stated margin tolerance of flipping (a
    calibrated head decides on its probabilities: within their stated tolerance). A
    target stated exact (no margin tolerance) is excused nothing: a margin exactly at the
    cut, or an exact tie, must give the program's class."""
    if expected.get("link") == "calibrated":
        if not (tol.probability_abs > 0 or tol.probability_ulps > 0):
            return np.zeros(expected["probabilities"].shape[0], dtype=bool)
        return _near_tie(expected["probabilities"], tol.probability_abs,
                         tol.probability_ulps, tol.precision)
    margins = expected["margins"]
    if not (tol.margin_abs > 0 or tol.margin_ulps > 0):
        return np.zeros(margins.shape[0], dtype=bool)
    slack = np.maximum(tol.margin_abs, 0.0)
    if tol.margin_ulps:
        dtype = np.float32 if tol.precision == "float" else np.float64
        with np.errstate(over="ignore"):
            spacing = np.spacing(np.abs(margins).astype(dtype)).astype(np.float64)
        slack = np.maximum(slack, tol.margin_ulps * spacing.max(axis=1))
    if margins.shape[1] == 1:
        cut = expected.get("cut", 0.0)
        return np.abs(margins[:, 0] - cut) <= slack
    top2 = np.sort(margins, axis=1)[:, -2:]
    return (top2[:, 1] - top2[:, 0]) <= 2 * slack


def _near_tie(values: np.ndarray, abs_ok: float, ulps_ok: float, precision: str) -> np.ndarray:
    """Rows whose two largest values are within twice the stated tolerance of a tie."""
    slack = np.full(values.shape[0], max(abs_ok, 0.0))
    if ulps_ok:
        dtype = np.float32 if precision == "float" else np.float64
        spacing = np.spacing(np.abs(values).astype(dtype)).astype(np.float64)
        slack = np.maximum(slack, ulps_ok * spacing.max(axis=1))
    top2 = np.sort(values, axis=1)[:, -2:]
    return (top2[:, 1] - top2[:, 0]) <= 2 * slack
