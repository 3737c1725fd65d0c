"""Groups that use different subsets of the coefficient slots, fitted in one call.

A model such as a change-point model gives each group its own set of active coefficients and,
possibly, parameters estimated outside least squares (the change points). Groups sharing one
pattern of active slots are fitted together by `fit_groups` with the sub-list of terms; the
parts are merged into one EngineFit over all groups and all p slots: NaN coefficients and std
errors on the slots a group does not use, 0 in (X'X)⁻¹ on those rows and columns. Every part's
batches are kept, each in its own width, with `slots` naming its columns among the p.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from ..terms import Term
from .engine import Batch, EngineFit, fit_groups, group_bounds
from .row_measures import scaled_weights

NO_COEFFICIENT = "no coefficient is active for this group, so there is nothing to estimate"


def fit_patterns(y: np.ndarray, cols: Mapping[str, np.ndarray], codes: np.ndarray, n_groups: int,
                 terms: Sequence[Term], intercept: bool, active: np.ndarray | None = None,
                 extra_params: np.ndarray | None = None, weights: np.ndarray | None = None) -> EngineFit:
    """Fit every group on its own active slots (intercept first when present, then the terms).

    `active` (G, p) bool, None for all; `extra_params` (G,) int parameters estimated outside least
    squares (change points), default 0: they reduce each group's residual degrees of freedom.
    Rows must be sorted by group code, as for fit_groups.
    """
    p = len(terms) + (1 if intercept else 0)
    act = np.ones((n_groups, p), dtype=bool) if active is None else np.asarray(active, dtype=bool)
    extra = (np.zeros(n_groups, dtype=np.int64) if extra_params is None
             else np.asarray(extra_params, dtype=np.int64))
    if act.shape != (n_groups, p) or extra.shape != (n_groups,):
        raise ValueError(f"active must be ({n_groups}, {p}) and extra_params ({n_groups},); "
                         f"got {act.shape} and {extra.shape}")
    if (extra < 0).any():
        raise ValueError("extra_params must not be negative")
    patterns, which = np.unique(act, axis=0, return_inverse=True)
    which = np.asarray(which).reshape(-1)
    if len(patterns) == 1 and patterns[0].all():
        return fit_groups(y, cols, codes, n_groups, terms, intercept, extra_params=extra, weights=weights)
    codes = np.asarray(codes)
    merged = _Merged.empty(n_groups, p, len(codes), act, extra, group_bounds(codes, n_groups)[1])
    for k, pattern in enumerate(patterns):
        ids = np.flatnonzero(which == k)
        if not pattern.any():
            merged.reason[ids] = NO_COEFFICIENT
            continue
        part, rows = _fit_pattern(y, cols, codes, ids, terms, intercept, pattern, extra[ids], weights)
        merged.add(part, ids, rows, np.flatnonzero(pattern))
    fit = merged.engine_fit(intercept)
    return fit if weights is None else merged.weighted(fit, np.asarray(weights, dtype=np.float64), codes)


def _fit_pattern(y: np.ndarray, cols: Mapping[str, np.ndarray], codes: np.ndarray, ids: np.ndarray,
                 terms: Sequence[Term], intercept: bool, pattern: np.ndarray, extra: np.ndarray,
                 weights: np.ndarray | None = None) -> tuple[EngineFit, np.ndarray]:
    """fit_groups on the groups `ids` alone with the pattern's terms; also the engine rows it used."""
    off = 1 if intercept else 0
    sub_terms = [t for j, t in enumerate(terms) if pattern[off + j]]
    sub_intercept = bool(intercept and pattern[0])
    code_in_part = np.full(int(max(codes.max(initial=-1), ids.max())) + 1, -1)
    code_in_part[ids] = np.arange(len(ids))
    rows = np.flatnonzero(code_in_part[codes] >= 0)
    needed = {t.column for t in sub_terms}
    sub_cols = {c: np.asarray(v)[rows] for c, v in cols.items() if c in needed}
    part = fit_groups(np.asarray(y)[rows], sub_cols, code_in_part[codes[rows]], len(ids), sub_terms,
                      sub_intercept, extra_params=extra, weights=None if weights is None else np.asarray(weights)[rows])
    return part, rows


@dataclass
class _Merged:
    """The arrays of the merged EngineFit, filled part by part (as for unfitted groups until then)."""

    arrays: dict[str, np.ndarray]
    reason: np.ndarray
    active: np.ndarray
    extra: np.ndarray
    batches: list[Batch]

    @classmethod
    def empty(cls, G: int, p: int, N: int, active: np.ndarray, extra: np.ndarray,
              counts: np.ndarray) -> _Merged:
        """Every group unfitted: NaN values, y_scale 1, df from the counts."""
        n_coef = active.sum(axis=1)
        arrays = {name: np.full(shape, np.nan) for name, shape in (
            ("beta", (G, p)), ("se", (G, p)), ("xtx_inv", (G, p, p)), ("rss_scaled", G), ("tss_scaled", G),
            ("ymean", G), ("fitted", N), ("resid", N), ("leverage", N), ("studentized", N), ("internal", N),
            ("cooks", N))}
        arrays.update(fitted_ok=np.zeros(G, dtype=bool), n=counts, y_scale=np.ones(G),
                      df_resid=(counts - n_coef - extra).astype(np.float64))
        return cls(arrays=arrays, reason=np.full(G, "", dtype=object), active=active, extra=extra, batches=[])

    def add(self, part: EngineFit, ids: np.ndarray, rows: np.ndarray, slots: np.ndarray) -> None:
        """Place a pattern's fit: its groups are `ids`, its engine rows `rows`, its p_b slots `slots`."""
        a = self.arrays
        self.reason[ids] = part.not_fitted_reason
        for name in ("fitted_ok", "n", "y_scale", "rss_scaled", "tss_scaled", "ymean", "df_resid"):
            a[name][ids] = getattr(part, name)
        a["beta"][np.ix_(ids, slots)] = part.beta
        a["se"][np.ix_(ids, slots)] = part.se
        inv = np.zeros((len(ids),) + a["xtx_inv"].shape[1:])
        inv[:, slots[:, None], slots[None, :]] = part.xtx_inv
        inv[~part.fitted_ok] = np.nan
        a["xtx_inv"][ids] = inv
        for name in ("fitted", "resid", "leverage", "studentized", "internal", "cooks"):
            a[name][rows] = getattr(part, name)
        for b in part.batches:
            self.batches.append(dataclasses.replace(
                b, groups=ids[b.groups], rows=np.where(b.rows >= 0, rows[b.rows], -1), slots=slots[b.slots]))

    def weighted(self, fit: EngineFit, weights: np.ndarray, codes: np.ndarray) -> EngineFit:
        """The merged fit with the weights each part fitted with (scaled per group, as fit_groups scales them)."""
        scaled, mean, _ = scaled_weights(weights, codes, fit.n_groups)
        half_log = 0.5 * np.bincount(codes, weights=np.log(scaled), minlength=fit.n_groups)
        return dataclasses.replace(fit, weights=scaled, weight_mean=mean, half_log_weights=half_log)

    def engine_fit(self, intercept: bool) -> EngineFit:
        """The merged EngineFit."""
        G, p = self.active.shape
        return EngineFit(n_groups=G, p=p, intercept=intercept, not_fitted_reason=self.reason,
                         batches=tuple(self.batches), active=self.active, n_coef=self.active.sum(axis=1),
                         extra_params=self.extra, **self.arrays)
