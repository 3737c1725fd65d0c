"""Linear form: Ramsey's RESET, whether powers of the fitted values add to the model (a curved relation).

Each group is tested on its own design (its batch's columns). A change point is taken as known
for the regressors (the usual practice) but, as an estimated parameter, it takes one degree of
freedom from the F denominator: df = n − own coefficients − change points − 2.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..model.engine import EngineFit
from .auxiliary import aux_r2
from .result import CheckResult, empty_arrays

RESET = "reset"


def reset(fit: EngineFit) -> CheckResult:
    """Ramsey's RESET, F form: do squares and cubes of the fitted values add to the model?"""
    stat, pval, note = empty_arrays(fit.n_groups)
    for b in fit.batches:
        f = b.raw_fitted
        scale = np.abs(f).max(axis=1, keepdims=True)
        f = f / np.where(scale > 0, scale, 1.0)
        f2 = f * f
        root = 1.0 if b.sqrt_w is None else b.sqrt_w     # weighted: the powers enter the weighted model as √w·ŷ^k
        Z = np.concatenate([b.W, (root * f2)[:, :, None], (root * f2 * f)[:, :, None]], axis=2)
        df2 = b.df_resid - 2
        small = df2 < 1
        _, rss_u, ok = aux_r2(Z, b.y, b.mask)
        with np.errstate(invalid="ignore", divide="ignore"):
            F = ((b.rss - rss_u) / 2.0) / (rss_u / df2)
        bad = small | ~ok | ~(b.rss > 0) | ~np.isfinite(F)
        F[bad] = np.nan
        for gi in np.flatnonzero(bad):
            note[b.groups[gi]] = ("too few rows for RESET" if small[gi] else
                                  "fitted values take too few distinct values for RESET"
                                  if not ok[gi] else "residuals are all zero (perfect fit)")
        stat[b.groups] = F
        pval[b.groups] = stats.f.sf(F, 2, df2)
    return CheckResult(RESET, "linear form (RESET)", "p_small", stat, pval,
                       np.full(fit.n_groups, np.nan), note,
                       "the relation is curved, not straight in the inputs (RESET, {p})")
