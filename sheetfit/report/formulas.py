"""Sheets of live formulas (the `predict` and `explorer` sheets): cells gathered in any order, A1 references.

Both sheets decide their cells out of row order, then write them row by row as constant_memory
requires; each formula carries the result shown before a spreadsheet application recalculates.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from xlsxwriter.utility import quote_sheetname, xl_rowcol_to_cell

from ..results.headers import cell_text


class Cells:
    """Cells of one sheet gathered in any order, then written row by row (constant_memory)."""

    def __init__(self, cache: bool = True) -> None:
        self.cache = cache
        self._cells: dict[tuple[int, int], tuple[str, Any, Any, Any]] = {}
        self._merged: dict[tuple[int, int], int] = {}
        self._heights: dict[int, float] = {}

    def text(self, r: int, c: int, value: str, fmt: Any = None) -> None:
        self._cells[(r, c)] = ("text", value, fmt, None)

    def number(self, r: int, c: int, value: float, fmt: Any = None) -> None:
        self._cells[(r, c)] = ("number", value, fmt, None)

    def formula(self, r: int, c: int, formula: str, fmt: Any = None, value: Any = None) -> None:
        """`value` is the cached result shown before recalculation (dropped when cache is off)."""
        self._cells[(r, c)] = ("formula", formula, fmt, value)

    def blank(self, r: int, c: int, fmt: Any) -> None:
        self._cells[(r, c)] = ("blank", None, fmt, None)

    def merge(self, r: int, c: int, last_col: int, height: float | None = None) -> None:
        """Merge the cell at (r, c) across to `last_col` (its content and format stay); set the row height."""
        self._merged[(r, c)] = last_col
        if height:
            self._heights[r] = height

    def flush(self, ws: Any) -> None:
        """Write every gathered cell to `ws`, row by row and left to right."""
        row = -1
        for (r, c) in sorted(self._cells):
            kind, value, fmt, cached = self._cells[(r, c)]
            if r != row and r in self._heights:
                ws.set_row(r, self._heights[r])
            row = r
            if (r, c) in self._merged:
                ws.merge_range(r, c, r, self._merged[(r, c)], "", fmt)
            if kind == "text":
                ws.write_string(r, c, cell_text(value), fmt)
            elif kind == "number":
                ws.write_number(r, c, value, fmt)
            elif kind == "blank":
                ws.write_blank(r, c, None, fmt)
            else:
                ws.write_formula(r, c, value, fmt, _cached(cached) if self.cache else "")


class EmptyText(str):
    """An empty text result that xlsxwriter stores as text (`t="str"`, empty value).

    xlsxwriter stores a cached value of "" untyped (its way to ask for recalculation), which a
    program reading stored values takes as 0; this empty string compares unequal to "" so that
    xlsxwriter types it, and is written as nothing.
    """

    def __eq__(self, other: object) -> bool:
        return isinstance(other, EmptyText)

    def __ne__(self, other: object) -> bool:
        return not self.__eq__(other)

    __hash__ = str.__hash__


TYPED_EMPTY = EmptyText("")


def _cached(v: Any) -> Any:
    """A formula's cached result as xlsxwriter takes it: NaN and ±inf show #N/A, numpy numbers plain."""
    if v is None:
        return ""
    if isinstance(v, (float, np.floating)):
        return "#N/A" if not math.isfinite(float(v)) else float(v)
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, str):
        return TYPED_EMPTY if v == "" else cell_text(v)
    return v


def lookup(cell: str, rng: str) -> str:
    """MATCH of a label in a list, with the wildcard characters * ? ~ escaped so labels match literally."""
    escaped = f'SUBSTITUTE(SUBSTITUTE(SUBSTITUTE({cell},"~","~~"),"*","~*"),"?","~?")'
    return f"MATCH({escaped},{rng},0)"


def ref(sheet: str | None, r: int, c: int, absolute: bool = True) -> str:
    """An A1 reference to one cell, on `sheet` when given ('model store'!$B$3)."""
    cell = xl_rowcol_to_cell(r, c, row_abs=absolute, col_abs=absolute)
    return f"{quote_sheetname(sheet)}!{cell}" if sheet else cell


def area(sheet: str | None, r1: int, c1: int, r2: int, c2: int) -> str:
    """An absolute A1 range, on `sheet` when given ('model store'!$A$3:$A$9)."""
    a = f"{xl_rowcol_to_cell(r1, c1, True, True)}:{xl_rowcol_to_cell(r2, c2, True, True)}"
    return f"{quote_sheetname(sheet)}!{a}" if sheet else a
