"""Predictions from stored models: the Python API `predict` and the arithmetic behind `sheetfit predict`.

Rows that cannot be predicted keep a reason instead of results. Reading the new rows from a
workbook is `sheetfit.prediction.new_rows`; writing the predictions workbook is
`sheetfit.report.predictions`; `sheetfit.pipeline.predict_workbook` joins them.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..job import check_setting
from ..read.cells import cell_number, key_label, label
from ..results.headers import (AVERAGE_HIGH, AVERAGE_LOW, EXTRAPOLATION, MEAN_STD_ERROR, NEW_ROW_HIGH,
    NEW_ROW_LOW, PREDICTED, PREDICTION_REASON, shown_names)
from ..results.store import (
    RESULT_COLUMNS,
    ModelStore,
    group_label,
    store_from_results,
)
from ..results.store_read import read_store
from ..terms import design_matrix, weights_from_label

if TYPE_CHECKING:
    from ..results.types import FitResults


def predict(results_or_path: "FitResults | Path | str | ModelStore", new_rows: pd.DataFrame,
            level: float | None = None) -> pd.DataFrame:
    """Predicted value, confidence interval of the mean and prediction interval for each new row.

    `new_rows` holds the group key columns and the model's source input columns. Intervals use
    `level` (default: the fit's confidence level) and a t quantile with the group's residual degrees
    of freedom. Rows that cannot be predicted (unknown group, missing or non-numeric input, log/sqrt
    of a bad value, an input so large that a term or the prediction is not a finite number) keep
    empty results and a reason. Columns: the group keys and inputs given, then RESULT_COLUMNS; a
    given column named like one of ours is shown as `NAME (input)` (see results.headers).
    """
    store = at_level(_store(results_or_path), level)
    if not isinstance(new_rows, pd.DataFrame):
        raise TypeError("new_rows must be a pandas DataFrame")
    from .new_rows import for_every_response_frame

    new_rows = for_every_response_frame(new_rows, store)
    given = [str(c) for c in new_rows.columns]
    raw = {c: new_rows.iloc[:, given.index(c)].tolist()
           for c in (*store.group_columns, *store.sources, *store.extra_columns) if c in given}
    out = predict_cells(store, raw, len(new_rows))
    front = pd.DataFrame({c: new_rows.iloc[:, given.index(c)].to_numpy() for c in raw}, index=new_rows.index)
    front.columns = shown_names(list(raw), out.columns)
    out.index = new_rows.index
    return pd.concat([front, out], axis=1)


def at_level(store: ModelStore, level: float | None) -> ModelStore:
    """The store with its intervals at confidence `level` (checked as --level is), or as fitted when None."""
    if level is None:
        return store
    return dataclasses.replace(store, level=check_setting("level", level))


def store_of(obj: Any) -> ModelStore:
    """The ModelStore of FitResults, of a results workbook's path, or the store itself."""
    return _store(obj)


def _store(obj: Any) -> ModelStore:
    """The ModelStore of FitResults, of a results workbook's path, or the store itself."""
    if isinstance(obj, ModelStore):
        return obj
    if isinstance(obj, (str, Path)):
        return read_store(obj)
    return store_from_results(obj)


def predict_cells(store: ModelStore, raw: dict[str, list], n_rows: int) -> pd.DataFrame:
    """Predictions from raw cell values per column (any reader type); the RESULT_COLUMNS only."""
    gidx, D, reasons, X = _design(store, raw, n_rows)
    ok = np.array([not r for r in reasons], dtype=bool) & (gidx >= 0)
    results, too_large = _intervals(store, gidx, D, np.flatnonzero(ok), n_rows)
    for r, why in too_large.items():
        reasons[r].append(why)
        ok[r] = False
    if store.weights:
        _weighted_new_row_intervals(store, raw, gidx, X, results, ok, reasons)
    out = pd.DataFrame(results)
    extrap = np.full(n_rows, "", dtype=object)
    for r in np.flatnonzero(ok):
        extrap[r] = _extrapolation(store, gidx[r], X[r])
    out[EXTRAPOLATION] = extrap
    out[PREDICTION_REASON] = ["; ".join(r) for r in reasons]
    return out


def design_for_rows(store: ModelStore, raw: dict[str, list], n_rows: int
                    ) -> tuple[np.ndarray, np.ndarray, list[list[str]]]:
    """Each new row's group position in the store (−1 unknown), raw design row and reasons.

    `raw` maps column → cell values as read (any reader type). A design row (p values, the
    intercept first) uses the row's group's change points; it is NaN where the row cannot be
    computed (unknown group, a missing or non-numeric input, a term outside its domain, a term
    value too large to be a finite number), and each such row has at least one reason.
    """
    return _design(store, raw, n_rows)[:3]


def input_values(store: ModelStore, raw: dict[str, list], n_rows: int) -> np.ndarray:
    """The rows' source-column values as numbers (n, m); NaN where a cell is not one (its reason is not kept)."""
    return _inputs(store, raw, n_rows, [[] for _ in range(n_rows)])


def group_positions(store: ModelStore, raw: dict[str, list], n_rows: int) -> tuple[np.ndarray, list[list[str]]]:
    """Each new row's group position in the store (−1 unknown) and, per row, why its group is not known."""
    reasons: list[list[str]] = [[] for _ in range(n_rows)]
    return _group_positions(store, raw, n_rows, reasons), reasons


def _design(store: ModelStore, raw: dict[str, list], n_rows: int
            ) -> tuple[np.ndarray, np.ndarray, list[list[str]], np.ndarray]:
    """design_for_rows, plus the rows' source-column values (NaN where not numbers)."""
    reasons: list[list[str]] = [[] for _ in range(n_rows)]
    gidx = _group_positions(store, raw, n_rows, reasons)
    X = _inputs(store, raw, n_rows, reasons)
    unseen_levels(store, gidx, X, reasons)
    for t in store.terms:
        bad = t.domain_problem(X[:, store.sources.index(t.column)])
        for r in np.flatnonzero(bad):
            reasons[r].append(t.domain_reason())
    D = np.full((n_rows, len(store.term_labels)), np.nan)
    rows = np.flatnonzero(np.array([not r for r in reasons], dtype=bool) & (gidx >= 0))
    if len(rows):
        g = gidx[rows]
        cps = {"below": store.change_points[g, 0], "above": store.change_points[g, 1]}
        with np.errstate(all="ignore"):
            found = design_matrix(store.terms, store.intercept, {c: X[rows, j] for j, c in enumerate(store.sources)},
                                  cps)
        bad = ~np.isfinite(found).all(axis=1)
        labels = store.term_labels
        for i in np.flatnonzero(bad):
            term = labels[int(np.flatnonzero(~np.isfinite(found[i]))[0])]
            reasons[int(rows[i])].append(f"{term} at these inputs is too large to compute (not a finite number); "
                                         f"check the inputs' units")
        D[rows[~bad]] = found[~bad]
    return gidx, D, reasons, X


def _group_positions(store: ModelStore, raw: dict[str, list], n_rows: int, reasons: list[list[str]]) -> np.ndarray:
    """Each row's group position in the store (−1 when unknown); unknown groups get a reason."""
    lookup: dict[tuple[str, ...], int] = {k: i for i, k in enumerate(store.keys)}
    loose: dict[tuple[str, ...], int] = {}
    for i, k in enumerate(store.keys):
        loose.setdefault(tuple(key_label(v) for v in k), i)
    gidx = np.full(n_rows, -1, dtype=np.int64)
    missing_keys = [c for c in store.group_columns if c not in raw]
    for c in missing_keys:
        for r in reasons:
            r.append(f'no group column "{c}" in the new rows')
    if missing_keys:
        return gidx
    for r in range(n_rows):
        vals = [raw[c][r] for c in store.group_columns]
        exact = tuple(v if isinstance(v, str) else label(v) for v in vals)
        hit = lookup.get(exact, loose.get(tuple(key_label(v) for v in vals), -1))
        gidx[r] = hit
        if hit < 0:
            shown = group_label(tuple(label(v) for v in vals))
            near = _close_label(shown, store.labels)
            hint = f'; closest fitted group: "{near}"' if near else ""
            reasons[r].append(f'no fitted model for group "{shown}" (not in the results, or not fitted '
                              f'there: see the groups sheet){hint}')
    return gidx


def _inputs(store: ModelStore, raw: dict[str, list], n_rows: int, reasons: list[list[str]]) -> np.ndarray:
    """The rows' source-column values as numbers (NaN where a reason says why not)."""
    X = np.full((n_rows, len(store.sources)), np.nan)
    categories = store.category_columns
    for j, col in enumerate(store.sources):
        if col not in raw:
            for r in reasons:
                r.append(f'no input column "{col}" in the new rows')
            continue
        if col in categories:
            X[:, j] = _level_codes(store, col, raw[col], reasons)
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
    return X


def _intervals(store: ModelStore, gidx: np.ndarray, D: np.ndarray, rows: np.ndarray,
               n_rows: int) -> tuple[dict[str, np.ndarray], dict[int, str]]:
    """Predicted value, its standard error and both intervals for `rows` (NaN elsewhere).

    Also returns, per row whose results are not finite numbers (an input such as 1e308 squared
    times its coefficient), the reason; those rows keep empty results.
    """
    from scipy import stats

    res = {c: np.full(n_rows, np.nan) for c in RESULT_COLUMNS[:6]}
    if not len(rows):
        return res, {}
    g = gidx[rows]
    with np.errstate(all="ignore"):
        D = D[rows]
        pred = np.einsum("np,np->n", D, store.beta[g])
        quad = np.einsum("np,npq,nq->n", D, store.xtx_inv[g], D)
        s2 = store.sigma2[g]
        se = np.sqrt(np.maximum(s2 * quad, 0.0))
        se_obs = np.sqrt(np.maximum(s2 * (1.0 + quad), 0.0))
        t_q = stats.t.ppf(0.5 + store.level / 2.0, store.df[g])
        found = {PREDICTED: pred, MEAN_STD_ERROR: se,
                 AVERAGE_LOW: pred - t_q * se, AVERAGE_HIGH: pred + t_q * se,
                 NEW_ROW_LOW: pred - t_q * se_obs, NEW_ROW_HIGH: pred + t_q * se_obs}
    bad = ~np.isfinite(np.column_stack(list(found.values()))).all(axis=1)
    too_large = {int(r): ("the prediction or its interval at these inputs is too large to compute "
                          "(not a finite number); check the inputs' units") for r in rows[bad]}
    for name, values in found.items():
        res[name][rows[~bad]] = values[~bad]
    return res, too_large


def new_row_weights(store: ModelStore, raw: dict[str, list], gidx: np.ndarray, X: np.ndarray,
                    response: np.ndarray) -> tuple[np.ndarray, str]:
    """Each row's weight relative to its group's (w0 = weight / the group's weight mean) in a weighted
    fit, from an input, from `response` (when the weights are of the response) or from the weight
    column of the new rows; NaN where it cannot be had, with the reason shared by those rows."""
    spec = weights_from_label(store.weights)
    if spec.column == store.y:
        value = response
    elif spec.column in store.sources:
        value = X[:, store.sources.index(spec.column)]
    elif spec.column in raw:
        value = np.array([cell_number(v)[0] if cell_number(v)[1] is None else np.nan for v in raw[spec.column]],
                         dtype=np.float64)
    else:
        return np.full(len(gidx), np.nan), (f'no weight column "{spec.column}" in the new rows: the range for a '
                                            f'new row of a weighted fit needs its weight')
    return (store.relative_weights(gidx, value),
            f"weight {spec.label} is not a positive number here: no range for a new row")


def _weighted_new_row_intervals(store: ModelStore, raw: dict[str, list], gidx: np.ndarray, X: np.ndarray,
                                results: dict[str, np.ndarray], ok: np.ndarray, reasons: list[list[str]]) -> None:
    """A weighted fit's range for a new row: σ²·(1/w0 + x'(X'WX)⁻¹x), w0 the row's relative weight (weights
    of the response are taken at the predicted value). Rows without a weight keep the rest, with a reason."""
    from scipy import stats

    w0, why = new_row_weights(store, raw, gidx, X, results[PREDICTED])
    rows = np.flatnonzero(ok)
    g = gidx[rows]
    with np.errstate(all="ignore"):
        s2 = store.sigma2[g]
        quad = (results[MEAN_STD_ERROR][rows] ** 2) / s2
        se_obs = np.sqrt(np.maximum(s2 * (1.0 / w0[rows] + quad), 0.0))
        t_q = stats.t.ppf(0.5 + store.level / 2.0, store.df[g])
    pred = results[PREDICTED][rows]
    results[NEW_ROW_LOW][rows] = pred - t_q * se_obs
    results[NEW_ROW_HIGH][rows] = pred + t_q * se_obs
    for r in rows[~np.isfinite(w0[rows])]:
        reasons[r].append(why)


def _level_codes(store: ModelStore, col: str, cells: list, reasons: list[list[str]]) -> np.ndarray:
    """A category input's cells as the models' level codes (NaN, with a reason, for a level the fit never saw)."""
    codes = store.level_codes(col)
    out = np.full(len(cells), np.nan)
    known = ", ".join(sorted(codes)[:12]) + ("…" if len(codes) > 12 else "")
    for r, v in enumerate(cells):
        name = "" if v is None or (isinstance(v, float) and v != v) else key_label(v)
        if name in codes:
            out[r] = codes[name]
        else:
            reasons[r].append(f'{col}: "{name}" is not a level of the fit ({known})' if name else f"{col}: empty cell")
    return out


def unseen_levels(store: ModelStore, gidx: np.ndarray, X: np.ndarray, reasons: list[list[str]]) -> None:
    """A row at a level its group had no rows at: no coefficient says what that level does there."""
    for col in store.category_columns:
        names = {code: name for name, code in store.level_codes(col).items()}
        at = X[:, store.sources.index(col)]
        for r in np.flatnonzero((gidx >= 0) & np.isfinite(at)):
            seen = store.seen_in_group(int(gidx[r]), col)
            name = names.get(int(at[r]))
            if seen is not None and name not in seen:
                reasons[r].append(f"{col}: this group had no rows at {name}, so the fit says nothing about it here")


def _close_label(name: str, labels: Sequence[str]) -> str | None:
    """A fitted group whose label differs from `name` only slightly (a typo or letter case), else None."""
    import difflib

    lowered = {lab.lower(): lab for lab in labels}
    if name.lower() in lowered:
        return lowered[name.lower()]
    hit = difflib.get_close_matches(name.lower(), list(lowered), n=1, cutoff=0.8)
    return lowered[hit[0]] if hit else None


def _extrapolation(store: ModelStore, g: int, x: np.ndarray) -> str:
    """'no', or 'yes: <input> above the observed range (lo to hi); …'."""
    outside = []
    for j, col in enumerate(store.sources):
        if col in store.category_columns:
            continue
        lo, hi = store.lo[g, j], store.hi[g, j]
        slack = 1e-14 * max(abs(lo), abs(hi))      # the workbook keeps 16 significant digits
        if math.isfinite(lo) and x[j] < lo - slack:
            outside.append(f"{col} below the observed range ({lo:.6g} to {hi:.6g})")
        elif math.isfinite(hi) and x[j] > hi + slack:
            outside.append(f"{col} above the observed range ({lo:.6g} to {hi:.6g})")
    return "yes: " + "; ".join(outside) if outside else "no"
