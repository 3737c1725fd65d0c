"""What the charts show: which groups get charts, and the cells on the `chart data` sheet behind them.

The data sheet is written row by row: an overview block (R² of every fitted group, lowest first),
then one block per charted group. Blocks remember their rows so chart series can point at them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..results.headers import (AVERAGE_HIGH, AVERAGE_LOW, COEFFICIENT, FITTED, FLAGS, INPUT, R2, REASONS,
    RESIDUAL, ROW_FLAGS, ROWS_USED, STATUS, USED, YES, cell_text)
from ..results.observations import model_value_headers
from ..results.store import group_label
from ..results.types import FitResults
from ..terms import HINGES, INDICATOR, INTERCEPT, Term, source_columns
from . import fastrows

MAX_POINTS = 5_000      # points per group plotted; beyond that, flagged rows plus an even sample

BLOCK_HEADERS = ("group", "x", "y", FITTED, RESIDUAL, "grid x", "grid fitted value", AVERAGE_LOW,
                 AVERAGE_HIGH, "normal quantile", "standardized residual", "y = x (fit)",
                 "zero line x", "zero line y", "y = x (quantiles)")
(C_GROUP, C_X, C_Y, C_FIT, C_RES, C_GX, C_GF, C_LO, C_HI, C_Q, C_SR, C_REF_FIT, C_ZX, C_ZY,
 C_REF_Q) = range(len(BLOCK_HEADERS))
OVERVIEW_HEADERS = ("group", "rank (lowest R² first)", "R² (no flags)", "R² (flagged)")


@dataclass
class GroupBlock:
    """One charted group: its label, facts for titles, and its columns on the data sheet."""

    label: str
    flagged: bool
    reasons: str
    r2: float
    n: int
    equation: str
    one_input: bool
    x_name: str = ""
    cols: dict[int, list] = field(default_factory=dict)
    n_points: int = 0
    n_grid: int = 0
    n_quantiles: int = 0
    sampled_from: int = 0     # > 0 when points were thinned to MAX_POINTS
    start: int = 0            # first data-sheet row of the block

    @property
    def height(self) -> int:
        return max(self.n_points, self.n_grid, self.n_quantiles, 2)


@dataclass
class ChartPlan:
    fitted_groups: int
    blocks: list[GroupBlock]
    overview: list[tuple[str, float, bool]]   # (label, R², flagged), lowest R² first
    overview_start: int = 0
    x_name: str = ""


def _indices(df: pd.DataFrame, k: int) -> dict[tuple, np.ndarray]:
    """Rows of each group in a result table whose first `k` columns are the group keys."""
    if df is None or len(df) == 0:
        return {}
    if not k:
        return {(): np.arange(len(df))}
    idx = df.groupby([df.iloc[:, j] for j in range(k)], sort=False, dropna=False).indices
    return {(key if isinstance(key, tuple) else (key,)): v for key, v in idx.items()}


def _floats(df: pd.DataFrame, col: str, rows: np.ndarray) -> np.ndarray:
    if col not in df.columns:
        return np.full(len(rows), np.nan)
    return df[col].to_numpy(dtype=np.float64, na_value=np.nan)[rows] if len(rows) else np.empty(0)


def _cells(a: np.ndarray) -> list:
    """Numbers as cells; non-finite → None (an empty cell, not plotted)."""
    out = a.tolist()
    bad = ~np.isfinite(a)
    if bad.any():
        for i in np.flatnonzero(bad).tolist():
            out[i] = None
    return out


def fmt_number(v: float) -> str:
    """A coefficient for an equation: four significant digits (whole numbers from 1000 up), true minus."""
    a = abs(v)
    if a == 0:
        text = "0"
    elif 1e-4 <= a < 1e7:
        text = f"{v:.0f}" if a >= 1000 else f"{v:.4g}"
    else:
        text = f"{v:.3e}"
    return text.replace("-", "−")


def equation(y: str, terms: list[tuple[str, float]], constant: str | None = INTERCEPT) -> str:
    """'y = 3.2 + 0.41·x' from (term label, coefficient) pairs; the intercept's label is `constant`."""
    parts: list[str] = []
    for term, est in terms:
        if not math.isfinite(est):
            continue
        body = fmt_number(abs(est)) if term == constant else f"{fmt_number(abs(est))}·{term}"
        if not parts:
            parts.append(("−" if est < 0 else "") + body)
        else:
            parts.append(("− " if est < 0 else "+ ") + body)
    return f"{y} = {' '.join(parts) if parts else '0'}"


def model_column(res: FitResults, column: str) -> str:
    """The observations column holding the numbers the model used for the user's `column`: its day
    counts for a date column (the curves' x is in days too), else the column itself."""
    headers = model_value_headers([*res.group_columns, *res.number_columns], res.info.date_columns)
    return headers.get(column, column)


def plan_charts(res: FitResults) -> ChartPlan:
    """Choose the charted groups (flagged first, capped) and gather their chart data."""
    k = len(res.group_columns)
    g = res.groups
    fitted_mask = g[STATUS].astype(str).eq("fitted").to_numpy() if STATUS in g.columns else np.ones(len(g), bool)
    flags = pd.to_numeric(g.get(FLAGS, pd.Series(0, index=g.index)), errors="coerce").fillna(0).to_numpy()
    r2_all = pd.to_numeric(g.get(R2, pd.Series(np.nan, index=g.index)), errors="coerce").to_numpy()
    key_rows = list(zip(*(g.iloc[:, j].tolist() for j in range(k)))) if k else [()] * len(g)
    fitted = [i for i in range(len(g)) if fitted_mask[i]]

    overview = sorted(((group_label(key_rows[i]), float(r2_all[i]), bool(flags[i] > 0))
                       for i in fitted if math.isfinite(r2_all[i])), key=lambda t: t[1])
    chosen = sorted(fitted, key=lambda i: (not flags[i] > 0, i))[: max(res.job.max_charts, 0)]
    plan = ChartPlan(fitted_groups=len(fitted), blocks=[], overview=overview)
    if not chosen:
        return plan

    srcs = source_columns(res.terms)
    one_source = len(srcs) == 1 and not any(t.kind == INDICATOR for t in res.terms)   # a category: no x axis
    plan.x_name = srcs[0] if one_source else ""
    constant = res.term_labels[0] if res.job.intercept else None
    obs, cur, qq, coef = res.observations, res.curves, res.quantiles, res.coefficients
    obs_at, cur_at, qq_at, coef_at = _indices(obs, k), _indices(cur, k), _indices(qq, k), _indices(coef, k)
    y_col = model_column(res, res.y)
    x_col = model_column(res, plan.x_name) if one_source else ""
    if one_source and plan.x_name in res.info.date_columns:
        plan.x_name = x_col             # the axis counts days from the group's start: say so in its title
    used_all = obs[USED].astype(str).eq(YES).to_numpy() if USED in obs.columns else np.ones(len(obs), bool)
    flagged_rows = (obs[ROW_FLAGS].fillna("").astype(str).str.len().gt(0).to_numpy()
                    if ROW_FLAGS in obs.columns else np.zeros(len(obs), bool))
    reasons = g[REASONS].fillna("").astype(str).tolist() if REASONS in g.columns else [""] * len(g)
    ns = pd.to_numeric(g.get(ROWS_USED, pd.Series(0, index=g.index)), errors="coerce").fillna(0).astype(int).tolist()

    for i in chosen:
        key = key_rows[i]
        rows = obs_at.get(key, np.empty(0, dtype=np.intp))
        rows = rows[used_all[rows]] if len(rows) else rows
        fit = _floats(obs, FITTED, rows)
        rows = rows[np.isfinite(fit)]
        sampled_from = 0
        if len(rows) > MAX_POINTS:
            sampled_from = len(rows)
            keep = flagged_rows[rows]
            rest = np.flatnonzero(~keep)
            room = max(MAX_POINTS - int(keep.sum()), 0)
            if room and len(rest):
                keep[rest[np.linspace(0, len(rest) - 1, min(room, len(rest))).astype(int)]] = True
            rows = rows[keep]
        y, fit, res_ = _floats(obs, y_col, rows), _floats(obs, FITTED, rows), _floats(obs, RESIDUAL, rows)
        crow = cur_at.get(key, np.empty(0, dtype=np.intp))
        one_input = one_source and len(crow) > 0
        qrow = qq_at.get(key, np.empty(0, dtype=np.intp))
        qv, sr = _floats(qq, "normal quantile", qrow), _floats(qq, "standardized residual", qrow)
        krow = coef_at.get(key, np.empty(0, dtype=np.intp))
        eq_terms = list(zip(coef[INPUT].astype(str).to_numpy()[krow].tolist(), _floats(coef, COEFFICIENT, krow)))
        if res.change_points is not None:
            eq_terms = hinge_words(res.terms, res.change_points[i], eq_terms)

        b = GroupBlock(label=group_label(key), flagged=bool(flags[i] > 0), reasons=reasons[i],
                       r2=float(r2_all[i]), n=ns[i], equation=equation(res.y, eq_terms, constant), one_input=one_input, x_name=plan.x_name,
                       n_points=len(rows), n_grid=len(crow), n_quantiles=len(qrow), sampled_from=sampled_from)
        c = b.cols
        c[C_X] = _cells(_floats(obs, x_col, rows)) if one_input else []
        c[C_Y], c[C_FIT], c[C_RES] = _cells(y), _cells(fit), _cells(res_)
        if one_input:
            for col, name in ((C_GX, "x"), (C_GF, FITTED), (C_LO, AVERAGE_LOW), (C_HI, AVERAGE_HIGH)):
                c[col] = _cells(_floats(cur, name, crow))
        c[C_Q], c[C_SR] = _cells(qv), _cells(sr)
        c[C_REF_FIT] = _span(np.concatenate([y, fit]))
        c[C_ZX], c[C_ZY] = _span(fit), [0.0, 0.0]
        c[C_REF_Q] = _span(np.concatenate([qv, sr]))
        plan.blocks.append(b)
    return plan


def _span(a: np.ndarray) -> list:
    a = a[np.isfinite(a)]
    return [float(a.min()), float(a.max())] if a.size else [None, None]


def layout(plan: ChartPlan) -> None:
    """Assign data-sheet rows: note, overview block, group blocks (each after its header row)."""
    plan.overview_start = 3                       # row 2 holds the overview header
    row = plan.overview_start + len(plan.overview) + 1
    row += 1                                      # group-block header row
    for b in plan.blocks:
        b.start = row
        row += b.height


def write_data_sheet(ws: Any, plan: ChartPlan, styles: Any, y_name: str, bulk: Any = None) -> None:
    """Fill the `chart data` sheet row by row, following `layout`; `bulk` (WriteContext.add_bulk) lets
    many cells or long group labels take the fast path (the same cells)."""
    ws.set_column(0, 0, 24)
    ws.set_column(1, len(BLOCK_HEADERS) - 1, 22)
    ws.write_string(0, 0, "Data behind the charts on the 'charts' and 'overview' sheets. The charts read these "
                          "cells: restyle freely, but do not sort, insert or delete rows.", styles.note)
    ws.write_row(2, 0, list(OVERVIEW_HEADERS), styles.header)
    r = plan.overview_start
    for rank, (label, r2, flagged) in enumerate(plan.overview, start=1):
        ws.write_row(r, 0, [label, rank, None if flagged else r2, r2 if flagged else None])
        r += 1
    headers = list(BLOCK_HEADERS)
    headers[C_X] = cell_text(f"x: {plan.x_name}") if plan.x_name else "x"
    headers[C_Y] = cell_text(f"y: {y_name}")
    ws.write_row(r + 1, 0, headers, styles.header)
    rows = sum(b.height for b in plan.blocks)
    chars = sum(len(b.label) * b.height for b in plan.blocks)
    if bulk is not None and plan.blocks and fastrows.use_fast(rows, len(BLOCK_HEADERS), chars):
        bulk(ws, plan.blocks[0].start, _block_columns(plan, rows))
        return
    for b in plan.blocks:
        cols = [[b.label] * b.height] + [b.cols.get(j, []) for j in range(1, len(BLOCK_HEADERS))]
        for k in range(b.height):
            ws.write_row(b.start + k, 0, [col[k] if k < len(col) else None for col in cols])


def _block_columns(plan: ChartPlan, rows: int) -> list[tuple[int, Any, Any]]:
    """The group blocks as column arrays for the bulk path (blocks are contiguous; NaN = no cell)."""
    labels = np.empty(rows, dtype=object)
    values = np.full((len(BLOCK_HEADERS), rows), np.nan)
    at = 0
    for b in plan.blocks:
        labels[at:at + b.height] = b.label
        for j in range(1, len(BLOCK_HEADERS)):
            col = b.cols.get(j, [])
            values[j, at:at + len(col)] = [np.nan if v is None else v for v in col]
        at += b.height
    return [(0, labels, None)] + [(j, values[j], None) for j in range(1, len(BLOCK_HEADERS))]


def hinge_words(terms: tuple[Term, ...], tau: np.ndarray, eq_terms: list[tuple[str, float]]
                ) -> list[tuple[str, float]]:
    """Equation terms with each change-point term written out with its group's τ: 'max(0, 15.3 − T)'.

    `tau` holds the group's change points of the 'below' and the 'above' term.
    """
    kinds = {t.label: t for t in terms if t.kind in HINGES}
    out = []
    for label, est in eq_terms:
        t = kinds.get(label)
        if t is not None and math.isfinite(tau[HINGES.index(t.kind)]):
            at = fmt_number(float(tau[HINGES.index(t.kind)]))
            label = f"max(0, {at} − {t.column})" if t.kind == "below" else f"max(0, {t.column} − {at})"
        out.append((label, est))
    return out
