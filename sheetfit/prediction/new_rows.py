"""The new rows `sheetfit predict` applies the stored models to: one sheet of a workbook, read as cells.

The sheet's first non-empty row is the header; empty rows are skipped and every kept row
remembers its row number in the sheet.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..errors import NoUsableDataError, SheetNotFoundError, not_found_message
from ..read import open_book, sniff
from ..read.cells import NO_RESULT, ErrorCell, cell_number, header_name, is_blank
from ..results.store import MAX_UNPACKED


def read_new_rows(path: Path, sheet: str | None) -> tuple[pd.DataFrame, np.ndarray, str]:
    """Cells of one sheet under its first non-empty row (the header): (raw values, source rows, sheet)."""
    fmt = sniff(path, MAX_UNPACKED)
    book = open_book(path, fmt)
    try:
        names = book.sheet_names()
        if sheet is None:
            if not names:
                raise SheetNotFoundError(f'"{path.name}" has no worksheet; give a workbook with the new rows')
            sheet = names[0]
        elif sheet not in names:
            raise SheetNotFoundError(not_found_message("sheet", sheet, names) + f' in "{path.name}"')
        grid = book.grid(sheet)
    finally:
        book.close()
    rows = grid.rows
    h = next((i for i, r in enumerate(rows) if any(not is_blank(v) for v in r)), None)
    if h is None:
        raise NoUsableDataError(f'sheet "{sheet}" of "{path.name}" is empty; put a header row and the new rows '
                                f'there')
    headers = [header_name(v) for v in rows[h]]
    keep = [j for j, name in enumerate(headers) if name]
    body, src = [], []
    for i in range(h + 1, len(rows)):
        r = rows[i]
        if all(is_blank(v) for v in r):
            continue
        body.append([_plain_cell(r[j] if j < len(r) else "") for j in keep])
        src.append(grid.top + i)
    names_kept = _dedupe([headers[j] for j in keep])
    frame = pd.DataFrame(body, columns=names_kept, dtype=object) if body else pd.DataFrame(columns=names_kept)
    return frame, np.asarray(src, dtype=np.int64), sheet


def _plain_cell(v: Any) -> Any:
    """A cell as the frame keeps it: an error cell as its code, an empty or blank text cell as None."""
    if isinstance(v, ErrorCell):
        return v.code
    if v is NO_RESULT or (isinstance(v, str) and not v.strip()):
        return None
    return v


def _dedupe(names: list[str]) -> list[str]:
    """Header names made unique: a repeated name gets ' (2)', ' (3)'…"""
    seen: dict[str, int] = {}
    out = []
    for n in names:
        seen[n] = seen.get(n, 0) + 1
        out.append(n if seen[n] == 1 else f"{n} ({seen[n]})")
    return out


def inputs_as_numbers(frame: pd.DataFrame, columns: tuple[str, ...]) -> pd.DataFrame:
    """A copy of `frame` where the cells of `columns` that read as numbers are numbers (for writing back)."""
    frame = frame.copy()
    for c in columns:
        if c in frame.columns:
            frame[c] = [_as_number(v) for v in frame[c].tolist()]
    return frame


def _as_number(v: Any) -> Any:
    """The cell's number when it reads as one; dates, times, empty cells and other text stay as they are."""
    if isinstance(v, (dt.date, dt.time)) or v is None:
        return v
    value, problem, _ = cell_number(v)
    return value if problem is None else v
