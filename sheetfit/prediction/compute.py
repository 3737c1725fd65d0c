"""Predictions from stored models: the Python API `predict` and the library side of `sheetfit predict`.

Rows that cannot be predicted keep a reason instead of results.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..errors import (
    NoUsableDataError,
    OutputError,
    SheetNotFoundError,
    not_found_message,
)
from ..results.store import (
    MAX_UNPACKED,
    RESULT_COLUMNS,
    ModelStore,
    group_label,
    read_store,
    store_from_results,
)

if TYPE_CHECKING:
    from ..results.types import FitResults


def predict(results_or_path: "FitResults | Path | str | ModelStore", new_rows: pd.DataFrame) -> pd.DataFrame:
    """Predicted value, confidence interval of the mean and prediction interval for each new row.

    `new_rows` holds the group key columns and the model's source input columns. Intervals use the
    fit's confidence level and a t quantile with the group's residual degrees of freedom. Rows that
    cannot be predicted (unknown group, missing or non-numeric input, log/sqrt of a bad value)
    keep empty results and a reason. Columns: the group keys and inputs given, then RESULT_COLUMNS.
    """
    store = _store(results_or_path)
    if not isinstance(new_rows, pd.DataFrame):
        raise TypeError("new_rows must be a pandas DataFrame")
    given = [str(c) for c in new_rows.columns]
    raw = {c: new_rows.iloc[:, given.index(c)].tolist() for c in (*store.group_columns, *store.sources)
           if c in given}
    out = predict_cells(store, raw, len(new_rows))
    front = pd.DataFrame({c: new_rows.iloc[:, given.index(c)].to_numpy() for c in raw}, index=new_rows.index)
    out.index = new_rows.index
    return pd.concat([front, out], axis=1)


def _store(obj: Any) -> ModelStore:
    if isinstance(obj, ModelStore):
        return obj
    if isinstance(obj, (str, Path)):
        return read_store(obj)
    return store_from_results(obj)


def predict_cells(store: ModelStore, raw: dict[str, list], n_rows: int) -> pd.DataFrame:
    """Predictions from raw cell values per column (any reader type); the RESULT_COLUMNS only."""
    from scipy import stats

    from ..read.cells import cell_number, label

    reasons: list[list[str]] = [[] for _ in range(n_rows)]
    lookup: dict[tuple[str, ...], int] = {k: i for i, k in enumerate(store.keys)}
    loose: dict[tuple[str, ...], int] = {}
    for i, k in enumerate(store.keys):
        loose.setdefault(tuple(label(v) for v in k), i)
    gidx = np.full(n_rows, -1, dtype=np.int64)
    missing_keys = [c for c in store.group_columns if c not in raw]
    for c in missing_keys:
        for r in reasons:
            r.append(f'no group column "{c}" in the new rows')
    if not missing_keys:
        for r in range(n_rows):
            vals = [raw[c][r] for c in store.group_columns]
            exact = tuple(v if isinstance(v, str) else label(v) for v in vals)
            hit = lookup.get(exact, loose.get(tuple(label(v) for v in vals), -1))
            gidx[r] = hit
            if hit < 0:
                shown = group_label(tuple(label(v) for v in vals))
                near = _close_label(shown, store.labels)
                hint = f'; closest fitted group: "{near}"' if near else ""
                reasons[r].append(f'no fitted model for group "{shown}" (not in the results, or not fitted '
                                  f'there: see the groups sheet){hint}')
    m = len(store.sources)
    X = np.full((n_rows, m), np.nan)
    for j, col in enumerate(store.sources):
        if col not in raw:
            for r in reasons:
                r.append(f'no input column "{col}" in the new rows')
            continue
        for r, v in enumerate(raw[col]):
            if isinstance(v, (dt.date, dt.time)):
                reasons[r].append(f"{col}: a date or time, not a number"
                                  + (" (give days since the group's earliest date, as in the fit)"
                                     if col in store.date_columns else ""))
                continue
            value, problem, _ = cell_number(v)
            if problem is not None:
                reasons[r].append(f"{col}: {problem}")
            else:
                X[r, j] = value
    for t in store.terms:
        bad = t.domain_problem(X[:, store.sources.index(t.column)])
        for r in np.flatnonzero(bad):
            reasons[r].append(t.domain_reason())
    ok = np.array([not r for r in reasons], dtype=bool) & (gidx >= 0)
    res = {c: np.full(n_rows, np.nan) for c in RESULT_COLUMNS[:6]}
    extrap = np.full(n_rows, "", dtype=object)
    rows = np.flatnonzero(ok)
    if len(rows):
        g = gidx[rows]
        cols = {c: X[rows, j] for j, c in enumerate(store.sources)}
        parts = [np.ones(len(rows))] if store.intercept else []
        parts += [t.values(cols[t.column]) for t in store.terms]
        D = np.column_stack(parts)
        pred = np.einsum("np,np->n", D, store.beta[g])
        quad = np.einsum("np,npq,nq->n", D, store.xtx_inv[g], D)
        s2 = store.sigma2[g]
        se = np.sqrt(np.maximum(s2 * quad, 0.0))
        se_obs = np.sqrt(np.maximum(s2 * (1.0 + quad), 0.0))
        t_q = stats.t.ppf(0.5 + store.level / 2.0, store.df[g])
        res["predicted"][rows] = pred
        res["std error of mean"][rows] = se
        res["mean CI low"][rows], res["mean CI high"][rows] = pred - t_q * se, pred + t_q * se
        res["prediction low"][rows], res["prediction high"][rows] = pred - t_q * se_obs, pred + t_q * se_obs
        for k, r in enumerate(rows):
            extrap[r] = _extrapolation(store, g[k], X[r])
    out = pd.DataFrame(res)
    out["extrapolation"] = extrap
    out["reason"] = ["; ".join(r) for r in reasons]
    return out


def _close_label(name: str, labels: Sequence[str]) -> str | None:
    """A fitted group whose label differs from `name` only slightly (a typo or letter case), else None."""
    import difflib

    lowered = {lab.lower(): lab for lab in labels}
    if name.lower() in lowered:
        return lowered[name.lower()]
    hit = difflib.get_close_matches(name.lower(), list(lowered), n=1, cutoff=0.8)
    return lowered[hit[0]] if hit else None


def _as_number(v: Any) -> Any:
    from ..read.cells import cell_number

    if isinstance(v, (dt.date, dt.time)) or v is None:
        return v
    value, problem, _ = cell_number(v)
    return value if problem is None else v


def _extrapolation(store: ModelStore, g: int, x: np.ndarray) -> str:
    """'no', or 'yes: <input> above the observed range (lo to hi); …'."""
    outside = []
    for j, col in enumerate(store.sources):
        lo, hi = store.lo[g, j], store.hi[g, j]
        slack = 1e-14 * max(abs(lo), abs(hi))      # the workbook keeps 16 significant digits
        if math.isfinite(lo) and x[j] < lo - slack:
            outside.append(f"{col} below the observed range ({lo:.6g} to {hi:.6g})")
        elif math.isfinite(hi) and x[j] > hi + slack:
            outside.append(f"{col} above the observed range ({lo:.6g} to {hi:.6g})")
    return "yes: " + "; ".join(outside) if outside else "no"


# --- new rows from a workbook → predictions workbook --------------------------------------------

def read_new_rows(path: Path, sheet: str | None) -> tuple[pd.DataFrame, np.ndarray, str]:
    """Cells of one sheet under its first non-empty row (the header): (raw values, source rows, sheet)."""
    from ..read.cells import NO_RESULT, ErrorCell, header_name, is_blank
    from ..read import open_book, sniff

    fmt = sniff(path, MAX_UNPACKED)
    book = open_book(path, fmt)
    try:
        names = book.sheet_names()
        if sheet is None:
            if not names:
                raise SheetNotFoundError(f'"{path.name}" has no worksheet; give a workbook with the new rows')
            sheet = names[0]
        elif sheet not in names:
            raise SheetNotFoundError(not_found_message("sheet", sheet, names) + f' in "{path.name}"')
        grid = book.grid(sheet)
    finally:
        book.close()
    rows = grid.rows
    h = next((i for i, r in enumerate(rows) if any(not is_blank(v) for v in r)), None)
    if h is None:
        raise NoUsableDataError(f'sheet "{sheet}" of "{path.name}" is empty; put a header row and the new rows '
                                f'there')
    headers = [header_name(v) for v in rows[h]]
    keep = [j for j, name in enumerate(headers) if name]
    body, src = [], []
    for i in range(h + 1, len(rows)):
        r = rows[i]
        if all(is_blank(v) for v in r):
            continue
        body.append([_plain_cell(r[j] if j < len(r) else "", ErrorCell, NO_RESULT) for j in keep])
        src.append(grid.top + i)
    names_kept = _dedupe([headers[j] for j in keep])
    frame = pd.DataFrame(body, columns=names_kept, dtype=object) if body else pd.DataFrame(columns=names_kept)
    return frame, np.asarray(src, dtype=np.int64), sheet


def _plain_cell(v: Any, error_type: type, no_result: Any) -> Any:
    if isinstance(v, error_type):
        return v.code
    if v is no_result or (isinstance(v, str) and not v.strip()):
        return None
    return v


def _dedupe(names: list[str]) -> list[str]:
    seen: dict[str, int] = {}
    out = []
    for n in names:
        seen[n] = seen.get(n, 0) + 1
        out.append(n if seen[n] == 1 else f"{n} ({seen[n]})")
    return out


def predict_workbook(results_path: Path, new_rows_path: Path, sheet: str | None, out: Path | None,
                     overwrite: bool) -> Path:
    """Apply the models stored in a results workbook to a sheet of new rows; write a predictions workbook.

    Default output: `<new rows stem>-predicted.xlsx` beside the new rows. Returns where it went.
    """
    from ..read import check_path
    from ..report.safe import check_output_path

    results_path, new_rows_path = Path(results_path), Path(new_rows_path)
    check_path(new_rows_path)
    store = read_store(results_path)
    target = Path(out) if out is not None else new_rows_path.with_name(f"{new_rows_path.stem}-predicted.xlsx")
    target = check_output_path(new_rows_path, target, overwrite)
    if target.resolve() == results_path.resolve():
        raise OutputError(f'output "{target}" is the results workbook; choose another --out')
    frame, src_rows, sheet_name = read_new_rows(new_rows_path, sheet)
    raw = {c: frame[c].tolist() for c in (*store.group_columns, *store.sources) if c in frame.columns}
    preds = predict_cells(store, raw, len(frame))
    for c in store.sources:                # inputs read as numbers are written as numbers
        if c in frame.columns:
            frame[c] = [_as_number(v) for v in frame[c].tolist()]
    _write_predictions(target, overwrite, store, frame, src_rows, preds,
                       (("results workbook", results_path.name), ("new rows", new_rows_path.name),
                        ("sheet", sheet_name)))
    return target


def _write_predictions(target: Path, overwrite: bool, store: ModelStore, frame: pd.DataFrame,
                       src_rows: np.ndarray, preds: pd.DataFrame, about: tuple[tuple[str, str], ...]) -> None:
    """The predictions workbook: the new rows as given, their predictions, and an about sheet."""
    import xlsxwriter

    from ..report.book import WORKBOOK_OPTIONS
    from ..report.columns import Column, column_letter
    from ..report.safe import atomic_output
    from ..report.styles import Styles

    table = pd.concat([pd.DataFrame({"source row": src_rows}), frame.reset_index(drop=True),
                       preds.reset_index(drop=True)], axis=1)
    n = len(table)
    with atomic_output(target, overwrite) as tmp:
        wb = xlsxwriter.Workbook(str(tmp), {**WORKBOOK_OPTIONS, "constant_memory": False})
        st = Styles(wb)
        ws = wb.add_worksheet("predictions")
        columns = [Column(h, table.iloc[:, j], n) for j, h in enumerate(table.columns)]
        for j, col in enumerate(columns):
            wide = {"extrapolation": 50, "reason": 60}.get(col.header, min(col.width, 40))
            ws.set_column(j, j, wide, st.number(col.num_format) if col.num_format else None)
        ws.write_row(0, 0, [c.header for c in columns], st.header)
        for r, row in enumerate(zip(*(c.block(0, n) for c in columns)), start=1):
            ws.write_row(r, 0, row)
        ws.freeze_panes(1, 0)
        ws.autofilter(0, 0, max(n, 1), len(columns) - 1)
        heads = [c.header for c in columns]
        if n:
            for head, test, style in (("reason", 'LEN({c})>0', "left_out"),
                                      ("extrapolation", 'LEFT({c},3)="yes"', "check_failed")):
                cell = f"${column_letter(heads.index(head))}2"
                ws.conditional_format(1, 0, n, len(columns) - 1, {
                    "type": "formula", "criteria": "=" + test.format(c=cell), "format": st.highlight[style],
                    "stop_if_true": True})
        info = wb.add_worksheet("about")
        info.set_column(0, 0, 28)
        info.set_column(1, 1, 100, st.wrap)
        done = int(preds["predicted"].notna().sum())
        lines = [*about, ("response", store.y), ("terms", ", ".join(store.term_labels)),
                 ("confidence level", f"{store.level:g}"),
                 ("rows", f"{n}: {done} predicted, {n - done} with a reason instead"),
                 ("predicted", "Σ coefficient × term value at the row's inputs"),
                 ("std error of mean", "√(residual variance × x'(X'X)⁻¹x), x the row's term values"),
                 ("mean CI low, mean CI high", "predicted ∓ t · std error of mean: where the group's mean lies"),
                 ("prediction low, prediction high", "predicted ∓ t · √(residual variance + std error of mean²): "
                  "where one new observation lies"),
                 ("t", "t quantile at the confidence level with the group's residual degrees of freedom"),
                 ("extrapolation", "yes when an input lies outside the group's observed range: "
                  "the model was not fitted there, so trust the numbers less"),
                 ("colours", "amber rows extrapolate; slate rows could not be predicted (see reason)")]
        info.write_row(0, 0, ["item", "value"], st.header)
        for r, (item, text) in enumerate(lines, start=1):
            info.write_string(r, 0, item)
            info.write_string(r, 1, str(text))
        wb.close()
