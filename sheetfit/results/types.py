"""Plain data passed between stages: frozen dataclasses holding tidy pandas DataFrames.

Column names of the result tables are the headers of the results workbook (see README);
the writer formats these tables and computes no statistics.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from ..job import FitJob
from ..terms import Term

SOURCE_SHEET = "source sheet"
SOURCE_ROW = "source row"
REASON = "reason"
INTERCEPT = "(intercept)"
BLANK_GROUP = "(blank)"


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
    each group column (str labels; blank → BLANK_GROUP), each needed numeric column
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


@dataclass(frozen=True)
class FitResults:
    """Everything the results workbook shows; each table uses the workbook's column headers.

    groups        one row per group: keys, status, flags, reasons, n, rows dropped, parameters,
                  R², adjusted R², residual std error, RMSE, CV(RMSE) %, F, F p-value, AIC, BIC, …
    coefficients  group × term: keys, term, estimate, std error, t, p-value, CI low, CI high, VIF,
                  robust std error columns when computed
    checks        group × check: keys, check, statistic, p-value, adjusted p-value, threshold,
                  verdict (pass / fail / n/a), note
    observations  input row: keys, source sheet, source row, y and source x columns, used, reason,
                  fitted, residual, studentized residual, leverage, Cook's distance, row flags
    curves        one-source-column models: keys, x, fitted, mean CI low, mean CI high (grid)
    quantiles     keys, normal quantile, standardized residual (sorted; for quantile plots)
    xtx_inverse   keys, row term, column term, value: (X'X)^-1 of each fitted group
    input_ranges  keys, column, min, max: observed range of each source column per group
    about         ordered (item, value) pairs: provenance, settings, counts, timings
    """

    job: FitJob
    group_columns: tuple[str, ...]
    y: str
    terms: tuple[Term, ...]
    groups: pd.DataFrame
    coefficients: pd.DataFrame
    checks: pd.DataFrame
    observations: pd.DataFrame
    curves: pd.DataFrame
    quantiles: pd.DataFrame
    xtx_inverse: pd.DataFrame
    input_ranges: pd.DataFrame
    info: ReadInfo
    about: tuple[tuple[str, Any], ...] = field(default_factory=tuple)

    @property
    def term_labels(self) -> tuple[str, ...]:
        """Coefficient labels in design order, intercept first when present."""
        labels = tuple(t.label for t in self.terms)
        return ((INTERCEPT,) + labels) if self.job.intercept else labels
