"""Observations from an in-memory table (the Python API's fit_frame), with the same row reasons as a file."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..errors import ColumnNotFoundError, JobError, not_found_message
from ..terms import parse_terms, source_columns
from .tidy import REASON, SOURCE_ROW, SOURCE_SHEET, Observations, ReadInfo


def observations_from_frame(frame: pd.DataFrame, *, y: str, x: Sequence[str], group: Sequence[str] = (),
                            order: str | None = None, name: str = "(data frame)") -> Observations:
    """Observations from an in-memory table of numbers (no parsing of text; NaN → unusable)."""
    header = [str(c) for c in frame.columns]
    terms = parse_terms(list(x), header)
    numeric = list(dict.fromkeys([y, *source_columns(terms), *([order] if order else [])]))
    _check_columns(header, list(group) + numeric)
    data = pd.DataFrame({SOURCE_SHEET: name, SOURCE_ROW: np.arange(2, len(frame) + 2)})
    for gcol in group:
        data[gcol] = frame[gcol].astype(str).to_numpy()
    why = np.full(len(frame), "", dtype=object)
    for c in numeric:
        v = pd.to_numeric(frame[c], errors="coerce").to_numpy(dtype=np.float64)
        data[c] = v
        for i in np.flatnonzero(~np.isfinite(v)):
            why[i] = f"{why[i]}; {c}: not a number" if why[i] else f"{c}: not a number"
    data[REASON] = why
    info = ReadInfo(file_name=name, file_sha256="", file_format="frame", reader="pandas",
                    sheets=(name,), region="whole table", header_row=1, rows_read=len(frame))
    return Observations(data=data, group_columns=tuple(group), y=y, terms=terms, order=order,
                        numeric_columns=tuple(numeric), info=info)


def _check_columns(header: list[str], needed: list[str]) -> None:
    """Every needed column exists, and none has a name the tidy table keeps for itself (as for a workbook)."""
    for c in needed:
        if c not in header:
            raise ColumnNotFoundError(not_found_message("column", c, header))
    reserved = [c for c in needed if c in (SOURCE_SHEET, SOURCE_ROW, REASON)]
    if reserved:
        raise JobError(f'column "{reserved[0]}" has a name sheetfit gives its own columns '
                       f'({SOURCE_SHEET}, {SOURCE_ROW}, {REASON}); rename it in the data frame')
