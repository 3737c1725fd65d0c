"""What the engine derives around its solve, row by row and group by group: weights scaled within each group,
the (weighted) total sum of squares, and the studentized residuals and Cook's distance of every row.
"""

from __future__ import annotations

import numpy as np

LEVERAGE_ONE_TOL = 1e-10    # leverage within this of 1: the row alone fixes a coefficient


def scaled_weights(weights: np.ndarray, codes: np.ndarray, n_groups: int
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Weights divided by their group's mean (exactly 1 where a group's weights are all equal), the
    means, and per group whether its weights vary (only those groups are whitened)."""
    counts = np.bincount(codes, minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.bincount(codes, weights=weights, minlength=n_groups) / counts
    hi = np.full(n_groups, -np.inf)
    lo = np.full(n_groups, np.inf)
    np.maximum.at(hi, codes, weights)
    np.minimum.at(lo, codes, weights)
    varies = hi > lo
    return np.where(varies[codes], weights / mean[codes], 1.0), mean, varies


def total_sum_of_squares(yw: np.ndarray, mask: np.ndarray, sw: np.ndarray | None, intercept: bool) -> np.ndarray:
    """Σ w·(y − ȳ_w)² from the (whitened) y of a batch, ȳ_w the weighted mean (Σ y² without a constant)."""
    if not intercept:
        return ((yw * mask) ** 2).sum(axis=1)
    root = mask.astype(np.float64) if sw is None else sw
    ybar = (root * yw).sum(axis=1) / (root**2).sum(axis=1)
    return (((yw - root * ybar[:, None]) * mask) ** 2).sum(axis=1)


def influence(resid: np.ndarray, h: np.ndarray, codes: np.ndarray, rss: np.ndarray,
               df_resid: np.ndarray, p: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Internally and externally studentized residuals and Cook's distance per row (scale-free:
    residuals and rss in the units of y / y_scale). df_resid is per group and counts any extra
    parameters: s² = RSS/df, s_(i)² = (RSS − e_i²/(1−h_i))/(df − 1), D_i = r_i²·h_i/(p·(1−h_i))."""
    rss_r = rss[codes]
    df_r = df_resid[codes]
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = rss_r / df_r
        one_minus_h = 1.0 - h
        lev_one = one_minus_h < LEVERAGE_ONE_TOL
        one_minus_h = np.where(lev_one, np.nan, one_minus_h)
        internal = resid / np.sqrt(s2 * one_minus_h)
        s2_without = (rss_r - resid**2 / one_minus_h) / (df_r - 1)
        s2_without = np.where((df_r > 1) & (s2_without > 0), s2_without, np.nan)
        external = resid / np.sqrt(s2_without * one_minus_h)
        cooks = internal**2 * h / one_minus_h / p
    return internal, external, cooks
