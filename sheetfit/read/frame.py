"""Observations from an in-memory table (the Python API's fit_frame), with the same row reasons as a file."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..errors import ColumnNotFoundError, JobError, not_found_message
from ..terms import as_categories, category_columns, parse_terms, parse_weights, source_columns
from .cells import category_labels
from .responses import stack_responses
from .cells import EPOCH
from .tidy import REASON, SOURCE_ROW, SOURCE_SHEET, Observations, ReadInfo, days_from_group_start


def observations_from_frame(frame: pd.DataFrame, *, y: str, x: Sequence[str], group: Sequence[str] = (),
                            order: str | None = None, name: str = "(data frame)",
                            weights: str | None = None, responses: Sequence[str] = ()) -> Observations:
    """Observations from an in-memory table of numbers and dates (no parsing of text; NaN, NaT → unusable).

    Date/time columns (datetime64) become days since the group's earliest date, as a workbook's do."""
    header = [str(c) for c in frame.columns]
    terms = as_categories(parse_terms(list(x), header), [c for c in header if _is_text(frame[c])])
    spec = parse_weights(weights, header) if weights else None
    kinds = set(category_columns(terms))
    numeric = list(dict.fromkeys([y, *responses, *(c for c in source_columns(terms) if c not in kinds),
                                  *([order] if order else []), *([spec.column] if spec else [])]))
    _check_columns(header, list(kinds))
    _check_columns(header, list(group) + numeric)
    data = pd.DataFrame({SOURCE_SHEET: name, SOURCE_ROW: np.arange(2, len(frame) + 2)})
    for gcol in group:
        data[gcol] = frame[gcol].astype(str).to_numpy()
    why = np.full(len(frame), "", dtype=object)
    dated = [c for c in numeric if pd.api.types.is_datetime64_any_dtype(frame[c].dtype)]
    for c in numeric:
        v = (_day_numbers(frame[c]) if c in dated
             else pd.to_numeric(frame[c], errors="coerce").to_numpy(dtype=np.float64))
        data[c] = v
        for i in np.flatnonzero(~np.isfinite(v)):
            what = "not a date" if c in dated else "not a number"
            why[i] = f"{why[i]}; {c}: {what}" if why[i] else f"{c}: {what}"
    for c in kinds:
        text, blank = category_labels(frame[c].tolist())
        data[c] = text
        for i in np.flatnonzero(blank):
            why[i] = f"{why[i]}; {c}: empty cell" if why[i] else f"{c}: empty cell"
    data[REASON] = why
    days, dates = days_from_group_start(data, dated, list(group))
    for c in dated:
        data[c] = days[c]
    info = ReadInfo(file_name=name, file_sha256="", file_format="frame", reader="pandas",
                    sheets=(name,), region="whole table", header_row=1, rows_read=len(frame),
                    date_columns=tuple(dated))
    obs = Observations(data=data, group_columns=tuple(group), y=y, terms=terms, order=order,
                       numeric_columns=tuple(numeric), info=info, dates=dates, weights=spec,
                       category_columns=tuple(kinds))
    return stack_responses(obs, responses)


def _is_text(values: pd.Series) -> bool:
    """A column of text (object, string or categorical dtype whose values are not all numbers)."""
    if pd.api.types.is_numeric_dtype(values.dtype) or pd.api.types.is_datetime64_any_dtype(values.dtype):
        return False
    present = values.dropna()
    return len(present) > 0 and pd.to_numeric(present, errors="coerce").isna().any()


def _day_numbers(dates: pd.Series) -> np.ndarray:
    """A date/time column as spreadsheet day numbers (a time zone is dropped, the wall-clock time kept,
    as the workbook reader does)."""
    if getattr(dates.dt, "tz", None) is not None:
        dates = dates.dt.tz_localize(None)
    stamps = dates.to_numpy(dtype="datetime64[ms]")
    days = (stamps - np.datetime64(EPOCH, "ms")) / np.timedelta64(1, "D")
    return np.where(np.isnat(stamps), np.nan, days).astype(np.float64)


def _check_columns(header: list[str], needed: list[str]) -> None:
    """Every needed column exists, and none has a name the tidy table keeps for itself (as for a workbook)."""
    for c in needed:
        if c not in header:
            raise ColumnNotFoundError(not_found_message("column", c, header))
    reserved = [c for c in needed if c in (SOURCE_SHEET, SOURCE_ROW, REASON)]
    if reserved:
        raise JobError(f'column "{reserved[0]}" has a name sheetfit gives its own columns '
                       f'({SOURCE_SHEET}, {SOURCE_ROW}, {REASON}); rename it in the data frame')
