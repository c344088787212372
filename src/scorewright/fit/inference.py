"""Inference for an unpenalized logistic fit: standard errors from the observed
information, Wald z, p-values, 95% intervals and odds ratios.

The fit runs on standardized columns; the maximum-likelihood estimate is
invariant under that linear reparametrization, so the estimates and their
covariance per original unit follow exactly as theta_orig = A theta_std and
cov_orig = A cov A' (A undoes the standardization). For the logit link the
observed information equals the expected one, X'WX with W = p(1 - p).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

Z95 = 1.959963984540054  # the 97.5% quantile of the standard normal


@dataclass(frozen=True)
class Inference:
    names: list[str]              # "intercept", then the design columns
    estimate: np.ndarray          # per original unit
    cov: np.ndarray               # per original unit
    estimate_sd: np.ndarray       # per standard deviation (numeric), as fitted otherwise
    se_sd: np.ndarray
    numeric: np.ndarray           # bool: which rows are numeric features
    condition: float              # condition number of the information matrix

    @property
    def se(self) -> np.ndarray:
        return np.sqrt(np.diag(self.cov))

    def table(self) -> list[dict]:
        rows = []
        for i, name in enumerate(self.names):
            b, se = float(self.estimate[i]), float(self.se[i])
            z = b / se if se > 0 else math.nan
            row = {"term": name, "estimate": b, "se": se, "z": z, "p_value": p_value(z),
                   "ci_low": b - Z95 * se, "ci_high": b + Z95 * se}
            if i > 0:
                row.update(odds_ratio=_exp(b), or_low=_exp(b - Z95 * se),
                           or_high=_exp(b + Z95 * se))
            if self.numeric[i]:
                bs, ss = float(self.estimate_sd[i]), float(self.se_sd[i])
                row.update(per_sd=bs, per_sd_low=bs - Z95 * ss, per_sd_high=bs + Z95 * ss,
                           or_per_sd=_exp(bs), or_per_sd_low=_exp(bs - Z95 * ss),
                           or_per_sd_high=_exp(bs + Z95 * ss))
            rows.append(row)
        return rows


def p_value(z: float) -> float:
    """Two-sided normal p-value."""
    if math.isnan(z):
        return math.nan
    return math.erfc(abs(z) / math.sqrt(2.0))


def _exp(x: float) -> float:
    return math.exp(x) if x < 709.0 else math.inf


def logistic_inference(design: np.ndarray, y: np.ndarray, intercept: float, coef: np.ndarray,
                       names: list[str], means: np.ndarray, scales: np.ndarray) -> Inference:
    """`design` is the standardized design matrix the model was fitted on; its first
    len(means) columns are the standardized numeric features."""
    n, k = design.shape
    x = np.hstack([np.ones((n, 1)), design])
    theta = np.concatenate([[intercept], coef])
    margin = x @ theta
    p = 1.0 / (1.0 + np.exp(-margin))
    w = p * (1.0 - p)
    info = x.T @ (x * w[:, None])
    condition = float(np.linalg.cond(info))
    cov_std = np.linalg.pinv(info) if not np.isfinite(condition) or condition > 1e15 \
        else np.linalg.inv(info)
    cov_std = (cov_std + cov_std.T) / 2.0
    n_num = len(means)
    a = np.eye(k + 1)
    for j in range(n_num):
        a[1 + j, 1 + j] = 1.0 / scales[j]
        a[0, 1 + j] = -means[j] / scales[j]
    numeric = np.zeros(k + 1, dtype=bool)
    numeric[1:1 + n_num] = True
    return Inference(
        names=["intercept"] + list(names),
        estimate=a @ theta,
        cov=a @ cov_std @ a.T,
        estimate_sd=theta.copy(),
        se_sd=np.sqrt(np.diag(cov_std)),
        numeric=numeric,
        condition=condition,
    )
