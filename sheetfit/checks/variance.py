"""Constant variance: Breusch–Pagan (Koenker) and White, n·R² of squared residuals on the inputs.

A failure here is what makes the run show heteroscedasticity-consistent (HC) std errors.

Each group is tested on its own design (its batch's columns). A change point is taken as known,
the usual practice: its segment columns are the regressors, and it costs these n·R² tests no
degree of freedom (their χ² df count the auxiliary regressors only).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy import stats

from ..model.engine import EngineFit
from ..terms import Term, polynomial_family
from .auxiliary import (
    aux_r2,
    batch_has_constant,
    batch_terms,
    projection_r2,
    with_constant,
)
from .result import CheckResult, empty_arrays

BREUSCH_PAGAN = "breusch_pagan"
WHITE = "white"


def breusch_pagan(fit: EngineFit) -> CheckResult:
    """Koenker's studentized form: n·R² of squared residuals on the model's inputs."""
    stat, pval, note = empty_arrays(fit.n_groups)
    for b in fit.batches:
        if batch_has_constant(b, fit.intercept) and b.sqrt_w is None:   # the design holds the constant: reuse its QR
            k = b.Q.shape[2]
            r2, _ = projection_r2(b.Q, b.resid**2, b.mask)
            ok = np.ones(len(b.groups), dtype=bool)
        else:
            Z = with_constant(b, fit.intercept)
            k = Z.shape[2]
            r2, _, ok = aux_r2(Z, b.resid**2, b.mask)
        lm = b.n * r2
        bad = ~ok | ~np.isfinite(lm)
        lm[bad] = np.nan
        note[b.groups[bad]] = "squared residuals do not vary (perfect fit or too few rows)"
        stat[b.groups] = lm
        pval[b.groups] = stats.chi2.sf(lm, k - 1)
    return CheckResult(BREUSCH_PAGAN, "constant variance (Breusch–Pagan)", "p_small", stat, pval,
                       np.full(fit.n_groups, np.nan), note,
                       "spread of residuals changes with the inputs (Breusch–Pagan, {p})")


def white_columns(terms: Sequence[Term], intercept: bool) -> list[tuple[int, int]]:
    """Pairs (i, j) of design columns, with a constant at index 0, whose products are distinct.

    Products that are the same monomial (x·x² and x³ in a polynomial family) are kept once; the
    product of a change-point run's 'below' and 'above' terms of one input is 0 and left out.
    Without an intercept every column or power term is a multiple of x^K (nothing is centred),
    so its products are monomials of x whether or not it belongs to a family.
    """
    base: list[dict[str, float]] = [{}]
    for j, t in enumerate(terms):
        monomial = t.kind in ("column", "power") and (not intercept or polynomial_family(terms, t.column))
        if monomial:
            base.append({f"z:{t.column}": float(t.power)})
        else:
            base.append({f"t:{j}": 1.0})
    seen: set[tuple] = set()
    pairs: list[tuple[int, int]] = []
    for i in range(len(base)):
        for j in range(i, len(base)):
            if i and j and _never_both(terms[i - 1], terms[j - 1]):
                continue                 # max(0, τ − T)·max(0, T − τ') is 0 on every row: no column
            mono = dict(base[i])
            for k, v in base[j].items():
                mono[k] = mono.get(k, 0.0) + v
            key = tuple(sorted(mono.items()))
            if key not in seen:
                seen.add(key)
                pairs.append((i, j))
    return pairs


def _never_both(a: Term, b: Term) -> bool:
    """The 'below' and 'above' change-point terms of one input are never both non-zero (τh ≤ τc)."""
    return a.column == b.column and {a.kind, b.kind} == {"below", "above"}


def _reduced_to_rank(Z: np.ndarray, u: np.ndarray) -> tuple[float, float]:
    """n·R² of u on the span of Z's columns and its degrees of freedom, rank − 1, when some products of
    a group's terms repeat others (e.g. below² + above² = (T − τ)² beside T²)."""
    if not np.ptp(u) > 0:
        return np.nan, np.nan
    scale = np.linalg.norm(Z, axis=0)
    Zs = Z / np.where(scale > 0, scale, 1.0)
    rank = np.linalg.matrix_rank(Zs)
    fitted = Zs @ np.linalg.lstsq(Zs, u, rcond=None)[0]
    r2 = 1.0 - np.sum((u - fitted) ** 2) / np.sum((u - u.mean()) ** 2)
    return len(u) * r2, rank - 1.0


def white(fit: EngineFit, terms: Sequence[Term]) -> CheckResult:
    """n·R² of squared residuals on the inputs, their squares and cross-products (of each group's own terms)."""
    stat, pval, note = empty_arrays(fit.n_groups)
    for b in fit.batches:
        pairs = white_columns(batch_terms(b, terms, fit.intercept), batch_has_constant(b, fit.intercept))
        k = len(pairs)
        Z0 = with_constant(b, fit.intercept)
        Z = np.stack([Z0[:, :, i] * Z0[:, :, j] for i, j in pairs], axis=2)
        small = b.n <= k
        r2, _, ok = aux_r2(Z, b.resid**2, b.mask)
        lm = b.n * r2
        df = np.full(len(b.groups), k - 1.0)
        too_few = np.zeros(len(b.groups), dtype=bool)
        for gi in np.flatnonzero(small | ~ok):        # products redundant in this group (indicators, hinges)
            lm[gi], df[gi] = _reduced_to_rank(Z[gi][b.mask[gi]], b.resid[gi][b.mask[gi]] ** 2)
            too_few[gi] = b.n[gi] <= df[gi] + 1       # the rank: a test needs more rows than that
            if np.isfinite(lm[gi]) and not too_few[gi] and df[gi] + 1 < k:
                note[b.groups[gi]] = f"{int(df[gi]) + 1} of the {k} products are independent; tested on those"
        bad = too_few | ~np.isfinite(lm)
        lm[bad] = np.nan
        for gi in np.flatnonzero(bad):
            note[b.groups[gi]] = (f"White's test needs more rows than its {int(df[gi]) + 1} independent products; "
                                  f"this group has {b.n[gi]}" if too_few[gi] else "squared residuals do not vary")
        stat[b.groups] = lm
        pval[b.groups] = stats.chi2.sf(lm, df)
    return CheckResult(WHITE, "constant variance (White)", "p_small", stat, pval,
                       np.full(fit.n_groups, np.nan), note,
                       "spread of residuals changes with the inputs or their squares (White, {p})")
