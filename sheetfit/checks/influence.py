"""Outlying and influential rows: row-level highlights and group-level checks that matter.

Row highlights use common-practice cut-offs (leverage > 2p/n, |studentized residual| > 3,
Cook's distance > 4/n) and never flag a group by themselves. A group is flagged only by the
Bonferroni outlier test, a Cook's distance above the median of F(k, n−k−c) (k coefficients, c change
points; F(p, n−p) in an ordinary fit), or a leverage of 1.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..job import Thresholds
from ..model.engine import EngineFit
from ..model.row_measures import LEVERAGE_ONE_TOL
from .result import CheckResult

OUTLIER = "outlier"
COOKS = "cooks"
LEVERAGE_ONE = "leverage_one"


def row_highlights(fit: EngineFit, codes: np.ndarray, thr: Thresholds) -> dict[str, np.ndarray]:
    """Boolean masks per engine row, by key.

    Worth a look: "leverage one", "outlying" (|studentized residual| > cutoff) and "moves the fit"
    (Cook's distance above the median of F(p, n−p), the cut of `cooks_check`, so these are the rows
    behind a failed influence check). Softer signals, common on healthy fits: "high leverage"
    (> factor·p/n) and "influential" (Cook's distance > factor/n).
    """
    n = fit.n[codes].astype(np.float64)
    p = fit.n_coef[codes].astype(np.float64)      # change points do not enter the hat matrix
    ok = fit.fitted_ok[codes]
    with np.errstate(invalid="ignore"):
        cut = cooks_cut(fit)[codes]
        lev_one = ok & (fit.leverage >= 1.0 - LEVERAGE_ONE_TOL)
        high_lev = ok & (fit.leverage > thr.leverage_factor * p / n)
        outlying = ok & (np.abs(fit.studentized) > thr.studentized_cutoff)
        influential = ok & (fit.cooks > thr.cooks_factor / n)
        moves = ok & (fit.cooks > cut)
    return {"leverage one": lev_one, "outlying": outlying, "moves the fit": moves,
            "high leverage": high_lev, "influential": influential}


def cooks_cut(fit: EngineFit) -> np.ndarray:
    """Per group the median of F(k, n − k − c): k coefficients, c change points (the Cook's check's cut)."""
    with np.errstate(invalid="ignore"):
        return np.asarray(stats.f.ppf(0.5, fit.n_coef, fit.df_resid), dtype=np.float64)


def _by_group(values: np.ndarray, codes: np.ndarray, G: int, how: str) -> tuple[np.ndarray, np.ndarray]:
    """Per-group max (of |values| for 'abs') ignoring NaN, and the engine row where it occurs.

    Engine rows are sorted by group code, so each group is one contiguous run.
    """
    v = np.abs(values) if how == "abs" else values
    v = np.where(np.isfinite(v), v, -np.inf)
    best = np.full(G, np.nan)
    where = np.full(G, -1)
    if len(v) == 0:
        return best, where
    starts = np.flatnonzero(np.r_[True, codes[1:] != codes[:-1]])
    run_max = np.maximum.reduceat(v, starts)
    present = codes[starts]
    hit = np.flatnonzero(v == np.repeat(run_max, np.diff(np.r_[starts, len(v)])))
    first_codes, first_idx = np.unique(codes[hit], return_index=True)
    where[first_codes] = hit[first_idx]
    best[present] = np.where(np.isfinite(run_max), run_max, np.nan)
    return best, where


def outlier_test(fit: EngineFit, codes: np.ndarray, source_rows: np.ndarray) -> CheckResult:
    """Bonferroni test of the most extreme externally studentized residual."""
    G = fit.n_groups
    tmax, where = _by_group(fit.studentized, codes, G, "abs")
    df = fit.df_resid - 1.0
    with np.errstate(invalid="ignore"):
        p_one = 2.0 * stats.t.sf(tmax, df)
        p_bonf = np.minimum(1.0, p_one * fit.n)
    note = np.full(G, "", dtype=object)
    extra = np.full(G, "", dtype=object)
    for g in range(G):
        if not fit.fitted_ok[g]:
            continue
        if np.isfinite(tmax[g]):
            extra[g] = f"source row {int(source_rows[where[g]])}"
            note[g] = f"most extreme row: {extra[g]}; p-value is Bonferroni-adjusted within the group (× n)"
        else:
            note[g] = "studentized residuals undefined (too few rows or perfect fit)"
    return CheckResult(OUTLIER, "outlier (Bonferroni)", "p_small", tmax, p_bonf,
                       np.full(G, np.nan), note,
                       "one row lies far from the fitted line ({extra}, studentized residual {stat}, "
                       "Bonferroni {p})", extra)


def cooks_check(fit: EngineFit, codes: np.ndarray, source_rows: np.ndarray) -> CheckResult:
    """Largest Cook's distance against the median of F(p, n−p)."""
    G = fit.n_groups
    dmax, where = _by_group(fit.cooks, codes, G, "plain")
    cut = cooks_cut(fit)
    note = np.full(G, "", dtype=object)
    extra = np.full(G, "", dtype=object)
    for g in np.flatnonzero(fit.fitted_ok):
        if np.isfinite(dmax[g]):
            extra[g] = f"source row {int(source_rows[where[g]])}"
            note[g] = f"largest at {extra[g]}; threshold is the median of F(p, n−p)"
        else:
            note[g] = "Cook's distance undefined (perfect fit or leverage 1)"
    return CheckResult(COOKS, "influence (Cook's distance)", "above", dmax, None, cut, note,
                       "one row moves the whole fit ({extra}, Cook's distance {stat} > {thr})", extra)


def leverage_one(fit: EngineFit, codes: np.ndarray, source_rows: np.ndarray) -> CheckResult:
    """A row with leverage 1 alone fixes a coefficient: its residual is zero and nothing checks it."""
    G = fit.n_groups
    hmax, where = _by_group(fit.leverage, codes, G, "plain")
    note = np.full(G, "", dtype=object)
    extra = np.full(G, "", dtype=object)
    for g in np.flatnonzero(fit.fitted_ok):
        extra[g] = f"source row {int(source_rows[where[g]])}"
        note[g] = f"largest leverage at {extra[g]}"
    return CheckResult(LEVERAGE_ONE, "single-row leverage", "above", hmax, None,
                       np.full(G, 1.0 - LEVERAGE_ONE_TOL), note,
                       "a single row alone fixes a coefficient ({extra} has leverage 1: its residual "
                       "is zero and its Cook's distance undefined)", extra)
