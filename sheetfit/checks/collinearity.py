"""Collinearity of the inputs: VIF per input and the condition number of the scaled design."""

from __future__ import annotations

import numpy as np

from ..model.engine import EngineFit
from .result import CheckResult

VIF = "vif"
CONDITION = "condition"


def vif(fit: EngineFit) -> np.ndarray:
    """VIF of every coefficient (G, p); NaN for the intercept and for one-input models.

    VIF_j = 1/(1 − R²_j) = (X'X)⁻¹_jj · Σ(x_j − x̄_j)² with an intercept (uncentred sum without).
    """
    out = np.full((fit.n_groups, fit.p), np.nan)
    off = 1 if fit.intercept else 0
    if fit.p - off < 2:
        return out
    for b in fit.batches:
        X = b.W @ b.T
        if fit.intercept:
            mean = X.sum(axis=1) / b.n[:, None]
            ss = (((X - mean[:, None, :]) * b.mask[:, :, None]) ** 2).sum(axis=1)
        else:
            ss = (X**2).sum(axis=1)
        xi = b.A @ np.swapaxes(b.A, 1, 2)
        v = np.diagonal(xi, axis1=1, axis2=2) * ss
        v[:, :off] = np.nan
        out[b.groups] = v
    return out


def condition_number(fit: EngineFit) -> np.ndarray:
    """Condition number of the design with every column (intercept included) scaled to unit length."""
    out = np.full(fit.n_groups, np.nan)
    for b in fit.batches:
        M = b.R @ b.T
        norms = np.sqrt((M**2).sum(axis=1))
        s = np.linalg.svd(M / norms[:, None, :], compute_uv=False)
        out[b.groups] = s[:, 0] / s[:, -1]
    return out


def collinearity_checks(fit: EngineFit, vifs: np.ndarray, vif_max: float,
                        condition_max: float, labels: list[str]) -> list[CheckResult]:
    """The largest VIF per group (and which input has it) and the condition number, against their limits."""
    G = fit.n_groups
    off = 1 if fit.intercept else 0
    many = fit.p - off >= 2
    note_v = np.full(G, "", dtype=object)
    extra = np.full(G, "", dtype=object)
    vmax = np.full(G, np.nan)
    if many:
        ok = fit.fitted_ok
        with np.errstate(invalid="ignore"):
            worst = np.nanargmax(np.where(np.isfinite(vifs[:, off:]), vifs[:, off:], -1.0), axis=1) + off
        vmax[ok] = vifs[ok, worst[ok]]
        for g in np.flatnonzero(ok):
            extra[g] = labels[worst[g]]
            note_v[g] = f"largest for {labels[worst[g]]}"
    else:
        note_v[fit.fitted_ok] = "one input: collinearity does not arise"
    cond = condition_number(fit)
    note_c = np.full(G, "", dtype=object)
    if not many:
        cond = np.full(G, np.nan)
        note_c[fit.fitted_ok] = "one input: collinearity does not arise"
    else:
        note_c[fit.fitted_ok] = "columns scaled to unit length, intercept included"
    return [
        CheckResult(VIF, "collinearity (VIF)", "above", vmax, None, np.full(G, vif_max), note_v,
                    "inputs move together, so their separate effects are uncertain ({extra} VIF {stat} > {thr})",
                    extra),
        CheckResult(CONDITION, "collinearity (condition number)", "above", cond, None,
                    np.full(G, condition_max), note_c,
                    "the inputs are nearly redundant as a set (condition number {stat} > {thr})"),
    ]
