"""Std errors that stay valid when the variance changes (HC0–HC3) or residuals are correlated (Newey–West).

Covariances are computed in the engine's units (residuals / y_scale, raw columns / their scale),
where every number is of order one, and converted back by powers of two (`coefficient_exponent`):
exact, and inf or 0 only where the true value is outside double precision.

Each batch works in its own width (its `slots` among the model's coefficients) and its blocks are
placed into the (G, p, p) arrays at those slots; slots a group does not use stay NaN. A change
point is taken as known for the covariance (the usual practice); HC1's n/(n − k) uses the group's
residual degrees of freedom, change points counted, as does the F of the robust Wald test.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from ..job import Thresholds
from ..model.basis import pow2_exponent
from ..model.engine import Batch, EngineFit
from ..model.row_measures import LEVERAGE_ONE_TOL
from ..model.inference import Inference


def _selected(b: Batch, only: np.ndarray | None) -> tuple[np.ndarray | slice, np.ndarray] | None:
    """Positions within batch `b` of the groups asked for (all when `only` is None)."""
    if only is None:
        return slice(None), b.groups
    pick = np.flatnonzero(only[b.groups])
    return (pick, b.groups[pick]) if len(pick) else None


def coefficient_exponent(fit: EngineFit) -> np.ndarray:
    """(G, p) k with β_j = 2**k · (β_j in the engine's units): y_scale / column scale as a power of two
    (0 on slots a group does not use)."""
    out = np.zeros((fit.n_groups, fit.p), dtype=int)
    for b in fit.batches:
        out[b.groups[:, None], b.slots[None, :]] = pow2_exponent(b.y_scale)[:, None] - pow2_exponent(b.col_scale)
    return out


def place(out: np.ndarray, groups: np.ndarray, slots: np.ndarray, block: np.ndarray) -> None:
    """Write a batch's (len(groups), p_b, p_b) block into `out` (G, p, p) at its groups and slots."""
    out[groups[:, None, None], slots[None, :, None], slots[None, None, :]] = block


def to_raw(cov: np.ndarray, k: np.ndarray) -> np.ndarray:
    """Covariances (G, p, p) in the engine's units → raw units, given coefficient_exponent k."""
    with np.errstate(over="ignore", under="ignore"):
        return np.ldexp(cov, k[:, :, None] + k[:, None, :])


def hc_cov(fit: EngineFit, kind: str, only: np.ndarray | None = None) -> np.ndarray:
    """Heteroscedasticity-consistent covariance (G, p, p) of the raw coefficients; with `only`
    (a (G,) mask) just for those groups, NaN elsewhere."""
    return to_raw(_hc_scaled(fit, kind, only), coefficient_exponent(fit))


def _hc_scaled(fit: EngineFit, kind: str, only: np.ndarray | None) -> np.ndarray:
    """hc_cov in the engine's units."""
    out = np.full((fit.n_groups, fit.p, fit.p), np.nan)
    for b in fit.batches:
        if (sel := _selected(b, only)) is None:
            continue
        at, groups = sel
        e2 = b.resid[at] ** 2
        h = b.leverage[at]
        n = b.n[at]
        with np.errstate(invalid="ignore", divide="ignore"):
            one = np.where(h < 1.0 - LEVERAGE_ONE_TOL, 1.0 - h, np.nan)
            if kind == "hc0":
                w = e2
            elif kind == "hc1":
                w = e2 * (n / b.df_resid[at])[:, None]
            elif kind == "hc2":
                w = e2 / one
            elif kind == "hc3":
                w = e2 / one**2
            else:
                raise ValueError(kind)
        w = np.where(b.mask[at], w, 0.0)
        Q, A = b.Q[at], b.A[at]
        meat = np.einsum("gmk,gm,gml->gkl", Q, w, Q)
        place(out, groups, b.slots, A @ meat @ np.swapaxes(A, 1, 2))
    return out


def default_hac_lag(n: np.ndarray) -> np.ndarray:
    """floor(4·(n/100)^(2/9)), the usual automatic Newey–West lag (common practice)."""
    return np.floor(4.0 * (np.asarray(n, dtype=np.float64) / 100.0) ** (2.0 / 9.0)).astype(int)


def hac_cov(fit: EngineFit, lags: int | None, only: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Newey–West covariance with Bartlett weights (G, p, p) and the lag used per group; with
    `only` (a (G,) mask) just for those groups (NaN and lag −1 elsewhere)."""
    cov, lag = _hac_scaled(fit, lags, only)
    return to_raw(cov, coefficient_exponent(fit)), lag


def _hac_scaled(fit: EngineFit, lags: int | None, only: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """hac_cov in the engine's units."""
    out = np.full((fit.n_groups, fit.p, fit.p), np.nan)
    lag_used = np.full(fit.n_groups, -1)
    for b in fit.batches:
        if (sel := _selected(b, only)) is None:
            continue
        at, groups = sel
        n = b.n[at]
        L = default_hac_lag(n) if lags is None else np.full(len(n), lags)
        L = np.minimum(L, n - 1)
        u = b.Q[at] * b.resid[at][:, :, None]
        S = np.einsum("gmk,gml->gkl", u, u)
        for lag in range(1, int(L.max(initial=0)) + 1):
            w = np.where(lag <= L, 1.0 - lag / (L + 1.0), 0.0)
            G_l = np.einsum("gmk,gml->gkl", u[:, lag:], u[:, :-lag])
            S += w[:, None, None] * (G_l + np.swapaxes(G_l, 1, 2))
        A = b.A[at]
        place(out, groups, b.slots, A @ S @ np.swapaxes(A, 1, 2))
        lag_used[groups] = L
    return out, lag_used


def wald_f(fit: EngineFit, cov: np.ndarray, k: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """F = b'V⁻¹b / q of a group's active slopes (the constant excluded) with covariance `cov`, and
    its p-value from F(q, df_resid). With k (coefficient_exponent), `cov` is in the engine's units
    and β is taken there too (F does not depend on the units). A change point has no row in the
    covariance, so it is not among the q tested; it counts in df_resid."""
    slopes = fit.active.copy()
    if fit.intercept:
        slopes[:, 0] = False
    q = slopes.sum(axis=1)
    beta = fit.beta if k is None else np.ldexp(fit.beta, -k)
    F = np.full(fit.n_groups, np.nan)
    patterns, which = np.unique(slopes, axis=0, return_inverse=True)
    which = np.asarray(which).reshape(-1)
    for j, pattern in enumerate(patterns):
        idx = np.flatnonzero(pattern)
        rows = np.flatnonzero(which == j)
        if not len(idx):
            continue
        b = beta[rows][:, idx]
        V = cov[rows][:, idx][:, :, idx]
        ok = np.isfinite(V).all(axis=(1, 2)) & np.isfinite(b).all(axis=1)
        if ok.any():
            sol = np.linalg.solve(V[ok], b[ok][..., None])[..., 0]
            F[rows[ok]] = (b[ok] * sol).sum(axis=1) / len(idx)
    with np.errstate(invalid="ignore"):
        return F, stats.f.sf(F, q, fit.df_resid)


@dataclass(frozen=True)
class RobustCovariances:
    """Robust covariances of the groups that need them, in the engine's units (raw = 2**(k_i + k_j)
    times these); NaN for the others, which never show them."""

    hc: np.ndarray        # (G, p, p) heteroscedasticity-consistent, where variance is not constant
    hac: np.ndarray       # (G, p, p) Newey–West, where residuals are not independent
    hac_lag: np.ndarray   # (G,) lag used by Newey–West
    exponent: np.ndarray  # (G, p) coefficient_exponent k

    def std_errors(self, cov: np.ndarray) -> np.ndarray:
        """Raw std errors (G, p) from one of the covariances above."""
        with np.errstate(invalid="ignore", over="ignore", under="ignore"):
            return np.ldexp(np.sqrt(np.diagonal(cov, axis1=1, axis2=2)), self.exponent)


def robust_covariances(fit: EngineFit, thr: Thresholds, het: np.ndarray, dep: np.ndarray) -> RobustCovariances:
    """HC covariances where variance is not constant (`het`), Newey–West where residuals are
    not independent (`dep`)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        hac, lag = _hac_scaled(fit, thr.hac_lags, only=dep)
        return RobustCovariances(hc=_hc_scaled(fit, thr.robust, only=het), hac=hac, hac_lag=lag,
                                 exponent=coefficient_exponent(fit))


def robust_model_test(fit: EngineFit, covs: RobustCovariances, het: np.ndarray, dep: np.ndarray,
                      f: np.ndarray, f_p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The model F-test as a Wald test with the robust covariance where one applies (--inference robust)."""
    cov = np.where(dep[:, None, None], covs.hac, covs.hc)
    f_rob, p_rob = wald_f(fit, cov, covs.exponent)
    use = het | dep
    return np.where(use, f_rob, f), np.where(use, p_rob, f_p)


def coefficient_extras(fit: EngineFit, inf: Inference, het: np.ndarray, dep: np.ndarray, thr: Thresholds,
                       intercept: bool, vifs: np.ndarray, covs: RobustCovariances
                       ) -> tuple[dict[str, np.ndarray], Inference]:
    """Extra coefficient columns: VIF, robust (HC) std errors where variance is not constant,
    Newey–West std errors where residuals are not independent; --inference robust swaps them in."""
    extra: dict[str, np.ndarray] = {}
    if fit.p - (1 if intercept else 0) >= 2:
        extra["VIF"] = vifs
    df = fit.df_resid[:, None]
    kind = thr.robust.upper()
    with np.errstate(invalid="ignore", divide="ignore"):
        hc_se = covs.std_errors(covs.hc)
        hac_se = covs.std_errors(covs.hac)
        extra[f"robust std error ({kind})"] = np.where(het[:, None], hc_se, np.nan)
        extra[f"robust p-value ({kind})"] = np.where(het[:, None], 2 * stats.t.sf(np.abs(fit.beta / hc_se), df), np.nan)
        extra["HAC std error"] = np.where(dep[:, None], hac_se, np.nan)
        extra["HAC p-value"] = np.where(dep[:, None], 2 * stats.t.sf(np.abs(fit.beta / hac_se), df), np.nan)
        extra["HAC lag"] = np.where(dep[:, None] & fit.active, np.repeat(covs.hac_lag[:, None], fit.p, axis=1),
                                    np.nan)
    if thr.inference == "robust":
        use_hc = het & ~dep
        se = np.where(dep[:, None], hac_se, np.where(use_hc[:, None], hc_se, fit.se))
        inf = inf.with_std_errors(fit.beta, se, fit.df_resid)
        used = np.where(dep, "Newey–West (HAC)", np.where(use_hc, kind, "classic"))
        extra["std error used"] = np.repeat(used[:, None], fit.p, axis=1)
    return extra, inf
