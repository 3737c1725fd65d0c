"""Inference from a fit: t, p-values and intervals per coefficient, and the whole-model metrics."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np
from scipy import stats

from .basis import pow2_exponent
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
    """t, p-values and confidence limits of every coefficient, plus whole-model metrics.

    Sums of squares are taken in units of the group's y_scale, so no square of the data is formed.
    Parameters are counted per group (`fit.n_params`: active coefficients and change points), so
    the model degrees of freedom, AIC and BIC count a change point as an estimated parameter.
    """
    df = fit.df_resid
    with np.errstate(invalid="ignore", divide="ignore"):
        t = fit.beta / fit.se
        pval = 2.0 * stats.t.sf(np.abs(t), df[:, None])
        q = stats.t.ppf(0.5 + level / 2.0, df)
        half = q[:, None] * fit.se
        n = fit.n.astype(np.float64)
        k_const = fit.has_constant.astype(np.int64)
        df_model = fit.n_params - k_const
        rss, tss, ys = fit.rss_scaled, fit.tss_scaled, fit.y_scale   # sums of squares of y / y_scale
        r2 = 1.0 - rss / tss
        adj = 1.0 - (n - k_const) / df * (1.0 - r2)
        rse = np.sqrt(rss / df) * ys
        rmse = np.sqrt(rss / n) * ys
        cv = 100.0 * rse / fit.ymean
        f = ((tss - rss) / df_model) / (rss / df)
        f_p = stats.f.sf(f, df_model, df)
        llf = -n / 2.0 * (np.log(2 * np.pi) + np.log(rss / n) + 2.0 * np.log(ys) + 1.0)
        if fit.half_log_weights is not None:         # weighted: the density of y, not of √w·y
            llf = llf + fit.half_log_weights
        aic = -2.0 * llf + 2.0 * fit.n_params
        bic = -2.0 * llf + np.log(n) * fit.n_params
    return Inference(t=t, p_value=pval, ci_low=fit.beta - half, ci_high=fit.beta + half, t_quantile=q,
                     r2=r2, adj_r2=adj, residual_std_error=rse, rmse=rmse, cv_rmse=cv, f=f, f_p_value=f_p,
                     aic=aic, bic=bic, df_model=df_model)


def mean_std_error(fit: EngineFit, groups: np.ndarray, D: np.ndarray) -> np.ndarray:
    """Std error of the fitted mean, √(d'(X'X)⁻¹d·σ²), at raw design rows D (len(groups), k, p).

    Only a group's active slots of D count (each batch takes its own columns), and σ² uses the
    group's residual degrees of freedom (change points counted).

    Computed as ‖d'A‖·σ in the engine's units (a sum of squares of numbers of order one), so it
    is finite whenever the answer is, even where fit.xtx_inv or fit.sigma2 alone is not. NaN for
    groups that were not fitted.
    """
    groups = np.asarray(groups)
    out = np.full(D.shape[:2], np.nan)
    at = np.full(fit.n_groups, -1)
    at[groups] = np.arange(len(groups))
    for b in fit.batches:
        sel = np.flatnonzero(at[b.groups] >= 0)
        if not len(sel):
            continue
        rows = at[b.groups[sel]]
        d = np.ldexp(D[rows][:, :, b.slots], -pow2_exponent(b.col_scale[sel])[:, None, :])  # raw column / scale
        s2 = b.rss[sel] / b.df_resid[sel]
        v = ((d @ b.A[sel]) ** 2).sum(axis=2) * s2[:, None]
        with np.errstate(over="ignore", under="ignore"):
            out[rows] = np.ldexp(np.sqrt(v), pow2_exponent(b.y_scale[sel])[:, None])
    return out
