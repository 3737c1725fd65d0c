"""Why a group cannot be fitted, in plain words: too few rows, an input that never changes, values
or coefficients outside double precision, a term that combines the others exactly.

Each screen sets the reason of the groups it rejects (an object array, '' where fittable) and
returns which groups of a batch it rejected; all are scale-free.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from ..terms import Term, coefficient_labels
from .basis import pow2_exponent

COLLINEAR_TOL = 1e-10       # |R_jj| / ‖W_j‖ below this: column j is a combination of the others


def reasons_before_solving(cols: Mapping[str, np.ndarray], terms: Sequence[Term], starts: np.ndarray,
                           counts: np.ndarray, n_groups: int, p: int, intercept: bool,
                           extra: np.ndarray | None = None) -> np.ndarray:
    """Why each group cannot be fitted, as far as is known before solving ('' where it may be).

    `extra` (G,) counts parameters estimated outside least squares (change points): a group needs
    more rows than coefficients and change points together, so one degree of freedom is left.
    """
    reason = np.full(n_groups, "", dtype=object)
    extra = np.zeros(n_groups, dtype=np.int64) if extra is None else extra
    too_few = counts <= p + extra
    for g in np.flatnonzero(too_few):
        reason[g] = too_few_rows(int(counts[g]), p, int(extra[g]))
    constant_inputs(cols, terms, starts, counts, intercept, reason, ~too_few)
    return reason


def too_few_rows(n: int, p: int, extra: int = 0) -> str:
    """Plain words for a group with n rows, p coefficients and `extra` change points, n ≤ p + extra."""
    points = f" and {extra} change point{'s' if extra != 1 else ''}" if extra else ""
    return (f"only {n} usable row{'s' if n != 1 else ''} for {p} coefficient{'s' if p != 1 else ''}"
            f"{points}; at least {p + extra + 1} are needed")


def values_out_of_range(W: np.ndarray, T: np.ndarray, scale: np.ndarray, ids: np.ndarray,
                        terms: Sequence[Term], intercept: bool, reason: np.ndarray) -> np.ndarray:
    """(G,) bool: groups with a term whose values fall outside double precision (x^k of a huge x); reasons set."""
    finite = np.isfinite(W).all(axis=1) & np.isfinite(T).all(axis=1) & np.isfinite(scale) & (scale > 0)
    return _first_bad_column(~finite, ids, terms, intercept, reason,
                             "the values of {} are outside the range of double precision numbers "
                             "(about 1e-308 to 1e308); rescale the input")


def _first_bad_column(bad_columns: np.ndarray, ids: np.ndarray, terms: Sequence[Term], intercept: bool,
                      reason: np.ndarray, text: str) -> np.ndarray:
    """(G,) bool: groups with any bad column; each gets `text` naming its first bad column as its reason."""
    bad = bad_columns.any(axis=1)
    if bad.any():
        labels = coefficient_labels(terms, intercept)
        for gi in np.flatnonzero(bad):
            reason[ids[gi]] = text.format(labels[int(np.argmax(bad_columns[gi]))])
    return bad


def exactly_collinear(W: np.ndarray, R: np.ndarray, ids: np.ndarray, terms: Sequence[Term],
                      intercept: bool, reason: np.ndarray) -> np.ndarray:
    """(G,) bool: the batch's groups with a column that combines the others exactly; their reasons are set.

    Scale-free: |R_jj| relative to the length of column j of W, whose columns are of order one.
    """
    colnorm = np.sqrt((W**2).sum(axis=1))
    diag = np.abs(np.diagonal(R, axis1=1, axis2=2))
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = diag / np.where(colnorm > 0, colnorm, 1.0)
    return _first_bad_column(ratio < COLLINEAR_TOL, ids, terms, intercept, reason,
                             "{} is an exact linear combination of the other terms in this group "
                             "(exact collinearity)")


def coefficients_out_of_range(b: np.ndarray, A: np.ndarray, rss: np.ndarray, df_resid: np.ndarray,
                              y_scale: np.ndarray, col_scale: np.ndarray, ids: np.ndarray,
                              terms: Sequence[Term], intercept: bool, reason: np.ndarray) -> np.ndarray:
    """(G,) bool: groups whose raw coefficient or std error would be beyond double precision; reasons set.

    b, A and rss are in the engine's units (see engine.Batch); raw = 2**k times them. df_resid is
    the residual degrees of freedom per group (extra parameters counted).
    """
    k = pow2_exponent(y_scale)[:, None] - pow2_exponent(col_scale)
    s2 = rss / df_resid
    root = np.sqrt(s2[:, None] * (A**2).sum(axis=2))
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        finite = np.isfinite(np.ldexp(b, k)) & np.isfinite(np.ldexp(root, k))
    return _first_bad_column(~finite, ids, terms, intercept, reason,
                             "the coefficient of {} is outside the range of double precision numbers "
                             "(about 1e308); rescale the response or this input")


def constant_inputs(cols: Mapping[str, np.ndarray], terms: Sequence[Term], starts: np.ndarray,
                    counts: np.ndarray, intercept: bool, reason: np.ndarray, check: np.ndarray) -> None:
    """Mark groups where a source column takes one value (collinear with the intercept)."""
    nonempty = counts > 0
    for col in dict.fromkeys(t.column for t in terms):
        x = np.asarray(cols[col], dtype=np.float64)
        if len(x) == 0:
            continue
        idx = starts[nonempty]
        hi = np.full(len(counts), np.nan)
        lo = np.full(len(counts), np.nan)
        hi[nonempty] = np.maximum.reduceat(x, idx)
        lo[nonempty] = np.minimum.reduceat(x, idx)
        const = check & nonempty & (hi == lo) & (reason == "")
        if not intercept:
            const &= hi == 0
        for g in np.flatnonzero(const):
            reason[g] = (f"input {col} takes the same value ({_num(hi[g])}) in every usable row, "
                         f"so its effect cannot be estimated")


def _num(v: float) -> str:
    return f"{v:.6g}"
