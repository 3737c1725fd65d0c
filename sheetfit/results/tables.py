"""Engine arrays → the tidy result tables (one row per group, group × term, observation …)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy import stats

from ..model.engine import EngineFit
from ..model.inference import Inference
from ..terms import INDICATOR, Term, design_matrix, source_columns
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
        COEFFICIENT_COUNT: fit.n_params,       # active coefficients plus change points
        AIC: only(inf.aic),
        BIC: only(inf.bic),
    }
    body.update({k: only(v) for k, v in extra.items()})
    return with_keys(keys, np.arange(G), body)


def active_cells(fit: EngineFit) -> tuple[np.ndarray, np.ndarray]:
    """(group, slot) of every coefficient a fitted group uses, group by group in slot order.

    Slots a group's shape does not use (a change-point run) have no coefficient and are left out.
    """
    g_idx = np.flatnonzero(fit.fitted_ok)
    p = fit.p
    codes, slots = np.repeat(g_idx, p), np.tile(np.arange(p), len(g_idx))
    used = fit.active[codes, slots]
    return (codes, slots) if used.all() else (codes[used], slots[used])


def coefficients_table(keys: pd.DataFrame, fit: EngineFit, inf: Inference, labels: Sequence[str],
                       extra: dict[str, np.ndarray]) -> pd.DataFrame:
    """group × term rows for fitted groups, the terms each group uses; `extra` maps column name → (G, p) arrays."""
    sel = active_cells(fit)
    codes = sel[0]
    body = {                       # in the order of results.headers.COEFFICIENT_HEADERS
        INPUT: np.asarray(labels, dtype=object)[sel[1]],
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
                 ranges: dict[str, tuple[np.ndarray, np.ndarray]],
                 change_points: np.ndarray | None = None) -> pd.DataFrame:
    """Fitted line and confidence band of the mean over each group's observed input range.

    `change_points` (G, 2), a change-point run's τ of the 'below' and the 'above' term per group:
    the grid then also holds each group's change points inside its range, so the broken line
    bends exactly there.
    """
    cols = source_columns(terms)
    if len(cols) != 1 or any(t.kind == INDICATOR for t in terms):      # a category has no line to draw
        return empty_table(keys, ["x", FITTED, AVERAGE_LOW, AVERAGE_HIGH])
    col = cols[0]
    lo, hi = ranges[col]
    g_idx = np.flatnonzero(fit.fitted_ok & np.isfinite(lo) & np.isfinite(hi))
    frac = np.linspace(0.0, 1.0, CURVE_POINTS)
    xs = lo[g_idx, None] + (hi - lo)[g_idx, None] * frac[None, :]
    cps, keep = None, None
    if change_points is not None:
        tau = np.asarray(change_points, dtype=np.float64)[g_idx]
        xs, keep = grid_with_change_points(xs, tau, lo[g_idx], hi[g_idx])
        cps = {"below": np.repeat(tau[:, 0], xs.shape[1]), "above": np.repeat(tau[:, 1], xs.shape[1])}
    k = xs.shape[1]
    with np.errstate(invalid="ignore"):
        D = design_matrix(terms, fit.intercept, {col: xs.ravel()}, cps).reshape(len(g_idx), k, fit.p)
    act = fit.active[g_idx]
    beta = np.where(act, fit.beta[g_idx], 0.0)
    inv = np.where(act[:, :, None] & act[:, None, :], fit.xtx_inv[g_idx], 0.0)
    yhat = np.einsum("gkp,gp->gk", D, beta)
    var = np.einsum("gkp,gpq,gkq->gk", D, inv, D) * fit.sigma2[g_idx, None]
    half = inf.t_quantile[g_idx, None] * np.sqrt(np.maximum(var, 0.0))
    codes = np.repeat(g_idx, k)
    body = {"x": xs.ravel(), FITTED: yhat.ravel(), AVERAGE_LOW: (yhat - half).ravel(),
            AVERAGE_HIGH: (yhat + half).ravel()}
    if keep is not None:
        at = keep.ravel()
        codes, body = codes[at], {name: v[at] for name, v in body.items()}
    return with_keys(keys, codes, body)


def grid_with_change_points(xs: np.ndarray, tau: np.ndarray, lo: np.ndarray, hi: np.ndarray
                            ) -> tuple[np.ndarray, np.ndarray]:
    """Each group's grid row with its change points strictly inside (lo, hi) added, sorted: (grid, which to keep).

    Rows are padded with NaN to one width; `keep` is False on padding and on repeats (two
    change points at one place, or a change point on a grid point).
    """
    inside = np.where((tau > lo[:, None]) & (tau < hi[:, None]), tau, np.nan)
    grid = np.sort(np.concatenate([xs, inside], axis=1), axis=1)       # NaN sorts last
    keep = np.isfinite(grid)
    keep[:, 1:] &= grid[:, 1:] != grid[:, :-1]
    return grid, keep


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
    """(X'X)⁻¹ of each fitted group, row term × column term, over the terms the group uses."""
    g_idx = np.flatnonzero(fit.fitted_ok)
    p = fit.p
    codes = np.repeat(g_idx, p * p)
    rows = np.tile(np.repeat(np.arange(p), p), len(g_idx))
    cols = np.tile(np.tile(np.arange(p), p), len(g_idx))
    used = fit.active[codes, rows] & fit.active[codes, cols]
    if not used.all():
        codes, rows, cols = codes[used], rows[used], cols[used]
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
