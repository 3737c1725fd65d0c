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

Every measure is taken over a group's active coefficients only (its batch's own columns): an
input none of whose terms a group uses is absent from that group's GVIF (NaN), and a group with
fewer than two inputs of its own has no collinearity to judge. Change points do not enter.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..model.engine import EngineFit
from ..terms import Term
from .auxiliary import batch_has_constant
from .result import CheckResult

VIF = "vif"
CONDITION = "condition"
MEASURE = ("generalised VIF per input (Fox & Monette 1992): GVIF^(1/df) over the terms of one "
           "input, the ordinary VIF for an input with one term, compared with --vif-max")


def vif(fit: EngineFit) -> np.ndarray:
    """VIF of every coefficient (G, p); NaN for the intercept, on slots a group does not use and
    where a group's design has fewer than two non-constant columns.

    VIF_j = 1/(1 − R²_j) = (X'X)⁻¹_jj · Σ(x_j − x̄_j)² with an intercept (uncentred sum without).
    Computed with every raw column divided by its scale (the VIF does not depend on it).
    """
    out = np.full((fit.n_groups, fit.p), np.nan)
    for b in fit.batches:
        constant = batch_has_constant(b, fit.intercept)
        off = 1 if constant else 0
        if len(b.slots) - off < 2:
            continue
        X = b.W @ b.T
        if b.sqrt_w is not None:        # weighted: X is √w·X, so this is Σ w·(x − x̄_w)² (Σ w·x² without a constant)
            root = b.sqrt_w[:, :, None]
            mean = (root * X).sum(axis=1) / (root**2).sum(axis=1)
            ss = ((X - root * mean[:, None, :]) ** 2).sum(axis=1) if constant else (X**2).sum(axis=1)
        elif constant:
            mean = X.sum(axis=1) / b.n[:, None]
            ss = (((X - mean[:, None, :]) * b.mask[:, :, None]) ** 2).sum(axis=1)
        else:
            ss = (X**2).sum(axis=1)
        xi = b.A @ np.swapaxes(b.A, 1, 2)
        v = np.diagonal(xi, axis1=1, axis2=2) * ss
        v[:, :off] = np.nan
        out[b.groups[:, None], b.slots[None, :]] = v
    return out


def families(terms: Sequence[Term], intercept: bool) -> list[tuple[str, list[int]]]:
    """(source column, design column indices) of each input, in first-use order."""
    off = 1 if intercept else 0
    out: dict[str, list[int]] = {}
    for j, t in enumerate(terms):
        out.setdefault(t.column, []).append(off + j)
    return list(out.items())


def family_sizes(fit: EngineFit, terms: Sequence[Term]) -> np.ndarray:
    """Active terms of every input per group (G, number of inputs): its df in GVIF^(1/df), 0 where absent."""
    sizes = [fit.active[:, cols].sum(axis=1) for _, cols in families(terms, fit.intercept)]
    return np.stack(sizes, axis=1) if sizes else np.zeros((fit.n_groups, 0), dtype=np.int64)


def gvif(fit: EngineFit, terms: Sequence[Term]) -> np.ndarray:
    """Generalised VIF of every input (G, number of inputs) over each group's active terms; NaN for
    groups not fitted, for inputs a group does not use and for groups with fewer than two inputs."""
    fams = families(terms, fit.intercept)
    out = np.full((fit.n_groups, len(fams)), np.nan)
    if len(fams) < 2:
        return out
    for b in fit.batches:
        off = 1 if batch_has_constant(b, fit.intercept) else 0
        at = np.full(fit.p, -1)
        at[b.slots] = np.arange(len(b.slots))    # each model slot's column in this batch's design
        present = [(f, at[cols][at[cols] >= 0] - off) for f, (_name, cols) in enumerate(fams)]
        present = [(f, own) for f, own in present if len(own)]
        if len(present) < 2:
            continue
        Rk = b.R[:, off:, off:]                  # with a constant: the columns with the constant projected out
        C = np.swapaxes(Rk, 1, 2) @ Rk           # cross-products of the (centred) working columns
        d = np.sqrt(np.diagonal(C, axis1=1, axis2=2))
        corr = C / d[:, :, None] / d[:, None, :]
        logdet = np.linalg.slogdet(corr)[1]
        every = np.arange(corr.shape[1])
        for f, own in present:
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
    size = family_sizes(fit, terms)
    several = (size > 0).sum(axis=1) >= 2
    if len(fams) >= 2:
        with np.errstate(invalid="ignore", divide="ignore"):
            adjusted = gvif(fit, terms) ** (1.0 / size)          # NaN where an input is absent
        show = np.flatnonzero(fit.fitted_ok & several & (np.isfinite(adjusted) | (size == 0)).all(axis=1))
        order = np.argsort(-adjusted[show], axis=1, kind="stable")          # largest first, absent last
        values = np.take_along_axis(adjusted[show], order, axis=1)
        names = np.array([name for name, _ in fams], dtype=object)[order]
        text = np.array([f"{v:.3g}" for v in values.ravel()], dtype=object).reshape(values.shape)
        worst[show] = values[:, 0]
        listed = names[:, 0] + " " + text[:, 0]
        for j in range(1, len(fams)):
            listed = np.where(np.isfinite(values[:, j]), listed + ", " + names[:, j] + " " + text[:, j], listed)
        note[show] = "GVIF^(1/df) per input: " + listed
        for i in np.flatnonzero(values[:, 0] > vif_max):
            above = names[i][values[i] > vif_max]
            extra[show[i]] = ", ".join(above) if len(above) > 1 else f"{above[0]} with the other inputs"
    note[fit.fitted_ok & ~several] = "one input: collinearity does not arise"
    return CheckResult(VIF, "collinearity (VIF)", "above", worst, None, np.full(G, vif_max), note,
                       "inputs move together, so their separate effects are uncertain ({extra}: "
                       "VIF {stat} > {thr})", extra)


def collinearity_checks(fit: EngineFit, terms: Sequence[Term], vif_max: float,
                        condition_max: float) -> list[CheckResult]:
    """The generalised VIF per input (the largest, and which inputs exceed the limit) and the
    condition number, against their limits."""
    G = fit.n_groups
    one_input = fit.n_coef - fit.has_constant < 2         # fewer than two non-constant columns of its own
    cond = np.where(one_input, np.nan, condition_number(fit))
    note_c = np.full(G, "", dtype=object)
    note_c[fit.fitted_ok & one_input] = "one input: collinearity does not arise"
    note_c[fit.fitted_ok & ~one_input] = "columns scaled to unit length, intercept included"
    return [
        _gvif_check(fit, terms, vif_max),
        CheckResult(CONDITION, "collinearity (condition number)", "above", cond, None,
                    np.full(G, condition_max), note_c,
                    "the inputs are nearly redundant as a set (condition number {stat} > {thr})"),
    ]
