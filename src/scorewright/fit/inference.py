"""Inference for an unpenalized fit: standard errors, Wald statistics, p-values, 95%
intervals, and the ratios a log-scale coefficient means (odds ratios for the logit link,
ratios of means for the log link), as statsmodels reports them for the same model.

The fit runs on standardized columns; the maximum-likelihood estimate is
invariant under that linear reparametrization, so the estimates and their
covariance per original unit follow exactly as theta_orig = A theta_std and
cov_orig = A cov A' (A undoes the standardization). With the canonical or log link
the covariance is scale * (X'WX)^-1 (statsmodels' GLM default, the expected
information): logit W = p(1 - p), scale 1; log link with Tweedie power p (Poisson 1,
gamma 2) W = mu^(2 - p), scale 1 for Poisson and otherwise Pearson's chi-square over the
residual degrees of freedom; linear W = 1, scale the residual mean square, with the t
distribution on n - k - 1 degrees of freedom (statsmodels' OLS). An exposure enters the
linear predictor as log(e), so mu is the expected count.
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
    df: float | None = None       # t distribution's degrees of freedom; None: normal
    ratio: str | None = "odds_ratio"  # what exp(estimate) is called, if anything

    @property
    def statistic(self) -> str:
        return "z" if self.df is None else "t"

    def _quantile(self) -> float:
        if self.df is None:
            return Z95
        from scipy import stats

        return float(stats.t.ppf(0.975, self.df))

    def _p(self, z: float) -> float:
        if self.df is None or math.isnan(z):
            return p_value(z)
        from scipy import stats

        return float(2.0 * stats.t.sf(abs(z), self.df))

    @property
    def se(self) -> np.ndarray:
        return np.sqrt(np.diag(self.cov))

    def table(self) -> list[dict]:
        rows = []
        q = self._quantile()
        for i, name in enumerate(self.names):
            b, se = float(self.estimate[i]), float(self.se[i])
            z = b / se if se > 0 else math.nan
            row = {"term": name, "estimate": b, "se": se, self.statistic: z,
                   "p_value": self._p(z), "ci_low": b - q * se, "ci_high": b + q * se}
            if i > 0 and self.ratio == "odds_ratio":
                row.update(odds_ratio=_exp(b), or_low=_exp(b - q * se),
                           or_high=_exp(b + q * se))
            elif i > 0 and self.ratio is not None:
                row.update({self.ratio: _exp(b), "ratio_low": _exp(b - q * se),
                            "ratio_high": _exp(b + q * se)})
            if self.numeric[i]:
                bs, ss = float(self.estimate_sd[i]), float(self.se_sd[i])
                row.update(per_sd=bs, per_sd_low=bs - q * ss, per_sd_high=bs + q * ss)
                if self.ratio == "odds_ratio":
                    row.update(or_per_sd=_exp(bs), or_per_sd_low=_exp(bs - q * ss),
                               or_per_sd_high=_exp(bs + q * ss))
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
    return glm_inference(design, y, intercept, coef, names, means, scales, "logistic")


def glm_inference(design: np.ndarray, y: np.ndarray, intercept: float, coef: np.ndarray,
                  names: list[str], means: np.ndarray, scales: np.ndarray, model: str,
                  power: float | None = None, exposure: np.ndarray | None = None,
                  cov_std: np.ndarray | None = None) -> Inference:
    """`design` is the standardized design matrix the model was fitted on; its first
    len(means) columns are the standardized numeric features. `model`: logistic, linear,
    or a log-link model of Tweedie `power`."""
    n, k = design.shape
    x = np.hstack([np.ones((n, 1)), design])
    theta = np.concatenate([[intercept], coef])
    margin = x @ theta
    y = np.asarray(y, dtype=np.float64)
    df, ratio, scale = None, None, 1.0
    if model == "logistic":
        p = 1.0 / (1.0 + np.exp(-margin))
        w = p * (1.0 - p)
        ratio = "odds_ratio"
    elif power is not None:
        mu = np.exp(margin + (0.0 if exposure is None else np.log(exposure)))
        w = mu ** (2.0 - power)
        ratio = "mean_ratio"
        if power != 1.0:
            scale = float(np.sum((y - mu) ** 2 / mu ** power) / (n - k - 1))
    else:
        w = np.ones(n)
        scale = float(np.sum((y - margin) ** 2) / (n - k - 1))
        df = float(n - k - 1)
    info = x.T @ (x * w[:, None])
    condition = float(np.linalg.cond(info))
    if cov_std is None:
        cov_std = np.linalg.pinv(info) if not np.isfinite(condition) or condition > 1e15 \
            else np.linalg.inv(info)
        cov_std = scale * (cov_std + cov_std.T) / 2.0
    else:
        # the fitter's own covariance (a negative binomial model: statsmodels' inverse
        # Hessian of the likelihood of the coefficients and alpha, alpha's row left out)
        cov_std = (np.asarray(cov_std, dtype=np.float64) + np.asarray(cov_std).T) / 2.0
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
        df=df,
        ratio=ratio,
    )
