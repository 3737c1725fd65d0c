"""Each group's sufficient statistics n, X'X, X'y and y'y: what a later run needs to test whether a
group's relation has changed without the old rows (stored in the results workbook's model store).

Sums are accumulated in extended precision from the raw design rows. In a weighted fit they are of
the weighted model (√w·X and √w·y, weights as fitted). A slot a group does not use is a zero column.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class GroupSums:
    """(G, p, p) X'X, (G, p) X'y and (G,) y'y per group (NaN for groups that were not fitted)."""

    xtx: np.ndarray
    xty: np.ndarray
    yty: np.ndarray


def group_sums(X: np.ndarray, y: np.ndarray, codes: np.ndarray, n_groups: int, fitted_ok: np.ndarray,
               weights: np.ndarray | None = None) -> GroupSums:
    """Sufficient statistics of every group from raw design rows X (N, p) in engine order."""
    with np.errstate(over="ignore", invalid="ignore"):     # data near 1e308: sums are inf or NaN, not stored
        return _sums(X, y, codes, n_groups, fitted_ok, weights)


def _sums(X: np.ndarray, y: np.ndarray, codes: np.ndarray, n_groups: int, fitted_ok: np.ndarray,
          weights: np.ndarray | None) -> GroupSums:
    N, p = X.shape
    Xl = X.astype(np.longdouble)
    yl = y.astype(np.longdouble)
    if weights is not None:
        w = weights.astype(np.longdouble)
        Xl, yl = Xl * w[:, None], yl * w       # then X'(wX) and X'(wy): the weighted sums without square roots
    xtx = np.zeros((n_groups, p, p), dtype=np.longdouble)
    xty = np.zeros((n_groups, p), dtype=np.longdouble)
    yty = np.zeros(n_groups, dtype=np.longdouble)
    Xr, yr = X.astype(np.longdouble), y.astype(np.longdouble)
    for i in range(p):
        for j in range(i, p):
            s = _group_sum(Xl[:, i] * Xr[:, j], codes, n_groups)
            xtx[:, i, j] = s
            xtx[:, j, i] = s
        xty[:, i] = _group_sum(Xl[:, i] * yr, codes, n_groups)
    yty[:] = _group_sum(yl * yr, codes, n_groups)
    bad = ~np.asarray(fitted_ok, dtype=bool)
    out = GroupSums(xtx.astype(np.float64), xty.astype(np.float64), yty.astype(np.float64))
    out.xtx[bad], out.xty[bad], out.yty[bad] = np.nan, np.nan, np.nan
    return out


def _group_sum(values: np.ndarray, codes: np.ndarray, n_groups: int) -> np.ndarray:
    """Σ of long-double values per group, rows sorted by group (np.bincount would round them to double)."""
    out = np.zeros(n_groups, dtype=np.longdouble)
    if not len(values):
        return out
    starts = np.flatnonzero(np.r_[True, codes[1:] != codes[:-1]])
    out[codes[starts]] = np.add.reduceat(values, starts)
    return out
