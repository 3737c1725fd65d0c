"""The rows the engine takes: every row read given its group code and its reason, the usable ones sorted by
group (and by the order column within a group), with the source columns, response and weights; and the
raw design rows of a fitted model in that order.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import UnusableRowsError
from ..read.tidy import REASON, SOURCE_FILE, SOURCE_ROW, SOURCE_SHEET, Observations
from ..terms import Term, design_matrix, source_columns
from .engine import EngineFit


@dataclass(frozen=True)
class GroupedRows:
    """The usable rows sorted by group (and by the order column within a group), as the engine takes them."""

    keys: pd.DataFrame          # one row per group: the group columns' labels
    codes_all: np.ndarray       # (N_read,) group code of every row read
    reason: np.ndarray          # (N_read,) '' when usable, else plain words
    pos: np.ndarray             # (N,) positions of the usable rows in the rows read, in engine order
    codes: np.ndarray           # (N,) group code per engine row
    columns: dict[str, np.ndarray]  # source column → (N,) values
    y: np.ndarray               # (N,)
    weights: np.ndarray | None = None   # (N,) row weights of a weighted fit

    @property
    def n_groups(self) -> int:
        return len(self.keys)


def row_reasons(obs: Observations) -> np.ndarray:
    """Reader reasons plus term-domain problems (log of ≤ 0, sqrt of < 0) and weights that are not positive."""
    reason = obs.data[REASON].to_numpy(dtype=object).copy()
    for term in obs.terms:
        if term.kind not in ("log", "sqrt"):
            continue
        bad = term.domain_problem(obs.data[term.column].to_numpy(dtype=np.float64))
        for i in np.flatnonzero(bad):
            reason[i] = f"{reason[i]}; {term.domain_reason()}" if reason[i] else term.domain_reason()
    if obs.weights is not None:
        problem = obs.weights.row_problem(obs.data[obs.weights.column].to_numpy(dtype=np.float64))
        for i in np.flatnonzero(problem != ""):
            reason[i] = f"{reason[i]}; {problem[i]}" if reason[i] else problem[i]
    return reason


def group_rows(obs: Observations, reason: np.ndarray, codes: dict[str, np.ndarray] | None = None) -> GroupedRows:
    """Give every row its group code and put the usable rows in engine order; `codes` holds each category
    column's level codes per row read (the data hold its levels as text)."""
    codes = codes or {}
    data = obs.data
    keys_cols = list(obs.group_columns)
    if keys_cols:
        codes_all = data.groupby(keys_cols, sort=False, dropna=False).ngroup().to_numpy()
    else:
        codes_all = np.zeros(len(data), dtype=np.int64)
    G = int(codes_all.max()) + 1 if len(codes_all) else 0
    first = np.unique(codes_all, return_index=True)[1]
    keys = data.iloc[first][keys_cols].reset_index(drop=True) if keys_cols else pd.DataFrame(index=range(G))
    pos = np.flatnonzero(reason == "")
    seq = data[obs.order].to_numpy(dtype=np.float64)[pos] if obs.order else pos.astype(np.float64)
    pos = pos[np.lexsort((pos, seq, codes_all[pos]))]
    columns = {c: (codes[c] if c in codes else data[c].to_numpy(dtype=np.float64))[pos]
               for c in source_columns(obs.terms)}
    weights = (None if obs.weights is None else
               obs.weights.values(data[obs.weights.column].to_numpy(dtype=np.float64)[pos]))
    return GroupedRows(keys=keys, codes_all=codes_all, reason=reason, pos=pos, codes=codes_all[pos],
                       columns=columns, y=data[obs.y].to_numpy(dtype=np.float64)[pos], weights=weights)


def design_rows(terms: Sequence[Term], intercept: bool, rows: GroupedRows, fit: EngineFit,
                change_points: np.ndarray | None = None) -> np.ndarray:
    """The raw design rows (N, p) in engine order, each group's change points (G, 2) in place; 0 on unused slots."""
    cps = None
    if change_points is not None:
        tau = np.asarray(change_points, dtype=np.float64)[rows.codes]
        cps = {"below": tau[:, 0], "above": tau[:, 1]}
    with np.errstate(invalid="ignore", over="ignore"):
        X = design_matrix(terms, intercept, rows.columns, cps) if len(rows.y) else np.zeros((0, fit.p))
    return np.where(fit.active[rows.codes], X, 0.0)


def refuse_unusable(data: pd.DataFrame, reason: np.ndarray) -> None:
    """--strict: one line naming the first rows that cannot be used, when any cannot."""
    bad = np.flatnonzero(reason != "")
    if len(bad):
        rows = data[SOURCE_ROW].to_numpy()
        where = [""] * len(data) if SOURCE_SHEET not in data.columns else (data[SOURCE_SHEET].astype(str) + "!").tolist()
        if SOURCE_FILE in data.columns:
            where = [f"{f} {w}" for f, w in zip(data[SOURCE_FILE].astype(str).tolist(), where)]
        shown = "; ".join(f"{where[i]}row {rows[i]}: {reason[i]}" for i in bad[:3])
        more = f" (and {len(bad) - 3} more)" if len(bad) > 3 else ""
        raise UnusableRowsError(f"--strict: {len(bad)} row(s) cannot be used: {shown}{more}; "
                                f"fix them or run without --strict to report them instead")


def nothing_fitted(fit: EngineFit, G: int) -> str:
    """Why no group could be fitted, in one line: the groups, the largest one's rows, the first reason."""
    biggest = int(fit.n.max()) if G else 0
    first = next((r for r in fit.not_fitted_reason if r), "no usable rows")
    need = int(fit.n_params.max()) if G else fit.p
    return (f"no group could be fitted ({G} group(s); the largest has {biggest} usable rows, "
            f"{need} coefficients need at least {need + 1}); first reason: {first}")
