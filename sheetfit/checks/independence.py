"""Independent residuals: Durbin–Watson and Breusch–Godfrey over each group's rows in sequence order.

Rows inside a batch are in sequence order (the order column, else source row order). A failure
here is what makes the run show Newey–West (HAC) std errors.

The Durbin–Watson p-value is exact for groups of up to EXACT_MAX_ROWS rows (Imhof's formula,
dw_exact.py). Beyond that it comes from a beta law with the exact null mean and variance: there
the approximation is within about 3 % of the exact tail probability (1.4 % at 100 rows), while the
exact way (an eigen-decomposition per group) would cost more than the rest of the checks
together at 10,000 groups of 100 rows.

Each group is tested on its own design (its batch's columns). A change point is taken as known,
the usual practice: the Durbin–Watson null distribution is that of the residual maker of the
group's design with its segment columns (n − p_b eigenvalues, p_b its own coefficients), and in
Breusch–Godfrey the segment columns are regressors of the auxiliary regression, whose χ² df is
the number of lags; neither test spends a degree of freedom on the change point itself.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..model.engine import Batch, EngineFit
from . import dw_exact
from .auxiliary import aux_r2, with_constant
from .result import CheckResult, empty_arrays

DURBIN_WATSON = "durbin_watson"
BREUSCH_GODFREY = "breusch_godfrey"
EXACT_MAX_ROWS = 50     # exact p-values up to this many rows (see the module docstring)
EXACT = "exact (Imhof)"
BETA_APPROXIMATION = "a beta approximation with the exact null mean and variance"
DW_METHOD = (f"two-sided; {EXACT} for groups of up to {EXACT_MAX_ROWS} rows, {BETA_APPROXIMATION} "
             f"for larger groups or where the integration fails (the check's note says which)")


def _dw_moments(b: Batch) -> tuple[np.ndarray, np.ndarray]:
    """Mean and variance of the Durbin–Watson statistic under independent normal errors."""
    n = b.n.astype(np.float64)
    p = b.Q.shape[2]
    dmask = (b.mask[:, 1:] & b.mask[:, :-1])[:, :, None]
    DQ = (b.Q[:, 1:] - b.Q[:, :-1]) * dmask                     # D·Q, rows t = 2…n
    QAQ = np.einsum("gtk,gtl->gkl", DQ, DQ)                      # Qᵀ A Q
    ADQ = np.zeros_like(b.Q)                                     # A·Q = Dᵀ(D·Q)
    ADQ[:, :-1] -= DQ
    ADQ[:, 1:] += DQ
    tr_ma = 2.0 * (n - 1.0) - np.trace(QAQ, axis1=1, axis2=2)
    tr_a2 = 6.0 * n - 8.0
    tr_ma2 = tr_a2 - 2.0 * (ADQ**2).sum(axis=(1, 2)) + (QAQ**2).sum(axis=(1, 2))
    dfr = n - p
    mean = tr_ma / dfr
    var = 2.0 * (tr_ma2 - tr_ma * mean) / (dfr * (dfr + 2.0))
    return mean, var


def durbin_watson(fit: EngineFit, order_note: str) -> CheckResult:
    """Durbin–Watson statistic with a two-sided p-value, 2·min(P(DW ≤ d), P(DW ≥ d)), under
    independent normal errors: exact (Imhof 1961, see dw_exact.py) for groups of up to
    EXACT_MAX_ROWS rows, else (or where the integration fails) from a beta law with the exact
    null mean and variance. The note of each group says which."""
    stat, pval, note = empty_arrays(fit.n_groups)
    for b in fit.batches:
        d_e = (np.diff(b.resid, axis=1) * (b.mask[:, 1:] & b.mask[:, :-1])) ** 2
        with np.errstate(invalid="ignore", divide="ignore"):
            dw = d_e.sum(axis=1) / b.rss
            low = _beta_lower_tail(b, dw)
        bad = ~(b.rss > 0) | (b.n - b.Q.shape[2] < 2)
        exact = np.flatnonzero(~bad & (b.n <= EXACT_MAX_ROWS) & np.isfinite(dw))
        low_exact = dw_exact.exact_lower_tail(b, exact, dw[exact])
        done = exact[np.isfinite(low_exact)]
        low[done] = low_exact[np.isfinite(low_exact)]
        pv = np.clip(2.0 * np.minimum(low, 1.0 - low), 0.0, 1.0)
        bad |= ~np.isfinite(pv)
        dw[~(b.rss > 0)] = np.nan
        pv[bad] = np.nan
        note[b.groups] = f"{order_note}; p-value from {BETA_APPROXIMATION} (more than {EXACT_MAX_ROWS} rows)"
        note[b.groups[exact]] = f"{order_note}; p-value from {BETA_APPROXIMATION} (the exact integration failed)"
        note[b.groups[done]] = f"{order_note}; p-value {EXACT}"
        note[b.groups[bad]] = "residuals are all zero or too few rows: no serial correlation to test"
        stat[b.groups] = dw
        pval[b.groups] = pv
    return CheckResult(DURBIN_WATSON, "independent residuals (Durbin–Watson)", "p_small", stat, pval,
                       np.full(fit.n_groups, np.nan), note,
                       "neighbouring residuals are correlated (Durbin–Watson = {stat}, {p})")


def _beta_lower_tail(b: Batch, dw: np.ndarray) -> np.ndarray:
    """P(DW ≤ dw) from a beta law on [0, 4] with the exact null mean and variance."""
    mean, var = _dw_moments(b)
    mu, v = mean / 4.0, var / 16.0
    common = mu * (1.0 - mu) / v - 1.0
    a, c = mu * common, (1.0 - mu) * common
    return stats.beta.cdf(dw / 4.0, a, c)


def breusch_godfrey(fit: EngineFit, lags: int, order_note: str) -> CheckResult:
    """n·R² of residuals on the inputs and their own first `lags` lags (zeros before the start).

    A weighted batch is tested as the weighted model it is: its own design (√w·X, which need not
    hold a constant) and the uncentred R², n·e'P e/e'e."""
    stat, pval, note = empty_arrays(fit.n_groups)
    for b in fit.batches:
        Z0 = with_constant(b, fit.intercept) if b.sqrt_w is None else b.W
        lagged = []
        for lag in range(1, lags + 1):
            col = np.zeros_like(b.resid)
            col[:, lag:] = b.resid[:, :-lag] if lag < b.resid.shape[1] else 0.0
            lagged.append(col * b.mask)
        Z = np.concatenate([Z0, np.stack(lagged, axis=2)], axis=2)
        small = b.n <= Z.shape[2]
        r2, rss, ok = aux_r2(Z, b.resid, b.mask)
        if b.sqrt_w is not None:
            with np.errstate(invalid="ignore", divide="ignore"):
                r2 = 1.0 - rss / (b.resid**2).sum(axis=1)
        lm = b.n * r2
        bad = small | ~ok | ~np.isfinite(lm)
        lm[bad] = np.nan
        note[b.groups] = f"{order_note}; lags: {lags}"
        note[b.groups[bad]] = f"too few rows or residuals all zero for {lags} lag(s)"
        stat[b.groups] = lm
        pval[b.groups] = stats.chi2.sf(lm, lags)
    return CheckResult(BREUSCH_GODFREY, "independent residuals (Breusch–Godfrey)", "p_small", stat,
                       pval, np.full(fit.n_groups, np.nan), note,
                       "residuals follow a pattern over the sequence (Breusch–Godfrey, {p})")
