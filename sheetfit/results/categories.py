"""The groups sheet's category columns: what each group's rows leave out, and whether a category's levels differ.

Per category input and group, the all-levels test is the Wald F of the group's indicator coefficients
of that category jointly zero: F = b'(V)⁻¹b / (q·s²), V the rows and columns of (X'X)⁻¹ of those q
coefficients, with F(q, residual df). It says whether the levels differ at all (after the other
inputs), not which ones; the coefficients sheet has each level against the reference.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
from scipy import stats

from ..model.engine import EngineFit
from ..terms import INDICATOR, Term

LEVELS_NOTE = "categories note"


def levels_f_header(column: str) -> str:
    return f"{column}: levels differ (F)"


def levels_p_header(column: str) -> str:
    return f"{column}: levels differ (p-value)"


def level_columns(fit: EngineFit, terms: Sequence[Term], columns: Sequence[str], notes: np.ndarray
                  ) -> dict[str, np.ndarray]:
    """The note per group, then per category the all-levels F and its p-value (NaN where a group estimates
    none of its levels)."""
    off = 1 if fit.intercept else 0
    out: dict[str, np.ndarray] = {LEVELS_NOTE: np.asarray(notes, dtype=object)}
    for col in columns:
        slots = np.array([off + j for j, t in enumerate(terms) if t.kind == INDICATOR and t.column == col],
                         dtype=np.int64)          # none when the run saw one level only
        F = np.full(fit.n_groups, np.nan)
        q = np.zeros(fit.n_groups)
        for g in np.flatnonzero(fit.fitted_ok):
            s = slots[fit.active[g, slots]]
            if not len(s) or not fit.sigma2[g] > 0:
                continue
            b = fit.beta[g, s]
            V = fit.xtx_inv[g][np.ix_(s, s)]
            with np.errstate(all="ignore"):
                F[g] = float(b @ np.linalg.solve(V, b)) / len(s) / fit.sigma2[g]
            q[g] = len(s)
        with np.errstate(invalid="ignore"):
            p = np.where(q > 0, stats.f.sf(F, np.maximum(q, 1), fit.df_resid), np.nan)
        out[levels_f_header(col)] = F
        out[levels_p_header(col)] = p
    return out


def category_about(levels: Mapping[str, Sequence[str]], reference: Mapping[str, str]) -> tuple[tuple[str, str], ...]:
    """One `about` row per category input: its reference level, then the other levels."""
    rows = []
    for col, found in levels.items():
        ref = reference[col]
        rest = [lev for lev in found if lev != ref]
        shown = ", ".join(rest[:30]) + (f" and {len(rest) - 30} more" if len(rest) > 30 else "")
        rows.append((f"category input {col}", f"reference level {ref}; other levels: {shown or '(none)'}"))
    return tuple(rows)
