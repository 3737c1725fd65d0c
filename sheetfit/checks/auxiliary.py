"""Auxiliary regressions behind the n·R² and F tests: R² of residuals (or y) on extra columns, per group of a batch.

Each batch has its own design (its `slots` among the model's coefficients); the helpers at the
end say which terms it holds and whether it holds the constant.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..model.engine import Batch
from ..terms import Term

AUX_TOL = 1e-9   # relative |R_jj| below this in an auxiliary regression: column redundant


def aux_r2(Z: np.ndarray, u: np.ndarray, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Centred R², residual sum of squares and a rank-ok flag of u on Z (Z holds a constant)."""
    if Z.shape[2] > Z.shape[1]:       # more columns than rows in every group: nothing to estimate
        G = Z.shape[0]
        return np.full(G, np.nan), np.full(G, np.nan), np.zeros(G, dtype=bool)
    Q, R = np.linalg.qr(Z)
    norm = np.sqrt((Z**2).sum(axis=1))
    diag = np.abs(np.diagonal(R, axis1=1, axis2=2))
    with np.errstate(invalid="ignore", divide="ignore"):
        ok = ~((diag / np.where(norm > 0, norm, 1.0)) < AUX_TOL).any(axis=1)
    r2, rss = projection_r2(Q, u, mask)
    return r2, rss, ok


def projection_r2(Q: np.ndarray, u: np.ndarray, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Centred R² and residual sum of squares of u on the columns of Q (orthonormal, spanning a constant)."""
    fitted = np.einsum("gmk,gk->gm", Q, np.einsum("gmk,gm->gk", Q, u))
    n = mask.sum(axis=1)
    resid = (u - fitted) * mask
    rss = (resid**2).sum(axis=1)
    ubar = (u * mask).sum(axis=1) / n
    tss = (((u - ubar[:, None]) * mask) ** 2).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        r2 = 1.0 - rss / tss
    return r2, rss


def batch_has_constant(b: Batch, intercept: bool) -> bool:
    """Whether the batch's own design holds the constant (the model's intercept slot is among its slots)."""
    return bool(intercept and len(b.slots) and int(b.slots[0]) == 0)


def batch_terms(b: Batch, terms: Sequence[Term], intercept: bool) -> list[Term]:
    """The terms of the batch's own design, in its column order (the model's terms at its slots)."""
    off = 1 if intercept else 0
    return [terms[int(s) - off] for s in b.slots if s >= off]


def with_constant(b: Batch, intercept: bool) -> np.ndarray:
    """The batch's working design with a constant column in front when it has none: the inputs a
    residual's spread is tested against. In a weighted batch these are the inputs themselves (the
    working columns divided by √w), so its constant is a column of ones, not √w."""
    W = b.W if b.sqrt_w is None else np.where(b.mask[:, :, None], b.W / np.where(b.mask, b.sqrt_w, 1.0)[:, :, None],
                                              0.0)
    if batch_has_constant(b, intercept):
        return W
    return np.concatenate([b.mask[:, :, None].astype(np.float64), W], axis=2)
