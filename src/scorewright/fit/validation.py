"""Fit and validate honestly: held-out test part, cross-validation on the rest.

1. A test part (stratified by label for classifiers) is set aside and touched once.
2. On the training part, K-fold cross-validation (stratified for classifiers)
   scores every penalty strength of the grid by out-of-fold log loss (squared
   error for linear, Poisson deviance for poisson); the best is chosen.
3. The decision cut is chosen from the pooled out-of-fold predictions.
4. The chosen model is refitted on the whole training part and frozen; the
   test part is scored once by the frozen model's reference evaluator, so the
   test metrics describe exactly what will be deployed.
"""

from __future__ import annotations

import sys
import warnings
from dataclasses import dataclass, field

import numpy as np

from ..errors import ScorewrightError
from . import diagnostics, metrics
from .labels import log_link_power
from .cut import CutRule, choose_threshold
from .labels import Label
from .pipeline import (NEGATIVE_BINOMIAL, Spec, design_names, make_pipeline,
                       reference_levels, standardization)
from .pipeline import strength_grid


@dataclass
class Validation:
    """Everything the summary, the report and the provenance need."""

    pipeline: object = None
    grid: list = field(default_factory=list)
    cv_loss: list = field(default_factory=list)      # (mean, sd) per grid strength
    loss_name: str = ""
    chosen: float | None = None
    threshold: float | None = None                   # binary: p*
    cv: dict = field(default_factory=dict)           # metric -> {mean, sd}
    cv_confusion: list | None = None                 # pooled out-of-fold, at the cut
    oof_y: np.ndarray | None = None
    oof_pred: np.ndarray | None = None
    n_train: int = 0
    n_test: int = 0
    train_index: np.ndarray | None = None
    test_index: np.ndarray | None = None
    notes: list = field(default_factory=list)
    cv_fits: int = 0
    cv_unconverged: int = 0
    terms: object = None                             # RowTerms: exposure and weights


def _loss(spec: Spec, y, pred, weights=None) -> float:
    if spec.classifier:
        if weights is None:
            return metrics.log_loss(y, pred)
        p = np.clip(pred[np.arange(len(y)), np.asarray(y)], 1e-15, 1.0)
        return float(np.average(-np.log(p), weights=weights))
    power = log_link_power(spec.model)
    if power is not None:
        return float(np.average(metrics.unit_deviance(y, pred, power), weights=weights))
    return float(np.average((np.asarray(y) - pred) ** 2, weights=weights))


def _fit(pipe, x, y, extra=None) -> bool:
    """Fit (`extra`: the estimator's fit parameters); False when the solver warned that it
    did not converge."""
    from sklearn.exceptions import ConvergenceWarning

    extra = {f"estimate__{k}": v for k, v in (extra or {}).items()}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        pipe.fit(x, y, **extra)
    return not any(issubclass(w.category, ConvergenceWarning) for w in caught)


@dataclass(frozen=True)
class RowTerms:
    """Per row: what the rate is multiplied by (the exposure, or exp of the offset) and
    the row weight; None where not given. A model with an exposure is fitted on the rate
    y / e with sample weight w * e^(2 - p) (p the Tweedie power: 1 Poisson, 2 gamma),
    whose estimating equations are those of the count model with offset log e (common
    practice for Tweedie models); its predictions are rates, times e expected counts."""

    exposure: np.ndarray | None = None
    weights: np.ndarray | None = None

    @classmethod
    def of(cls, columns: dict | None) -> "RowTerms":
        columns = columns or {}
        e = columns.get("exposure")
        if "offset" in columns:
            e = np.exp(columns["offset"])
        return cls(e, columns.get("weights"))

    def target(self, y, idx, spec: Spec):
        """The target and the estimator's fit parameters for rows `idx`. A negative
        binomial model takes the exposure as its offset log(e) and fits the counts."""
        if spec.model == NEGATIVE_BINOMIAL:
            return y[idx], ({} if self.exposure is None else
                            {"offset": np.log(self.exposure[idx])})
        if self.exposure is None:
            return y[idx], ({} if self.weights is None else
                            {"sample_weight": self.weights[idx]})
        e = self.exposure[idx]
        w = e ** (2.0 - log_link_power(spec.model))
        if self.weights is not None:
            w = w * self.weights[idx]
        return y[idx] / e, {"sample_weight": w}

    def count(self, pred, idx):
        return pred if self.exposure is None else pred * self.exposure[idx]

    def weight(self, idx):
        return None if self.weights is None else self.weights[idx]


def predict(pipe, spec: Spec, x) -> np.ndarray:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # unseen levels in a fold: encoded as zeros, by design
        if spec.classifier:
            return pipe.predict_proba(x)
        return pipe.predict(x)


def _splits(spec: Spec, y, folds: int, test_fraction: float, seed: int):
    from sklearn.model_selection import KFold, StratifiedKFold, train_test_split

    index = np.arange(len(y))
    strat = y if spec.classifier else None
    if test_fraction > 0:
        train, test = train_test_split(index, test_size=test_fraction, random_state=seed,
                                       stratify=strat)
        train, test = np.sort(train), np.sort(test)
    else:
        train, test = index, index[:0]
    if spec.classifier:
        counts = np.bincount(y[train], minlength=int(y.max()) + 1)
        if counts.min() < folds:
            raise ScorewrightError(
                f"a class has only {counts.min()} rows in the training part; {folds}-fold "
                "cross-validation needs at least one per fold (lower --cv or use more data)")
        splitter = StratifiedKFold(n_splits=folds, shuffle=True, random_state=seed)
        return train, test, list(splitter.split(train, y[train]))
    if len(train) < 2 * folds:
        raise ScorewrightError(f"{len(train)} training rows are too few for {folds}-fold "
                               "cross-validation")
    splitter = KFold(n_splits=folds, shuffle=True, random_state=seed)
    return train, test, list(splitter.split(train))


def validate(schema, x, label: Label, spec: Spec, rule: CutRule | None, folds: int,
             test_fraction: float, progress: bool = True, columns=None) -> Validation:
    import click

    y = label.y
    terms = RowTerms.of(columns)
    v = Validation(loss_name="log loss" if spec.classifier else
                   "Poisson deviance" if spec.model in ("poisson", NEGATIVE_BINOMIAL) else
                   f"{spec.model.split(':')[0]} deviance"
                   if log_link_power(spec.model) is not None else "squared error")
    train, test, splits = _splits(spec, y, folds, test_fraction, spec.seed)
    v.train_index, v.test_index = train, test
    v.n_train, v.n_test = len(train), len(test)
    x_train, y_train = x.iloc[train], y[train]
    v.terms = terms
    refs = reference_levels(schema, x_train)
    v.grid = strength_grid(spec)
    oof = {}
    total = len(v.grid) * len(splits) + 1
    bar = click.progressbar(length=total, label="cross-validation", file=sys.stderr,
                            show_pos=True) if progress else None
    try:
        if bar is not None:
            bar.__enter__()
        for s, strength in enumerate(v.grid):
            pred = None
            losses = []
            for tr, va in splits:
                pipe = make_pipeline(schema, spec, strength, refs)
                v.cv_fits += 1
                target, extra = terms.target(y, train[tr], spec)
                v.cv_unconverged += not _fit(pipe, x_train.iloc[tr], target, extra)
                p = terms.count(predict(pipe, spec, x_train.iloc[va]), train[va])
                if pred is None:
                    pred = np.zeros((len(train),) + p.shape[1:])
                pred[va] = p
                losses.append(_loss(spec, y_train[va], p, terms.weight(train[va])))
                if bar is not None:
                    bar.update(1)
            oof[s] = pred
            v.cv_loss.append((float(np.mean(losses)), float(np.std(losses, ddof=1))))
        best = int(np.argmin([m for m, _ in v.cv_loss]))
        v.chosen = v.grid[best]
        v.oof_y, v.oof_pred = y_train, oof[best]
        v.pipeline = make_pipeline(schema, spec, v.chosen, refs)
        target, extra = terms.target(y, train, spec)
        converged = _fit(v.pipeline, x_train, target, extra)
        if bar is not None:
            bar.update(1)
    finally:
        if bar is not None:
            bar.__exit__(None, None, None)
    if not converged:
        v.notes.append("the solver did not converge when refitting the chosen model on the "
                       "training part; its coefficients may be off")
    note = diagnostics.convergence_note("cross-validation fits", v.cv_unconverged, v.cv_fits)
    if note:
        v.notes.append(note)
    if spec.penalty != "none" and best in (0, len(v.grid) - 1):
        side = "strongest" if (best == 0) == spec.classifier else "weakest"
        v.notes.append(f"the chosen penalty strength is the {side} in the grid; the best "
                       "value may lie beyond it")
    _fold_metrics(v, spec, label, rule, splits)
    return v


def _fold_metrics(v: Validation, spec: Spec, label: Label, rule, splits) -> None:
    y, pred = v.oof_y, v.oof_pred
    if spec.model == "logistic":
        v.threshold = choose_threshold(rule, y, pred[:, 1])
    per_fold = []
    for _, va in splits:
        if spec.classifier:
            per_fold.append(metrics.classification_metrics(y[va], pred[va],
                                                           _decide(pred[va], v.threshold)))
        else:
            per_fold.append(metrics.regression_metrics(y[va], pred[va], spec.model))
    v.cv = metrics.spread(per_fold)
    if spec.classifier:
        v.cv_confusion = metrics.confusion(y, _decide(pred, v.threshold),
                                           len(label.classes)).tolist()


def _decide(proba: np.ndarray, threshold: float | None) -> np.ndarray:
    if proba.shape[1] == 2:
        return (proba[:, 1] > threshold).astype(np.int64)
    return np.argmax(proba, axis=1)


def fitted_inference(v: Validation, schema, x, label: Label, spec: Spec):
    """The inference table of the refitted unpenalized model (binary logistic, linear, or
    a log-link model, with its exposure)."""
    from .inference import glm_inference

    pipe = v.pipeline
    x_train = x.iloc[v.train_index]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        design = np.asarray(pipe.named_steps["prepare"].transform(x_train), dtype=np.float64)
    est = pipe.named_steps["estimate"]
    means, scales = standardization(pipe, schema)
    coef = np.asarray(est.coef_, dtype=np.float64).reshape(-1)
    intercept = float(np.asarray(est.intercept_).reshape(-1)[0])
    exposure = None
    if v.terms is not None and v.terms.exposure is not None:
        exposure = v.terms.exposure[v.train_index]
    return glm_inference(design, label.y[v.train_index], intercept, coef,
                         design_names(pipe, schema), means, scales, spec.model,
                         log_link_power(spec.model), exposure,
                         cov_std=getattr(est, "cov_", None))
