"""The `model store` sheet: places the store's prepared cells with xlsxwriter and gives them their formats.

What each cell holds and where it sits comes from `sheetfit.results.store` (store_settings,
term_rows, group_headers, group_columns) and `sheetfit.results.store_layout`, the same code
`read_store` reads the sheet back with.
"""

from __future__ import annotations

import math
from typing import Any

from ..results.store import (
    ModelStore,
    StoreColumn,
    group_columns,
    group_headers,
    store_settings,
    term_rows,
)
from ..results.store_layout import (
    INACTIVE_NOTE,
    INACTIVE_NOTE_ROW,
    NOTE_ROW,
    SETTING_HEADER,
    SETTING_HEADER_ROW,
    STORE_NOTE,
    STORE_TITLE,
    TERM_COLUMNS,
    TITLE_ROW,
    StoreLayout,
)
from ..results.headers import cell_text
from . import fastrows
from .columns import SCIENTIFIC

SCIENTIFIC_PARTS = ("residual variance", "coefficient", "(X'X)⁻¹")   # shown as 1.234E-05


def fill_store(ws: Any, store: ModelStore, lay: StoreLayout, st: Any, bulk: Any = None) -> None:
    """Write the store sheet row by row; `bulk` (WriteContext.add_bulk) lets many groups take the fast path."""
    ws.set_column(0, 0, 26)
    ws.set_column(1, lay.width - 1, 16)
    ws.set_landscape()
    ws.fit_to_pages(1, 0)
    ws.write_string(TITLE_ROW, 0, STORE_TITLE, st.title)
    ws.write_string(NOTE_ROW, 0, STORE_NOTE, st.note)
    if lay.extras:
        ws.write_string(INACTIVE_NOTE_ROW, 0, INACTIVE_NOTE, st.note)
    ws.write_row(SETTING_HEADER_ROW, 0, list(SETTING_HEADER), st.header)
    for i, (name, values) in enumerate(store_settings(store)):
        ws.write_string(lay.first_setting + i, 0, name)
        for j, v in enumerate(values):
            _put(ws, lay.first_setting + i, 1 + j, v)
    ws.write_row(lay.term_header, 0, list(TERM_COLUMNS), st.header)
    for i, row in enumerate(term_rows(store)):
        for j, v in enumerate(row):
            _put(ws, lay.term_header + 1 + i, j, v)
    ws.write_row(lay.group_header, 0, group_headers(store), st.header)
    sci = st.number(SCIENTIFIC)
    columns = [(c, sci if c.part in SCIENTIFIC_PARTS else None) for c in group_columns(store, lay)]
    # a change-point store always takes the bulk path, which keeps every bit of each number (τ too)
    if bulk is not None and (lay.extras or fastrows.use_fast(len(store), lay.width)):
        bulk(ws, lay.first, [(c.col, c.values, fmt) for c, fmt in columns])
    else:
        for g in range(len(store)):
            _group_row(ws, lay.first + g, g, columns)
    ws.freeze_panes(0, 1)


def _put(ws: Any, r: int, c: int, v: Any) -> None:
    """A settings or terms cell: text as text (cut to what a cell holds), numbers as numbers."""
    if isinstance(v, str):
        ws.write_string(r, c, cell_text(v))
    else:
        ws.write_number(r, c, v)


def _group_row(ws: Any, r: int, g: int, columns: list[tuple[StoreColumn, Any]]) -> None:
    """One group's row of the store: text as text, finite numbers as numbers, the rest left empty."""
    for c, fmt in columns:
        v = c.values[g]
        if isinstance(v, str):
            ws.write_string(r, c.col, cell_text(v))
        elif math.isfinite(v):
            ws.write_number(r, c.col, v.item() if hasattr(v, "item") else v, fmt)
