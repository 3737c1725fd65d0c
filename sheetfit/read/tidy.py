"""What reading hands to the next stages: tidy rows with their source, and where they came from."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from ..terms import Term

SOURCE_SHEET = "source sheet"
SOURCE_ROW = "source row"
REASON = "reason"


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


@dataclass(frozen=True)
class Observations:
    """Tidy rows from the reader, one per non-blank input row, in source order.

    `data` columns: SOURCE_SHEET (str), SOURCE_ROW (int, 1-based row in the sheet),
    each group column (str labels; a blank cell → cells.BLANK_LABEL), each needed numeric column
    (float64, NaN where the cell could not be used), and REASON ('' when every needed cell
    parsed, else plain words such as 'Load kWh: empty cell; Pallets: error value #N/A').
    Date/time columns are days since the group's earliest date.
    """

    data: pd.DataFrame
    group_columns: tuple[str, ...]
    y: str
    terms: tuple[Term, ...]
    order: str | None
    numeric_columns: tuple[str, ...]      # y, term source columns, order column (no repeats)
    info: ReadInfo
