"""The header of a sheet or region: which row holds the column names, and where each name sits.

The header row is --header-row, else the top row of a table or defined name, else the first
non-empty row. Merged header cells give their value to every cell they cover; when a merged
header cell reaches down into later rows, those rows join the header and each column's name is
its parts joined top to bottom with spaces ("Energy" over "Load kWh" → "Energy Load kWh").
"""

from __future__ import annotations

from dataclasses import dataclass

from xlsxwriter.utility import xl_col_to_name

from ..errors import DuplicateHeaderError, JobError, NoUsableDataError
from ..job import FitJob
from .cells import header_name, is_blank
from .grid import Grid, Region

_MAX_HEADER_ROWS = 10


@dataclass
class Header:
    """Where the column names are and what they are."""

    sheet: str
    row: int                             # first header row (1-based)
    last: int                            # last header row (several when merged cells reach down)
    bottom: int                          # last data row
    names: dict[str, list[int]]          # name → sheet column indices holding it
    spans: tuple[int, int]               # first and last column of the region


def find_header(grid: Grid, region: Region | None, job: FitJob) -> Header:
    """The header of a sheet or region; NoUsableDataError when the sheet is empty."""
    if region is not None:
        left, right, bottom = max(region.left, grid.left), min(region.right, grid.right), min(region.bottom, grid.bottom)
        row = job.header_row or region.header_row
        if not region.header_row <= row <= region.bottom:
            raise JobError(f"--header-row {row} lies outside {region.label} (rows {region.header_row}–{region.bottom})")
    else:
        left, right, bottom = grid.left, grid.right, grid.bottom
        row = job.header_row or _first_nonblank(grid)
    if row is None or not grid.rows:
        raise NoUsableDataError(f'sheet "{grid.sheet}" is empty; choose another sheet with --sheet')
    if row > grid.bottom:
        raise NoUsableDataError(f'header row {row} is below the last filled row ({grid.bottom}) of sheet '
                                f'"{grid.sheet}"; check --header-row')
    if region is not None and region.headers is not None and not job.header_row:
        names: dict[str, list[int]] = {}
        for i, n in enumerate(region.headers):
            if header_name(n):
                names.setdefault(header_name(n), []).append(region.left + i)
        return Header(grid.sheet, row, row, bottom, names, (left, right))
    last = row
    for _ in range(_MAX_HEADER_ROWS):
        deeper = max((r2 for r1, c1, r2, c2 in grid.merged if r1 <= last and r2 > last and r2 >= row
                      and c2 >= left and c1 <= right), default=last)
        if deeper == last:
            break
        last = min(deeper, row + _MAX_HEADER_ROWS - 1)
    filled = {}
    for r1, c1, r2, c2 in grid.merged:
        if r2 >= row and r1 <= last:
            for r in range(max(r1, row), min(r2, last) + 1):
                for c in range(max(c1, left), min(c2, right) + 1):
                    filled[(r, c)] = grid.get(r1, c1)
    names = {}
    for c in range(left, right + 1):
        parts: list[str] = []
        for r in range(row, last + 1):
            text = header_name(filled.get((r, c), grid.get(r, c)))
            if text and (not parts or parts[-1] != text):
                parts.append(text)
        if parts:
            names.setdefault(" ".join(parts), []).append(c)
    return Header(grid.sheet, row, last, bottom, names, (left, right))


def _first_nonblank(grid: Grid) -> int | None:
    for i, r in enumerate(grid.rows):
        if any(not is_blank(v) for v in r):
            return grid.top + i
    return None


def no_duplicates(header: Header, used: list[str]) -> None:
    """DuplicateHeaderError naming each used name that heads more than one column."""
    dups = [n for n in dict.fromkeys(used) if len(header.names.get(n, ())) > 1]
    if dups:
        shown = "; ".join(f'"{n}" in columns {", ".join(xl_col_to_name(c) for c in header.names[n])}' for n in dups)
        raise DuplicateHeaderError(f'header row {header.row} of sheet "{header.sheet}" repeats column names: '
                                   f'{shown}; rename them so each column used has its own name')
