"""What every check returns: one `CheckResult` per check across all groups, and the blank arrays a check starts from."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class CheckResult:
    """One check across all groups.

    `rule` says how flags.py turns it into a verdict:
      'p_small'  fail when the (adjusted) p-value < alpha   (assumption rejected)
      'p_large'  fail when the (adjusted) p-value >= alpha  (no evidence of a relation)
      'above'    fail when statistic > threshold
      'below'    fail when statistic < threshold
    """

    key: str                 # stable identifier, e.g. 'breusch_pagan'
    name: str                # shown in the `check` column
    rule: str
    statistic: np.ndarray    # (G,)
    pvalue: np.ndarray | None
    threshold: np.ndarray    # (G,) the cut-off applied (alpha for p-value rules)
    note: np.ndarray         # (G,) object: why n/a, or what was done (order used, lag…)
    failure: str             # plain-words template, formatted with {stat}, {p}, {thr}, {extra}
    extra: np.ndarray | None = None   # (G,) object: a detail for the failure text


def empty_arrays(G: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Statistic and p-value (NaN) and note ('') for G groups, filled in batch by batch."""
    return np.full(G, np.nan), np.full(G, np.nan), np.full(G, "", dtype=object)
