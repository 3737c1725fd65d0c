"""Reading unknowns back through a calibration line (inverse prediction).

A calibration line y = b0 + b1·x is fitted on standards of known input x; an unknown sample's
measured response y0 (the mean of m replicate measurements) is read back as x̂0 = (y0 − b0)/b1,
with the classical std error and a t interval. Rows that cannot be read back keep a reason, and
every read-back value says whether its response lies outside the calibrated range and whether it
is below the limit of quantification. Only stored numbers are used: no refit, no input data.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from ..job import check_setting
from ..read.cells import cell_number
from ..results.calibration import LIMIT_OF_QUANTIFICATION, limits
from ..results.headers import PREDICTION_REASON
from ..results.store import ModelStore
from ..terms import weights_from_label

READ_BACK = "read-back input value"
READ_BACK_STD_ERROR = "std error of read-back value"
READ_BACK_LOW, READ_BACK_HIGH = "read-back low", "read-back high"
MEASUREMENTS = "measurements averaged"
OUTSIDE_RANGE = "outside calibrated range"
BELOW_LOQ = "below limit of quantification"
INVERSE_COLUMNS = (READ_BACK, READ_BACK_STD_ERROR, READ_BACK_LOW, READ_BACK_HIGH, MEASUREMENTS, OUTSIDE_RANGE,
                   BELOW_LOQ, PREDICTION_REASON)
NEEDS_LINE = "reading back needs a straight line in one input with a constant"
UNKNOWN_GROUP = ("no fitted calibration line for this row's group (not in the results, or not fitted there: "
                 "see the groups sheet)")


def inverse_predict(store: ModelStore, group_pos: np.ndarray, response: np.ndarray, replicates: np.ndarray | None,
                    level: float | None, loq: np.ndarray | None = None, *,
                    group_reasons: Sequence[Sequence[str]] | None = None,
                    weight_values: np.ndarray | None = None) -> pd.DataFrame:
    """Each row's input value read back from its measured response, with std error and interval.

    `group_pos` (n,) is each row's group in the store (−1 unknown); `response` (n,) the measured
    responses and `replicates` (n,) how many measurements each response averages (None: one each),
    both as numbers or as cells of any reader type; `level` the interval's confidence level (None:
    the store's); `loq` (G,) each group's limit of quantification in input units (NaN or None:
    not known, the flag stays empty); `group_reasons` (n,) why each unknown group is unknown, as
    the caller's matching found it (None: one plain sentence). Columns: INVERSE_COLUMNS, one row
    per given row.

    With Sxx = Σ(x − x̄)² and the stored (X'X)⁻¹ of the design [1, x], whose inverse is
    [[Σx², −Σx], [−Σx, n]] / (n·Sxx): [(X'X)⁻¹]₁₁ = 1/Sxx and [(X'X)⁻¹]₀₁ = −x̄/Sxx, so
    Sxx = 1/[(X'X)⁻¹]₁₁ and x̄ = −[(X'X)⁻¹]₀₁/[(X'X)⁻¹]₁₁; the least-squares line passes through
    the centroid, so ȳ = b0 + b1·x̄ (taken from the same stored numbers as the slope's variance
    rather than from the stored response mean, which older stores lack). Then
        s_x0 = (s/|b1|)·√(1/m + 1/n + (y0 − ȳ)²/(b1²·Sxx)),   x̂0 ± t(df; level)·s_x0.
    In a weighted fit (weights scaled to average 1, so Σw = n) x̄ and ȳ are the weighted means the
    stored (X'WX)⁻¹ gives, Sxx = Σw(x − x̄)², and 1/m becomes 1/(m·w0), w0 the unknown's weight relative
    to the group's: taken at y0 (weights of the response), at x̂0 (weights of the input) or from
    `weight_values` (n,), the weight column's values in the new rows.
    The value, its std error and interval are left empty, with the reason, when the slope is not
    distinguishable from zero
    at `level` (|b1|/se(b1) ≤ t): the set of inputs consistent with y0 is then unbounded.
    """
    level = store.level if level is None else float(check_setting("level", level))
    group_pos = np.asarray(group_pos, dtype=np.int64).reshape(-1)
    n_rows = len(group_pos)
    if len(response) != n_rows or any(v is not None and len(v) != n_rows for v in (replicates, group_reasons)):
        raise ValueError("group_pos, response, replicates and group_reasons must have one value per row")
    if loq is not None and len(loq) != len(store):
        raise ValueError("loq must have one value per group of the store")
    if ((group_pos < -1) | (group_pos >= len(store))).any():
        raise ValueError("group_pos must be −1 or a group position in the store")
    reasons: list[list[str]] = [[] for _ in range(n_rows)]
    out = {c: np.full(n_rows, np.nan) for c in INVERSE_COLUMNS[:5]}
    flags = {OUTSIDE_RANGE: np.full(n_rows, "", dtype=object), BELOW_LOQ: np.full(n_rows, "", dtype=object)}
    problem = line_problem(store)
    if problem:
        for r in reasons:
            r.append(problem)
        return _table(out, flags, reasons)
    for r in np.flatnonzero(group_pos < 0):
        reasons[r] += list(group_reasons[r]) if group_reasons is not None and group_reasons[r] else [UNKNOWN_GROUP]
    y0 = _numbers(response, "response", reasons)
    m = np.ones(n_rows) if replicates is None else _replicates(replicates, reasons)
    rows = np.flatnonzero(np.array([not r for r in reasons], dtype=bool))
    found = _read_back(store, group_pos[rows], y0[rows], m[rows], level,
                       None if weight_values is None else np.asarray(weight_values, dtype=np.float64)[rows])
    for i, r in enumerate(rows):
        reasons[r] += found["why"][i]
    for name in INVERSE_COLUMNS[:5]:
        out[name][rows] = found[name]
    has_value = rows[np.isfinite(found[READ_BACK])]
    _flag_rows(store, group_pos, y0, out[READ_BACK], has_value, loq, flags)
    return _table(out, flags, reasons)


def line_problem(store: ModelStore) -> str:
    """'' when the stored models are straight lines in one input with a constant; else why not, in words."""
    found = []
    if any(t.kind in ("below", "above") for t in store.terms):
        return f"{NEEDS_LINE}; this is a change-point model (--change-point)"
    if not store.intercept:
        found.append("no constant")
    if len(store.terms) != 1:
        listed = ", ".join(t.label for t in store.terms)
        found.append(f"{len(store.terms)} input terms ({listed})" if store.terms else "no input term")
    elif store.terms[0].kind != "column":
        found.append(f"the term {store.terms[0].label}, not the input itself")
    return f"{NEEDS_LINE}; this model has {' and '.join(found)}" if found else ""


def quantification_limits(store: ModelStore) -> np.ndarray:
    """(G,) each group's limit of quantification 10·σ/|b1| in input units (NaN where undefined).

    The ICH Q2 approach based on the calibration line: σ the residual std error, b1 the slope.
    All NaN when the stored models are not straight lines in one input with a constant.
    """
    if line_problem(store):
        return np.full(len(store), np.nan)
    with np.errstate(all="ignore"):
        sigma = np.sqrt(store.sigma2)
    limit = limits(store.beta, sigma, np.ones(len(store), dtype=bool))[LIMIT_OF_QUANTIFICATION]
    return np.where(store.df > 0, limit, np.nan)


def _read_back(store: ModelStore, g: np.ndarray, y0: np.ndarray, m: np.ndarray, level: float,
               weight_values: np.ndarray | None = None) -> dict:
    """The read-back value, std error and interval for rows of known groups (see inverse_predict),
    with each row's reasons (`why`) where a part is missing."""
    from scipy import stats

    b0, b1 = store.beta[g, 0], store.beta[g, 1]
    inv01, inv11 = store.xtx_inv[g, 0, 1], store.xtx_inv[g, 1, 1]
    s2, df, n = store.sigma2[g], store.df[g], store.n[g].astype(np.float64)
    with np.errstate(all="ignore"):
        x0 = (y0 - b0) / b1
        x_bar = -inv01 / inv11
        y_bar = b0 + b1 * x_bar
        w0 = _unknown_weight(store, g, y0, x0, weight_values)
        se = np.sqrt(s2 * (1.0 / (m * w0) + 1.0 / n + (y0 - y_bar) ** 2 * inv11 / b1**2)) / np.abs(b1)
        t_q = stats.t.ppf(0.5 + level / 2.0, np.where(df > 0, df, np.nan))
        t_slope = np.abs(b1) / np.sqrt(s2 * inv11)
    no_spread = ~((df > 0) & np.isfinite(s2) & (s2 >= 0))
    flat = ~np.isfinite(b1) | (b1 == 0)
    huge = ~flat & ~np.isfinite(x0)
    unsure = ~flat & ~huge & ~no_spread & ~(t_slope > t_q)
    why: list[list[str]] = [[] for _ in range(len(g))]
    for i in np.flatnonzero(flat):
        why[i].append("the calibration line is flat (slope 0): no input value can be read back from a response")
    for i in np.flatnonzero(huge):
        why[i].append("the read-back value is too large to compute (not a finite number); check the response's "
                      "units")
    for i in np.flatnonzero(~flat & ~huge & no_spread):
        why[i].append("no std error or interval: the calibration line has no residual degrees of freedom "
                      "(as many coefficients as standards), so its scatter is unknown")
    for i in np.flatnonzero(unsure):
        why[i].append(f"no read-back value: the slope is not distinguishable from zero at the {_percent(level)} "
                      f"level (|t| = {t_slope[i]:.3g}, needs more than {t_q[i]:.3g}), so the inputs consistent with "
                      f"this response are unbounded")
    for i in np.flatnonzero(~flat & ~huge & ~no_spread & ~unsure & ~np.isfinite(w0)):
        why[i].append(f"no std error or interval: the weight {store.weights} of this unknown is not a positive "
                      f"number (a weight column outside the inputs must be in the new rows)")
    value = np.where(flat | huge | unsure, np.nan, x0)
    se = np.where(flat | huge | no_spread | unsure, np.nan, se)
    half = np.where(unsure | ~np.isfinite(se), np.nan, t_q * se)
    return {READ_BACK: value, READ_BACK_STD_ERROR: se, READ_BACK_LOW: value - half, READ_BACK_HIGH: value + half,
            MEASUREMENTS: m, "why": why}


def _unknown_weight(store: ModelStore, g: np.ndarray, y0: np.ndarray, x0: np.ndarray,
                   weight_values: np.ndarray | None) -> np.ndarray:
    """Each unknown's weight relative to its group's (1 in an unweighted fit; NaN where it has none)."""
    if not store.weights:
        return np.ones(len(g))
    spec = weights_from_label(store.weights)
    if spec.column == store.y:
        value = y0
    elif spec.column in store.sources:
        value = x0
    elif weight_values is not None:
        value = weight_values
    else:
        return np.full(len(g), np.nan)
    return store.relative_weights(g, value)


def _flag_rows(store: ModelStore, group_pos: np.ndarray, y0: np.ndarray, x0: np.ndarray, rows: np.ndarray,
               loq: np.ndarray | None, flags: dict[str, np.ndarray]) -> None:
    """Fill the two flag columns for the rows with a read-back value.

    The calibrated responses run between the line's values at the lowest and the highest standard
    (the observed input range), in either order for a falling line.
    """
    for r in rows:
        g = int(group_pos[r])
        b0, b1 = store.beta[g, 0], store.beta[g, 1]
        ends = (b0 + b1 * store.lo[g, 0], b0 + b1 * store.hi[g, 0])
        low, high = min(ends), max(ends)
        if math.isfinite(low) and math.isfinite(high):
            slack = 1e-14 * max(abs(low), abs(high))      # the workbook keeps 16 significant digits
            side = "below" if y0[r] < low - slack else "above" if y0[r] > high + slack else ""
            flags[OUTSIDE_RANGE][r] = (f"yes: response {side} the calibrated responses ({low:.6g} to {high:.6g})"
                                       if side else "no")
        limit = math.nan if loq is None else float(loq[g])
        if math.isfinite(limit):
            flags[BELOW_LOQ][r] = f"yes (limit {limit:.6g})" if x0[r] < limit else "no"


def _numbers(values: np.ndarray, what: str, reasons: list[list[str]]) -> np.ndarray:
    """Cells as numbers (NaN where not), each problem a reason naming `what`."""
    out = np.full(len(values), np.nan)
    for r, v in enumerate(values):
        v = _plain(v)
        if isinstance(v, (dt.date, dt.time)):
            reasons[r].append(f"{what}: a date or time, not a number")
            continue
        value, problem, _ = cell_number(v)
        if problem is not None:
            reasons[r].append(f"{what}: {problem}")
        else:
            out[r] = value
    return out


def _replicates(values: np.ndarray, reasons: list[list[str]]) -> np.ndarray:
    """The number of measurements each response averages: a whole number ≥ 1, else a reason."""
    what = "number of measurements averaged"
    m = _numbers(values, what, reasons)
    for r in np.flatnonzero(np.isfinite(m) & ((m < 1) | (m != np.floor(m)))):
        reasons[r].append(f"{what}: {m[r]:g} is not a whole number of at least 1")
    return np.where(np.isfinite(m) & (m >= 1) & (m == np.floor(m)), m, np.nan)


def _plain(v: object) -> object:
    """A numpy scalar as its Python value; NaN and pandas' missing values as an empty cell."""
    if isinstance(v, np.generic):
        v = v.item()
    if v is None or v is pd.NA or v is pd.NaT or (isinstance(v, float) and math.isnan(v)):
        return None
    return v


def _percent(level: float) -> str:
    return f"{100.0 * level:g} %"


def _table(out: dict[str, np.ndarray], flags: dict[str, np.ndarray], reasons: list[list[str]]) -> pd.DataFrame:
    """The result columns in INVERSE_COLUMNS order."""
    table = pd.DataFrame({**out, **flags, PREDICTION_REASON: ["; ".join(r) for r in reasons]})
    return table[list(INVERSE_COLUMNS)]


def read_back_cells(store: ModelStore, columns: Mapping[str, Sequence[object]], n_rows: int,
                    replicates: str | None, level: float | None = None) -> pd.DataFrame:
    """`inverse_predict` for new rows given as raw cells per column (the group keys, the response under the fit's
    response name, the replicates column when named, a weighted fit's own weight column when present), as
    `sheetfit predict --inverse` and `sheetfit.read_back` both read them. Columns: INVERSE_COLUMNS."""
    from .compute import group_positions

    gpos, why = group_positions(store, {c: list(columns[c]) for c in store.group_columns}, n_rows)
    counts = None if replicates is None else np.asarray(list(columns[replicates]), dtype=object)
    extra = [c for c in store.extra_columns if c in columns]
    weight_values = (pd.to_numeric(pd.Series(list(columns[extra[0]])), errors="coerce").to_numpy(np.float64)
                     if extra else None)
    return inverse_predict(store, gpos, np.asarray(list(columns[store.y]), dtype=object), counts, level,
                           quantification_limits(store), group_reasons=why, weight_values=weight_values)
