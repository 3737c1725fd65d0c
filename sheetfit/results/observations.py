"""The observations table: every input row with its source, use, fit and row flags."""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from ..model.engine import EngineFit
from ..read.tidy import REASON, SOURCE_ROW, SOURCE_SHEET, Observations
from .headers import COOKS, FITTED, LEVERAGE, NO, RESIDUAL, ROW_FLAGS, STUDENTIZED, USED, YES, shown_names

# our columns on `observations`, around the user's group keys (first) and number columns (after the source)
OBSERVATION_HEAD = (SOURCE_SHEET, SOURCE_ROW)
OBSERVATION_TAIL = (USED, REASON, ROW_FLAGS, FITTED, RESIDUAL, STUDENTIZED, LEVERAGE, COOKS)


def observation_headers(user: Sequence[str]) -> list[str]:
    """Headers of the user's columns (group keys, then number columns) on `observations`."""
    return shown_names(user, (*OBSERVATION_HEAD, *OBSERVATION_TAIL))


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
    words = ("leverage 1", "high leverage", "outlying", "influential")
    bits = np.zeros(N, dtype=np.int64)
    for i, key in enumerate(("leverage one", "high leverage", "outlying", "influential")):
        bits[pos] |= highlights[key].astype(np.int64) << i
    table = np.array(["; ".join(w for i, w in enumerate(words) if code >> i & 1) for code in range(16)],
                     dtype=object)
    row_flags = table[bits]
    keys = list(obs.group_columns)
    value_cols = [c for c in obs.numeric_columns if c not in (SOURCE_SHEET, SOURCE_ROW, *keys)]
    out = data[keys + [SOURCE_SHEET, SOURCE_ROW] + value_cols].copy()
    shown = observation_headers(keys + value_cols)       # the user's columns never take our names
    out.columns = shown[:len(keys)] + [SOURCE_SHEET, SOURCE_ROW] + shown[len(keys):]
    out[USED] = np.array([NO, YES], dtype=object)[used.astype(np.intp)]   # object: 6× faster into pandas
    out[REASON] = why
    out[ROW_FLAGS] = row_flags
    out[FITTED] = fitted
    out[RESIDUAL] = resid
    out[STUDENTIZED] = stud
    out[LEVERAGE] = lev
    out[COOKS] = cooks
    return out
