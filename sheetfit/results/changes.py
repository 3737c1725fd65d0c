"""What changed since an earlier run: each group's fit compared with the same group in an earlier
results workbook, from the models both workbooks store (the earlier rows are not needed).

Per group fitted in both runs, with k coefficients, b the coefficients, A = X'X (√w·X when
weighted), RSS its residual sum of squares and n its rows, the Chow test of one unchanged relation:

    F = [(b₁ − b₂)'(A₁⁻¹ + A₂⁻¹)⁻¹(b₁ − b₂) / k] / [(RSS₁ + RSS₂)/(n₁ + n₂ − 2k)],

whose numerator is exactly RSS(one fit of both runs' rows) − RSS₁ − RSS₂, so it follows from each
run's sufficient statistics n, X'X, X'y and y'y (b = A⁻¹X'y, RSS = y'y − b'X'y); the stored b, A⁻¹
and RSS = σ²·df are those statistics solved, accurately. It assumes one residual variance in both
runs. p-values are adjusted across groups like every check. Each coefficient's change b₂ − b₁ has
std error √(s²·[A₁⁻¹ + A₂⁻¹]_jj), s² the pooled residual variance, t with n₁ + n₂ − 2k df.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats

from ..checks.verdicts import adjust_pvalues
from ..errors import JobError
from ..job import Thresholds
from .store import ModelStore

# per-group table
WHAT_CHANGED = "what changed"
CHOW_F, CHOW_DF1, CHOW_DF2 = "Chow F", "df (coefficients)", "df (residual)"
CHOW_P, CHOW_P_ADJUSTED = "p-value", "adjusted p-value"
FLAGS_BEFORE, FLAGS_NOW, ROWS_BEFORE, ROWS_NOW = "flags before", "flags now", "rows before", "rows now"
NOTE = "note"
GROUP_COLUMNS = (WHAT_CHANGED, CHOW_F, CHOW_DF1, CHOW_DF2, CHOW_P, CHOW_P_ADJUSTED, FLAGS_BEFORE, FLAGS_NOW,
                 ROWS_BEFORE, ROWS_NOW, NOTE)
# per-coefficient table
COEFFICIENT, BEFORE, NOW, CHANGE = "coefficient", "before", "now", "change"
CHANGE_STD_ERROR, CHANGE_LOW, CHANGE_HIGH = "std error of change", "change low", "change high"
COEFFICIENT_COLUMNS = (COEFFICIENT, BEFORE, NOW, CHANGE, CHANGE_STD_ERROR, CHANGE_LOW, CHANGE_HIGH)
# the words of `what changed`
CHANGED, UNCHANGED = "relation changed", "no change found"
NEWLY_FLAGGED, NO_LONGER_FLAGGED = "newly flagged", "no longer flagged"
NEW_GROUP, GONE_GROUP = "new group", "gone"
KINDS = (CHANGED, NEWLY_FLAGGED, NO_LONGER_FLAGGED, NEW_GROUP, GONE_GROUP)


@dataclass(frozen=True)
class RunChanges:
    """The comparison with an earlier run: per group and per coefficient, and how many groups of each kind."""

    previous: str                 # the earlier results workbook's file name
    groups: pd.DataFrame          # keys, then GROUP_COLUMNS
    coefficients: pd.DataFrame    # keys, then COEFFICIENT_COLUMNS (groups fitted in both runs)
    counts: dict[str, int]        # KINDS → number of groups
    level: float

    def summary(self) -> str:
        """One line for the terminal: how many groups changed, got flagged, were added or are gone."""
        parts = [f"{self.counts[k]} {k}" for k in KINDS if self.counts[k]]
        return f"compared with {self.previous}: " + (", ".join(parts) if parts else "nothing changed")


def same_model(old: ModelStore, new: ModelStore, name: str) -> None:
    """JobError in one line unless the earlier run fitted the same response on the same terms and weights."""
    if old.y != new.y:
        raise JobError(f'--previous: "{name}" fitted the response "{old.y}", this run "{new.y}"; compare runs '
                       f'of the same model')
    if old.term_labels != new.term_labels:
        raise JobError(f'--previous: "{name}" used the terms {", ".join(old.term_labels)}; this run uses '
                       f'{", ".join(new.term_labels)}; compare runs of the same model')
    if old.group_columns != new.group_columns:
        raise JobError(f'--previous: "{name}" grouped by {", ".join(old.group_columns) or "nothing"}; this run '
                       f'by {", ".join(new.group_columns) or "nothing"}; use the same --group')
    if old.weights != new.weights:
        raise JobError(f'--previous: "{name}" was fitted with weights "{old.weights or "none"}", this run with '
                       f'"{new.weights or "none"}"; compare runs with the same --weights')
    if not old.has_sums and len(old):
        raise JobError(f'--previous: "{name}" was written by an earlier sheetfit whose model store keeps no '
                       f'sufficient statistics; fit the earlier rows again with this version, then compare')


def compare_runs(old: ModelStore, new: ModelStore, previous: Path | str, thr: Thresholds, level: float
                 ) -> RunChanges:
    """The per-group and per-coefficient comparison of `new` (this run) with `old` (an earlier one)."""
    name = Path(previous).name
    same_model(old, new, name)
    keys = list(dict.fromkeys([*old.keys, *new.keys]))
    at_old = {k: i for i, k in enumerate(old.keys)}
    at_new = {k: i for i, k in enumerate(new.keys)}
    both = [k for k in keys if k in at_old and k in at_new]
    io = np.array([at_old[k] for k in both], dtype=np.int64)
    inew = np.array([at_new[k] for k in both], dtype=np.int64)
    test = chow(old, new, io, inew, level)
    p_adj = adjust_pvalues(test["p"], thr.adjust)
    rows = _group_rows(old, new, keys, at_old, at_new, both, test, p_adj, thr.alpha)
    groups = pd.DataFrame(rows, columns=[*new.group_columns, *GROUP_COLUMNS])
    coefficients = _coefficient_rows(new, both, io, inew, old, test)
    counts = {k: int(groups[WHAT_CHANGED].str.contains(k, regex=False).sum()) for k in KINDS}
    counts[GONE_GROUP] = int((groups[WHAT_CHANGED] == GONE_GROUP).sum())
    return RunChanges(name, groups, coefficients, counts, level)


def chow(old: ModelStore, new: ModelStore, io: np.ndarray, inew: np.ndarray, level: float) -> dict:
    """Chow F, its df, p-value and the coefficient changes with std errors and intervals, for groups
    `io` of `old` paired with `inew` of `new`. A group is tested on the coefficients it uses (a change-point
    shape or a category level may leave some unused: 0 in the store's (X'X)⁻¹) when it uses the same ones in
    both runs; the denominator's df are the two fits' residual df. NaN where the coefficients differ or no df."""
    used_old = np.diagonal(old.xtx_inv[io], axis1=1, axis2=2) != 0
    used_new = np.diagonal(new.xtx_inv[inew], axis1=1, axis2=2) != 0
    full = (used_old == used_new).all(axis=1)
    k = used_new.sum(axis=1).astype(np.float64)
    both = used_old & used_new
    d = np.where(both, new.beta[inew] - old.beta[io], 0.0)
    V = old.xtx_inv[io] + new.xtx_inv[inew]
    eye = np.broadcast_to(np.eye(V.shape[1]), V.shape)
    V_used = np.where(both[:, :, None] & both[:, None, :], V, np.where(both[:, :, None] | both[:, None, :], 0.0, eye))
    rss = old.sigma2[io] * old.df[io] + new.sigma2[inew] * new.df[inew]
    df2 = (old.df[io] + new.df[inew]).astype(np.float64)
    with np.errstate(all="ignore"):
        q = np.full(len(io), np.nan)
        if len(io):
            q = np.einsum("gk,gk->g", d, np.linalg.solve(V_used, d[..., None])[..., 0])
        s2 = rss / df2
        F = (q / k) / s2
        ok = full & (k > 0) & (df2 > 0) & np.isfinite(F) & (s2 > 0)
        F = np.where(ok, F, np.nan)
        p = stats.f.sf(F, k, df2)
        se = np.where(both, np.sqrt(s2[:, None] * np.diagonal(V, axis1=1, axis2=2)), np.nan)
        t = stats.t.ppf(0.5 + level / 2, np.where(df2 > 0, df2, np.nan))[:, None]
        change = np.where(both, d, np.nan)
    return {"F": F, "df1": k, "df2": df2, "p": p, "change": change, "se": se,
            "low": change - t * se, "high": change + t * se, "full": full}


def _group_rows(old: ModelStore, new: ModelStore, keys: list, at_old: dict, at_new: dict, both: list,
                test: dict, p_adj: np.ndarray, alpha: float) -> list[list]:
    """One row per group of either run: keys, the words of what changed, the test and the counts."""
    where = {k: i for i, k in enumerate(both)}
    rows = []
    for key in keys:
        o, n = at_old.get(key), at_new.get(key)
        flags_before = old.flags[o] if o is not None else np.nan
        flags_now = new.flags[n] if n is not None else np.nan
        rows_before = old.n[o] if o is not None else np.nan
        rows_now = new.n[n] if n is not None else np.nan
        if o is None or n is None:
            word = NEW_GROUP if o is None else GONE_GROUP
            rows.append([*key, word, *[np.nan] * 5, flags_before, flags_now, rows_before, rows_now,
                         "fitted in this run only" if o is None else "fitted in the earlier run only"])
            continue
        i = where[key]
        words = [CHANGED] if p_adj[i] < alpha else []
        if flags_before == 0 and flags_now > 0:
            words.append(NEWLY_FLAGGED)
        if flags_before > 0 and flags_now == 0:
            words.append(NO_LONGER_FLAGGED)
        note = "" if test["full"][i] else ("not tested: the two runs use different coefficients (another change-point "
                                           "shape, or a category level seen in one run only)")
        if test["full"][i] and not np.isfinite(test["F"][i]):
            note = "not tested: too few rows in the two runs together, or no residual scatter"
        rows.append([*key, "; ".join(words) or UNCHANGED, test["F"][i], test["df1"][i], test["df2"][i],
                     test["p"][i], p_adj[i], flags_before, flags_now, rows_before, rows_now, note])
    return rows


def _coefficient_rows(new: ModelStore, both: list, io: np.ndarray, inew: np.ndarray, old: ModelStore,
                      test: dict) -> pd.DataFrame:
    """One row per group fitted in both runs and coefficient: before, now, the change and its interval."""
    labels = new.term_labels
    rows = []
    for i, key in enumerate(both):
        for j, label in enumerate(labels):
            rows.append([*key, label, old.beta[io[i], j], new.beta[inew[i], j], test["change"][i, j],
                         test["se"][i, j], test["low"][i, j], test["high"][i, j]])
    return pd.DataFrame(rows, columns=[*new.group_columns, *COEFFICIENT_COLUMNS])
