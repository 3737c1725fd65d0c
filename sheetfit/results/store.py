"""The stored models of a results workbook: what `sheetfit predict` and the what-if sheet need.

A results workbook carries every fitted model on its `model store` sheet (terms, coefficients,
(X'X)⁻¹, residual variance and degrees of freedom, observed input ranges), so predictions need
neither the input data nor a refit.
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

if TYPE_CHECKING:
    from .types import FitResults

STORE_SHEET = "model store"
STORE_TITLE = "sheetfit model store"
STORE_FORMAT = 1
GROUP_HEADER = "group"
TERM_HEADER = "coefficient"
RESULT_COLUMNS = ("predicted", "std error of mean", "mean CI low", "mean CI high", "prediction low",
                  "prediction high", "extrapolation", "reason")
MAX_UNPACKED = 2 * 1024**3


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
    """The label a group shows in drop-downs: its key values joined by ' · ' ('all rows' without keys)."""
    return " · ".join(str(k) for k in keys) if keys else "all rows"


def unique_labels(keys: Sequence[tuple[str, ...]]) -> tuple[str, ...]:
    """Group labels made unique ignoring letter case, as spreadsheet lookups compare them."""
    taken: set[str] = set()
    out = []
    for k in keys:
        base = label = group_label(k)
        n = 1
        while label.lower() in taken:
            n += 1
            label = f"{base} ({n})"
        taken.add(label.lower())
        out.append(label)
    return tuple(out)


def group_codes(df: pd.DataFrame, keys: Sequence[str], ref: pd.DataFrame) -> np.ndarray:
    """Position of each row's group among the rows of `ref` (−1 when absent), keys compared as text."""
    keys = list(keys)
    if not keys:
        return np.zeros(len(df), dtype=np.int64) if len(ref) else np.full(len(df), -1, dtype=np.int64)
    if len(keys) == 1:
        return pd.Index(ref[keys[0]].astype(str)).get_indexer(df[keys[0]].astype(str))
    return pd.MultiIndex.from_frame(ref[keys].astype(str)).get_indexer(pd.MultiIndex.from_frame(df[keys].astype(str)))


def _spread(table: pd.DataFrame, keys: list[str], fitted: pd.DataFrame, slots: dict[str, pd.Index],
            value: str, shape: tuple[int, ...]) -> np.ndarray:
    """Long rows (group, slot columns…, value) → an array indexed by group then slot positions."""
    out = np.full(shape, np.nan)
    if len(table) == 0 or value not in table.columns:
        return out
    at = [group_codes(table, keys, fitted)] + [idx.get_indexer(table[c].astype(str)) for c, idx in slots.items()]
    ok = np.logical_and.reduce([a >= 0 for a in at])
    out[tuple(a[ok] for a in at)] = pd.to_numeric(table[value], errors="coerce").to_numpy(np.float64)[ok]
    return out


def store_from_results(results: "FitResults") -> ModelStore:
    """Gather the stored model of every fitted group from FitResults (no statistics computed here).

    Groups without a complete set of coefficients and (X'X)⁻¹ are left out.
    """
    keys = list(results.group_columns)
    labels = pd.Index(results.term_labels)
    sources = pd.Index(source_columns(results.terms))
    p, m = len(labels), len(sources)
    g = results.groups
    fitted = (g[g["status"].astype(str).eq("fitted")] if "status" in g.columns else g).reset_index(drop=True)
    G = len(fitted)
    beta = _spread(results.coefficients, keys, fitted, {"term": labels}, "estimate", (G, p))
    inv = _spread(results.xtx_inverse, keys, fitted, {"row term": labels, "column term": labels}, "value",
                  (G, p, p))
    lo = _spread(results.input_ranges, keys, fitted, {"column": sources}, "min", (G, m))
    hi = _spread(results.input_ranges, keys, fitted, {"column": sources}, "max", (G, m))
    ok = np.isfinite(beta).all(axis=1) & np.isfinite(inv).reshape(G, -1).all(axis=1)
    sub = fitted[ok]
    kept = list(zip(*(sub[k].astype(str) for k in keys))) if keys else [()] * len(sub)
    n = pd.to_numeric(sub["n"]).to_numpy(np.int64)
    rse = pd.to_numeric(sub["residual std error"]).to_numpy(np.float64)
    return ModelStore(
        y=results.y, group_columns=tuple(keys), terms=tuple(results.terms),
        intercept=bool(results.job.intercept), level=float(results.job.level),
        date_columns=tuple(c for c in results.info.date_columns if c in sources),
        labels=unique_labels(kept), keys=tuple(kept), n=n,
        df=(n - pd.to_numeric(sub["parameters"]).to_numpy(np.int64)).astype(np.float64), sigma2=rse**2,
        beta=beta[ok], xtx_inv=inv[ok], lo=lo[ok], hi=hi[ok])


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
    rows = [[_cell(v) for v in r] for r in rows]
    first = [_text(r[0]) if r else "" for r in rows]
    if not first or first[0] != STORE_TITLE:
        raise ValueError(f'cell A1 should read "{STORE_TITLE}"')
    settings = {}
    i = first.index("setting") + 1
    while i < len(rows) and first[i]:
        settings[first[i]] = rows[i][1:]
        i += 1
    version = int(_number(settings["store format"][0]))
    if version != STORE_FORMAT:
        raise ResultsWorkbookError(f'"{name}" stores models in format {version}; this sheetfit reads format '
                                   f'{STORE_FORMAT}: fit again with this version')

    def names(key: str) -> tuple[str, ...]:
        return tuple(_text(v) for v in settings.get(key, []) if _text(v))

    group_cols = names("group columns")
    i = first.index(TERM_HEADER, i) + 1
    term_rows = []
    while i < len(rows) and first[i]:
        term_rows.append(rows[i])
        i += 1
    intercept = _text(settings["intercept"][0]) == "yes"
    terms = tuple(Term(label=_text(r[0]), column=_text(r[1]), kind=_text(r[2]), power=int(_number(r[3])))
                  for r in term_rows if _text(r[2]) != "intercept")
    p, k, m = len(term_rows), len(group_cols), len(source_columns(terms))
    h = first.index(GROUP_HEADER, i)
    body = [r for r in rows[h + 1:] if r and _text(r[0])]
    width = 1 + k + 3 + p + p * p + 2 * m
    nums = np.array([[_number(v) for v in (r + [None] * width)[1 + k:width]] for r in body],
                    dtype=np.float64).reshape(len(body), width - 1 - k)
    keys = tuple(tuple(_text(v) for v in r[1:1 + k]) for r in body)
    G = len(body)
    b0 = 3
    x0 = b0 + p
    r0 = x0 + p * p
    if not np.isfinite(nums[:, :r0]).all():
        raise ValueError("a stored number is missing")
    return ModelStore(
        y=_text(settings["response"][0]), group_columns=group_cols, terms=terms, intercept=intercept,
        level=_number(settings["confidence level"][0]), date_columns=names("date/time inputs"),
        labels=tuple(_text(r[0]) for r in body), keys=keys, n=nums[:, 0].astype(np.int64), df=nums[:, 1],
        sigma2=nums[:, 2], beta=nums[:, b0:x0], xtx_inv=nums[:, x0:r0].reshape(G, p, p),
        lo=nums[:, r0:r0 + 2 * m:2], hi=nums[:, r0 + 1:r0 + 2 * m:2])


def _cell(v: Any) -> Any:
    return None if v == "" else v


