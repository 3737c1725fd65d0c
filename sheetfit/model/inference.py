"""Inference from a fit: t, p-values and intervals per coefficient, and the whole-model metrics."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
from scipy import stats

from .engine import EngineFit


@dataclass(frozen=True)
class Inference:
    """Per-coefficient arrays are (G, p); whole-model arrays are (G,). NaN where a group was not fitted."""

    t: np.ndarray
    p_value: np.ndarray
    ci_low: np.ndarray
    ci_high: np.ndarray
    t_quantile: np.ndarray          # two-sided t quantile at the confidence level, per group
    r2: np.ndarray
    adj_r2: np.ndarray
    residual_std_error: np.ndarray
    rmse: np.ndarray
    cv_rmse: np.ndarray             # percent of the response mean
    f: np.ndarray
    f_p_value: np.ndarray
    aic: np.ndarray
    bic: np.ndarray
    df_model: np.ndarray

    def with_std_errors(self, beta: np.ndarray, se: np.ndarray, df_resid: np.ndarray) -> Inference:
        """The same metrics with t, p-values and intervals taken from other std errors (robust ones)."""
        with np.errstate(invalid="ignore", divide="ignore"):
            t = beta / se
            half = self.t_quantile[:, None] * se
            return dataclasses.replace(self, t=t, p_value=2 * stats.t.sf(np.abs(t), df_resid[:, None]),
                                       ci_low=beta - half, ci_high=beta + half)


def inference(fit: EngineFit, level: float) -> Inference:
    """t, p-values and confidence limits of every coefficient, plus whole-model metrics."""
    df = fit.df_resid
    with np.errstate(invalid="ignore", divide="ignore"):
        t = fit.beta / fit.se
        pval = 2.0 * stats.t.sf(np.abs(t), df[:, None])
        q = stats.t.ppf(0.5 + level / 2.0, df)
        half = q[:, None] * fit.se
        n = fit.n.astype(np.float64)
        k_const = 1 if fit.intercept else 0
        df_model = fit.p - k_const
        r2 = 1.0 - fit.rss / fit.tss
        adj = 1.0 - (n - k_const) / df * (1.0 - r2)
        rse = np.sqrt(fit.rss / df)
        rmse = np.sqrt(fit.rss / n)
        cv = 100.0 * rse / fit.ymean
        f = ((fit.tss - fit.rss) / df_model) / (fit.rss / df)
        f_p = stats.f.sf(f, df_model, df)
        llf = -n / 2.0 * (np.log(2 * np.pi) + np.log(fit.rss / n) + 1.0)
        aic = -2.0 * llf + 2.0 * fit.p
        bic = -2.0 * llf + np.log(n) * fit.p
    return Inference(t=t, p_value=pval, ci_low=fit.beta - half, ci_high=fit.beta + half, t_quantile=q,
                     r2=r2, adj_r2=adj, residual_std_error=rse, rmse=rmse, cv_rmse=cv, f=f, f_p_value=f_p,
                     aic=aic, bic=bic, df_model=np.full(fit.n_groups, df_model))
