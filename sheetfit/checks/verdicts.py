"""Thresholds → verdicts and plain-words reasons; p-values adjusted across groups, per check."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..job import Thresholds
from .result import CheckResult


def adjust_pvalues(p: np.ndarray, method: str) -> np.ndarray:
    """Benjamini–Hochberg ('bh') or Holm ('holm') adjusted p-values; NaN entries are left out."""
    p = np.asarray(p, dtype=np.float64)
    out = np.full(p.shape, np.nan)
    ok = np.isfinite(p)
    m = int(ok.sum())
    if m == 0:
        return out
    v = p[ok]
    if method == "none":
        out[ok] = v
        return out
    order = np.argsort(v, kind="mergesort")
    ranked = v[order]
    if method == "bh":
        adj = ranked * m / np.arange(1, m + 1)
        adj = np.minimum.accumulate(adj[::-1])[::-1]
    elif method == "holm":
        adj = ranked * (m - np.arange(m))
        adj = np.maximum.accumulate(adj)
    else:
        raise ValueError(method)
    res = np.empty(m)
    res[order] = np.minimum(adj, 1.0)
    out[ok] = res
    return out


def _fmt(v: float) -> str:
    if not np.isfinite(v):
        return "n/a"
    if v != 0 and (abs(v) < 0.001 or abs(v) >= 1e5):
        return f"{v:.2e}"
    return f"{v:.3g}"


def _p_words(p: float, method: str) -> str:
    label = "p" if method == "none" else "adjusted p"
    if p < 0.001:
        return f"{label} < 0.001" if p >= 1e-300 else f"{label} ≈ 0"
    return f"{label} = {p:.3f}"


@dataclass(frozen=True)
class Verdicts:
    """What the flag stage decided for every group."""

    table: pd.DataFrame                   # group code (_code), check, statistic, p, adjusted p, threshold, verdict, note
    flags: np.ndarray                     # (G,) number of failed checks
    reasons: np.ndarray                   # (G,) object: the failures in plain words, '; '-joined
    failed: Mapping[str, np.ndarray]      # check key → (G,) bool: the check failed for the group

    def any_failed(self, keys: Sequence[str]) -> np.ndarray:
        """(G,) bool: any of the checks with these keys failed for the group."""
        out = np.zeros(len(self.flags), dtype=bool)
        for key in keys:
            if key in self.failed:
                out |= self.failed[key]
        return out


def verdicts(results: Sequence[CheckResult], fitted: np.ndarray, thr: Thresholds) -> Verdicts:
    """Each check's verdict per group, p-values adjusted across groups, reasons in plain words."""
    G = len(fitted)
    failed: dict[str, np.ndarray] = {}
    reasons: dict[int, list[str]] = {}     # failing groups only: G empty lists would cost a GC pass
    frames = []
    idx = np.flatnonzero(fitted)
    for res in results:
        stat = res.statistic
        if res.pvalue is not None:
            raw = np.where(fitted, res.pvalue, np.nan)
            adj = adjust_pvalues(raw, thr.adjust)
            threshold = np.full(G, thr.alpha)
            with np.errstate(invalid="ignore"):
                fail = adj < thr.alpha if res.rule == "p_small" else adj >= thr.alpha
            known = np.isfinite(adj)
        else:
            raw = adj = np.full(G, np.nan)
            threshold = np.broadcast_to(res.threshold, (G,)).astype(np.float64)
            with np.errstate(invalid="ignore"):
                fail = stat > threshold if res.rule == "above" else stat < threshold
            known = np.isfinite(stat) & np.isfinite(threshold)
        verdict = np.array(["n/a", "pass", "fail"], dtype=object)[known * (1 + fail.astype(np.intp))]
        failed[res.key] = fitted & (verdict == "fail")
        note = res.note.copy()
        unexplained = fitted & (verdict == "n/a") & (note == "")
        note[unexplained] = "cannot be computed for this group"
        for g in np.flatnonzero(fitted & (verdict == "fail")):
            reasons.setdefault(g, []).append(res.failure.format(
                stat=_fmt(stat[g]), p=_p_words(adj[g], thr.adjust), thr=_fmt(threshold[g]),
                extra=(res.extra[g] if res.extra is not None else "")))
        frames.append(pd.DataFrame({
            "_code": idx, "check": res.name, "statistic": stat[idx], "p-value": raw[idx],
            "adjusted p-value": adj[idx], "threshold": threshold[idx],
            "verdict": verdict[idx], "note": note[idx].astype(str),
        }))
    table = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
    if len(table):
        order = np.argsort(table["_code"].to_numpy(), kind="stable")
        table = table.iloc[order].reset_index(drop=True)
    counts = np.zeros(G, dtype=np.int64)
    text = np.full(G, "", dtype=object)
    for g, words in reasons.items():
        counts[g] = len(words)
        text[g] = "; ".join(words)
    return Verdicts(table=table, flags=counts, reasons=text, failed=failed)
