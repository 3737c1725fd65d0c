"""Engine arrays → the tidy result tables (one row per group, group × term, observation …)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy import stats

from ..model.engine import EngineFit, design_row
from ..model.inference import Inference
from ..terms import Term, source_columns
from .headers import (ADJUSTED_R2, AIC, AVERAGE_HIGH, AVERAGE_LOW, BIC, COEFFICIENT, COEFFICIENT_COUNT,
    CV_RMSE, F_P_VALUE, F_STAT, FITTED, FLAGS, INPUT, INTERVAL_HIGH, INTERVAL_LOW, P_VALUE, R2, REASONS,
    RESIDUAL_STD_ERROR, RMSE, ROWS_NOT_USED, ROWS_USED, STATUS, STD_ERROR, T_STAT, shown_names)

CURVE_POINTS = 25


def with_keys(keys: pd.DataFrame, codes: np.ndarray, body: dict) -> pd.DataFrame:
    """Group key columns for `codes` followed by the body columns (our columns).

    Keys are taken by position; a key whose name is also a body column is shown as `NAME (input)`
    (see results.headers), so the user's values and ours both stay.
    """
    names = shown_names(list(keys.columns), body)
    out = keys.iloc[codes].reset_index(drop=True)
    out.columns = names
    for k, v in body.items():
        out[k] = v
    return out


def empty_table(keys: pd.DataFrame, ours: Sequence[str]) -> pd.DataFrame:
    """A table without rows: the key columns (named as `with_keys` names them), then `ours`."""
    return pd.DataFrame(columns=[*shown_names(list(keys.columns), ours), *ours])


def groups_table(keys: pd.DataFrame, fit: EngineFit, inf: Inference, flags: np.ndarray, reasons: np.ndarray,
                 rows: tuple[np.ndarray, np.ndarray], extra: dict[str, np.ndarray]) -> pd.DataFrame:
    """One row per group; `rows` = (rows used, rows not used) per group, as `observations` says."""
    ok = fit.fitted_ok
    used, dropped = rows
    G = fit.n_groups

    def only(v):
        return np.where(ok, v, np.nan)

    reason_text = np.where(ok, reasons, fit.not_fitted_reason).astype(object)
    body = {                       # in the order of results.headers.GROUP_HEADERS
        STATUS: np.where(ok, "fitted", "not fitted"),
        FLAGS: np.where(ok, flags, 0),
        REASONS: reason_text,
        R2: only(inf.r2),
        ADJUSTED_R2: only(inf.adj_r2),
        F_STAT: only(inf.f),
        F_P_VALUE: only(inf.f_p_value),
        RESIDUAL_STD_ERROR: only(inf.residual_std_error),
        RMSE: only(inf.rmse),
        CV_RMSE: only(inf.cv_rmse),
        ROWS_USED: used,
        ROWS_NOT_USED: dropped,
        COEFFICIENT_COUNT: np.full(G, fit.p),
        AIC: only(inf.aic),
        BIC: only(inf.bic),
    }
    body.update({k: only(v) for k, v in extra.items()})
    return with_keys(keys, np.arange(G), body)


def coefficients_table(keys: pd.DataFrame, fit: EngineFit, inf: Inference, labels: Sequence[str],
                       extra: dict[str, np.ndarray]) -> pd.DataFrame:
    """group × term rows for fitted groups; `extra` maps column name → (G, p) arrays."""
    g_idx = np.flatnonzero(fit.fitted_ok)
    p = fit.p
    codes = np.repeat(g_idx, p)
    sel = (codes, np.tile(np.arange(p), len(g_idx)))
    body = {                       # in the order of results.headers.COEFFICIENT_HEADERS
        INPUT: np.tile(np.asarray(labels, dtype=object), len(g_idx)),
        COEFFICIENT: fit.beta[sel],
        INTERVAL_LOW: inf.ci_low[sel],
        INTERVAL_HIGH: inf.ci_high[sel],
        STD_ERROR: fit.se[sel],
        T_STAT: inf.t[sel],
        P_VALUE: inf.p_value[sel],
    }
    for name, arr in extra.items():
        body[name] = np.asarray(arr)[sel]
    return with_keys(keys, codes, body)


def curves_table(keys: pd.DataFrame, fit: EngineFit, inf: Inference, terms: Sequence[Term],
                 ranges: dict[str, tuple[np.ndarray, np.ndarray]]) -> pd.DataFrame:
    """Fitted line and confidence band of the mean over each group's observed input range."""
    cols = source_columns(terms)
    if len(cols) != 1:
        return empty_table(keys, ["x", FITTED, AVERAGE_LOW, AVERAGE_HIGH])
    col = cols[0]
    lo, hi = ranges[col]
    g_idx = np.flatnonzero(fit.fitted_ok & np.isfinite(lo) & np.isfinite(hi))
    frac = np.linspace(0.0, 1.0, CURVE_POINTS)
    xs = lo[g_idx, None] + (hi - lo)[g_idx, None] * frac[None, :]
    D = design_row(terms, fit.intercept, {col: xs.ravel()}).reshape(len(g_idx), CURVE_POINTS, fit.p)
    yhat = np.einsum("gkp,gp->gk", D, fit.beta[g_idx])
    var = np.einsum("gkp,gpq,gkq->gk", D, fit.xtx_inv[g_idx], D) * fit.sigma2[g_idx, None]
    half = inf.t_quantile[g_idx, None] * np.sqrt(np.maximum(var, 0.0))
    codes = np.repeat(g_idx, CURVE_POINTS)
    return with_keys(keys, codes, {"x": xs.ravel(), FITTED: yhat.ravel(),
                                   AVERAGE_LOW: (yhat - half).ravel(),
                                   AVERAGE_HIGH: (yhat + half).ravel()})


def quantiles_table(keys: pd.DataFrame, fit: EngineFit, codes: np.ndarray) -> pd.DataFrame:
    """Standardized residuals sorted per group against normal quantiles at (i − 3/8)/(n + 1/4).

    Sorted within each batch's padded rows (short sorts), and the normal quantiles computed once
    per distinct group size.
    """
    ok = fit.fitted_ok[codes] & np.isfinite(fit.internal)
    counts = np.bincount(codes[ok], minlength=fit.n_groups)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    resid = np.empty(int(counts.sum()))
    quantile = np.empty_like(resid)
    for b in fit.batches:
        vals = fit.internal[np.where(b.mask, b.rows, 0)]
        vals = np.where(b.mask & np.isfinite(vals), vals, np.inf)
        vals.sort(axis=1)
        n = counts[b.groups]
        sizes, which = np.unique(n, return_inverse=True)
        m = vals.shape[1]
        rank = np.arange(1, m + 1)
        by_size = np.full((len(sizes), m), np.nan)
        for k, size in enumerate(sizes):
            by_size[k, :size] = stats.norm.ppf((rank[:size] - 0.375) / (size + 0.25))
        take = rank[None, :] <= n[:, None]
        dest = (starts[b.groups][:, None] + rank[None, :] - 1)[take]
        resid[dest] = vals[take]
        quantile[dest] = by_size[which][take]
    c = np.repeat(np.arange(fit.n_groups), counts)
    return with_keys(keys, c, {"normal quantile": quantile, "standardized residual": resid})


def xtx_table(keys: pd.DataFrame, fit: EngineFit, labels: Sequence[str]) -> pd.DataFrame:
    g_idx = np.flatnonzero(fit.fitted_ok)
    p = fit.p
    codes = np.repeat(g_idx, p * p)
    rows = np.tile(np.repeat(np.arange(p), p), len(g_idx))
    cols = np.tile(np.tile(np.arange(p), p), len(g_idx))
    lab = np.asarray(labels, dtype=object)
    return with_keys(keys, codes, {"row term": lab[rows], "column term": lab[cols],
                                   "value": fit.xtx_inv[codes, rows, cols]})


def ranges_table(keys: pd.DataFrame, fit: EngineFit,
                 ranges: dict[str, tuple[np.ndarray, np.ndarray]]) -> pd.DataFrame:
    g_idx = np.flatnonzero(fit.fitted_ok)
    parts = []
    for col, (lo, hi) in ranges.items():
        parts.append(with_keys(keys, g_idx, {"column": col, "min": lo[g_idx], "max": hi[g_idx]}))
    if not parts:
        return empty_table(keys, ["column", "min", "max"])
    return pd.concat(parts, ignore_index=True)


def observed_ranges(columns: dict[str, np.ndarray], codes: np.ndarray, G: int
                    ) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Observed min and max of each source column per group (rows sorted by group)."""
    out = {}
    starts = np.flatnonzero(np.r_[True, codes[1:] != codes[:-1]]) if len(codes) else np.array([], int)
    present = codes[starts]
    for c, v in columns.items():
        lo = np.full(G, np.nan)
        hi = np.full(G, np.nan)
        if len(starts):
            lo[present] = np.minimum.reduceat(v, starts)
            hi[present] = np.maximum.reduceat(v, starts)
        out[c] = (lo, hi)
    return out
