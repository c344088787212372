"""The decision cut of a binary model: chosen as a probability threshold, frozen in
margin units.

A rule gives a probability threshold p* (predict positive iff probability > p*):
youden and f1 pick it from out-of-fold predictions (halfway between the two
distinct probabilities where the rule is best), cost:FP/FN uses the decision-
theoretic threshold FP / (FP + FN) for calibrated probabilities (common
practice), a number is taken as p* itself. The frozen model decides
`margin > cut`, so p* becomes cut = log(p*/(1-p*)); rounding in the logit and in
the sigmoid can disagree for margins within a few ULPs of the cut, so the cut is
then moved, if needed, until `margin > cut` reproduces `probability > p*` on
every row the model was checked with.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import ScorewrightError


@dataclass(frozen=True)
class CutRule:
    kind: str                  # default, youden, f1, cost, value
    text: str
    threshold: float | None = None  # cost and value: p*


def parse_cut(text: str | None) -> CutRule:
    if text is None:
        return CutRule("default", "0.5", 0.5)
    word = text.strip().lower()
    if word in ("youden", "f1"):
        return CutRule(word, word)
    if word.startswith("cost:"):
        fp, sep, fn = word[5:].partition("/")
        try:
            c_fp, c_fn = float(fp), float(fn)
        except ValueError:
            c_fp = c_fn = math.nan
        if not sep or not (c_fp > 0 and c_fn > 0) or not math.isfinite(c_fp + c_fn):
            raise ScorewrightError(f"--cut {text!r}: expected cost:FP/FN with two positive "
                                   "costs, e.g. cost:1/5")
        return CutRule("cost", text, c_fp / (c_fp + c_fn))
    try:
        value = float(word)
    except ValueError:
        raise ScorewrightError(f"--cut {text!r}: expected youden, f1, cost:FP/FN or a "
                               "probability between 0 and 1") from None
    if not 0.0 < value < 1.0:
        raise ScorewrightError(f"--cut {text!r}: a probability threshold must be strictly "
                               "between 0 and 1")
    return CutRule("value", text, value)


def choose_threshold(rule: CutRule, y: np.ndarray, p: np.ndarray) -> float:
    """p* for the rule, from out-of-fold labels and probabilities of the positive class."""
    if rule.threshold is not None:
        return rule.threshold
    y = np.asarray(y).astype(bool)
    levels = np.unique(p)
    if len(levels) < 2:
        return 0.5
    # Threshold i lies between levels[i] and levels[i+1]: positive iff p >= levels[i+1].
    pos_at = np.searchsorted(levels, p[y])
    neg_at = np.searchsorted(levels, p[~y])
    pos_count = np.bincount(pos_at, minlength=len(levels))
    neg_count = np.bincount(neg_at, minlength=len(levels))
    tp = pos_count[::-1].cumsum()[::-1][1:]     # rows at levels[i+1] or above
    fp = neg_count[::-1].cumsum()[::-1][1:]
    n_pos, n_neg = int(y.sum()), int((~y).sum())
    if rule.kind == "youden":
        score = tp / max(n_pos, 1) - fp / max(n_neg, 1)
    else:
        fn = n_pos - tp
        score = 2.0 * tp / np.maximum(2.0 * tp + fp + fn, 1)
    best = int(np.argmax(score))
    return float(levels[best] + (levels[best + 1] - levels[best]) / 2.0)


def logit(p: float) -> float:
    return math.log(p) - math.log1p(-p)


@dataclass(frozen=True)
class FrozenCut:
    threshold: float   # p*
    cut: float         # margin units
    moved: bool        # the logit was adjusted to reproduce the decisions
    rows: int          # rows the decisions were checked on
    agrees: bool


def reconcile(threshold: float, margins: np.ndarray, probabilities: np.ndarray) -> FrozenCut:
    """The margin cut that reproduces `probability > threshold` on these rows (the
    frozen model's own reference margins and probabilities)."""
    cut = logit(threshold)
    want = probabilities > threshold
    moved = False
    if np.any((margins > cut) != want):
        below = margins[~want]
        above = margins[want]
        low = float(below.max()) if len(below) else -math.inf
        high = float(above.min()) if len(above) else math.inf
        if low < high:
            cut = min(max(cut, low), float(np.nextafter(high, -np.inf)))
            moved = True
    agrees = bool(np.all((margins > cut) == want))
    return FrozenCut(threshold, cut, moved, len(margins), agrees)
