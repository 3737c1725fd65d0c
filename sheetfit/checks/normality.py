"""Normal residuals: Jarque–Bera (skewness and kurtosis) and Shapiro–Wilk, per group.

Both look at the residuals alone, so neither the group's own set of coefficients nor a change
point (taken as known, the usual practice) enters their null distribution.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..model.engine import EngineFit
from .result import CheckResult, empty_arrays

JARQUE_BERA = "jarque_bera"
SHAPIRO_WILK = "shapiro_wilk"


def jarque_bera(fit: EngineFit) -> CheckResult:
    """Jarque–Bera from the residuals' sample skewness and kurtosis; p-value from χ²(2)."""
    stat, pval, note = empty_arrays(fit.n_groups)
    for b in fit.batches:
        n = b.n.astype(np.float64)
        e = b.resid - (b.resid.sum(axis=1) / n)[:, None]
        e = e * b.mask
        e2 = e * e
        m2 = e2.sum(axis=1) / n
        with np.errstate(invalid="ignore", divide="ignore"):
            skew = (e2 * e).sum(axis=1) / n / m2**1.5
            kurt = (e2 * e2).sum(axis=1) / n / m2**2
            jb = n / 6.0 * (skew**2 + (kurt - 3.0) ** 2 / 4.0)
        zero = ~(m2 > 0)
        jb[zero] = np.nan
        note[b.groups[zero]] = "residuals are all zero (perfect fit): no distribution to test"
        stat[b.groups] = jb
        pval[b.groups] = stats.chi2.sf(jb, 2)
    return CheckResult(JARQUE_BERA, "normal residuals (Jarque–Bera)", "p_small", stat, pval,
                       np.full(fit.n_groups, np.nan), note,
                       "residuals are not normally distributed: skewed or heavy-tailed (Jarque–Bera, {p})")


def _shapiro_kernel():
    """scipy's own Shapiro–Wilk routine without its per-call wrapper (10,000 groups: 2 s → 0.1 s).

    Same algorithm and numbers as scipy.stats.shapiro: the sorted data minus the middle value
    of the data as given; falls back to the public function if scipy reorganises its internals.
    """
    try:
        from scipy.stats._ansari_swilk_statistics import swilk
    except ImportError:  # pragma: no cover
        return lambda e, ordered: tuple(stats.shapiro(e))
    coefficients: dict[int, np.ndarray] = {}

    def run(e: np.ndarray, ordered: np.ndarray) -> tuple[float, float]:
        n = len(e)
        y = ordered - e[n // 2]
        a = coefficients.get(n)
        if a is None:
            a = np.zeros(n // 2)
            w, pw, _ = swilk(y, a, 0)
            coefficients[n] = a
        else:
            w, pw, _ = swilk(y, a, 1)
        return float(w), float(pw)

    return run


def shapiro_wilk(fit: EngineFit) -> CheckResult:
    """Shapiro–Wilk W and p-value of each group's residuals (3 to 5000 rows)."""
    stat, pval, note = empty_arrays(fit.n_groups)
    kernel = _shapiro_kernel()
    for b in fit.batches:
        ordered = np.sort(np.where(b.mask, b.resid, np.inf), axis=1)   # each group's rows, sorted
        last = np.take_along_axis(ordered, (b.n - 1)[:, None], axis=1)[:, 0]
        spread = last - ordered[:, 0]
        for gi in range(len(b.groups)):
            g, n = b.groups[gi], int(b.n[gi])
            if not 3 <= n <= 5000:
                note[g] = f"Shapiro–Wilk needs 3 to 5000 rows; this group has {n}"
            elif not spread[gi] > 0:
                note[g] = "residuals are all equal (perfect fit): no distribution to test"
            else:
                stat[g], pval[g] = kernel(b.resid[gi, :n], ordered[gi, :n])
    return CheckResult(SHAPIRO_WILK, "normal residuals (Shapiro–Wilk)", "p_small", stat, pval,
                       np.full(fit.n_groups, np.nan), note,
                       "residuals are not normally distributed (Shapiro–Wilk, {p})")
