"""The explorer's data: what it shows of each group (`Explorer`) and the `explorer data` sheet.

`explorer.plan_explorer` gathers the rows and the index (first row, row count, fit figures and
coefficients per group); `fill_data` writes them on the sheet the explorer's formulas read.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..results.change_points import CHANGE_POINT, SHAPE, UPPER_CHANGE_POINT
from ..results.headers import (ADJUSTED_R2, COEFFICIENT, CV_RMSE, F_P_VALUE, FITTED, FLAGS, INPUT,
    INTERVAL_HIGH, INTERVAL_LOW, P_VALUE, R2, REASONS, RESIDUAL, RESIDUAL_STD_ERROR, RMSE, ROWS_USED, STD_ERROR,
    cell_text)
from ..results.store import group_codes
from . import fastrows

METRICS = (R2, ADJUSTED_R2, F_P_VALUE, RESIDUAL_STD_ERROR, RMSE, CV_RMSE, ROWS_USED, FLAGS, REASONS)
CHANGE_POINT_METRICS = (SHAPE, CHANGE_POINT, UPPER_CHANGE_POINT)   # shown when the groups table has them
TEXT_METRICS = (REASONS, SHAPE)
COEF = (COEFFICIENT, INTERVAL_LOW, INTERVAL_HIGH, STD_ERROR, P_VALUE)
LOWEST, HIGHEST = f"lowest {FITTED}", f"highest {FITTED}"


@dataclass
class Explorer:
    """What the explorer shows: groups, their index entries, and the rows of the data sheet."""

    labels: list[str]
    index: pd.DataFrame                  # one row per group: first, rows, metrics, coefficient columns
    rows: pd.DataFrame                   # group, source row, inputs, y, fitted, residual
    sources: list[str]                   # the input (source) column names
    y: str                               # the response's name
    terms: list[str]
    block: int
    sampled: int = 0                     # groups shown as an even sample of `cap` rows
    cap: int = 0                         # rows kept per group
    left_out: int = 0                    # fitted groups left out to keep the data sheet small
    formats: dict[str, str] = field(default_factory=dict)          # column of `rows` → number format
    figure_formats: dict[str, str] = field(default_factory=dict)   # metric or coefficient column → format
    headers: dict[str, str] = field(default_factory=dict)   # input or response name → its header in `rows`
    metrics: tuple[str, ...] = METRICS   # the fit figures shown, in order (change-point runs add theirs)

    def header(self, name: str) -> str:
        """The header of input or response `name` in `rows` (`NAME (input)` when it is one of ours)."""
        return self.headers.get(name, name)


def shown_metrics(fitted: pd.DataFrame) -> tuple[str, ...]:
    """The fit figures the explorer shows: METRICS, with a change-point run's shape and change points
    (the columns the groups table has) before the reasons."""
    extra = tuple(c for c in CHANGE_POINT_METRICS if c in fitted.columns)
    return METRICS[:-1] + extra + METRICS[-1:] if extra else METRICS


def coefficient_columns(idx: pd.DataFrame, coef: pd.DataFrame, fitted: pd.DataFrame, gi: np.ndarray,
                         terms: list[str], k: int) -> None:
    """Add to the index, per term, the COEF columns of each shown group (NaN where the group has no such
    coefficient, as for a term a change-point group's shape does not use)."""
    c_code = np.full(len(fitted), -1, dtype=np.int64)
    c_code[gi] = np.arange(len(gi))
    cc = group_codes(coef, fitted, k) if len(coef) else np.empty(0, dtype=np.int64)
    rows_of = np.where(cc >= 0, c_code[np.maximum(cc, 0)], -1)
    term_at = pd.Index(terms).get_indexer(coef[INPUT].astype(str)) if len(coef) else np.empty(0, dtype=np.int64)
    ok = (rows_of >= 0) & (term_at >= 0)
    for t_i, t in enumerate(terms):
        for c in COEF:
            values = np.full(len(gi), np.nan)
            if c in coef.columns:
                sel = ok & (term_at == t_i)
                values[rows_of[sel]] = pd.to_numeric(coef[c], errors="coerce").to_numpy(np.float64)[sel]
            idx[f"{c}: {t}"] = values


def _cell(v: Any) -> Any:
    """A data-sheet cell: numbers stay numbers; missing numbers become empty text."""
    if v is None:
        return ""
    if isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, bool):
        f = float(v)
        return f if math.isfinite(f) else ""
    return cell_text(str(v))


def _bulk_values(series: pd.Series) -> np.ndarray:
    """A column as `_cell` would write it, for the bulk path: numbers as floats, the rest as text."""
    if pd.api.types.is_numeric_dtype(series.dtype) and not pd.api.types.is_bool_dtype(series.dtype):
        return series.to_numpy(dtype=np.float64, na_value=np.nan)
    return np.array([_cell(v) for v in series.tolist()], dtype=object)


def _rows(ws: Any, first: int, df: pd.DataFrame, bulk: Any) -> None:
    chars = sum(int(df[c].map(lambda v: len(v) if isinstance(v, str) else 0).sum())
                for c in df.columns if df[c].dtype == object)
    if bulk is not None and fastrows.use_fast(len(df), len(df.columns), chars):
        bulk(ws, first, [(j, _bulk_values(df[c]), None) for j, c in enumerate(df.columns)])
        return
    for r, row in enumerate(df.itertuples(index=False), start=first):
        ws.write_row(r, 0, [_cell(v) for v in row])


def fill_data(ws: Any, ex: Explorer, st: Any, bulk: Any = None) -> None:
    """Write the data sheet; `bulk` (WriteContext.add_bulk) lets large blocks take the fast path."""
    ws.set_column(0, 0, 24)
    ws.set_column(1, max(len(ex.index.columns), len(ex.rows.columns)), 14)
    ws.set_landscape()
    ws.fit_to_pages(1, 0)
    ws.write_string(0, 0, "Rows behind the 'explorer' sheet: an index of each group's first row and row count, "
                          "then every group's rows, sorted by group. Do not sort, insert or delete rows.", st.note)
    ws.write_row(2, 0, [cell_text(str(c)) for c in ex.index.columns], st.header)
    _rows(ws, 3, ex.index, bulk)
    h = data_header(ex)
    ws.write_row(h, 0, [cell_text(str(c)) for c in ex.rows.columns], st.header)
    _rows(ws, h + 1, ex.rows, bulk)


def block_headers(ex: Explorer) -> list[str]:
    """Columns of the explorer block: inputs (the first one is the charts' x), y, fitted, residual, source row
    (headers of `ex.rows`)."""
    return [*(ex.header(c) for c in ex.sources), ex.header(ex.y), FITTED, RESIDUAL, "source row"]


def data_header(ex: Explorer) -> int:
    return 3 + len(ex.index) + 1
