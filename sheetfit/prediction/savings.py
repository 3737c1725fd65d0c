"""Savings over a reporting period: each group's baseline applied to rows of measured use.

Per row: the adjusted baseline ŷ = x·β, the actual use a and the avoided use ŷ − a. Per group,
over the m rows that have both: the totals, the avoided total's exact std error for the fitted
baseline, its interval, the fractional savings and, beside them, an approximate fractional
savings uncertainty. Rows that cannot be used keep a reason and are counted, never dropped
silently. The per-group sheet is written by report.savings.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..errors import ColumnNotFoundError, not_found_message
from ..job import check_setting
from ..read.cells import cell_number
from ..results.headers import EXTRAPOLATION, PREDICTION_REASON, shown_names
from ..results.store import RESULT_COLUMNS, ModelStore, store_from_results
from ..results.store_read import read_store

if TYPE_CHECKING:
    from ..results.types import FitResults

# per-row columns (added to the predictions table)
ADJUSTED_BASELINE = "adjusted baseline"
ACTUAL_USE = "actual use"
AVOIDED_USE = "avoided use"
LEFT_OUT_BECAUSE = "left out of the totals because"
ROW_COLUMNS = (ADJUSTED_BASELINE, ACTUAL_USE, AVOIDED_USE, LEFT_OUT_BECAUSE)

# per-group columns (after the group keys)
ROWS_IN_TOTALS = "reporting rows in totals"
ROWS_LEFT_OUT = "reporting rows left out"
ROWS_OUTSIDE = "rows outside the baseline range"
BASELINE_TOTAL = "adjusted baseline total"
ACTUAL_TOTAL = "actual use total"
AVOIDED_TOTAL = "avoided energy use"
AVOIDED_STD_ERROR = "std error of avoided use"
AVOIDED_LOW, AVOIDED_HIGH = "avoided use, low", "avoided use, high"
FRACTIONAL_SAVINGS = "fractional savings %"
VERDICT = "compared with the baseline"
APPROX_FSU = "fractional savings uncertainty % (approximate)"
APPROX_FSU_NOTE = "about the approximate uncertainty"
GROUP_COLUMNS = (ROWS_IN_TOTALS, ROWS_LEFT_OUT, ROWS_OUTSIDE, BASELINE_TOTAL, ACTUAL_TOTAL, AVOIDED_TOTAL,
                 AVOIDED_STD_ERROR, AVOIDED_LOW, AVOIDED_HIGH, FRACTIONAL_SAVINGS, VERDICT, APPROX_FSU,
                 APPROX_FSU_NOTE)

# verdicts, in plain words
SAVING = "less use than the baseline: saving"
MORE_USE = "more use than the baseline"
WITHIN_NOISE = "within the noise of the baseline"
NO_ROWS = "no reporting row could be used"
NO_VARIANCE = "cannot say: the baseline has no residual variance"
VERDICTS = (SAVING, WITHIN_NOISE, MORE_USE)

FSU_SOURCE = "ASHRAE Guideline 14, Annex B"
FSU_FACTOR = 1.26                      # the guideline's constant in the approximate formula
NOT_STORED = ("not in this results workbook: it was written by an older sheetfit, whose model store lacks the "
              "baseline's mean use and residual lag-1 autocorrelation; fit the baseline again to get it")


@dataclass(frozen=True)
class Savings:
    """The reporting period's savings: one row per new row, one row per group with reporting rows."""

    rows: pd.DataFrame                # ROW_COLUMNS, in the order of the new rows
    groups: pd.DataFrame              # the group key columns, then GROUP_COLUMNS
    level: float                      # confidence level of the intervals
    actual_column: str                # the new rows' column of measured use
    unknown_group_rows: int           # rows whose group has no fitted baseline (not in any group's count)

    def verdict_counts(self) -> dict[str, int]:
        """Groups per verdict (every verdict present, zero when none)."""
        found = self.groups[VERDICT].value_counts() if len(self.groups) else pd.Series(dtype=int)
        return {v: int(found.get(v, 0)) for v in (*VERDICTS, NO_ROWS, NO_VARIANCE)}

    @property
    def rows_in_totals(self) -> int:
        return int(self.rows[LEFT_OUT_BECAUSE].eq("").sum())

    @property
    def rows_outside(self) -> int:
        """Rows in the totals that lie outside their baseline's observed input range."""
        return int(self.groups[ROWS_OUTSIDE].sum()) if len(self.groups) else 0


def reporting_savings(store: ModelStore, group_pos: np.ndarray, design: np.ndarray, actual_raw: list,
                      level: float | None = None, *, outside: np.ndarray | None = None,
                      actual_column: str = ACTUAL_USE, row_weights: np.ndarray | None = None) -> Savings:
    """Avoided use per row and per group, with the exact std error of each group's avoided total.

    `group_pos` (n,) is each row's group in the store (−1 unknown), `design` (n, p) its raw design
    row (NaN where not computable), `actual_raw` the measured use as cells of any reader type and
    `outside` (n,) whether a row lies outside its baseline's observed input range (None: not known;
    the count stays empty). Coefficient slots a group does not use (NaN coefficient) count as 0.
    Var(A) = s²·(m + dᵀ(X'X)⁻¹d), d = Σ x_r over the m rows used: the m reporting deviations are
    independent with the baseline's residual variance, and the baseline's own error enters through
    d; exact for the fitted model, taking any change points as known. Intervals use t with the
    baseline's residual df at `level` (None: the store's level). A weighted baseline gives each row
    its own weight relative to its group's, `row_weights` (n,): m becomes Σ 1/w0 over the rows used.
    """
    level = store.level if level is None else float(check_setting("level", level))
    group_pos = np.asarray(group_pos, dtype=np.int64)
    n_rows = len(group_pos)
    yhat, why_not = _adjusted_baseline(store, group_pos, np.asarray(design, dtype=np.float64))
    actual = np.full(n_rows, np.nan)
    for r, v in enumerate(actual_raw):
        value, problem = _actual_number(v, actual_column)
        if problem:
            why_not[r].append(problem)
        else:
            actual[r] = value
    if row_weights is not None:
        for r in np.flatnonzero(~(np.asarray(row_weights) > 0)):
            why_not[r].append(f"no weight for this row (the baseline is weighted by {store.weights})")
    used = np.array([not w for w in why_not], dtype=bool)
    avoided = np.where(used, yhat - actual, np.nan)
    rows = pd.DataFrame({ADJUSTED_BASELINE: yhat, ACTUAL_USE: actual, AVOIDED_USE: avoided,
                         LEFT_OUT_BECAUSE: ["; ".join(w) for w in why_not]})
    groups = _group_table(store, group_pos, np.asarray(design, dtype=np.float64), rows, used, outside, level,
                          row_weights)
    return Savings(rows, groups, level, actual_column, int((group_pos < 0).sum()))


def _adjusted_baseline(store: ModelStore, group_pos: np.ndarray,
                       design: np.ndarray) -> tuple[np.ndarray, list[list[str]]]:
    """ŷ per row (NaN where not computable) and, per row, why it has none."""
    why_not: list[list[str]] = [[] for _ in range(len(group_pos))]
    yhat = np.full(len(group_pos), np.nan)
    known = np.flatnonzero(group_pos >= 0)
    g = group_pos[known]
    active = np.isfinite(store.beta[g])
    x = np.where(active, design[known], 0.0)
    with np.errstate(all="ignore"):
        values = np.einsum("np,np->n", x, np.where(active, store.beta[g], 0.0))
    ok = np.isfinite(x).all(axis=1) & np.isfinite(values)
    yhat[known[ok]] = values[ok]
    for r in np.flatnonzero(~np.isfinite(yhat)):
        why_not[r].append(f"no adjusted baseline for this row (see {PREDICTION_REASON})")
    return yhat, why_not


def _actual_number(v: Any, column: str) -> tuple[float, str]:
    """The measured use as a number, or the reason it is not one (NaN and pandas' NA read as empty)."""
    if v is pd.NA or v is pd.NaT or (isinstance(v, float) and math.isnan(v)):
        v = None
    value, problem, is_date = cell_number(v)
    if problem is not None:
        return math.nan, f'actual use ("{column}"): {problem}'
    if is_date:
        return math.nan, f'actual use ("{column}"): a date or time, not a number'
    return value, ""


def _group_table(store: ModelStore, group_pos: np.ndarray, design: np.ndarray, rows: pd.DataFrame,
                 used: np.ndarray, outside: np.ndarray | None, level: float,
                 row_weights: np.ndarray | None = None) -> pd.DataFrame:
    """One row per group that has reporting rows, in the order the groups first appear."""
    from scipy import stats

    known = group_pos[group_pos >= 0]
    gs = pd.unique(known).astype(np.int64)                # groups in order of first appearance
    slot = np.full(len(store), -1, dtype=np.int64)
    slot[gs] = np.arange(len(gs))
    at = slot[np.where(group_pos >= 0, group_pos, 0)]
    G = len(gs)
    sums = {c: np.bincount(at[used], weights=rows[c].to_numpy()[used], minlength=G)
            for c in (ADJUSTED_BASELINE, ACTUAL_USE, AVOIDED_USE)}
    m = np.bincount(at[used], minlength=G)
    left = np.bincount(at[group_pos >= 0], minlength=G) - m
    active = np.isfinite(store.beta[gs])
    d = np.zeros((G, store.beta.shape[1]))
    for j in range(d.shape[1]):
        d[:, j] = np.bincount(at[used], weights=design[used, j], minlength=G)
    d = np.where(active, d, 0.0)
    inv = np.nan_to_num(store.xtx_inv[gs], nan=0.0)
    s2, df = store.sigma2[gs], store.df[gs]
    with np.errstate(all="ignore"):
        spread = m if row_weights is None else np.bincount(at[used], weights=1.0 / row_weights[used], minlength=G)
        var = s2 * (spread + np.einsum("gp,gpq,gq->g", d, inv, d))
        se = np.where((m > 0) & (df > 0), np.sqrt(np.maximum(var, 0.0)), np.nan)
        t_q = stats.t.ppf(0.5 + level / 2.0, np.where(df > 0, df, np.nan))
        frac = np.where(sums[ADJUSTED_BASELINE] != 0, sums[AVOIDED_USE] / sums[ADJUSTED_BASELINE], np.nan)
    avoided = np.where(m > 0, sums[AVOIDED_USE], np.nan)
    low, high = avoided - t_q * se, avoided + t_q * se
    fsu, notes = approximate_fsu(store, gs, m, frac, t_q)
    table = {ROWS_IN_TOTALS: m, ROWS_LEFT_OUT: left,
             ROWS_OUTSIDE: pd.array(np.bincount(at[used & outside], minlength=G) if outside is not None
                                    else [None] * G, dtype="Int64"),
             BASELINE_TOTAL: np.where(m > 0, sums[ADJUSTED_BASELINE], np.nan),
             ACTUAL_TOTAL: np.where(m > 0, sums[ACTUAL_USE], np.nan), AVOIDED_TOTAL: avoided,
             AVOIDED_STD_ERROR: se, AVOIDED_LOW: low, AVOIDED_HIGH: high, FRACTIONAL_SAVINGS: 100.0 * frac,
             VERDICT: [verdict(k, lo, hi) for k, lo, hi in zip(m, low, high)],
             APPROX_FSU: fsu, APPROX_FSU_NOTE: notes}
    keys = np.array([store.keys[g] for g in gs], dtype=object).reshape(G, len(store.group_columns))
    shown = shown_names(store.group_columns, GROUP_COLUMNS)
    front = pd.DataFrame({name: keys[:, j] for j, name in enumerate(shown)})
    return pd.concat([front, pd.DataFrame(table)], axis=1)


def verdict(m: int, low: float, high: float) -> str:
    """Plain words for the avoided total's interval: saving, more use, or within the noise."""
    if m == 0:
        return NO_ROWS
    if not (math.isfinite(low) and math.isfinite(high)):
        return NO_VARIANCE
    if low > 0:
        return SAVING
    if high < 0:
        return MORE_USE
    return WITHIN_NOISE


def approximate_fsu(store: ModelStore, gs: np.ndarray, m: np.ndarray, frac: np.ndarray,
                    t_q: np.ndarray) -> tuple[np.ndarray, list[str]]:
    """Approximate fractional savings uncertainty in % per group, with a note saying how it was had.

    Source: ASHRAE Guideline 14, Annex B (the formula as written here is from memory of its
    published form; check it against the edition in force before relying on it):
        FSU = t · 1.26 · CV · √((n/n′) · (1 + 2/n′) · (1/m)) / |F|
    CV = residual std error / mean baseline use (a fraction), n the baseline rows, m the reporting
    rows used, F = avoided total / adjusted baseline total, t as for the exact interval (the
    baseline's residual df at the level), n′ = n·(1 − ρ)/(1 + ρ) with ρ the lag-1
    autocorrelation of the baseline residuals. ρ ≤ 0 is taken as 0 (n′ = n: negatively
    correlated residuals earn no extra information); n′ < 1 (ρ near 1) leaves it empty, since the
    approximation then has no meaning. F enters as |F| so the value is a size, whatever the sign.
    Left empty, with the note saying why, when the results workbook does not hold the baseline's
    mean or lag-1 autocorrelation (fitted by an older sheetfit), or when any part is undefined.
    """
    means = getattr(store, "response_mean", None)
    lags = getattr(store, "residual_lag1", None)
    if means is None or lags is None:                     # a store read from an older results workbook
        means = lags = np.full(len(store), np.nan)
    out = np.full(len(gs), np.nan)
    notes = []
    for i, g in enumerate(gs):
        value, note = _fsu_one(int(store.n[g]), float(store.sigma2[g]), float(means[g]), float(lags[g]),
                               int(m[i]), float(frac[i]), float(t_q[i]))
        out[i] = value
        notes.append(note)
    return out, notes


def _fsu_one(n: int, s2: float, mean: float, rho: float, m: int, frac: float, t_q: float) -> tuple[float, str]:
    """One group's approximate FSU in % and its note (see approximate_fsu)."""
    if math.isnan(mean):
        return math.nan, NOT_STORED
    if m == 0:
        return math.nan, "no reporting rows in the totals"
    if not (math.isfinite(s2) and math.isfinite(t_q)):
        return math.nan, "the baseline has no residual variance"
    if math.isnan(rho):
        return math.nan, "the lag-1 autocorrelation of the baseline residuals is undefined for this group"
    if mean <= 0:
        return math.nan, "needs a positive mean baseline use (CV(RMSE) is relative to it)"
    if not (math.isfinite(frac) and frac != 0):
        return math.nan, "no fractional savings to relate it to"
    r = max(rho, 0.0)
    n_eff = n * (1.0 - r) / (1.0 + r)
    if n_eff < 1:
        return math.nan, (f"residuals too strongly autocorrelated (lag-1 {rho:.3f}, effective rows n′ "
                          f"{n_eff:.2f} below 1): the approximation does not apply")
    cv = math.sqrt(s2) / mean
    fsu = t_q * FSU_FACTOR * cv * math.sqrt((n / n_eff) * (1.0 + 2.0 / n_eff) / m) / abs(frac)
    taken = f"lag-1 autocorrelation {rho:.3f}" + (" ≤ 0, taken as 0" if rho <= 0 else "")
    return 100.0 * fsu, f"approximate ({FSU_SOURCE}); {taken}; effective baseline rows n′ = {n_eff:.1f} of {n}"


def extrapolated(preds: pd.DataFrame) -> np.ndarray:
    """Rows the predictions table marks as outside their group's observed input range."""
    return preds[EXTRAPOLATION].astype(str).str.startswith("yes").to_numpy()


def check_actual_column(headers: list[str], actual: str, store: ModelStore, where: str) -> None:
    """The actual-use column is a header of the new rows and not one of the model's own columns."""
    if actual in (*store.group_columns, *store.sources):
        kind = "a group column" if actual in store.group_columns else "an input of the model"
        raise ColumnNotFoundError(f'--actual "{actual}" is {kind}; name the column of measured use')
    if actual not in headers:
        raise ColumnNotFoundError(not_found_message("column", actual, headers).replace(
            'column "', 'actual-use column "', 1).replace(" not found;", f" not found in {where};", 1))


def savings_for_cells(store: ModelStore, raw: dict[str, list], n_rows: int, actual_raw: list,
                      preds: pd.DataFrame, actual_column: str) -> Savings:
    """Savings of rows given as raw cells, beside their predictions (`predict_cells` of the same rows).

    The store's level sets the intervals (`compute.at_level` first to change it).
    """
    from .compute import design_for_rows, input_values, new_row_weights

    group_pos, design, _ = design_for_rows(store, raw, n_rows)
    weights = None
    if store.weights:
        measured = np.array([_actual_number(v, actual_column)[0] for v in actual_raw], dtype=np.float64)
        weights = new_row_weights(store, raw, group_pos, input_values(store, raw, n_rows), measured)[0]
    return reporting_savings(store, group_pos, design, actual_raw, None, outside=extrapolated(preds),
                             actual_column=actual_column, row_weights=weights)


def frame_savings(results_or_path: FitResults | Path | str | ModelStore, new_rows: pd.DataFrame, actual: str,
                  level: float | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The API's savings: (per row: `predict`'s columns then ROW_COLUMNS; per group: keys then GROUP_COLUMNS).

    `new_rows` holds the reporting period: group keys, the model's inputs and the `actual` column
    of measured use. `level` sets the intervals (default: the fit's level).
    """
    from .compute import at_level, predict

    if isinstance(results_or_path, ModelStore):
        store = results_or_path
    elif isinstance(results_or_path, (str, Path)):
        store = read_store(results_or_path)
    else:
        store = store_from_results(results_or_path)
    store = at_level(store, level)
    if not isinstance(new_rows, pd.DataFrame):
        raise TypeError("new_rows must be a pandas DataFrame")
    given = [str(c) for c in new_rows.columns]
    check_actual_column(given, actual, store, "the new rows")
    preds = predict(store, new_rows)
    raw = {c: new_rows.iloc[:, given.index(c)].tolist() for c in (*store.group_columns, *store.sources)
           if c in given}
    found = savings_for_cells(store, raw, len(new_rows), new_rows.iloc[:, given.index(actual)].tolist(), preds,
                              actual)
    front = [str(c) for c in preds.columns[:len(raw)]]          # the user's columns `predict` repeats
    preds.columns = [*shown_names(front, [*RESULT_COLUMNS, *ROW_COLUMNS]), *preds.columns[len(raw):]]
    return pd.concat([preds, found.rows.set_axis(new_rows.index)], axis=1), found.groups
