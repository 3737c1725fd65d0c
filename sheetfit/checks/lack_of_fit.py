"""Lack of fit: where inputs repeat, does the model miss the replicates' means more than their scatter allows?

Per group, with n rows at m distinct input points and p estimated parameters (coefficients and
change points), the residual sum of squares splits exactly into pure error (the scatter of each
point's residuals about their mean, n − m degrees of freedom) and lack of fit (Σ over points of
n_j·(mean residual)², m − p degrees of freedom). Both are taken from the residuals: rows at one
input point share one fitted value, so their residuals scatter as their responses do, and no
sum of squares is found by subtracting two nearly equal ones. F = (SS_LOF/(m − p))/(SS_PE/(n − m)).
In a weighted fit both sums carry the weights: SS_PE = Σ w·(e − ē_j)² with ē_j the weighted mean
residual at point j, SS_LOF = Σ_j (Σw)_j·ē_j²; they still add up to the weighted residual sum.
Sums run in the units of y / y_scale (exact powers of two), so the test is scale-free.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from scipy import stats

from ..model.engine import EngineFit
from .result import CheckResult, empty_arrays

LACK_OF_FIT = "lack_of_fit"
PURE_ERROR_ZERO = 1e-13   # pure-error rms at most this times the group's largest |y|: rounding, not scatter


def replicate_keys(columns: Mapping[str, np.ndarray], codes: np.ndarray) -> np.ndarray:
    """(N,) int: one key per distinct input point of a group; rows of one group whose values are
    equal in every given column share it (0.0 and −0.0 count as equal; no rounding). Keys are
    distinct across groups. With no columns every row of a group is the same point."""
    codes = np.asarray(codes, dtype=np.int64)
    bits = []
    for values in columns.values():
        v = np.asarray(values, dtype=np.float64) + 0.0          # −0.0 + 0.0 is +0.0
        v = np.where(np.isnan(v), np.nan, v)                     # one NaN pattern
        bits.append(v.view(np.int64))
    ids, _ = _dense_ids(codes, *bits)
    return ids


def _dense_ids(*arrays: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Ids 0…K−1 of the distinct tuples (arrays[0][i], arrays[1][i], …), numbered in sorted order,
    and the index of one row holding each tuple."""
    N = len(arrays[0])
    if N == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    order = np.lexsort(arrays[::-1])
    new = np.zeros(N, dtype=bool)
    new[0] = True
    for a in arrays:
        s = a[order]
        new[1:] |= s[1:] != s[:-1]
    ids = np.empty(N, dtype=np.int64)
    ids[order] = np.cumsum(new) - 1
    return ids, order[new]


def pure_error_split(fit: EngineFit, design_keys: np.ndarray, codes: np.ndarray,
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per group: distinct input points m, points with replicates, pure-error SS and lack-of-fit SS
    (both / y_scale²); groups that were not fitted get zero counts and NaN sums."""
    G = fit.n_groups
    codes = np.asarray(codes, dtype=np.int64)
    ok_rows = fit.fitted_ok[codes]
    c, k = codes[ok_rows], np.asarray(design_keys)[ok_rows]
    e = fit.resid[ok_rows] / fit.y_scale[c]                        # exact: y_scale is a power of two
    w = np.ones(len(e)) if fit.weights is None else fit.weights[ok_rows]
    point, first = _dense_ids(c, k)
    owner = c[first]                                              # the group of each point
    size = np.bincount(point).astype(np.float64)
    total_w = np.bincount(point, weights=w)
    mean_e = np.bincount(point, weights=w * e) / total_w         # weighted: Σw·e/Σw at each point
    ss_pe = np.bincount(c, weights=w * (e - mean_e[point]) ** 2, minlength=G)
    ss_lof = np.bincount(owner, weights=total_w * mean_e**2, minlength=G)
    m = np.bincount(owner, minlength=G)
    repeated = np.bincount(owner, weights=size > 1, minlength=G).astype(np.int64)
    ss_pe[~fit.fitted_ok] = np.nan
    ss_lof[~fit.fitted_ok] = np.nan
    return m, repeated, ss_pe, ss_lof


def lack_of_fit(fit: EngineFit, design_keys: np.ndarray, codes: np.ndarray) -> CheckResult:
    """Lack-of-fit F-test against pure error from replicated input points; n/a with a note where it
    cannot run (no replicates, too few distinct points for the parameters, replicates that agree
    to rounding). `design_keys` (N,) names each engine row's input point (see `replicate_keys`)."""
    G = fit.n_groups
    stat, pval, note = empty_arrays(G)
    m, repeated, ss_pe, ss_lof = pure_error_split(fit, design_keys, codes)
    p = fit.n_params.astype(np.int64)
    df_lof = m - p
    df_pe = fit.n - m
    ok = fit.fitted_ok
    no_reps = ok & (df_pe <= 0)
    few_points = ok & ~no_reps & (df_lof <= 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        zero_pe = ok & ~no_reps & ~few_points & ~(ss_pe > df_pe * PURE_ERROR_ZERO**2)
        run = ok & ~no_reps & ~few_points & ~zero_pe & np.isfinite(ss_pe) & np.isfinite(ss_lof)
        f = (ss_lof / df_lof) / (ss_pe / df_pe)
    stat[run] = f[run]
    pval[run] = stats.f.sf(f[run], df_lof[run], df_pe[run])
    note[no_reps] = "no repeated input values: lack of fit cannot be tested"
    note[few_points] = _words("too few distinct input values (", m[few_points], ") for the ",
                              p[few_points], " estimated parameters: lack of fit cannot be tested")
    note[zero_pe] = "replicated inputs give the same response (zero pure error): lack of fit cannot be tested"
    note[run] = _words("replicates at ", repeated[run], " of ", m[run], " input values; F on ",
                       df_lof[run], " and ", df_pe[run], " degrees of freedom")
    points = run & (fit.extra_params > 0)
    note[points] = note[points] + "; change points counted as parameters (F approximate)"
    return CheckResult(LACK_OF_FIT, "lack of fit (replicates)", "p_small", stat, pval,
                       np.full(G, np.nan), note,
                       "the model misses the replicates' means more than their scatter allows "
                       "(lack of fit, F = {stat}, {p})")


def _words(*parts: str | np.ndarray) -> np.ndarray:
    """Text per element: string parts as they are, integer arrays as decimal numbers (vectorised)."""
    out: np.ndarray = np.asarray("")
    for part in parts:
        out = np.char.add(out, part if isinstance(part, str) else np.asarray(part, dtype=np.int64).astype(str))
    return out.astype(object)
