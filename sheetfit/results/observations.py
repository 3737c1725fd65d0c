"""The observations table: every input row with its source, use, fit and row flags.

A date/time column of the user's shows the dates as read, and beside it the days since the group's
earliest date that the model used (`NAME (days from group start)`).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from ..model.engine import EngineFit
from ..read.tidy import REASON, SOURCE_FILE, SOURCE_ROW, SOURCE_SHEET, Observations
from .headers import (COOKS, DAYS_MARK, FITTED, FLAG_SEPARATOR, HIGH_LEVERAGE_FLAG, INFLUENTIAL_FLAG, LEVERAGE,
    LEVERAGE_ONE_FLAG, MOVES_FIT_FLAG, NO, OUTLYING_FLAG, RESIDUAL, ROW_FLAGS, STUDENTIZED, USED, WEIGHT_USED, YES,
    shown_names)

# our columns on `observations`, around the user's group keys (first) and number columns (after the source)
OBSERVATION_HEAD = (SOURCE_SHEET, SOURCE_ROW)
OBSERVATION_TAIL = (USED, REASON, ROW_FLAGS, FITTED, RESIDUAL, STUDENTIZED, LEVERAGE, COOKS)

# row highlight key (checks.influence.row_highlights) → its word in `row flags`, the words that shade first
ROW_FLAG_WORDS: tuple[tuple[str, str], ...] = (
    ("leverage one", LEVERAGE_ONE_FLAG), ("outlying", OUTLYING_FLAG), ("moves the fit", MOVES_FIT_FLAG),
    ("high leverage", HIGH_LEVERAGE_FLAG), ("influential", INFLUENTIAL_FLAG))


def observation_headers(user: Sequence[str]) -> list[str]:
    """Headers of the user's columns (group keys, then number columns) on `observations`."""
    return shown_names(user, (*OBSERVATION_HEAD, *OBSERVATION_TAIL))


def day_count_headers(user: Sequence[str], dates: Sequence[str]) -> dict[str, str]:
    """Date column → the header of its day counts on `observations`: `NAME (days from group start)`,
    numbered (`… 2`) should a column of the user's (`user`) already have that name."""
    taken = {str(u) for u in user} | set(OBSERVATION_HEAD) | set(OBSERVATION_TAIL)
    out: dict[str, str] = {}
    for name in dates:
        k, head = 1, f"{name} ({DAYS_MARK})"
        while head in taken:
            k += 1
            head = f"{name} ({DAYS_MARK} {k})"
        taken.add(head)
        out[name] = head
    return out


def model_value_headers(user: Sequence[str], dates: Sequence[str]) -> dict[str, str]:
    """User column → the `observations` header of the numbers the model used for it: a date column's day
    counts, else the column's own header. `user`: group keys then number columns, as `observation_headers`."""
    days = day_count_headers(user, dates)
    return {str(u): days.get(str(u), shown) for u, shown in zip(user, observation_headers(user))}


def row_flag_words(highlights: Mapping[str, np.ndarray], pos: np.ndarray, n_rows: int) -> np.ndarray:
    """Per input row, the words of its row highlights ('' for none), in ROW_FLAG_WORDS order."""
    bits = np.zeros(n_rows, dtype=np.int64)
    for i, (key, _) in enumerate(ROW_FLAG_WORDS):
        bits[pos] |= highlights[key].astype(np.int64) << i
    words = [w for _, w in ROW_FLAG_WORDS]
    table = np.array([FLAG_SEPARATOR.join(w for i, w in enumerate(words) if code >> i & 1)
                      for code in range(1 << len(words))], dtype=object)
    return table[bits]


def observations_table(obs: Observations, reason: np.ndarray, pos: np.ndarray, codes_all: np.ndarray,
                       fit: EngineFit, highlights: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """One row per input row: where it came from, whether it was used (and why not), its fit and flags."""
    data = obs.data
    N = len(data)
    fitted = np.full(N, np.nan)
    resid = np.full(N, np.nan)
    stud = np.full(N, np.nan)
    lev = np.full(N, np.nan)
    cooks = np.full(N, np.nan)
    fitted[pos], resid[pos], stud[pos], lev[pos], cooks[pos] = (
        fit.fitted, fit.resid, fit.studentized, fit.leverage, fit.cooks)
    ok_group = fit.fitted_ok[codes_all]
    used = (reason == "") & ok_group
    group_reason = np.array(["group not fitted: " + str(r) for r in fit.not_fitted_reason], dtype=object)
    why = np.where((reason == "") & ~ok_group, group_reason[codes_all], reason)
    keys = list(obs.group_columns)
    head = [c for c in (SOURCE_FILE, SOURCE_SHEET, SOURCE_ROW) if c in data.columns]
    value_cols = [c for c in (*obs.numeric_columns, *obs.category_columns) if c not in (*head, *keys)]
    out = data[keys + head + value_cols].copy()
    shown = observation_headers(keys + value_cols)       # the user's columns never take our names
    out.columns = shown[:len(keys)] + head + shown[len(keys):]
    _show_dates(out, obs, dict(zip(keys + value_cols, shown)), keys + value_cols)
    out[USED] = np.array([NO, YES], dtype=object)[used.astype(np.intp)]   # object: 6× faster into pandas
    out[REASON] = why
    out[ROW_FLAGS] = row_flag_words(highlights, pos, N)
    out[FITTED] = fitted
    out[RESIDUAL] = resid
    out[STUDENTIZED] = stud
    out[LEVERAGE] = lev
    out[COOKS] = cooks
    if fit.weights is not None:
        weight = np.full(N, np.nan)
        weight[pos] = fit.weights
        out[WEIGHT_USED] = weight
    return out


def _show_dates(out: pd.DataFrame, obs: Observations, header: Mapping[str, str], user: Sequence[str]) -> None:
    """In place: each date column of `out` shows the user's dates, its day counts in a column beside it."""
    dated = [c for c in obs.info.date_columns if c in header and c in obs.dates.columns]
    days_header = day_count_headers(user, dated)
    for c in dated:
        at = out.columns.get_loc(header[c])
        out.insert(at + 1, days_header[c], out[header[c]].to_numpy(dtype=np.float64))
        out[header[c]] = obs.dates[c].to_numpy()
