"""Calibration-line results (--calibration): detection and quantification limits per group, and each
standard's value read back from its own response with its deviation.

For a straight line y = b0 + b1·x with residual std error s: limit of detection 3.3·s/|b1| and
limit of quantification 10·s/|b1| (the ICH Q2 approach based on the calibration line). A
standard's back-calculated value is (y − b0)/b1; its deviation is 100·(back-calculated − x)/x, in %,
flagged beyond a limit (15 % by default, 20 % at the group's lowest non-zero standard: common
practice in method validation). The blank (x = 0) has no deviation.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..job import Thresholds
from .headers import USED, YES

LIMIT_OF_DETECTION = "limit of detection"
LIMIT_OF_QUANTIFICATION = "limit of quantification"
BACK_CALCULATED = "back-calculated input"
DEVIATION = "deviation %"
STANDARD_OFF = "standard off"
CALIBRATION_GROUP_HEADERS = (LIMIT_OF_DETECTION, LIMIT_OF_QUANTIFICATION)
CALIBRATION_ROW_HEADERS = (BACK_CALCULATED, DEVIATION, STANDARD_OFF)
LOD_FACTOR, LOQ_FACTOR = 3.3, 10.0


def limits(beta: np.ndarray, residual_std_error: np.ndarray, steep: np.ndarray) -> dict[str, np.ndarray]:
    """Per group: 3.3·s/|b1| and 10·s/|b1| from a (G, 2) constant-and-slope coefficient array; empty
    where the slope is not distinguishable from zero (`steep` false): the limits would be meaningless."""
    with np.errstate(divide="ignore", invalid="ignore"):
        per = residual_std_error / np.abs(beta[:, 1])
    per = np.where(np.isfinite(per) & steep, per, np.nan)
    return {LIMIT_OF_DETECTION: LOD_FACTOR * per, LIMIT_OF_QUANTIFICATION: LOQ_FACTOR * per}


def back_calculation(x: np.ndarray, y: np.ndarray, codes: np.ndarray, used: np.ndarray, beta: np.ndarray,
                     slope_p: np.ndarray, alpha: float, limit: float, limit_lowest: float) -> dict[str, np.ndarray]:
    """Per input row: the back-calculated input, its deviation in % and, beyond the limit, why (text).

    Rows not used in the fit (or of groups not fitted) get NaN and ''. The lowest non-zero standard
    of a group (smallest |x| > 0 among its used rows) is judged against `limit_lowest`. In a group
    whose slope is not distinguishable from zero (p ≥ alpha) nothing is read back, and the row says why.
    """
    n_rows, G = len(x), len(beta)
    safe = np.clip(codes, 0, max(G - 1, 0))
    flat = used & ~(slope_p[safe] < alpha)
    used = used & ~flat
    b0, b1 = beta[safe, 0], beta[safe, 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        back = np.where(used, (y - b0) / b1, np.nan)
        dev = np.where(used & (x != 0), 100.0 * (back - x) / x, np.nan)
    lowest = np.full(G, np.inf)
    nonzero = used & (x != 0) & np.isfinite(x)
    np.minimum.at(lowest, codes[nonzero], np.abs(x[nonzero]))
    at_lowest = nonzero & (np.abs(x) == lowest[safe])
    cut = np.where(at_lowest, limit_lowest, limit)
    off = np.isfinite(dev) & (np.abs(dev) > cut)
    words = np.full(n_rows, "", dtype=object)
    for i in np.flatnonzero(off):
        where = "the lowest standard, " if at_lowest[i] else ""
        words[i] = f"back-calculated value off by {dev[i]:+.1f} % ({where}limit ±{cut[i]:g} %)"
    for i in np.flatnonzero(flat):
        words[i] = (f"not read back: the slope is not distinguishable from zero (p = {slope_p[safe[i]]:.3g}), "
                    "so a response says little about the input")
    return {BACK_CALCULATED: back, DEVIATION: dev, STANDARD_OFF: words}


def with_back_calculation(observations: pd.DataFrame, x: np.ndarray, y: np.ndarray, codes_all: np.ndarray,
                          beta: np.ndarray, slope_p: np.ndarray, thr: Thresholds) -> pd.DataFrame:
    """Observations with each standard's back-calculated input, its deviation and whether it is off (rows used)."""
    used = (observations[USED] == YES).to_numpy()
    found = back_calculation(x, y, codes_all, used, beta, slope_p, thr.alpha, thr.back_calc_limit,
                             thr.back_calc_limit_lowest)
    return observations.assign(**found)
