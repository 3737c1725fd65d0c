"""What reading hands to the next stages: tidy rows with their source, and where they came from."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..terms import Term, WeightSpec
from .cells import EPOCH

SOURCE_FILE = "source file"              # only when several files are read (read.many)
SOURCE_SHEET = "source sheet"
SOURCE_ROW = "source row"
REASON = "reason"

_MS_PER_DAY = 86_400_000.0
_EPOCH_MS = np.datetime64(EPOCH, "ms")
_MAX_MS = 2.0**62                         # beyond this a day number is no date (datetime64[ms] holds ±2^63)


@dataclass(frozen=True)
class ReadInfo:
    """Provenance of what was read: enough for the `about` sheet."""

    file_name: str
    file_sha256: str
    file_format: str                      # xlsx | xlsm | xls | ods | csv
    reader: str                           # library that read the data region
    sheets: tuple[str, ...]
    region: str                           # "whole sheet", "table Sales", "defined name X"…
    header_row: int                       # 1-based spreadsheet row of the header
    rows_read: int                        # data rows under the header (blank rows excluded)
    hidden_rows: int = 0
    hidden_columns: int = 0
    date_columns: tuple[str, ...] = ()    # columns that held dates/times, given as days
    warnings: tuple[str, ...] = ()        # one line each, e.g. formulas without cached values
    columns: tuple[str, ...] = ()         # every header name of the sheets read (sheetfit's own keys avoid them)
    files: tuple["ReadInfo", ...] = ()    # several files read as one (read.many): each file's own, in order
    file_key: str | None = None           # then the group column holding each row's file name

    @property
    def several(self) -> bool:
        """Whether several files were read as one table (then `files` says what each one held)."""
        return bool(self.files)


@dataclass(frozen=True)
class Observations:
    """Tidy rows from the reader, one per non-blank input row, in source order.

    `data` columns: SOURCE_SHEET (str), SOURCE_ROW (int, 1-based row in the sheet),
    SOURCE_FILE (str, the file's name; only when several files were read, see `sheetfit.read.many`),
    each group column (str labels; a blank cell → cells.BLANK_LABEL), each needed numeric column
    (float64, NaN where the cell could not be used), and REASON ('' when every needed cell
    parsed, else plain words such as 'Load kWh: empty cell; Pallets: error value #N/A').
    Date/time columns (`info.date_columns`) are days since the group's earliest date in `data`, the
    numbers the model uses; `dates` keeps the user's own dates and times of those columns
    (datetime64[ms], NaT where the cell could not be used), same rows and index as `data`.
    """

    data: pd.DataFrame
    group_columns: tuple[str, ...]
    y: str
    terms: tuple[Term, ...]
    order: str | None
    numeric_columns: tuple[str, ...]      # y, term source columns, order column, weight column (no repeats)
    info: ReadInfo
    dates: pd.DataFrame = field(default_factory=pd.DataFrame)   # date column → the dates as read
    weights: WeightSpec | None = None     # a weighted fit's row weights (their column is among numeric_columns)
    category_columns: tuple[str, ...] = ()   # inputs read as categories: `data` holds their levels as text ('' blank)


def serial_dates(days: np.ndarray) -> np.ndarray:
    """Spreadsheet day numbers (days since cells.EPOCH, time of day as the fraction) → datetime64[ms].

    Kept to the millisecond, the finest a spreadsheet stores; NaN and numbers too large for a date
    become NaT."""
    ms = np.round(np.asarray(days, dtype=np.float64) * _MS_PER_DAY)
    out = np.full(ms.shape, np.datetime64("NaT"), dtype="datetime64[ms]")
    ok = np.isfinite(ms) & (np.abs(ms) < _MAX_MS)
    out[ok] = _EPOCH_MS + ms[ok].astype(np.int64).astype("timedelta64[ms]")
    return out


def days_from_group_start(frame: pd.DataFrame, columns: Sequence[str],
                          group_columns: Sequence[str]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Date columns of `frame` (spreadsheet day numbers) as (days since each group's earliest date, the
    dates themselves): the first is what the model uses, the second the user's own dates."""
    days, dates = {}, {}
    for name in columns:
        values = frame[name].astype("float64")
        if group_columns:
            earliest = values.groupby([frame[g] for g in group_columns], sort=False).transform("min")
        else:
            earliest = values.min()
        days[name] = (values - earliest).astype("float64")
        dates[name] = pd.Series(serial_dates(values.to_numpy()), index=frame.index)
    return pd.DataFrame(days, index=frame.index), pd.DataFrame(dates, index=frame.index)
