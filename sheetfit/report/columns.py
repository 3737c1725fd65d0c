"""Column preparation for fast row-by-row writing: cell values in bulk, formats and widths per column.

Every column is converted once, vectorised; rows are then handed to xlsxwriter's write_row in
blocks, so the per-cell Python work is only xlsxwriter's own.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ..results.headers import (ADJUSTED_R2, CELL_LIMIT, CONDITION_NUMBER, COEFFICIENT_COUNT, CV_RMSE, FLAGS,
    HIGH_LEVERAGE_ROWS, INFLUENTIAL_ROWS, LEVERAGE, OUTLYING_ROWS, R2, ROWS_NOT_USED, ROWS_USED, STUDENTIZED,
    cell_text)

MAX_TEXT = CELL_LIMIT  # UTF-16 units a cell's text can hold; longer text is cut, ending in …

COUNT_COLUMNS = {FLAGS, ROWS_USED, ROWS_NOT_USED, COEFFICIENT_COUNT, "source row", "HAC lag",
                 HIGH_LEVERAGE_ROWS, OUTLYING_ROWS, INFLUENTIAL_ROWS, "rows read"}
FIXED_FORMATS = {
    R2: "0.0000", ADJUSTED_R2: "0.0000", LEVERAGE: "0.0000", CV_RMSE: "0.00",
    STUDENTIZED: "0.000", "standardized residual": "0.000", "normal quantile": "0.000",
    "VIF": "0.00", CONDITION_NUMBER: "0.0",
}
P_VALUE_FORMAT = "[<0.0001]0.00E+00;0.0000"   # small p-values in powers of ten, the rest as 0.0123
SCIENTIFIC = "0.000E+00"
DATE_FORMAT = "yyyy-mm-dd hh:mm"
DAY_FORMAT, SECONDS_FORMAT = "yyyy-mm-dd", "yyyy-mm-dd hh:mm:ss"
CLOCK_FORMAT, CLOCK_SECONDS_FORMAT = "hh:mm", "hh:mm:ss"
DATE_FORMATS = (DAY_FORMAT, DATE_FORMAT, SECONDS_FORMAT, CLOCK_FORMAT, CLOCK_SECONDS_FORMAT)
_EXCEL_EPOCH = np.datetime64("1899-12-30")


def date_format(days: np.ndarray) -> str:
    """The date format that shows what spreadsheet day numbers hold: the date, with the time of day only
    when some value has one (seconds only when some value has them); times alone below day 1."""
    v = days[np.isfinite(days)]
    seconds = np.round(np.mod(v, 1.0) * 86_400.0, 3)
    if not v.size or not seconds.any():
        return DAY_FORMAT
    to_the_second = bool(np.any(np.mod(seconds, 60.0)))
    if v.min() >= 0 and v.max() < 1:
        return CLOCK_SECONDS_FORMAT if to_the_second else CLOCK_FORMAT
    return SECONDS_FORMAT if to_the_second else DATE_FORMAT


def number_format(header: str, values: np.ndarray) -> str:
    """A display format that shows sensible digits for this column (cells keep full precision)."""
    if header in FIXED_FORMATS:
        return FIXED_FORMATS[header]
    if header in COUNT_COLUMNS:
        return "0"
    if "p-value" in header:           # also `robust p-value (HC3)`, `HAC p-value`
        return P_VALUE_FORMAT
    v = np.abs(values[np.isfinite(values)])
    v = v[v > 0]
    if v.size == 0:
        return "0"
    if np.all(v == np.round(v)) and v.max() < 1e10:
        return "0"
    sample = v[:: v.size // 20_000] if v.size > 20_000 else v
    lo, hi = np.percentile(sample, [5, 95])
    if hi >= 1e7 or hi < 1e-3:
        return SCIENTIFIC
    if hi / lo > 1e5:
        return "General"   # magnitudes too varied for one fixed number of decimals
    decimals = min(6, max(0, 3 - math.floor(math.log10(lo))))
    for k in range(decimals):        # data typed with fewer decimals (e.g. 47.9) keep their look
        scaled = v * 10.0**k
        if np.all(np.abs(scaled - np.round(scaled)) <= 1e-9 * np.maximum(scaled, 1.0)):
            decimals = k
            break
    return "0" if decimals == 0 else "0." + "0" * decimals


MAX_WIDTH = 60          # characters: the widest column; longer text wraps
FILTER_BUTTON = 3       # characters a header needs beside its autofilter button
BOLD = 1.1              # a bold header is about this much wider than its number of characters


def shown_width(values: np.ndarray, num_format: str) -> int:
    """Characters of the widest finite value of `values` as `num_format` shows it (about)."""
    v = values[np.isfinite(values)] if values.dtype.kind == "f" else values
    if v.size == 0:
        return 1
    lo, hi = float(v.min()), float(v.max())
    sign = 1 if lo < 0 else 0
    if num_format == P_VALUE_FORMAT:
        return 8
    if num_format == SCIENTIFIC:
        return 9 + sign
    if num_format in DATE_FORMATS:
        return len(num_format)
    if num_format == "General":
        return 11 + sign                  # General shows at most about 11 characters
    decimals = len(num_format.split(".", 1)[1]) if "." in num_format else 0
    big = max(abs(lo), abs(hi))
    return max(len(f"{lo:.{decimals}f}"), len(f"{hi:.{decimals}f}"), len(f"{big:.{decimals}f}") + sign)


def fit_width(header: str, shown: float) -> float:
    """A column width showing its header (with filter button) and its widest shown value, capped."""
    return min(max(math.ceil(len(header) * BOLD) + FILTER_BUTTON, shown + 2, 8), MAX_WIDTH)


class Column:
    """One table column ready to write: cell values by row block, format, width and counts."""

    def __init__(self, header: str, series: pd.Series | None, n_rows: int) -> None:
        self.header = cell_text(str(header))
        self.n_rows = n_rows
        self.num_format: str | None = None
        self.undefined = 0     # NaN numbers written as empty cells
        self.infinite = 0      # ±inf written as empty cells
        self.cut = 0           # texts cut to MAX_TEXT characters
        self.chars = 0         # characters of text in the column
        self.widest = 0        # characters of its longest text
        self.timezone_dropped = False
        self._bad: np.ndarray | None = None
        self._mixed = False
        if series is None:                                     # contract column not computed
            self.kind = "empty"
            self._array = np.full(n_rows, None, dtype=object)
            self.width = len(self.header) + 4
            return
        dtype = series.dtype
        if pd.api.types.is_bool_dtype(dtype):
            self._text(series.map({True: "yes", False: "no"}))
        elif pd.api.types.is_datetime64_any_dtype(dtype):
            self._datetime(series)
        elif pd.api.types.is_numeric_dtype(dtype):
            self._numbers(series)
        else:
            self._text(series)

    def _numbers(self, series: pd.Series) -> None:
        self.kind = "number"
        if pd.api.types.is_integer_dtype(series.dtype) and not series.hasnans:
            self._array = series.to_numpy(dtype=np.int64)
            self.num_format = "0"
        else:
            a = series.to_numpy(dtype=np.float64, na_value=np.nan)
            finite = np.isfinite(a)
            if not finite.all():
                nan = np.isnan(a)
                self.undefined = int(nan.sum())
                self.infinite = int((~finite).sum()) - self.undefined
                self._bad = ~finite
            self._array = a
            self.num_format = number_format(self.header, a)
        self.set_format(self.num_format)

    def set_format(self, num_format: str) -> None:
        """Show the numbers with `num_format`, the width following what it shows."""
        self.num_format = num_format
        self.width = max(fit_width(self.header, shown_width(self._array, num_format)), 10)

    def _datetime(self, series: pd.Series) -> None:
        if getattr(series.dt, "tz", None) is not None:
            series = series.dt.tz_convert("UTC").dt.tz_localize(None)
            self.timezone_dropped = True
        raw = series.to_numpy()
        days = np.where(np.isnat(raw), np.nan, (raw - _EXCEL_EPOCH) / np.timedelta64(1, "D"))
        self._numbers(pd.Series(days, dtype=np.float64))
        self.undefined = 0 if self._bad is None else int(self._bad.sum())
        self.set_format(date_format(days))

    def _text(self, series: pd.Series) -> None:
        self.kind = "text"
        arr = series.to_numpy(dtype=object, na_value=None)
        inferred = pd.api.types.infer_dtype(arr, skipna=True)
        if inferred not in ("string", "empty"):
            self._mixed = True                                 # numbers and text in one column
            plain = np.empty(len(arr), dtype=object)
            plain[:] = [_plain(v) for v in arr]
            arr = plain
        texts = [v for v in arr if isinstance(v, str)] if self._mixed else list(filter(None, arr))
        lengths_all = list(map(len, texts))
        self.chars = sum(lengths_all)
        if max(lengths_all, default=0) > MAX_TEXT // 2:      # may pass the limit in UTF-16 units
            arr = arr.copy()
            cuts: dict[str, str] = {}           # a long text repeated on many rows is cut once
            for i, v in enumerate(arr):
                if isinstance(v, str) and len(v) > MAX_TEXT // 2:
                    cut = cuts.get(v)
                    if cut is None:
                        cut = cuts[v] = cell_text(v)
                    if cut is not v:
                        arr[i] = cut
                        self.cut += 1
        self._array = arr
        self.widest = max(lengths_all, default=0)
        self.width = fit_width(self.header, self.widest)

    def values(self, lo: int, hi: int) -> np.ndarray:
        """Rows lo..hi-1 as an array: int or float (non-finite = empty cell) or object (None = empty)."""
        return self._array[lo:hi]

    def block(self, lo: int, hi: int) -> list:
        """Cell values of rows lo..hi-1: numbers, strings, or None for an empty cell."""
        values = self._array[lo:hi].tolist()
        if self._bad is not None:
            bad = self._bad[lo:hi]
            if bad.any():
                for i in np.flatnonzero(bad).tolist():
                    values[i] = None
        return values


def _plain(v: object) -> object:
    """A mixed column's cell: finite numbers stay numbers, everything else becomes text."""
    if v is None or isinstance(v, str):
        return v
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, float, np.integer, np.floating)):
        if not math.isfinite(float(v)):
            return None
        return v.item() if isinstance(v, np.generic) else v
    return str(v)
