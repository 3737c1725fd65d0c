"""The change-point columns of `groups` in a change-point run, and each group's residual lag-1 correlation.

Headers of our own: the shape chosen, the change point with its profile interval (for heating-
cooling the lower one; the upper one in its own columns), why the shape was chosen, how many
change points were counted as parameters, and NMBE.
"""

from __future__ import annotations

import numpy as np

SHAPE = "shape"
CHANGE_POINT = "change point"
CHANGE_POINT_LOW = "change point low"
CHANGE_POINT_HIGH = "change point high"
UPPER_CHANGE_POINT = "upper change point"
UPPER_CHANGE_POINT_LOW = "upper change point low"
UPPER_CHANGE_POINT_HIGH = "upper change point high"
SHAPE_NOTE = "why this shape"
CHANGE_POINT_COUNT = "change points"
NMBE = "NMBE %"
CHANGE_POINT_HEADERS = (SHAPE, CHANGE_POINT, CHANGE_POINT_LOW, CHANGE_POINT_HIGH, UPPER_CHANGE_POINT,
                        UPPER_CHANGE_POINT_LOW, UPPER_CHANGE_POINT_HIGH, CHANGE_POINT_COUNT, SHAPE_NOTE)


def change_point_columns(points, fitted_ok: np.ndarray) -> dict[str, np.ndarray]:
    """Per-group columns from a `model.change_point.ChangePoints` (NaN / '' for groups not fitted).

    'change point' is the single change point of heating, cooling and two-slopes, and the lower one
    (where heating starts) of heating-cooling; 'upper change point' is where cooling starts.
    """
    shape = np.asarray(points.shape, dtype=object)
    two = shape == "heating-cooling"
    cooling = shape == "cooling"

    def first(below: np.ndarray, above: np.ndarray) -> np.ndarray:
        return np.where(cooling, above, below)

    def upper(above: np.ndarray) -> np.ndarray:
        return np.where(two, above, np.nan)

    cols = {
        SHAPE: shape.copy(),
        CHANGE_POINT: first(points.below, points.above),
        CHANGE_POINT_LOW: first(points.below_low, points.above_low),
        CHANGE_POINT_HIGH: first(points.below_high, points.above_high),
        UPPER_CHANGE_POINT: upper(points.above),
        UPPER_CHANGE_POINT_LOW: upper(points.above_low),
        UPPER_CHANGE_POINT_HIGH: upper(points.above_high),
        CHANGE_POINT_COUNT: np.asarray(points.count, dtype=np.float64),
        SHAPE_NOTE: np.asarray(points.note, dtype=object).copy(),
    }
    for name, values in cols.items():
        if values.dtype == object:
            values[~fitted_ok] = ""
        else:
            values[~fitted_ok] = np.nan
    return cols


def residual_lag1(resid: np.ndarray, codes: np.ndarray, n_groups: int) -> np.ndarray:
    """Lag-1 autocorrelation of each group's residuals in fitting order: Σ e_t·e_(t−1) / Σ e_t².

    Rows are sorted by group (and by the order column within a group). NaN where the group has
    fewer than 3 rows or its residuals are all zero.
    """
    e = np.where(np.isfinite(resid), resid, 0.0)
    top = np.zeros(n_groups)
    np.maximum.at(top, codes, np.abs(e))
    e = e / np.where(top > 0, top, 1.0)[codes]          # of order one: no square overflows or vanishes
    same = np.r_[False, codes[1:] == codes[:-1]]
    lagged = np.where(same, e * np.r_[0.0, e[:-1]], 0.0)
    num = np.bincount(codes, weights=lagged, minlength=n_groups)
    den = np.bincount(codes, weights=e * e, minlength=n_groups)
    count = np.bincount(codes, minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    return np.where((count >= 3) & (den > 0), out, np.nan)
