"""Reading the model store back from a results workbook: the cells `store.group_columns` and the settings
and terms tables were written as, at the positions of `store_layout.StoreLayout`, into a ModelStore.
Formats 1 (before change points), 2 (before weights and sufficient statistics) and 3 are read.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import ResultsWorkbookError
from ..terms import Term, source_columns
from .store import MAX_UNPACKED, ModelStore
from .store_layout import (FORMATS_READ, GROUP_HEADER, LAG1_HEADER, MEAN_HEADER, SETTING_HEADER, SHAPE_HEADER,
    STORE_SHEET, STORE_TITLE, TERM_HEADER, StoreLayout)


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
    if version not in FORMATS_READ:
        raise ResultsWorkbookError(f'"{name}" stores models in format {version}; this sheetfit reads formats '
                                   f'{", ".join(map(str, FORMATS_READ[:-1]))} and {FORMATS_READ[-1]}: fit again with this version')

    def names(key: str) -> tuple[str, ...]:
        return tuple(_text(v) for v in settings.get(key, []) if _text(v))

    group_cols = names("group columns")
    end, term_table = _table(rows, first, first.index(TERM_HEADER, end) + 1)
    terms = tuple(_term(r) for r in term_table if _text(r[2]) != "intercept")
    h = first.index(GROUP_HEADER, end)
    body = [r for r in rows[h + 1:] if r and _text(r[0])]
    lay = StoreLayout(k=len(group_cols), p=len(term_table), m=len(source_columns(terms)), groups=len(body),
                      extras=version >= 2, sums=version >= 3)
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
        lo=nums[:, [lay.col_min(j) for j in range(lay.m)]], hi=nums[:, [lay.col_max(j) for j in range(lay.m)]],
        weights=_text(settings["weights"][0]) if settings.get("weights") else "",
        reference=names("reference levels"), responses=names("responses"), **_extras(body, nums, lay))


def _term(r: list) -> Term:
    """A row of the terms table (a store before categories has four columns)."""
    r = (list(r) + [None] * 7)[:7]
    code = _number(r[6])
    return Term(label=_text(r[0]), column=_text(r[1]), kind=_text(r[2]), power=int(_number(r[3])), by=_text(r[4]),
                level=_text(r[5]), code=int(code) if math.isfinite(code) else -1)


def _extras(body: list[list], nums: np.ndarray, lay: StoreLayout) -> dict[str, Any]:
    """The format-2 fields from the group rows (none from a format-1 store: they stay NaN)."""
    if not lay.extras:
        return {}
    out = {"change_points": nums[:, [lay.col_change_point(0), lay.col_change_point(1)]],
           "response_mean": nums[:, lay.col_extra(MEAN_HEADER)],
           "residual_lag1": nums[:, lay.col_extra(LAG1_HEADER)],
           "shapes": tuple(_text(r[lay.col_extra(SHAPE_HEADER)]) for r in body)}
    if lay.sums:
        p, G = lay.p, len(body)
        out.update(weight_mean=nums[:, lay.col_weight_mean()], flags=nums[:, lay.col_flags()],
                   levels_seen=tuple(_text(r[lay.col_levels_seen()]) for r in body),
                   xtx=nums[:, [lay.col_xtx(i, j) for i in range(p) for j in range(p)]].reshape(G, p, p),
                   xty=nums[:, [lay.col_xty(j) for j in range(p)]], yty=nums[:, lay.col_yty()])
    return out


def _table(rows: list[list], first: list[str], i: int) -> tuple[int, list[list]]:
    """The rows from `i` down to the first one with an empty first cell: (that row's index, the rows)."""
    out = []
    while i < len(rows) and first[i]:
        out.append(rows[i])
        i += 1
    return i, out


def _cell(v: Any) -> Any:
    return None if v == "" else v


