"""The label column: which task it calls for, its classes, and the positive class.

Rows without a label are left out (and counted); a label column with no
values, or a classification label with a single class, is an error.
"""

from __future__ import annotations

from dataclasses import dataclass

import math

import numpy as np

from ..errors import ScorewrightError

MODELS = ("logistic", "multinomial", "linear", "poisson", "gamma", "tweedie",
          "negative-binomial")
TWEEDIE_POWER = 1.5  # the compound Poisson-gamma default of --model tweedie (common practice)


def log_link_power(model: str) -> float | None:
    """The Tweedie power of a log-link model (poisson 1, gamma 2, tweedie:P), else None.
    A negative binomial model is a count model with the log link: 1, the power its
    deviance and label checks use (its fit and inference are its own)."""
    if model in ("poisson", "negative-binomial"):
        return 1.0
    if model == "gamma":
        return 2.0
    if model.startswith("tweedie:"):
        return float(model.split(":", 1)[1])
    return None


def _model_name(model: str) -> str:
    """--model as given, with tweedie's power made explicit (tweedie -> tweedie:1.5)."""
    if model == "tweedie":
        return f"tweedie:{TWEEDIE_POWER}"
    if model.startswith("tweedie:"):
        try:
            power = float(model.split(":", 1)[1])
        except ValueError:
            power = math.nan
        if not 1.0 < power < 2.0:
            raise ScorewrightError(f"--model {model}: the Tweedie power must be strictly "
                                   "between 1 and 2 (e.g. tweedie:1.5)")
        return f"tweedie:{power!r}"
    if model not in MODELS:
        raise ScorewrightError(f"--model: expected one of {', '.join(MODELS)} "
                               f"(tweedie:POWER), got {model!r}")
    return model
# Label pairs whose positive class is obvious (common practice); others need --positive.
OBVIOUS_POSITIVE = {("0", "1"): "1", ("false", "true"): "true", ("no", "yes"): "yes",
                    ("n", "y"): "y", ("f", "t"): "t"}


@dataclass(frozen=True)
class Label:
    name: str
    model: str                      # one of MODELS
    y: np.ndarray                   # 0/1 (logistic), class index (multinomial), float
    classes: tuple | None           # labels in head order; logistic: (negative, positive)
    kept: np.ndarray                # bool mask of rows with a label
    missing: int


def read_label(series, name: str, model: str | None, positive: str | None) -> Label:
    import pandas as pd

    text = pd.Series(_cells(series), index=series.index, dtype=object)
    kept = np.array([v is not None for v in text], dtype=bool)
    missing = int((~kept).sum())
    if not kept.any():
        raise ScorewrightError(f"label column {name!r} has no values")
    values = text[kept]
    numbers = pd.to_numeric(values, errors="coerce").to_numpy(dtype=np.float64)
    all_numbers = bool(np.all(np.isfinite(numbers)))
    whole = all_numbers and bool(np.all(numbers == np.floor(numbers)))
    distinct = sorted(set(map(str, values)))
    if model is None:
        if len(distinct) == 2:
            model = "logistic"
        elif whole and len(distinct) > 2 and bool(np.all(numbers >= 0)):
            # counts (whole numbers, none negative): never a linear regression by default
            model = "poisson"
        elif all_numbers and len(distinct) > 2:
            model = "linear"
        else:
            model = "multinomial"
    model = _model_name(model)
    if model == "linear" or log_link_power(model) is not None:
        if positive is not None:
            raise ScorewrightError(f"--positive applies to classification, not --model {model}")
        if not all_numbers:
            bad = values[~np.isfinite(numbers)].iloc[0]
            raise ScorewrightError(f"label {name!r}: {bad!r} is not a number "
                                   f"(--model {model} needs a numeric label)")
        if model != "gamma" and log_link_power(model) is not None and np.any(numbers < 0):
            raise ScorewrightError(f"label {name!r} has negative values; --model {model} "
                                   "needs values of zero or more")
        if model == "gamma" and np.any(numbers <= 0):
            raise ScorewrightError(f"label {name!r} has values of zero or less; --model gamma "
                                   "needs positive values (claim sizes, durations...)")
        if len(set(numbers)) < 2:
            raise ScorewrightError(f"label {name!r} has a single value; nothing to predict")
        return Label(name, model, numbers, None, kept, missing)
    levels = _typed_levels(values, numbers, whole)
    if len(levels) < 2:
        raise ScorewrightError(f"label {name!r} has a single class ({levels[0]!r}); a "
                               "classifier needs at least two")
    keys = [str(v) for v in levels]
    codes = np.array([keys.index(str(v)) for v in _typed_values(values, numbers, whole)])
    if model == "multinomial":
        if positive is not None:
            raise ScorewrightError("--positive applies to a binary (--model logistic) label")
        if len(levels) < 3:
            raise ScorewrightError(f"label {name!r} has two classes; use --model logistic")
        return Label(name, model, codes, tuple(levels), kept, missing)
    if len(levels) > 2:
        raise ScorewrightError(f"label {name!r} has {len(levels)} classes; --model logistic "
                               "needs two (use --model multinomial)")
    pos = _positive(name, keys, positive)
    neg = 1 - pos
    y = (codes == pos).astype(np.int64)
    return Label(name, model, y, (levels[neg], levels[pos]), kept, missing)


def _cells(series) -> list:
    """The label cells as plain values: text stripped, None for an empty or missing cell.

    Built as a list, not with Series.map: pandas 3 infers its string dtype for a
    mapped column of text and turns None back into NaN, which then reads as the
    class 'nan'."""
    missing = series.isna().to_numpy()
    out = []
    for value, absent in zip(series.astype(object).tolist(), missing):
        if isinstance(value, str):
            value = value.strip()
        out.append(None if absent or value == "" else value)
    return out


def _typed_levels(values, numbers, whole):
    if whole:
        return sorted({int(v) for v in numbers})
    return sorted({str(v) for v in values})


def _typed_values(values, numbers, whole):
    if whole:
        return [int(v) for v in numbers]
    return [str(v) for v in values]


def _positive(name, keys, positive) -> int:
    if positive is not None:
        if positive not in keys:
            raise ScorewrightError(f"--positive {positive!r} is not a class of {name!r} "
                                   f"(classes: {', '.join(map(repr, keys))})")
        return keys.index(positive)
    lowered = tuple(sorted(k.lower() for k in keys))
    if lowered in OBVIOUS_POSITIVE:
        want = OBVIOUS_POSITIVE[lowered]
        return [k.lower() for k in keys].index(want)
    raise ScorewrightError(f"label {name!r} has classes {keys[0]!r} and {keys[1]!r}; say which "
                           "is positive with --positive")
