"""The stored models of a results workbook: what `sheetfit predict` and the live prediction sheet need.

A results workbook carries every fitted model on its `model store` sheet (terms, coefficients,
(X'X)⁻¹, residual variance and degrees of freedom, observed input ranges), so predictions need
neither the input data nor a refit. This module gathers the store from FitResults, gives the
sheet's cells as plain values (the report only places them, at the positions of
`store_layout.StoreLayout`) and reads the sheet back from the same positions.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from ..errors import ResultsWorkbookError
from ..terms import Term, coefficient_labels, source_columns
from .headers import (CELL_LIMIT, COEFFICIENT, COEFFICIENT_COUNT, INPUT, PREDICTION_HEADERS,
    RESIDUAL_STD_ERROR, ROWS_USED, STATUS, cell_text, shown_names)
from .store_layout import (
    GROUP_HEADER,
    SETTING_HEADER,
    SETTING_NAMES,
    STORE_FORMAT,
    STORE_SHEET,
    STORE_TITLE,
    TERM_HEADER,
    StoreLayout,
)

if TYPE_CHECKING:
    from .types import FitResults

RESULT_COLUMNS = PREDICTION_HEADERS
MAX_UNPACKED = 2 * 1024**3
# the store sheet's numbers of each group, before its coefficients
STORE_NUMBERS = (ROWS_USED, "residual degrees of freedom", "residual variance")


@dataclass(frozen=True)
class ModelStore:
    """Every fitted group's model, as the results workbook stores it (one row per group)."""

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

    @property
    def term_labels(self) -> tuple[str, ...]:
        return coefficient_labels(self.terms, self.intercept)

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

    Groups without a complete set of coefficients and (X'X)⁻¹ are left out.
    """
    k = len(results.group_columns)
    labels = pd.Index(results.term_labels)
    sources = pd.Index(source_columns(results.terms))
    p, m = len(labels), len(sources)
    g = results.groups
    fitted = (g[g[STATUS].astype(str).eq("fitted")] if STATUS in g.columns else g).reset_index(drop=True)
    G = len(fitted)
    beta = _spread(results.coefficients, k, fitted, {INPUT: labels}, COEFFICIENT, (G, p))
    inv = _spread(results.xtx_inverse, k, fitted, {"row term": labels, "column term": labels}, "value",
                  (G, p, p))
    lo = _spread(results.input_ranges, k, fitted, {"column": sources}, "min", (G, m))
    hi = _spread(results.input_ranges, k, fitted, {"column": sources}, "max", (G, m))
    ok = np.isfinite(beta).all(axis=1) & np.isfinite(inv).reshape(G, -1).all(axis=1)
    sub = fitted[ok]
    kept = list(zip(*(sub.iloc[:, j].astype(str) for j in range(k)))) if k else [()] * len(sub)
    n = pd.to_numeric(sub[ROWS_USED]).to_numpy(np.int64)
    rse = pd.to_numeric(sub[RESIDUAL_STD_ERROR]).to_numpy(np.float64)
    return ModelStore(
        y=results.y, group_columns=tuple(results.group_columns), terms=tuple(results.terms),
        intercept=bool(results.job.intercept), level=float(results.job.level),
        date_columns=tuple(c for c in results.info.date_columns if c in sources),
        labels=unique_labels(kept), keys=tuple(kept), n=n,
        df=(n - pd.to_numeric(sub[COEFFICIENT_COUNT]).to_numpy(np.int64)).astype(np.float64), sigma2=rse**2,
        beta=beta[ok], xtx_inv=inv[ok], lo=lo[ok], hi=hi[ok])


# --- the store sheet's cells as plain values --------------------------------------------------------

@dataclass(frozen=True)
class StoreColumn:
    """One column of the store's group rows: its position, what it holds, one value per group."""

    col: int
    part: str             # "group", "key", "rows used", "residual df", "residual variance", "coefficient",
    values: np.ndarray    # "(X'X)⁻¹", "min" or "max"


def store_layout(store: ModelStore) -> StoreLayout:
    """The store sheet's layout for this store."""
    return StoreLayout(k=len(store.group_columns), p=len(store.term_labels), m=len(store.sources),
                       groups=len(store))


def store_settings(store: ModelStore) -> list[tuple[str, list]]:
    """The rows of the settings table: (setting, its values)."""
    values = ([STORE_FORMAT], [store.y], ["yes" if store.intercept else "no"], [store.level],
              list(store.group_columns), list(store.sources), list(store.date_columns), [len(store)])
    return list(zip(SETTING_NAMES, values))


def term_rows(store: ModelStore) -> list[list]:
    """The rows of the terms table: label, source column, kind, power (the intercept first)."""
    rows: list[list] = [[store.term_labels[0], "", "intercept", 0]] if store.intercept else []
    return rows + [[t.label, t.column, t.kind, t.power] for t in store.terms]


def group_headers(store: ModelStore) -> list[str]:
    """The header row of the group table (a group column named like one of ours shows as `NAME (input)`)."""
    labels = store.term_labels
    ours = list(STORE_NUMBERS)
    ours += [f"coefficient: {t}" for t in labels]
    ours += [f"(X'X)⁻¹: {a} × {b}" for a in labels for b in labels]
    for c in store.sources:
        ours += [f"min: {c}", f"max: {c}"]
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
    return cols


# --- reading the store back from a results workbook ------------------------------------------------

def _text(v: Any) -> str:
    if v is None:
        return ""
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v).strip()


def _number(v: Any) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def read_store(path: Path | str) -> ModelStore:
    """The stored models of a results workbook written by `sheetfit fit`."""
    from ..read import open_book, sniff

    path = Path(path)
    fmt = sniff(path, MAX_UNPACKED)
    if fmt not in ("xlsx", "xlsm", "ods"):
        raise ResultsWorkbookError(f'"{path.name}" is not a results workbook (it is {fmt}); give the .xlsx '
                                   f'that `sheetfit fit` wrote')
    book = open_book(path, fmt)
    try:
        names = book.sheet_names()
        name = next((s for s in names if s.strip().lower() == STORE_SHEET), None)
        if name is None:
            raise ResultsWorkbookError(f'"{path.name}" has no "{STORE_SHEET}" sheet, so it holds no stored '
                                       f'models; fit again with `sheetfit fit` to write a results workbook with one')
        grid = book.grid(name)
    finally:
        book.close()
    try:
        return _parse_store([list(r) for r in grid.rows], path.name)
    except (ValueError, IndexError, KeyError) as exc:
        raise ResultsWorkbookError(f'the "{STORE_SHEET}" sheet of "{path.name}" is damaged ({exc}); '
                                   f'fit again with `sheetfit fit`') from None


def _parse_store(rows: list[list], name: str) -> ModelStore:
    """The ModelStore from the store sheet's cells (rows as read, top-left cell first)."""
    rows = [[_cell(v) for v in r] for r in rows]
    first = [_text(r[0]) if r else "" for r in rows]
    if not first or first[0] != STORE_TITLE:
        raise ValueError(f'cell A1 should read "{STORE_TITLE}"')
    end, table = _table(rows, first, first.index(SETTING_HEADER[0]) + 1)
    settings = {_text(r[0]): r[1:] for r in table}
    version = int(_number(settings["store format"][0]))
    if version != STORE_FORMAT:
        raise ResultsWorkbookError(f'"{name}" stores models in format {version}; this sheetfit reads format '
                                   f'{STORE_FORMAT}: fit again with this version')

    def names(key: str) -> tuple[str, ...]:
        return tuple(_text(v) for v in settings.get(key, []) if _text(v))

    group_cols = names("group columns")
    end, term_table = _table(rows, first, first.index(TERM_HEADER, end) + 1)
    terms = tuple(Term(label=_text(r[0]), column=_text(r[1]), kind=_text(r[2]), power=int(_number(r[3])))
                  for r in term_table if _text(r[2]) != "intercept")
    h = first.index(GROUP_HEADER, end)
    body = [r for r in rows[h + 1:] if r and _text(r[0])]
    lay = StoreLayout(k=len(group_cols), p=len(term_table), m=len(source_columns(terms)), groups=len(body))
    body = [(r + [None] * lay.width)[:lay.width] for r in body]
    nums = np.array([[_number(v) for v in r] for r in body], dtype=np.float64).reshape(len(body), lay.width)
    if not np.isfinite(nums[:, lay.col_n():lay.col_min(0)]).all():
        raise ValueError("a stored number is missing")
    return ModelStore(
        y=_text(settings["response"][0]), group_columns=group_cols, terms=terms,
        intercept=_text(settings["intercept"][0]) == "yes", level=_number(settings["confidence level"][0]),
        date_columns=names("date/time inputs"), labels=tuple(_text(r[0]) for r in body),
        keys=tuple(tuple(_text(r[lay.col_key(j)]) for j in range(lay.k)) for r in body),
        n=nums[:, lay.col_n()].astype(np.int64), df=nums[:, lay.col_df()], sigma2=nums[:, lay.col_s2()],
        beta=nums[:, lay.coef_columns()], xtx_inv=nums[:, lay.inv_columns()].reshape(len(body), lay.p, lay.p),
        lo=nums[:, [lay.col_min(j) for j in range(lay.m)]], hi=nums[:, [lay.col_max(j) for j in range(lay.m)]])


def _table(rows: list[list], first: list[str], i: int) -> tuple[int, list[list]]:
    """The rows from `i` down to the first one with an empty first cell: (that row's index, the rows)."""
    out = []
    while i < len(rows) and first[i]:
        out.append(rows[i])
        i += 1
    return i, out


def _cell(v: Any) -> Any:
    return None if v == "" else v


