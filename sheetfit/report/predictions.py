"""The predictions workbook `sheetfit predict` writes: the new rows as given, their predictions, an about sheet.

With savings (`sheetfit predict --actual COL`) the savings sheet comes first (report.savings) and the
predictions table gains the per-row savings columns. Computes nothing: the predictions come from
`sheetfit.prediction.compute.predict_cells`, the savings from `sheetfit.prediction.savings`. More rows
than a sheet holds continue on `predictions (2)`, `predictions (3)`… as the results workbook's long
tables do (report.tables).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..prediction.inverse import (BELOW_LOQ, MEASUREMENTS, OUTSIDE_RANGE, READ_BACK, READ_BACK_LOW,
    READ_BACK_STD_ERROR)
from ..prediction.savings import LEFT_OUT_BECAUSE, Savings
from ..results.headers import (AVERAGE_LOW, EXTRAPOLATION, MEAN_STD_ERROR, NEW_ROW_LOW, PREDICTED,
    PREDICTION_REASON, cell_text, rename_note, renamed, shown_names)
from ..results.store import ModelStore
from . import tables
from .book import WORKBOOK_OPTIONS, print_title
from .columns import Column
from .safe import atomic_output, output_error, scratch_folder
from .savings import SHEET as SAVINGS_SHEET
from .savings import (SIDE_MARGIN, TableLayout, TableLook, plan_table, savings_about_lines, savings_sheet, set_columns,
    table_look, write_header, write_rows)
from .styles import HIGHLIGHTS as PALETTE
from .styles import Styles
from .tables import PRINT_FIT_WIDTH, ROW_HEIGHT, Rule, highlight_rows, wrapped_lines

SHEET = "predictions"
MAX_DATA_ROWS = tables.MAX_DATA_ROWS            # data rows per sheet (a sheet holds 1,048,576 rows)
ZIP64_CELLS = 40_000_000                          # beyond this many cells the archive may pass 4 GB
SOURCE_ROW = "source row"
TEXT_WIDTH = 40                 # characters: longer texts (the user's too) wrap at this width
WIDTHS = {EXTRAPOLATION: 30, PREDICTION_REASON: 40, LEFT_OUT_BECAUSE: 40, OUTSIDE_RANGE: 30, BELOW_LOQ: 20}      # these columns hold sentences
ITEM_WIDTH, VALUE_WIDTH = 30, 100                 # the about sheet's two columns (characters; both wrap)
HIGHLIGHTS = (Rule(PREDICTION_REASON, 'LEN({c})>0', "left_out"),
              Rule(LEFT_OUT_BECAUSE, 'LEN({c})>0', "left_out"),
              Rule(EXTRAPOLATION, 'LEFT({c},3)="yes"', "check_failed"),
              Rule(OUTSIDE_RANGE, 'LEFT({c},3)="yes"', "check_failed"),
              Rule(BELOW_LOQ, 'LEFT({c},3)="yes"', "check_failed"))


def write_predictions(target: Path, overwrite: bool, store: ModelStore, frame: pd.DataFrame,
                      src_rows: np.ndarray, preds: pd.DataFrame, about: tuple[tuple[str, str], ...],
                      savings: Savings | None = None, inverse: bool = False) -> list[str]:
    """The predictions workbook at `target`: complete or not at all (see report.safe).

    With `savings` (rows in the order of `preds`), the savings sheet comes first and the per-row
    savings columns follow the predictions. Returns the names of the predictions sheets. A full
    disk, a name too long for the file system or another OS error while writing is an OutputError
    naming `target`.
    """
    import xlsxwriter
    from xlsxwriter.exceptions import FileCreateError, FileSizeError

    done = int(preds[READ_BACK if inverse else PREDICTED].notna().sum())
    saved = savings_about_lines(savings) if savings is not None else []
    if savings is not None:
        preds = pd.concat([preds.reset_index(drop=True), savings.rows.reset_index(drop=True)], axis=1)
    user = [str(c) for c in frame.columns]
    shown = shown_names(user, [SOURCE_ROW, *preds.columns])    # a user column never takes one of our names
    given = _cell_types(frame.reset_index(drop=True).set_axis(shown, axis=1))
    table = pd.concat([pd.DataFrame({SOURCE_ROW: src_rows}), given, preds.reset_index(drop=True)], axis=1)
    pairs = renamed(user, shown)
    about = (*about, *((("renamed columns", rename_note(pairs)),) if pairs else ()))
    try:
        with scratch_folder() as scratch, atomic_output(target, overwrite) as tmp:
            wb = xlsxwriter.Workbook(str(tmp), {**WORKBOOK_OPTIONS, "tmpdir": str(scratch)})
            if len(table) * max(len(table.columns), 1) > ZIP64_CELLS:
                wb.use_zip64()
            st, look, title = Styles(wb), table_look(wb), dict(about).get("new rows", "")
            if savings is not None:
                ws = wb.add_worksheet(SAVINGS_SHEET)
                print_title(ws, title)
                savings_sheet(ws, st, look, savings)
            names = _predictions_sheets(wb, st, look, table, title)
            ws = wb.add_worksheet("about")
            print_title(ws, title)
            lines = (_inverse_about_lines if inverse else _about_lines)(store, len(table), done)
            _about_sheet(ws, st, [*about, *lines, *saved, *_split_lines(names)])
            wb.close()
    except (OSError, FileCreateError, FileSizeError) as exc:
        raise output_error(target, exc) from None
    return names


def _predictions_sheets(wb: Any, st: Styles, look: TableLook, table: pd.DataFrame, title: str) -> list[str]:
    """The table on as many sheets as its rows need, each with its header row."""
    n = len(table)
    columns = [Column(h, table.iloc[:, j], n) for j, h in enumerate(table.columns)]
    caps = {**{c.header: TEXT_WIDTH for c in columns}, **WIDTHS}
    layout = plan_table(st, look, columns, caps)
    names = []
    for part in range(max(1, -(-n // MAX_DATA_ROWS))):
        name = SHEET if part == 0 else f"{SHEET} ({part + 1})"
        lo, hi = part * MAX_DATA_ROWS, min(n, (part + 1) * MAX_DATA_ROWS)
        ws = wb.add_worksheet(name)
        print_title(ws, title)
        _predictions_sheet(ws, st, layout, columns, lo, hi)
        names.append(name)
    return names


def _predictions_sheet(ws: Any, st: Styles, layout: TableLayout, columns: list[Column], lo: int, hi: int) -> None:
    """Rows lo..hi: source row, the columns given, then the results (reasons and extrapolation lit)."""
    n = hi - lo
    set_columns(ws, layout)
    headers = [c.header for c in columns]
    write_header(ws, layout, headers, 0)
    write_rows(ws, layout, columns, 1, lo, hi)
    ws.freeze_panes(1, 0)
    ws.autofilter(0, 0, max(n, 1), len(columns) - 1)
    ws.set_landscape()
    ws.set_margins(left=SIDE_MARGIN, right=SIDE_MARGIN)
    ws.repeat_rows(0)
    if layout.total_width <= PRINT_FIT_WIDTH:         # printed: every column on the page width
        ws.fit_to_pages(1, 0)
    if n:
        highlight_rows(ws, st, headers, HIGHLIGHTS, n)


def _cell_types(frame: pd.DataFrame) -> pd.DataFrame:
    """The new rows as the sheet shows them: a column read as cells that are all numbers (or all dates)
    becomes a number (date) column, so it takes one number (date) format and aligns as numbers do.
    Values stay as read; a column mixing kinds stays as it is, each cell written as itself."""
    out = frame.copy()
    for j in range(frame.shape[1]):
        col = frame.iloc[:, j]
        kind = pd.api.types.infer_dtype(col, skipna=True) if col.dtype == object else ""
        try:
            if kind in ("integer", "floating", "mixed-integer-float"):
                col = pd.to_numeric(col)
            elif kind in ("date", "datetime"):
                col = pd.to_datetime(col)
        except (ValueError, TypeError, OverflowError):     # e.g. a date outside what pandas holds
            continue
        out.isetitem(j, col)
    return out


def _split_lines(names: list[str]) -> list[tuple[str, str]]:
    if len(names) < 2:
        return []
    return [("sheets", f"more rows than a sheet holds ({MAX_DATA_ROWS:,} data rows each), so the table "
                       f"continues on {', '.join(repr(s) for s in names[1:])}")]


def _about_lines(store: ModelStore, n: int, done: int) -> list[tuple[str, str]]:
    """What the model was and what every result column means."""
    return [("response", store.y), ("terms", ", ".join(store.term_labels)),
            ("confidence level", f"{store.level:g}"),
            ("rows", f"{n}: {done} predicted, {n - done} with a reason instead"),
            (PREDICTED, "Σ coefficient × term value at the row's inputs"),
            (MEAN_STD_ERROR, "√(residual variance × x'(X'X)⁻¹x), x the row's term values"),
            (f"{AVERAGE_LOW} / high", f"{PREDICTED} ∓ t · {MEAN_STD_ERROR}: where the group's average lies at "
             "the row's inputs (the confidence interval of the mean)"),
            (f"{NEW_ROW_LOW} / high", f"{PREDICTED} ∓ t · √(residual variance + {MEAN_STD_ERROR}²): where one "
             "new row lies (the prediction interval)"),
            ("t", "t quantile at the confidence level with the group's residual degrees of freedom"),
            (EXTRAPOLATION, "yes when an input lies outside the group's observed range: "
             "the model was not fitted there, so trust the numbers less"),
            ("colours", f"{_colour('check_failed')} rows extrapolate; {_colour('left_out')} rows could not be "
             f"predicted (see {PREDICTION_REASON})")]


def _inverse_about_lines(store: ModelStore, n: int, done: int) -> list[tuple[str, str]]:
    """What the calibration line was and what every read-back column means (`sheetfit predict --inverse`)."""
    x = store.sources[0]
    return [("response", store.y), ("input read back", x), ("confidence level", f"{store.level:g}"),
            ("rows", f"{n}: {done} read back, {n - done} with a reason instead"),
            (READ_BACK, f"(response − constant) / slope: the value of {x} whose line value is the measured "
             "response (inverse prediction)"),
            (READ_BACK_STD_ERROR, "s/|slope| · √(1/m + 1/n + (response − ȳ)² / (slope² · Sxx)): s the residual std "
             f"error, n the standards, ȳ their mean response, Sxx = Σ({x} − mean)², m the {MEASUREMENTS}"),
            (f"{READ_BACK_LOW} / high", f"{READ_BACK} ∓ t · {READ_BACK_STD_ERROR}; empty when the slope is not "
             "distinguishable from zero at the confidence level (the interval would be unbounded)"),
            (MEASUREMENTS, "how many measurements the response averages (1 unless a --replicates column gives it)"),
            (OUTSIDE_RANGE, "yes when the response lies beyond the line's values at the lowest and highest "
             "standard: the value is extrapolated, so trust it less"),
            (BELOW_LOQ, "yes when the read-back value is below the limit of quantification 10·s/|slope| "
             "(ICH Q2, from the calibration line)"),
            ("t", "t quantile at the confidence level with the group's residual degrees of freedom"),
            ("colours", f"{_colour('check_failed')} rows are outside the calibrated range or below the limit; "
             f"{_colour('left_out')} rows were not read back or have no interval (see {PREDICTION_REASON})")]


def _colour(key: str) -> str:
    """The legend's name of a highlight colour."""
    return next(h.colour_name for h in PALETTE if h.key == key)


def _about_sheet(ws: Any, st: Styles, lines: list[tuple[str, str]]) -> None:
    """Two columns, item and value, both wrapped and top-aligned; each row as tall as its longer text."""
    ws.set_column(0, 0, ITEM_WIDTH, st.wrap)
    ws.set_column(1, 1, VALUE_WIDTH, st.wrap)
    ws.set_landscape()
    ws.fit_to_pages(1, 0)
    ws.repeat_rows(0)
    ws.write_row(0, 0, ["item", "value"], st.header)
    for r, (item, text) in enumerate(lines, start=1):
        item, text = cell_text(str(item)), cell_text(str(text))
        height = max(wrapped_lines(item, ITEM_WIDTH), wrapped_lines(text, VALUE_WIDTH))
        if height > 1:                    # applications do not grow a row for wrapped text on opening
            ws.set_row(r, ROW_HEIGHT * height)
        ws.write_string(r, 0, item)
        ws.write_string(r, 1, text)
    ws.freeze_panes(1, 0)
