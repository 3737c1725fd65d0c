"""The predictions workbook `sheetfit predict` writes: the new rows as given, their predictions, an about sheet.

Computes nothing: the predictions come from `sheetfit.prediction.compute.predict_cells`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..results.store import ModelStore
from .book import WORKBOOK_OPTIONS
from .columns import Column
from .safe import atomic_output
from .styles import Styles
from .tables import Rule, highlight_rows

WIDTHS = {"extrapolation": 50, "reason": 60}      # these columns hold sentences
HIGHLIGHTS = (Rule("reason", 'LEN({c})>0', "left_out"), Rule("extrapolation", 'LEFT({c},3)="yes"', "check_failed"))


def write_predictions(target: Path, overwrite: bool, store: ModelStore, frame: pd.DataFrame,
                      src_rows: np.ndarray, preds: pd.DataFrame, about: tuple[tuple[str, str], ...]) -> None:
    """The predictions workbook at `target`: complete or not at all (see report.safe)."""
    import xlsxwriter

    table = pd.concat([pd.DataFrame({"source row": src_rows}), frame.reset_index(drop=True),
                       preds.reset_index(drop=True)], axis=1)
    with atomic_output(target, overwrite) as tmp:
        wb = xlsxwriter.Workbook(str(tmp), {**WORKBOOK_OPTIONS, "constant_memory": False})
        st = Styles(wb)
        _predictions_sheet(wb.add_worksheet("predictions"), st, table)
        done = int(preds["predicted"].notna().sum())
        _about_sheet(wb.add_worksheet("about"), st, [*about, *_about_lines(store, len(table), done)])
        wb.close()


def _predictions_sheet(ws: Any, st: Styles, table: pd.DataFrame) -> None:
    """One row per new row: source row, the columns given, then the results (reasons and extrapolation lit)."""
    n = len(table)
    columns = [Column(h, table.iloc[:, j], n) for j, h in enumerate(table.columns)]
    for j, col in enumerate(columns):
        wide = WIDTHS.get(col.header, min(col.width, 40))
        ws.set_column(j, j, wide, st.number(col.num_format) if col.num_format else None)
    ws.write_row(0, 0, [c.header for c in columns], st.header)
    for r, row in enumerate(zip(*(c.block(0, n) for c in columns)), start=1):
        ws.write_row(r, 0, row)
    ws.freeze_panes(1, 0)
    ws.autofilter(0, 0, max(n, 1), len(columns) - 1)
    if n:
        highlight_rows(ws, st, [c.header for c in columns], HIGHLIGHTS, n)


def _about_lines(store: ModelStore, n: int, done: int) -> list[tuple[str, str]]:
    """What the model was and what every result column means."""
    return [("response", store.y), ("terms", ", ".join(store.term_labels)),
            ("confidence level", f"{store.level:g}"),
            ("rows", f"{n}: {done} predicted, {n - done} with a reason instead"),
            ("predicted", "Σ coefficient × term value at the row's inputs"),
            ("std error of mean", "√(residual variance × x'(X'X)⁻¹x), x the row's term values"),
            ("mean CI low, mean CI high", "predicted ∓ t · std error of mean: where the group's mean lies"),
            ("prediction low, prediction high", "predicted ∓ t · √(residual variance + std error of mean²): "
             "where one new observation lies"),
            ("t", "t quantile at the confidence level with the group's residual degrees of freedom"),
            ("extrapolation", "yes when an input lies outside the group's observed range: "
             "the model was not fitted there, so trust the numbers less"),
            ("colours", "amber rows extrapolate; slate rows could not be predicted (see reason)")]


def _about_sheet(ws: Any, st: Styles, lines: list[tuple[str, str]]) -> None:
    """Two columns, item and value."""
    ws.set_column(0, 0, 28)
    ws.set_column(1, 1, 100, st.wrap)
    ws.write_row(0, 0, ["item", "value"], st.header)
    for r, (item, text) in enumerate(lines, start=1):
        ws.write_string(r, 0, item)
        ws.write_string(r, 1, str(text))
