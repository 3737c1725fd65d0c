"""Assumption checks, influence and collinearity for every fitted group, batched.

Each check returns a `CheckResult`: one statistic (and p-value where the test has one) per
group, NaN with a note where the check cannot run. Verdicts are made later in flags.py.
Rows inside a batch are in sequence order (the order column, else source row order).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..model.engine import Batch, EngineFit
from ..terms import Term, polynomial_family

AUX_TOL = 1e-9   # relative |R_jj| below this in an auxiliary regression: column redundant


@dataclass(frozen=True)
class CheckResult:
    """One check across all groups.

    `rule` says how flags.py turns it into a verdict:
      'p_small'  fail when the (adjusted) p-value < alpha   (assumption rejected)
      'p_large'  fail when the (adjusted) p-value >= alpha  (no evidence of a relation)
      'above'    fail when statistic > threshold
      'below'    fail when statistic < threshold
    """

    key: str                 # stable identifier, e.g. 'breusch_pagan'
    name: str                # shown in the `check` column
    rule: str
    statistic: np.ndarray    # (G,)
    pvalue: np.ndarray | None
    threshold: np.ndarray    # (G,) the cut-off applied (alpha for p-value rules)
    note: np.ndarray         # (G,) object: why n/a, or what was done (order used, lag…)
    failure: str             # plain-words template, formatted with {stat}, {p}, {thr}, {extra}
    extra: np.ndarray | None = None   # (G,) object: a detail for the failure text


def _empty(G: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    return np.full(G, np.nan), np.full(G, np.nan), np.full(G, "", dtype=object)


def _aux_r2(Z: np.ndarray, u: np.ndarray, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Centred R², residual sum of squares and a rank-ok flag of u on Z (Z holds a constant)."""
    if Z.shape[2] > Z.shape[1]:       # more columns than rows in every group: nothing to estimate
        G = Z.shape[0]
        return np.full(G, np.nan), np.full(G, np.nan), np.zeros(G, dtype=bool)
    Q, R = np.linalg.qr(Z)
    norm = np.sqrt((Z**2).sum(axis=1))
    diag = np.abs(np.diagonal(R, axis1=1, axis2=2))
    with np.errstate(invalid="ignore", divide="ignore"):
        ok = ~((diag / np.where(norm > 0, norm, 1.0)) < AUX_TOL).any(axis=1)
    r2, rss = _projection_r2(Q, u, mask)
    return r2, rss, ok


def _projection_r2(Q: np.ndarray, u: np.ndarray, mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
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


def _with_constant(b: Batch, intercept: bool) -> np.ndarray:
    """The working design with a constant column in front when the model has none."""
    if intercept:
        return b.W
    return np.concatenate([b.mask[:, :, None].astype(np.float64), b.W], axis=2)


def jarque_bera(fit: EngineFit) -> CheckResult:
    stat, pval, note = _empty(fit.n_groups)
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
    return CheckResult("jarque_bera", "normal residuals (Jarque–Bera)", "p_small", stat, pval,
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
    stat, pval, note = _empty(fit.n_groups)
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
    return CheckResult("shapiro_wilk", "normal residuals (Shapiro–Wilk)", "p_small", stat, pval,
                       np.full(fit.n_groups, np.nan), note,
                       "residuals are not normally distributed (Shapiro–Wilk, {p})")


def breusch_pagan(fit: EngineFit) -> CheckResult:
    """Koenker's studentized form: n·R² of squared residuals on the model's inputs."""
    stat, pval, note = _empty(fit.n_groups)
    for b in fit.batches:
        if fit.intercept:       # the model's own design holds the constant: reuse its QR
            k = b.Q.shape[2]
            r2, _ = _projection_r2(b.Q, b.resid**2, b.mask)
            ok = np.ones(len(b.groups), dtype=bool)
        else:
            Z = _with_constant(b, fit.intercept)
            k = Z.shape[2]
            r2, _, ok = _aux_r2(Z, b.resid**2, b.mask)
        lm = b.n * r2
        bad = ~ok | ~np.isfinite(lm)
        lm[bad] = np.nan
        note[b.groups[bad]] = "squared residuals do not vary (perfect fit or too few rows)"
        stat[b.groups] = lm
        pval[b.groups] = stats.chi2.sf(lm, k - 1)
    return CheckResult("breusch_pagan", "constant variance (Breusch–Pagan)", "p_small", stat, pval,
                       np.full(fit.n_groups, np.nan), note,
                       "spread of residuals changes with the inputs (Breusch–Pagan, {p})")


def white_columns(terms: Sequence[Term], intercept: bool) -> list[tuple[int, int]]:
    """Pairs (i, j) of design columns, with a constant at index 0, whose products are distinct.

    Products that are the same monomial (x·x² and x³ in a polynomial family) are kept once.
    """
    base: list[dict[str, float]] = [{}]
    for j, t in enumerate(terms):
        family = polynomial_family(terms, t.column) if intercept else None
        if family and t.kind in ("column", "power"):
            base.append({f"z:{t.column}": float(t.power)})
        else:
            base.append({f"t:{j}": 1.0})
    seen: set[tuple] = set()
    pairs: list[tuple[int, int]] = []
    for i in range(len(base)):
        for j in range(i, len(base)):
            mono = dict(base[i])
            for k, v in base[j].items():
                mono[k] = mono.get(k, 0.0) + v
            key = tuple(sorted(mono.items()))
            if key not in seen:
                seen.add(key)
                pairs.append((i, j))
    return pairs


def white(fit: EngineFit, terms: Sequence[Term]) -> CheckResult:
    """n·R² of squared residuals on the inputs, their squares and cross-products."""
    stat, pval, note = _empty(fit.n_groups)
    pairs = white_columns(terms, fit.intercept)
    k = len(pairs)
    for b in fit.batches:
        Z0 = _with_constant(b, fit.intercept)
        Z = np.stack([Z0[:, :, i] * Z0[:, :, j] for i, j in pairs], axis=2)
        small = b.n <= k
        r2, _, ok = _aux_r2(Z, b.resid**2, b.mask)
        lm = b.n * r2
        bad = small | ~ok | ~np.isfinite(lm)
        lm[bad] = np.nan
        for gi in np.flatnonzero(bad):
            note[b.groups[gi]] = (f"White's test needs more than {k} rows; this group has {b.n[gi]}"
                                  if small[gi] else "squared residuals do not vary or products are redundant")
        stat[b.groups] = lm
        pval[b.groups] = stats.chi2.sf(lm, k - 1)
    return CheckResult("white", "constant variance (White)", "p_small", stat, pval,
                       np.full(fit.n_groups, np.nan), note,
                       "spread of residuals changes with the inputs or their squares (White, {p})")


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
    """Durbin–Watson statistic; two-sided p-value from a beta law with the exact null mean and variance."""
    stat, pval, note = _empty(fit.n_groups)
    for b in fit.batches:
        d_e = (np.diff(b.resid, axis=1) * (b.mask[:, 1:] & b.mask[:, :-1])) ** 2
        with np.errstate(invalid="ignore", divide="ignore"):
            dw = d_e.sum(axis=1) / b.rss
            mean, var = _dw_moments(b)
            mu, v = mean / 4.0, var / 16.0
            common = mu * (1.0 - mu) / v - 1.0
            a, c = mu * common, (1.0 - mu) * common
            low = stats.beta.cdf(dw / 4.0, a, c)
        pv = np.clip(2.0 * np.minimum(low, 1.0 - low), 0.0, 1.0)
        bad = ~(b.rss > 0) | ~np.isfinite(pv) | (b.n - b.Q.shape[2] < 2)
        dw[~(b.rss > 0)] = np.nan
        pv[bad] = np.nan
        note[b.groups] = order_note + "; p-value from a beta approximation with the exact null mean and variance"
        note[b.groups[bad]] = "residuals are all zero or too few rows: no serial correlation to test"
        stat[b.groups] = dw
        pval[b.groups] = pv
    return CheckResult("durbin_watson", "independent residuals (Durbin–Watson)", "p_small", stat, pval,
                       np.full(fit.n_groups, np.nan), note,
                       "neighbouring residuals are correlated (Durbin–Watson = {stat}, {p})")


def breusch_godfrey(fit: EngineFit, lags: int, order_note: str) -> CheckResult:
    """n·R² of residuals on the inputs and their own first `lags` lags (zeros before the start)."""
    stat, pval, note = _empty(fit.n_groups)
    for b in fit.batches:
        Z0 = _with_constant(b, fit.intercept)
        lagged = []
        for lag in range(1, lags + 1):
            col = np.zeros_like(b.resid)
            col[:, lag:] = b.resid[:, :-lag] if lag < b.resid.shape[1] else 0.0
            lagged.append(col * b.mask)
        Z = np.concatenate([Z0, np.stack(lagged, axis=2)], axis=2)
        small = b.n <= Z.shape[2]
        r2, _, ok = _aux_r2(Z, b.resid, b.mask)
        lm = b.n * r2
        bad = small | ~ok | ~np.isfinite(lm)
        lm[bad] = np.nan
        note[b.groups] = f"{order_note}; lags: {lags}"
        note[b.groups[bad]] = f"too few rows or residuals all zero for {lags} lag(s)"
        stat[b.groups] = lm
        pval[b.groups] = stats.chi2.sf(lm, lags)
    return CheckResult("breusch_godfrey", "independent residuals (Breusch–Godfrey)", "p_small", stat,
                       pval, np.full(fit.n_groups, np.nan), note,
                       "residuals follow a pattern over the sequence (Breusch–Godfrey, {p})")


def reset(fit: EngineFit) -> CheckResult:
    """Ramsey's RESET, F form: do squares and cubes of the fitted values add to the model?"""
    stat, pval, note = _empty(fit.n_groups)
    p = fit.p
    for b in fit.batches:
        f = (b.y - b.resid) * b.mask
        scale = np.abs(f).max(axis=1, keepdims=True)
        f = f / np.where(scale > 0, scale, 1.0)
        f2 = f * f
        Z = np.concatenate([b.W, f2[:, :, None], (f2 * f)[:, :, None]], axis=2)
        df2 = b.n - p - 2
        small = df2 < 1
        _, rss_u, ok = _aux_r2(Z, b.y, b.mask)
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
    return CheckResult("reset", "linear form (RESET)", "p_small", stat, pval,
                       np.full(fit.n_groups, np.nan), note,
                       "the relation is curved, not straight in the inputs (RESET, {p})")


def model_f_test(fit: EngineFit, f: np.ndarray, f_p: np.ndarray) -> CheckResult:
    G = fit.n_groups
    note = np.full(G, "", dtype=object)
    note[fit.fitted_ok] = "fails when the inputs explain no more than chance would"
    return CheckResult("f_test", "model F-test", "p_large", f, f_p, np.full(G, np.nan), note,
                       "the inputs explain no more than chance would (F-test, {p})")


def r_squared(fit: EngineFit, r2: np.ndarray, min_r2: float) -> CheckResult:
    G = fit.n_groups
    note = np.full(G, "", dtype=object)
    note[fit.fitted_ok] = "threshold is a setting (--min-r2); what counts as weak depends on the field"
    return CheckResult("r2", "R² below threshold", "below", r2, None, np.full(G, min_r2), note,
                       "weak fit: R² = {stat} is below {thr}")


def enough_rows(fit: EngineFit, per_coefficient: float) -> CheckResult:
    G = fit.n_groups
    ratio = np.where(fit.fitted_ok, fit.n / fit.p, np.nan)
    note = np.full(G, "", dtype=object)
    note[fit.fitted_ok] = f"usable rows per estimated coefficient ({fit.p} coefficients)"
    return CheckResult("rows", "enough data", "below", ratio, None, np.full(G, per_coefficient), note,
                       "few rows for the number of coefficients ({stat} rows per coefficient < {thr})")
