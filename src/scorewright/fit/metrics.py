"""Validation metrics, computed here from predictions (the tests hold them to
scikit-learn's metric functions).

Conventions: probabilities in log loss are clipped to [eps, 1 - eps] with eps the
double machine epsilon (as scikit-learn does); the confusion matrix has true
classes as rows and predicted classes as columns; calibration bin k of n holds
the probabilities p with k/n < p <= (k+1)/n, the first bin also holding 0.
"""

from __future__ import annotations

import math

import numpy as np

from .labels import log_link_power

EPS = float(np.finfo(np.float64).eps)


def roc_auc(y: np.ndarray, score: np.ndarray) -> float:
    """Probability that a random positive scores above a random negative (ties count
    half): the Mann-Whitney statistic over midranks. NaN with a single class."""
    y = np.asarray(y).astype(bool)
    n_pos = int(y.sum())
    n_neg = len(y) - n_pos
    if n_pos == 0 or n_neg == 0:
        return math.nan
    ranks = _midranks(np.asarray(score, dtype=np.float64))
    return float((ranks[y].sum() - n_pos * (n_pos + 1) / 2.0) / (n_pos * n_neg))


def _midranks(x: np.ndarray) -> np.ndarray:
    order = np.argsort(x, kind="mergesort")
    xs = x[order]
    ranks = np.empty(len(x), dtype=np.float64)
    start = 0
    n = len(x)
    while start < n:
        end = start
        while end + 1 < n and xs[end + 1] == xs[start]:
            end += 1
        ranks[order[start:end + 1]] = (start + end) / 2.0 + 1.0
        start = end + 1
    return ranks


def log_loss(y: np.ndarray, proba: np.ndarray) -> float:
    """Mean negative log likelihood; `proba` is (n, K) with columns in class order and
    `y` the class index of each row."""
    proba = np.clip(np.asarray(proba, dtype=np.float64), EPS, 1.0 - EPS)
    picked = proba[np.arange(len(y)), np.asarray(y)]
    return float(-np.mean(np.log(picked)))


def brier(y: np.ndarray, proba: np.ndarray) -> float:
    """Binary: mean squared error of the positive-class probability. Multiclass: mean
    over rows of the squared distance to the one-hot truth."""
    proba = np.asarray(proba, dtype=np.float64)
    if proba.shape[1] == 2:
        return float(np.mean((proba[:, 1] - np.asarray(y)) ** 2))
    onehot = np.eye(proba.shape[1])[np.asarray(y)]
    return float(np.mean(np.sum((proba - onehot) ** 2, axis=1)))


def confusion(y: np.ndarray, predicted: np.ndarray, n_classes: int) -> np.ndarray:
    out = np.zeros((n_classes, n_classes), dtype=np.int64)
    np.add.at(out, (np.asarray(y), np.asarray(predicted)), 1)
    return out


def accuracy(y, predicted) -> float:
    return float(np.mean(np.asarray(y) == np.asarray(predicted)))


def balanced_accuracy(y, predicted, n_classes: int) -> float:
    """Mean recall over the classes present in `y`."""
    table = confusion(y, predicted, n_classes)
    totals = table.sum(axis=1)
    present = totals > 0
    return float(np.mean(np.diag(table)[present] / totals[present]))


def calibration_table(y: np.ndarray, p: np.ndarray, n_bins: int = 10) -> list[dict]:
    """One row per bin: edges, count, mean predicted probability, observed share."""
    y = np.asarray(y, dtype=np.float64)
    p = np.asarray(p, dtype=np.float64)
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    ids = np.searchsorted(edges[1:-1], p)
    rows = []
    for k in range(n_bins):
        inside = ids == k
        count = int(inside.sum())
        rows.append({
            "low": float(edges[k]), "high": float(edges[k + 1]), "count": count,
            "positives": int(y[inside].sum()),
            "mean_predicted": float(p[inside].mean()) if count else None,
            "observed": float(y[inside].mean()) if count else None,
        })
    return rows


def classification_metrics(y, proba, predicted) -> dict:
    """The summary numbers for one set of predictions."""
    proba = np.asarray(proba, dtype=np.float64)
    k = proba.shape[1]
    if k == 2:
        auc = roc_auc(y, proba[:, 1])
    else:
        aucs = [roc_auc(np.asarray(y) == j, proba[:, j]) for j in range(k)]
        auc = float(np.mean(aucs)) if not any(math.isnan(a) for a in aucs) else math.nan
    return {
        "roc_auc": auc,
        "log_loss": log_loss(y, proba),
        "brier": brier(y, proba),
        "accuracy": accuracy(y, predicted),
        "balanced_accuracy": balanced_accuracy(y, predicted, k),
    }


def poisson_deviance(y, mu) -> np.ndarray:
    """Unit Poisson deviance 2 (y log(y/mu) - y + mu), with 0 log 0 = 0."""
    y = np.asarray(y, dtype=np.float64)
    mu = np.asarray(mu, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        term = np.where(y > 0, y * np.log(y / mu), 0.0)
    return 2.0 * (term - y + mu)


def unit_deviance(y, mu, power: float) -> np.ndarray:
    """The unit deviance of the Tweedie family of this power: Poisson (1), gamma (2)
    2 (y / mu - log(y / mu) - 1), and between them the compound Poisson-gamma form
    2 (y^(2-p) / ((1-p)(2-p)) - y mu^(1-p) / (1-p) + mu^(2-p) / (2-p)) (McCullagh and
    Nelder's Generalized Linear Models; from memory)."""
    if power == 1.0:
        return poisson_deviance(y, mu)
    y = np.asarray(y, dtype=np.float64)
    mu = np.asarray(mu, dtype=np.float64)
    if power == 2.0:
        return 2.0 * (y / mu - np.log(y / mu) - 1.0)
    p = power
    return 2.0 * (np.power(y, 2 - p) / ((1 - p) * (2 - p)) - y * np.power(mu, 1 - p) / (1 - p)
                  + np.power(mu, 2 - p) / (2 - p))


def regression_metrics(y, predicted, model: str) -> dict:
    """RMSE, MAE and deviance explained (1 - D(model)/D(mean-only); for the normal
    deviance this is R squared)."""
    y = np.asarray(y, dtype=np.float64)
    predicted = np.asarray(predicted, dtype=np.float64)
    error = y - predicted
    power = log_link_power(model)
    if power is not None:
        dev = unit_deviance(y, predicted, power).sum()
        null = unit_deviance(y, np.full_like(y, y.mean()), power).sum()
    else:
        dev = float(np.sum(error ** 2))
        null = float(np.sum((y - y.mean()) ** 2))
    return {
        "rmse": float(math.sqrt(np.mean(error ** 2))),
        "mae": float(np.mean(np.abs(error))),
        "deviance_explained": float(1.0 - dev / null) if null > 0 else math.nan,
    }


def spread(values: list[dict]) -> dict:
    """Mean and sample standard deviation of each metric over folds."""
    out = {}
    for key in values[0]:
        xs = np.array([v[key] for v in values], dtype=np.float64)
        ok = xs[~np.isnan(xs)]
        out[key] = {"mean": float(ok.mean()) if len(ok) else math.nan,
                    "sd": float(ok.std(ddof=1)) if len(ok) > 1 else math.nan}
    return out
