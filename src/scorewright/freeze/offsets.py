"""An offset or an exposure as an input of the frozen model.

A count model fitted with an exposure (years insured, machine hours) predicts a rate; the
frozen model takes the exposure column as one more input, added to the margin through its
log with weight 1, and marks it as the exposure (the feature's `role`, format version 4).
An offset is added to the margin as it is. Every artifact outputs the expected count (the
`value`: the inverse link of the margin with the offset) and the rate (the `rate`: the
inverse link of the margin without it; for an exposure, the rate per unit of exposure).
The rule where the column gives nothing usable is stated once, here, and every target
follows it through the scoring program: a missing offset counts as 0; a missing or
non-positive exposure (0, negative, NaN, +-inf, absent) as 1, so the count is then the
rate. A huge exposure is clamped to the input guard like every numeric input (the count's
margin stays finite; the rate does not read it).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from ..errors import ScorewrightError
from ..model import DesignColumn, FrozenModel, Head, NumericFeature, ScalingStep

KINDS = ("offset", "exposure")


def rule(attr: str, column: str) -> str:
    if attr == "offset":
        return f"{column} is the offset: missing, it counts as 0"
    return (f"{column} is the exposure: missing or not positive, it counts as 1 (the count "
            "is then the rate per unit of exposure)")


def with_offset(model: FrozenModel, attr: str, column: str) -> FrozenModel:
    """The model with `column` added to its margin (an exposure through its log)."""
    if attr not in KINDS:
        raise ValueError(attr)
    if model.head.task != "regression":
        raise ScorewrightError(f"an {attr} applies to a regression model, not {model.head.task}")
    if attr == "exposure" and model.head.link != "log":
        raise ScorewrightError(f"an exposure needs a log link; the model's is "
                               f"{model.head.link}")
    if any(f.name == column for f in model.features):
        raise ScorewrightError(f"{attr}={column!r}: the model already has a feature of that "
                               "name")
    steps = (ScalingStep("log"),) if attr == "exposure" else ()
    head = model.head
    head = Head(head.task, head.link, head.classes, head.intercepts,
                tuple(tuple(row) + (1.0,) for row in head.coefficients), head.cut)
    prov = dict(model.provenance)
    inputs = dict(prov.get("inputs", {}), **{attr: column})
    if "feature_names" in inputs:
        inputs["feature_names"] = list(inputs["feature_names"]) + [column]
    prov["inputs"] = inputs
    prov["notes"] = list(prov.get("notes", [])) + [rule(attr, column)]
    return replace(model, features=model.features + (NumericFeature(column, None, steps,
                                                                    role=attr),),
                   design=model.design + (DesignColumn(column),), head=head,
                   provenance=prov).sealed()


def factor(values, attr: str) -> np.ndarray:
    """What the offset or exposure multiplies the rate by, under the rule above."""
    v = np.asarray(values, dtype=np.float64)
    if attr == "offset":
        return np.exp(np.where(np.isfinite(v), v, 0.0))
    return np.where(np.isfinite(v) & (v > 0.0), v, 1.0)


class RateSource:
    """A scikit-learn regressor fitted on rates, as the self-check calls a source: per
    row, the expected count, its prediction times the exposure (or exp of the offset)
    under the stated rule, and the rate, its prediction itself (`estimator.predict`)."""

    def __init__(self, estimator, attr: str, column: str, names):
        self.estimator = estimator
        self.attr, self.column = attr, column
        self.feature_names_in_ = np.asarray(list(names), dtype=object)

    def predict(self, frame):
        rate = np.asarray(self.estimator.predict(frame.drop(columns=[self.column])),
                          dtype=np.float64)
        values = frame[self.column].to_numpy(dtype=np.float64, na_value=np.nan)
        return np.column_stack([rate * factor(values, self.attr), rate])
