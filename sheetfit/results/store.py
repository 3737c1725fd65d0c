"""The stored models of a results workbook: what `sheetfit predict` and the live prediction sheet need.

A results workbook carries every fitted model on its `model store` sheet (terms, coefficients,
(X'X)⁻¹, residual variance and degrees of freedom, observed input ranges; in a change-point run
also each group's shape, change points, response mean and residual lag-1 autocorrelation), so
predictions need neither the input data nor a refit. This module gathers the store from
FitResults, gives the sheet's cells as plain values (the report only places them, at the
positions of `store_layout.StoreLayout`) and reads the sheet back from the same positions.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from ..terms import HINGES, INDICATOR, PRODUCT, Term, coefficient_labels, source_columns, weights_from_label
from .change_points import SHAPE
from .headers import (CELL_LIMIT, COEFFICIENT, COEFFICIENT_COUNT, FLAGS, INPUT, PREDICTION_HEADERS,
    RESIDUAL_STD_ERROR, ROWS_USED, STATUS, cell_text, shown_names)
from .store_layout import (ABOVE_HEADER, BELOW_HEADER, EXTRA_HEADERS, GROUP_HEADER, LAG1_HEADER,
    MEAN_HEADER, SETTING_NAMES, SHAPE_HEADER, STORE_FORMAT, FLAGS_HEADER, LEVELS_SEEN_HEADER, WEIGHT_MEAN_HEADER, StoreLayout)

if TYPE_CHECKING:
    from .types import FitResults

RESULT_COLUMNS = PREDICTION_HEADERS
MAX_UNPACKED = 2 * 1024**3
# the store sheet's numbers of each group, before its coefficients
STORE_NUMBERS = (ROWS_USED, "residual degrees of freedom", "residual variance")
_PRESENT = "\x00present"     # a column name no table of ours or the user's carries


@dataclass(frozen=True)
class ModelStore:
    """Every fitted group's model, as the results workbook stores it (one row per group).

    In a change-point run a group uses only the slots of its shape: on the others `beta` is 0 and
    `xtx_inv` has a row and column of 0, so every product over all slots is right as it stands.
    The fields from `change_points` on may be left out (None): they then hold NaN and '' (unknown, as
    in an older results workbook; `shapes` is '' in every run without change points, `weights` '' in
    every unweighted run). `xtx`, `xty` and `yty` are each group's sufficient statistics (format 3).
    """

    y: str
    group_columns: tuple[str, ...]
    terms: tuple[Term, ...]
    intercept: bool
    level: float
    date_columns: tuple[str, ...]
    labels: tuple[str, ...]               # one display label per group (the drop-down entries)
    keys: tuple[tuple[str, ...], ...]     # group key values, as text
    n: np.ndarray                         # (G,) rows used
    df: np.ndarray                        # (G,) residual degrees of freedom
    sigma2: np.ndarray                    # (G,) residual variance RSS / df
    beta: np.ndarray                      # (G, p)
    xtx_inv: np.ndarray                   # (G, p, p)
    lo: np.ndarray                        # (G, m) observed minimum of each source column
    hi: np.ndarray                        # (G, m) observed maximum
    change_points: np.ndarray | None = None   # (G, 2) τ of the 'below' and the 'above' term; NaN where none
    response_mean: np.ndarray | None = None   # (G,) mean of the response over the rows used
    residual_lag1: np.ndarray | None = None   # (G,) lag-1 autocorrelation of the residuals in row order
    shapes: tuple[str, ...] | None = None     # (G,) shape of a change-point run's group; '' otherwise
    weights: str = ""                         # the weights of a weighted fit (COL, 1/COL, 1/COL^2); '' unweighted
    reference: tuple[str, ...] = ()           # COLUMN=LEVEL: each category input's reference level
    responses: tuple[str, ...] = ()           # several responses: their names (the first group column holds one)
    weight_mean: np.ndarray | None = None     # (G,) mean of the given weights each group's were divided by
    flags: np.ndarray | None = None           # (G,) the group's number of flags in its run
    levels_seen: tuple[str, ...] | None = None  # (G,) the category levels each group's rows show ('' none)
    xtx: np.ndarray | None = None             # (G, p, p) X'X of the rows used (√w·X when weighted)
    xty: np.ndarray | None = None             # (G, p) X'y
    yty: np.ndarray | None = None             # (G,) y'y

    def __post_init__(self) -> None:
        """Fields left out become NaN (numbers) or '' (shapes), one per group."""
        G, p = len(self.keys), len(self.term_labels)
        filled = {"change_points": np.full((G, 2), np.nan), "response_mean": np.full(G, np.nan),
                  "residual_lag1": np.full(G, np.nan), "shapes": ("",) * G, "weight_mean": np.full(G, np.nan), "flags": np.full(G, np.nan),
                  "levels_seen": ("",) * G,
                  "xtx": np.full((G, p, p), np.nan), "xty": np.full((G, p), np.nan), "yty": np.full(G, np.nan)}
        for name, empty in filled.items():
            if getattr(self, name) is None:
                object.__setattr__(self, name, empty)

    @property
    def term_labels(self) -> tuple[str, ...]:
        return coefficient_labels(self.terms, self.intercept)

    @property
    def extra_columns(self) -> tuple[str, ...]:
        """A weighted fit's weight column when it is neither the response nor an input (new rows may carry it)."""
        if not self.weights:
            return ()
        column = weights_from_label(self.weights).column
        return () if column in (self.y, *self.sources) else (column,)

    @property
    def category_columns(self) -> tuple[str, ...]:
        """The inputs the models take as categories (their values are level names)."""
        return tuple(dict.fromkeys([t.column for t in self.terms if t.kind == INDICATOR]
                                   + [t.by for t in self.terms if t.kind == PRODUCT and t.code >= 0]))

    def seen_in_group(self, g: int, column: str) -> set[str] | None:
        """The levels of a category input group g's rows show (None when the store does not say)."""
        for part in str(self.levels_seen[g]).split("; "):
            col, sep, names = part.partition("=")
            if sep and col == column:
                return set(names.split("|")) if names else set()
        return None

    def level_codes(self, column: str) -> dict[str, int]:
        """A category input's level name → its code in the models (the reference level included)."""
        codes = {t.level: t.code for t in self.terms if t.code >= 0 and column in (t.column, t.by)
                 and (t.kind == INDICATOR or t.by == column)}
        ref = dict(r.partition("=")[::2] for r in self.reference).get(column)
        if ref is not None:
            codes[ref] = next(k for k in range(len(codes) + 1) if k not in codes.values())
        return codes

    def relative_weights(self, groups: np.ndarray, values: np.ndarray) -> np.ndarray:
        """A weighted fit's weight of each row, from the values of its weight column (the response, an input
        or a column of its own: `weights_from_label(self.weights).column`), over its group's weight mean;
        NaN where that is not a positive number or the group (−1) is unknown."""
        spec = weights_from_label(self.weights)
        groups = np.asarray(groups)
        with np.errstate(all="ignore"):
            w0 = spec.values(values) / np.where(groups >= 0, self.weight_mean[groups], np.nan)
        return np.where(np.isfinite(w0) & (w0 > 0), w0, np.nan)

    @property
    def has_sums(self) -> bool:
        """Whether every group's sufficient statistics are known (a format-3 store)."""
        return bool(len(self) and np.isfinite(self.xtx).all() and np.isfinite(self.yty).all())

    @property
    def has_change_points(self) -> bool:
        """Whether the models hold change-point terms ('below' / 'above')."""
        return any(t.kind in HINGES for t in self.terms)

    @property
    def format(self) -> int:
        """The store format this store is written in: always the newest (see store_layout).

        Format 2 keeps every group's response mean and residual lag-1 autocorrelation (the savings'
        approximate uncertainty needs them) and, in change-point runs, its shape and change points.
        """
        return STORE_FORMAT

    @property
    def sources(self) -> tuple[str, ...]:
        return source_columns(self.terms)

    def __len__(self) -> int:
        return len(self.keys)


def group_label(keys: Sequence[str]) -> str:
    """The label a group shows in drop-downs: its key values joined by ' · ' ('all rows' without keys),
    cut to what a cell holds."""
    return cell_text(" · ".join(str(k) for k in keys)) if keys else "all rows"


def unique_labels(keys: Sequence[tuple[str, ...]]) -> tuple[str, ...]:
    """Group labels made unique ignoring letter case, as spreadsheet lookups compare them.

    A repeated label gets ' (2)', ' (3)'…; every label fits a cell (a long one is cut before its suffix).
    """
    taken: set[str] = set()
    next_k: dict[str, int] = {}           # per lower-cased base: the next suffix to try (keeps this linear)
    out = []
    for k in keys:
        base = group_label(k)
        label, low = base, base.lower()
        n = next_k.get(low, 1)
        while label.lower() in taken:
            n += 1
            suffix = f" ({n})"
            label = cell_text(base, CELL_LIMIT - len(suffix)) + suffix
        next_k[low] = n
        taken.add(label.lower())
        out.append(label)
    return tuple(out)


def group_codes(df: pd.DataFrame, ref: pd.DataFrame, k: int) -> np.ndarray:
    """Position of each row's group among the rows of `ref` (−1 when absent).

    The group keys are the first `k` columns of both tables (whatever their headers), compared as text.
    """
    if not k:
        return np.zeros(len(df), dtype=np.int64) if len(ref) else np.full(len(df), -1, dtype=np.int64)
    if k == 1:
        return pd.Index(ref.iloc[:, 0].astype(str)).get_indexer(df.iloc[:, 0].astype(str))
    return pd.MultiIndex.from_frame(ref.iloc[:, :k].astype(str)).get_indexer(
        pd.MultiIndex.from_frame(df.iloc[:, :k].astype(str)))


def _spread(table: pd.DataFrame, k: int, fitted: pd.DataFrame, slots: dict[str, pd.Index],
            value: str, shape: tuple[int, ...]) -> np.ndarray:
    """Long rows (group keys, slot columns…, value) → an array indexed by group then slot positions."""
    out = np.full(shape, np.nan)
    if len(table) == 0 or value not in table.columns:
        return out
    at = [group_codes(table, fitted, k)] + [idx.get_indexer(table[c].astype(str)) for c, idx in slots.items()]
    ok = np.logical_and.reduce([a >= 0 for a in at])
    out[tuple(a[ok] for a in at)] = pd.to_numeric(table[value], errors="coerce").to_numpy(np.float64)[ok]
    return out


def store_from_results(results: "FitResults") -> ModelStore:
    """Gather the stored model of every fitted group from FitResults (no statistics computed here).

    Groups without a complete set of coefficients and (X'X)⁻¹ are left out. In a change-point run
    a temperature slot without a coefficient row is one the group's shape does not use: it is
    stored as coefficient 0 with a row and column of 0 in (X'X)⁻¹.
    """
    k = len(results.group_columns)
    labels = pd.Index(results.term_labels)
    sources = pd.Index(source_columns(results.terms))
    p, m = len(labels), len(sources)
    g = results.groups
    is_fitted = g[STATUS].astype(str).eq("fitted").to_numpy() if STATUS in g.columns else np.ones(len(g), bool)
    fitted = g[is_fitted].reset_index(drop=True)
    G = len(fitted)
    beta = _spread(results.coefficients, k, fitted, {INPUT: labels}, COEFFICIENT, (G, p))
    present = _spread(results.coefficients.assign(**{_PRESENT: 1.0}), k, fitted, {INPUT: labels}, _PRESENT,
                      (G, p)) == 1.0
    inv = _spread(results.xtx_inverse, k, fitted, {"row term": labels, "column term": labels}, "value",
                  (G, p, p))
    lo = _spread(results.input_ranges, k, fitted, {"column": sources}, "min", (G, m))
    hi = _spread(results.input_ranges, k, fitted, {"column": sources}, "max", (G, m))
    both = present[:, :, None] & present[:, None, :]
    may_skip = _optional_slots(results)
    ok = (np.isfinite(np.where(present, beta, 0.0)).all(axis=1)
          & np.isfinite(np.where(both, inv, 0.0)).reshape(G, -1).all(axis=1)
          & (present | may_skip).all(axis=1))
    beta, inv = np.where(present, beta, 0.0), np.where(both, inv, 0.0)
    sub = fitted[ok]
    kept = list(zip(*(sub.iloc[:, j].astype(str) for j in range(k)))) if k else [()] * len(sub)
    n = pd.to_numeric(sub[ROWS_USED]).to_numpy(np.int64)
    rse = pd.to_numeric(sub[RESIDUAL_STD_ERROR]).to_numpy(np.float64)
    at = np.flatnonzero(is_fitted)[ok]        # the kept groups' positions among all groups

    def per_group(values: np.ndarray | None, width: tuple[int, ...] = ()) -> np.ndarray:
        return np.full((len(at), *width), np.nan) if values is None else np.asarray(values, np.float64)[at]

    cps = per_group(results.change_points, (2,))
    return ModelStore(
        y=results.y, group_columns=tuple(results.group_columns), terms=tuple(results.terms),
        intercept=bool(results.job.intercept), level=float(results.job.level),
        date_columns=tuple(c for c in results.info.date_columns if c in sources),
        labels=unique_labels(kept), keys=tuple(kept), n=n,
        df=(n - pd.to_numeric(sub[COEFFICIENT_COUNT]).to_numpy(np.int64)).astype(np.float64), sigma2=rse**2,
        beta=beta[ok], xtx_inv=inv[ok], lo=lo[ok], hi=hi[ok], change_points=cps,
        response_mean=per_group(results.response_mean), residual_lag1=per_group(results.residual_lag1),
        shapes=_shapes(sub, cps) if results.change_points is not None else None,
        weights=results.weights or "", weight_mean=per_group(results.weight_mean),
        reference=tuple(f"{c}={r}" for c, r in (results.reference_levels or {}).items()),
        responses=tuple(results.job.responses) if len(results.job.responses) > 1 else (),
        levels_seen=None if results.levels_seen is None else tuple(str(v) for v in np.asarray(results.levels_seen)[at]),
        flags=pd.to_numeric(sub[FLAGS], errors="coerce").to_numpy(np.float64) if FLAGS in sub.columns else None,
        xtx=per_group(None if results.sums is None else results.sums.xtx, (p, p)),
        xty=per_group(None if results.sums is None else results.sums.xty, (p,)),
        yty=per_group(None if results.sums is None else results.sums.yty))


def _optional_slots(results: "FitResults") -> np.ndarray:
    """(p,) the slots a group may leave unused: in a change-point run, the temperature's three slots."""
    hinged = {t.column for t in results.terms if t.kind in HINGES} if results.change_points is not None else set()
    slots = [t.column in hinged and t.kind in (*HINGES, "column") or t.code >= 0 for t in results.terms]
    return np.array(([False] if results.job.intercept else []) + slots, dtype=bool)


def _shapes(groups: pd.DataFrame, cps: np.ndarray) -> tuple[str, ...]:
    """Each kept group's shape: the groups table's own word, else read off its change points."""
    if SHAPE in groups.columns:
        words = groups[SHAPE].fillna("").astype(str).tolist()
        return tuple(w or "line" for w in words)
    below, above = np.isfinite(cps[:, 0]), np.isfinite(cps[:, 1])
    out = np.where(below & above, np.where(cps[:, 0] == cps[:, 1], "two-slopes", "heating-cooling"),
                   np.where(below, "heating", np.where(above, "cooling", "line")))
    return tuple(str(w) for w in out)


# --- the store sheet's cells as plain values --------------------------------------------------------

@dataclass(frozen=True)
class StoreColumn:
    """One column of the store's group rows: its position, what it holds, one value per group."""

    col: int
    part: str             # "group", "key", "rows used", "residual df", "residual variance", "coefficient",
    values: np.ndarray    # "(X'X)⁻¹", "min", "max"; format 2 also "shape", "change point", "mean", "lag-1"


def store_layout(store: ModelStore) -> StoreLayout:
    """The store sheet's layout for this store."""
    return StoreLayout(k=len(store.group_columns), p=len(store.term_labels), m=len(store.sources),
                       groups=len(store), extras=store.format >= 2, sums=store.format >= 3)


def store_settings(store: ModelStore) -> list[tuple[str, list]]:
    """The rows of the settings table: (setting, its values)."""
    values = ([store.format], [store.y], ["yes" if store.intercept else "no"], [store.level],
              list(store.group_columns), list(store.sources), list(store.date_columns), [len(store)],
              [store.weights] if store.weights else [], list(store.reference), list(store.responses))
    return list(zip(SETTING_NAMES, values))


def term_rows(store: ModelStore) -> list[list]:
    """The rows of the terms table: label, source column, kind, power (the intercept first)."""
    rows: list[list] = [[store.term_labels[0], "", "intercept", 0]] if store.intercept else []
    return rows + [[t.label, t.column, t.kind, t.power, t.by, t.level, t.code if t.code >= 0 else ""]
                   for t in store.terms]


def group_headers(store: ModelStore) -> list[str]:
    """The header row of the group table (a group column named like one of ours shows as `NAME (input)`)."""
    labels = store.term_labels
    ours = list(STORE_NUMBERS)
    ours += [f"coefficient: {t}" for t in labels]
    ours += [f"(X'X)⁻¹: {a} × {b}" for a in labels for b in labels]
    for c in store.sources:
        ours += [f"min: {c}", f"max: {c}"]
    if store.format >= 2:
        ours += list(EXTRA_HEADERS)
    if store.format >= 3:
        ours += [WEIGHT_MEAN_HEADER, FLAGS_HEADER, LEVELS_SEEN_HEADER, *(f"sum x·x: {a} × {b}" for a in labels for b in labels),
                 *(f"sum x·y: {a}" for a in labels), "sum y·y"]
    keys = shown_names(store.group_columns, [GROUP_HEADER, *ours])
    return [cell_text(h) for h in (GROUP_HEADER, *keys, *ours)]


def group_columns(store: ModelStore, lay: StoreLayout) -> list[StoreColumn]:
    """Every column of the group rows, left to right (non-finite numbers stay empty cells)."""
    G = len(store)
    cols = [StoreColumn(0, "group", np.array(store.labels, dtype=object))]
    keys = np.array(store.keys, dtype=object).reshape(G, lay.k)
    cols += [StoreColumn(lay.col_key(j), "key", keys[:, j]) for j in range(lay.k)]
    cols += [StoreColumn(lay.col_n(), "rows used", np.asarray(store.n, dtype=np.int64)),
             StoreColumn(lay.col_df(), "residual df", np.asarray(store.df, dtype=np.float64)),
             StoreColumn(lay.col_s2(), "residual variance", np.asarray(store.sigma2, dtype=np.float64))]
    cols += [StoreColumn(c, "coefficient", store.beta[:, j]) for j, c in enumerate(lay.coef_columns())]
    inv = store.xtx_inv.reshape(G, lay.p * lay.p)
    cols += [StoreColumn(c, "(X'X)⁻¹", inv[:, i]) for i, c in enumerate(lay.inv_columns())]
    for j in range(lay.m):
        cols += [StoreColumn(lay.col_min(j), "min", store.lo[:, j]),
                 StoreColumn(lay.col_max(j), "max", store.hi[:, j])]
    if lay.extras:
        cols += [StoreColumn(lay.col_extra(SHAPE_HEADER), "shape", np.array(store.shapes, dtype=object)),
                 StoreColumn(lay.col_extra(BELOW_HEADER), "change point", store.change_points[:, 0]),
                 StoreColumn(lay.col_extra(ABOVE_HEADER), "change point", store.change_points[:, 1]),
                 StoreColumn(lay.col_extra(MEAN_HEADER), "mean", np.asarray(store.response_mean, np.float64)),
                 StoreColumn(lay.col_extra(LAG1_HEADER), "lag-1", np.asarray(store.residual_lag1, np.float64))]
    if lay.sums:
        p = lay.p
        xtx = np.asarray(store.xtx, np.float64).reshape(G, p * p)
        cols += [StoreColumn(lay.col_weight_mean(), "weight mean", np.asarray(store.weight_mean, np.float64)),
                 StoreColumn(lay.col_flags(), "flags", np.asarray(store.flags, np.float64)),
                 StoreColumn(lay.col_levels_seen(), "levels seen", np.array(store.levels_seen, dtype=object))]
        cols += [StoreColumn(lay.col_xtx(i, j), "sum", xtx[:, i * p + j]) for i in range(p) for j in range(p)]
        cols += [StoreColumn(lay.col_xty(j), "sum", np.asarray(store.xty, np.float64)[:, j]) for j in range(p)]
        cols += [StoreColumn(lay.col_yty(), "sum", np.asarray(store.yty, np.float64))]
    return cols
