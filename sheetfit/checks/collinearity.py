"""Collinearity of the inputs: a generalised VIF per input, the VIF per coefficient, and the
condition number of the scaled design.

The check judges inputs, not terms: all terms built from one source column (x, x^2, log(x) …)
form one family, and powers of one input moving together is no collinearity problem. Per family
F with df_F terms, the generalised VIF of Fox & Monette (1992, JASA 87:178–183) is
GVIF_F = det(R_FF)·det(R_OO)/det(R), with R the correlation matrix of the non-constant design
columns (uncentred cross-products scaled to unit diagonal without an intercept) and O the other
columns. The check compares GVIF_F^(1/df_F), i.e. (GVIF^(1/(2·df)))², with --vif-max: for a
one-term input it is the ordinary VIF, for a family the size-adjusted value Fox & Monette
recommend, squared to stay on the VIF scale. GVIF is unchanged by any reparametrisation inside a
family, so it is computed on the engine's working basis (centred and scaled, polynomial families
on [−1, 1]), where the cross-products come from R of the QR factors and X'X is never formed.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..model.engine import EngineFit
from ..terms import Term
from .result import CheckResult

VIF = "vif"
CONDITION = "condition"
MEASURE = ("generalised VIF per input (Fox & Monette 1992): GVIF^(1/df) over the terms of one "
           "input, the ordinary VIF for an input with one term, compared with --vif-max")


def vif(fit: EngineFit) -> np.ndarray:
    """VIF of every coefficient (G, p); NaN for the intercept and for one-input models.

    VIF_j = 1/(1 − R²_j) = (X'X)⁻¹_jj · Σ(x_j − x̄_j)² with an intercept (uncentred sum without).
    Computed with every raw column divided by its scale (the VIF does not depend on it).
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


def families(terms: Sequence[Term], intercept: bool) -> list[tuple[str, list[int]]]:
    """(source column, design column indices) of each input, in first-use order."""
    off = 1 if intercept else 0
    out: dict[str, list[int]] = {}
    for j, t in enumerate(terms):
        out.setdefault(t.column, []).append(off + j)
    return list(out.items())


def gvif(fit: EngineFit, terms: Sequence[Term]) -> np.ndarray:
    """Generalised VIF of every input (G, number of inputs); NaN for groups not fitted and for one-input models."""
    fams = families(terms, fit.intercept)
    out = np.full((fit.n_groups, len(fams)), np.nan)
    if len(fams) < 2:
        return out
    off = 1 if fit.intercept else 0
    for b in fit.batches:
        Rk = b.R[:, off:, off:]                  # with an intercept: the columns with the constant projected out
        C = np.swapaxes(Rk, 1, 2) @ Rk           # cross-products of the (centred) working columns
        d = np.sqrt(np.diagonal(C, axis1=1, axis2=2))
        corr = C / d[:, :, None] / d[:, None, :]
        logdet = np.linalg.slogdet(corr)[1]
        every = np.arange(corr.shape[1])
        for f, (_name, cols) in enumerate(fams):
            own = np.array(cols) - off
            rest = np.setdiff1d(every, own)
            l_own = np.linalg.slogdet(corr[:, own][:, :, own])[1]
            l_rest = np.linalg.slogdet(corr[:, rest][:, :, rest])[1]
            out[b.groups, f] = np.exp(l_own + l_rest - logdet)
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


def _gvif_check(fit: EngineFit, terms: Sequence[Term], vif_max: float) -> CheckResult:
    """The largest GVIF^(1/df) over the inputs against --vif-max; the reason names the inputs above it."""
    G = fit.n_groups
    fams = families(terms, fit.intercept)
    note = np.full(G, "", dtype=object)
    extra = np.full(G, "", dtype=object)
    worst = np.full(G, np.nan)
    if len(fams) >= 2:
        adjusted = gvif(fit, terms) ** (1.0 / np.array([len(cols) for _, cols in fams]))
        show = np.flatnonzero(fit.fitted_ok & np.isfinite(adjusted).all(axis=1))
        order = np.argsort(-adjusted[show], axis=1, kind="stable")          # largest first
        values = np.take_along_axis(adjusted[show], order, axis=1)
        names = np.array([name for name, _ in fams], dtype=object)[order]
        text = np.array([f"{v:.3g}" for v in values.ravel()], dtype=object).reshape(values.shape)
        worst[show] = values[:, 0]
        listed = names[:, 0] + " " + text[:, 0]
        for j in range(1, len(fams)):
            listed = listed + ", " + names[:, j] + " " + text[:, j]
        note[show] = "GVIF^(1/df) per input: " + listed
        for i in np.flatnonzero(values[:, 0] > vif_max):
            above = names[i][values[i] > vif_max]
            extra[show[i]] = ", ".join(above) if len(above) > 1 else f"{above[0]} with the other inputs"
    else:
        note[fit.fitted_ok] = "one input: collinearity does not arise"
    return CheckResult(VIF, "collinearity (VIF)", "above", worst, None, np.full(G, vif_max), note,
                       "inputs move together, so their separate effects are uncertain ({extra}: "
                       "VIF {stat} > {thr})", extra)


def collinearity_checks(fit: EngineFit, terms: Sequence[Term], vif_max: float,
                        condition_max: float) -> list[CheckResult]:
    """The generalised VIF per input (the largest, and which inputs exceed the limit) and the
    condition number, against their limits."""
    G = fit.n_groups
    off = 1 if fit.intercept else 0
    cond = condition_number(fit)
    note_c = np.full(G, "", dtype=object)
    if fit.p - off < 2:
        cond = np.full(G, np.nan)
        note_c[fit.fitted_ok] = "one input: collinearity does not arise"
    else:
        note_c[fit.fitted_ok] = "columns scaled to unit length, intercept included"
    return [
        _gvif_check(fit, terms, vif_max),
        CheckResult(CONDITION, "collinearity (condition number)", "above", cond, None,
                    np.full(G, condition_max), note_c,
                    "the inputs are nearly redundant as a set (condition number {stat} > {thr})"),
    ]
