"""The new rows `sheetfit predict` applies the stored models to: one sheet of a workbook, read as cells.

The sheet's first non-empty row is the header; empty rows are skipped and every kept row
remembers its row number in the sheet.
"""

from __future__ import annotations

import datetime as dt
import dataclasses
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..errors import (
    ColumnNotFoundError,
    NoUsableDataError,
    SheetNotFoundError,
    closest,
    not_found_message,
)
from ..read import open_book, sniff
from ..read.cells import NO_RESULT, ErrorCell, cell_number, header_name, is_blank
from ..results.store import MAX_UNPACKED, ModelStore


@dataclass(frozen=True)
class NewRows:
    """The new rows as read: raw cell values under the header, their row numbers, which sheet."""

    frame: pd.DataFrame              # one column per header, cells as read (text, numbers, dates, None)
    source_rows: np.ndarray          # each row's number in the sheet
    sheet: str                       # the sheet read
    sheet_names: tuple[str, ...]     # every sheet of the file
    by_default: bool                 # the sheet was not named (the first one was read)
    file_name: str

    def where(self) -> str:
        return f'sheet "{self.sheet}" of "{self.file_name}"'


def require_columns(new: NewRows, store: ModelStore, needed: tuple[str, ...] | None = None) -> None:
    """Every group key and input column the models need is a header of the new rows, else one line.

    Headers are compared exactly, as `sheetfit fit` compares them; the message names the closest
    header and, when the first sheet was read by default, the other sheets.
    """
    headers = [str(c) for c in new.frame.columns]
    for name in needed if needed is not None else (*store.group_columns, *store.sources):
        if name in headers:
            continue
        kind = ("group column" if name in store.group_columns else "input column" if name in store.sources
                else "response column" if name == store.y else "column")
        msg = (not_found_message("column", name, headers).replace('column "', f'{kind} "', 1)
               .replace(" not found;", f" not found in {new.where()};", 1))
        near = closest(name, headers)
        if near is not None and near.lower() == name.lower():
            msg += " (headers must match the fit's letter case)"
        others = [s for s in new.sheet_names if s != new.sheet]
        if new.by_default and others:
            msg += ("; the first sheet is read unless --sheet names another: "
                    + ", ".join(f'"{s}"' for s in others[:10]))
        raise ColumnNotFoundError(msg)
    if not len(new.frame):
        raise NoUsableDataError(f"{new.where()} has a header but no rows below it; add the new rows to predict")


def read_new_rows(path: Path, sheet: str | None) -> NewRows:
    """Cells of one sheet under its first non-empty row (the header), with their row numbers."""
    fmt = sniff(path, MAX_UNPACKED)
    book = open_book(path, fmt)
    try:
        names = book.sheet_names()
        by_default = sheet is None
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
        others = [s for s in names if s != sheet] if by_default else []
        fix = ("name the sheet with --sheet (other sheets: " + ", ".join(f'"{s}"' for s in others[:10]) + ")"
               if others
               else "put a header row and the new rows there")
        raise NoUsableDataError(f'sheet "{sheet}" of "{path.name}" is empty; {fix}')
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
    return NewRows(frame, np.asarray(src, dtype=np.int64), sheet, tuple(names), by_default, path.name)


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


def for_every_response(new: NewRows, store: ModelStore) -> NewRows:
    """New rows for a fit of several responses that do not say which response: each row once per response,
    the response's name in the fit's response key column (first), so every response is predicted."""
    frame = for_every_response_frame(new.frame, store)
    if frame is new.frame:
        return new
    return dataclasses.replace(new, frame=frame, source_rows=np.tile(new.source_rows, len(store.responses)))


def for_every_response_frame(frame: pd.DataFrame, store: ModelStore) -> pd.DataFrame:
    """The DataFrame form of `for_every_response` (unchanged when not needed)."""
    key = store.group_columns[0] if store.responses else None
    if key is None or key in [str(c) for c in frame.columns]:
        return frame
    parts = [frame.assign(**{key: name}) for name in store.responses]
    out = pd.concat(parts, ignore_index=True)
    return out[[key, *[c for c in out.columns if c != key]]]
