"""The observations table: every input row with its source, use, fit and row flags."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from ..model.engine import EngineFit
from ..read.tidy import SOURCE_ROW, SOURCE_SHEET, Observations


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
    cols = [SOURCE_SHEET, SOURCE_ROW, *obs.group_columns]
    value_cols = [c for c in obs.numeric_columns if c not in cols]
    out = data[list(obs.group_columns) + [SOURCE_SHEET, SOURCE_ROW] + value_cols].copy()
    out["used"] = np.array(["no", "yes"], dtype=object)[used.astype(np.intp)]   # object: 6× faster into pandas
    out["reason"] = why
    out["fitted"] = fitted
    out["residual"] = resid
    out["studentized residual"] = stud
    out["leverage"] = lev
    out["Cook's distance"] = cooks
    out["row flags"] = row_flags
    return out
