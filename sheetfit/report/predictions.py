"""The predictions workbook `sheetfit predict` writes: the new rows as given, their predictions, an about sheet.

Computes nothing: the predictions come from `sheetfit.prediction.compute.predict_cells`. More rows
than a sheet holds continue on `predictions (2)`, `predictions (3)`… as the results workbook's long
tables do (report.tables).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..results.headers import (AVERAGE_HIGH, AVERAGE_LOW, EXTRAPOLATION, MEAN_STD_ERROR, NEW_ROW_HIGH,
    NEW_ROW_LOW, PREDICTED, PREDICTION_REASON, cell_text, rename_note, renamed, shown_names)
from ..results.store import ModelStore
from . import tables
from .book import WORKBOOK_OPTIONS
from .columns import Column
from .safe import atomic_output, output_error, scratch_folder
from .styles import HIGHLIGHTS as PALETTE
from .styles import Styles
from .tables import Rule, highlight_rows

SHEET = "predictions"
MAX_DATA_ROWS = tables.MAX_DATA_ROWS            # data rows per sheet (a sheet holds 1,048,576 rows)
ZIP64_CELLS = 40_000_000                          # beyond this many cells the archive may pass 4 GB
SOURCE_ROW = "source row"
WIDTHS = {EXTRAPOLATION: 50, PREDICTION_REASON: 60}      # these columns hold sentences
HIGHLIGHTS = (Rule(PREDICTION_REASON, 'LEN({c})>0', "left_out"),
              Rule(EXTRAPOLATION, 'LEFT({c},3)="yes"', "check_failed"))


def write_predictions(target: Path, overwrite: bool, store: ModelStore, frame: pd.DataFrame,
                      src_rows: np.ndarray, preds: pd.DataFrame, about: tuple[tuple[str, str], ...]) -> list[str]:
    """The predictions workbook at `target`: complete or not at all (see report.safe).

    Returns the names of the predictions sheets. A full disk, a name too long for the file system
    or another OS error while writing is an OutputError naming `target`.
    """
    import xlsxwriter
    from xlsxwriter.exceptions import FileCreateError, FileSizeError

    user = [str(c) for c in frame.columns]
    shown = shown_names(user, [SOURCE_ROW, *preds.columns])    # a user column never takes one of our names
    given = frame.reset_index(drop=True).set_axis(shown, axis=1)
    table = pd.concat([pd.DataFrame({SOURCE_ROW: src_rows}), given, preds.reset_index(drop=True)], axis=1)
    pairs = renamed(user, shown)
    about = (*about, *((("renamed columns", rename_note(pairs)),) if pairs else ()))
    try:
        with scratch_folder() as scratch, atomic_output(target, overwrite) as tmp:
            wb = xlsxwriter.Workbook(str(tmp), {**WORKBOOK_OPTIONS, "tmpdir": str(scratch)})
            if len(table) * max(len(table.columns), 1) > ZIP64_CELLS:
                wb.use_zip64()
            st = Styles(wb)
            names = _predictions_sheets(wb, st, table)
            done = int(preds[PREDICTED].notna().sum())
            _about_sheet(wb.add_worksheet("about"), st,
                         [*about, *_about_lines(store, len(table), done), *_split_lines(names)])
            wb.close()
    except (OSError, FileCreateError, FileSizeError) as exc:
        raise output_error(target, exc) from None
    return names


def _predictions_sheets(wb: Any, st: Styles, table: pd.DataFrame) -> list[str]:
    """The table on as many sheets as its rows need, each with its header row."""
    n = len(table)
    columns = [Column(h, table.iloc[:, j], n) for j, h in enumerate(table.columns)]
    names = []
    for part in range(max(1, -(-n // MAX_DATA_ROWS))):
        name = SHEET if part == 0 else f"{SHEET} ({part + 1})"
        lo, hi = part * MAX_DATA_ROWS, min(n, (part + 1) * MAX_DATA_ROWS)
        _predictions_sheet(wb.add_worksheet(name), st, columns, lo, hi)
        names.append(name)
    return names


def _predictions_sheet(ws: Any, st: Styles, columns: list[Column], lo: int, hi: int) -> None:
    """Rows lo..hi: source row, the columns given, then the results (reasons and extrapolation lit)."""
    n = hi - lo
    for j, col in enumerate(columns):
        wide = WIDTHS.get(col.header, min(col.width, 40))
        ws.set_column(j, j, wide, st.number(col.num_format) if col.num_format else None)
    ws.write_row(0, 0, [c.header for c in columns], st.header)
    for start in range(lo, hi, tables.BLOCK_ROWS):
        stop = min(hi, start + tables.BLOCK_ROWS)
        for r, row in enumerate(zip(*(c.block(start, stop) for c in columns)), start=start - lo + 1):
            ws.write_row(r, 0, row)
    ws.freeze_panes(1, 0)
    ws.autofilter(0, 0, max(n, 1), len(columns) - 1)
    if n:
        highlight_rows(ws, st, [c.header for c in columns], HIGHLIGHTS, n)


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


def _colour(key: str) -> str:
    """The legend's name of a highlight colour."""
    return next(h.colour_name for h in PALETTE if h.key == key)


def _about_sheet(ws: Any, st: Styles, lines: list[tuple[str, str]]) -> None:
    """Two columns, item and value."""
    ws.set_column(0, 0, 28)
    ws.set_column(1, 1, 100, st.wrap)
    ws.write_row(0, 0, ["item", "value"], st.header)
    for r, (item, text) in enumerate(lines, start=1):
        ws.write_string(r, 0, cell_text(str(item)))
        ws.write_string(r, 1, cell_text(str(text)))
