"""The `across groups` sheet: do the groups share their slopes, and which groups respond differently.

Computes nothing: the numbers come from `sheetfit.results.comparison`. The sheet opens with a title
and the notes (reference, assumption, std errors used, adjustment and its caution), then the tests
over all groups, then the group × input table (filterable, header frozen, flagged rows pale teal),
with a chart per input (up to MAX_CHARTS) to its right: each group's slope with its interval as error
bars, flagged groups deep teal, the slope of the other groups as a rust dash. The charts read a hidden
data sheet.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from xlsxwriter.utility import quote_sheetname, xl_col_to_name, xl_range_abs

from ..results.comparison import (ADJUSTED_P, CONCLUSION, DEGREES_OF_FREEDOM, DF_RESIDUAL, DF_TESTED, DIFFERENCE,
    GROUP_SLOPE, HOW_IT_DIFFERS, OTHERS_SLOPE, STATISTIC, TEST, TEST_HEADERS, ComparisonTables, group_labels)
from ..results.headers import INPUT, INTERVAL_HIGH, INTERVAL_LOW, P_VALUE, STD_ERROR, cell_text
from . import styles as S
from .book import WriteContext
from .columns import P_VALUE_FORMAT, Column, number_format
from .savings import (HEADER_PAD, TableLayout, TableLook, plan_table, print_wide, set_columns, table_look,
    write_header, write_rows)
from .tables import ROW_HEIGHT, wrapped_lines

SHEET = "across groups"
DATA_SHEET = "across groups data"
TITLE = "Do the groups respond alike? Each group's slopes against the other groups'"
TESTS_TITLE = "Tests over all compared groups"
TEXT_WIDTHS = {HOW_IT_DIFFERS: 36}     # a sentence: wrapped at this width
SLOPE_LIKE = (GROUP_SLOPE, OTHERS_SLOPE, DIFFERENCE, INTERVAL_LOW, INTERVAL_HIGH, STD_ERROR)
STAT_FORMAT = "0.000"
MAX_CHARTS = 3                 # inputs charted (the first ones, in term order)
MAX_CHART_GROUPS = 60          # groups on one chart: beyond this, the flagged and smallest adjusted p first
CHART_W, CHART_H = 620, 340    # pixels (a chart with many groups is wider)
ROW_PX = 20                    # pixels of a default row
CHART_ROWS = math.ceil(CHART_H / ROW_PX) + 1
DATA_COLUMNS = ("group", "slope", "slope (flagged)", "interval above", "interval below", "slope of the others")
LABEL_CHARS = 40               # characters of an input's label in a chart title


@dataclass(frozen=True)
class ChartBlock:
    """One input's chart: the charted groups' labels, slopes, flags, interval ends and references."""

    label: str
    groups: list[str]
    slope: np.ndarray
    flagged: np.ndarray
    low: np.ndarray
    high: np.ndarray
    reference: np.ndarray
    total: int                 # groups compared (more than charted when capped)


def comparison_sheet(ctx: WriteContext, tables: ComparisonTables | None = None) -> None:
    """Write the across-groups sheet (row by row, as constant_memory needs) and note it on `about`;
    `tables` default to the results' own comparison (nothing is written when there is none)."""
    tables = tables if tables is not None else getattr(ctx.results, "comparison", None)
    if tables is None:
        return
    st, look = ctx.styles, table_look(ctx.workbook)
    ws = ctx.add_sheet(SHEET)
    print_wide(ws)
    if tables.reason:
        ws.set_column(0, 0, 100)
        ws.write_string(0, 0, TITLE, st.title)
        for r, line in enumerate(tables.notes, start=1):
            ws.set_row(r, ROW_HEIGHT * wrapped_lines(line, 100))
            ws.write_string(r, 0, line, look.note)
        ctx.note(ws.name, f"slopes not compared across groups: {tables.reason}")
        return
    slopes = tables.slopes
    n = len(slopes)
    columns = [Column(str(h), slopes.iloc[:, j], n) for j, h in enumerate(slopes.columns)]
    share_formats(columns)
    layout = plan_table(st, look, columns, TEXT_WIDTHS)
    set_columns(ws, layout)
    top = tests_block(ws, st, look, layout, tables, notes_block(ws, st, look, layout, tables)) + 1
    headers = [c.header for c in columns]
    write_header(ws, layout, headers, top)
    write_rows(ws, layout, columns, top + 1, 0, n)
    last = len(columns) - 1
    ws.freeze_panes(top + 1, 0)
    ws.autofilter(top, 0, top + max(n, 1), last)
    ws.repeat_rows(top)
    if n:
        how = xl_col_to_name(headers.index(HOW_IT_DIFFERS))
        ws.conditional_format(top + 1, 0, top + n, last, {
            "type": "formula", "criteria": f"=LEN(${how}{top + 2})>0", "format": st.highlight["check_failed"]})
    blocks = chart_blocks(tables)
    if blocks:
        data = ctx.reserve_data_sheet(DATA_SHEET, lambda sheet: fill_chart_data(sheet, blocks))
        for i, block in enumerate(blocks):
            ws.insert_chart(top + 1 + i * CHART_ROWS, last + 2, slope_chart(ctx, data, i, block, tables.level),
                            {"x_offset": 8, "y_offset": 4, "object_position": 3})
    where = f" (chart cells on '{DATA_SHEET}')" if blocks else ""
    ctx.note(ws.name, f"each group's slopes against the common slope of the other groups: "
                      f"{n // max(len(tables.inputs), 1)} groups compared, {tables.flagged_groups} flagged; the tests "
                      f"over all groups above the table; charts for {len(blocks)} input(s) beside it{where}")


def share_formats(columns: Sequence[Column]) -> None:
    """The slope-like columns show the same decimals, so a slope and its interval read alike; degrees of
    freedom show a decimal only when some are fractional (Welch–Satterthwaite)."""
    like = [c for c in columns if c.header in SLOPE_LIKE and c.kind == "number"]
    if like:
        fmt = number_format(DIFFERENCE, np.concatenate([np.asarray(c.values(0, c.n_rows), dtype=float)
                                                        for c in like]))
        for c in like:
            c.set_format(fmt)
    for c in columns:
        if c.header == DEGREES_OF_FREEDOM and c.kind == "number":
            v = np.asarray(c.values(0, c.n_rows), dtype=float)
            v = v[np.isfinite(v)]
            c.set_format("0" if np.all(v == np.round(v)) else "0.0")


def notes_block(ws: Any, st: Any, look: TableLook, layout: TableLayout, tables: ComparisonTables) -> int:
    """Title and notes, each note one merged wrapped row across the table; returns the next free row."""
    ws.write_string(0, 0, TITLE, st.title)
    last = len(layout.widths) - 1
    lines = [*tables.notes, chart_legend(tables.level)]
    for r, line in enumerate(lines, start=1):
        ws.set_row(r, ROW_HEIGHT * wrapped_lines(line, layout.total_width))   # a merged cell does not grow
        ws.merge_range(r, 0, r, last, line, look.note)
    return len(lines) + 2


def chart_legend(level: float) -> str:
    """What the charts beside the table show."""
    return (f"Charts (right of the table, first {MAX_CHARTS} inputs): each group's slope, with the {100 * level:g}% "
            "interval of its difference from the others drawn around it, beside a rust dash: the slope of the other "
            "groups it is compared with (a bar that misses the dash: the difference's interval leaves out 0). Deep "
            "teal = flagged, warm grey = not flagged.")


def tests_block(ws: Any, st: Any, look: TableLook, layout: TableLayout, tables: ComparisonTables, r: int) -> int:
    """The tests over all groups at row `r`, laid over the table's columns: the test's name across the
    key and input columns, its numbers under the first number columns, the conclusion across the rest.
    Returns the row after the block."""
    k, last = tables.key_count, len(layout.widths) - 1
    spans = [(0, k), (k + 1, k + 1), (k + 2, k + 2), (k + 3, k + 3), (k + 4, k + 4), (k + 5, last)]
    widths = [sum(layout.widths[a:b + 1]) for a, b in spans]
    ws.write_string(r, 0, TESTS_TITLE, st.section)
    r += 1
    heads = [look.header, *[look.header_number] * 4, look.header_indent]
    ws.set_row(r, ROW_HEIGHT + HEADER_PAD)
    for (a, b), text, fmt in zip(spans, TEST_HEADERS, heads):
        _cell(ws, r, a, b, text, fmt)
    formats = {STATISTIC: st.number(STAT_FORMAT), DF_TESTED: st.number("0"), DF_RESIDUAL: st.number("0"),
               P_VALUE: st.number(P_VALUE_FORMAT)}
    for row in tables.tests.itertuples(index=False):
        r += 1
        values = dict(zip(TEST_HEADERS, row))
        ws.set_row(r, ROW_HEIGHT * max(wrapped_lines(values[TEST], widths[0]),
                                       wrapped_lines(values[CONCLUSION], widths[-1])))
        _cell(ws, r, *spans[0], str(values[TEST]), look.wrap[False])
        for (a, _), header in zip(spans[1:5], TEST_HEADERS[1:5]):
            value = float(values[header])
            if np.isfinite(value):
                ws.write_number(r, a, value, formats[header])
            else:
                ws.write_blank(r, a, None, formats[header])
        _cell(ws, r, *spans[-1], str(values[CONCLUSION]), look.wrap[True])
    return r + 2


def _cell(ws: Any, r: int, first: int, last: int, text: str, fmt: Any) -> None:
    """Text in one cell, or merged across columns first..last."""
    if last > first:
        ws.merge_range(r, first, r, last, text, fmt)
    else:
        ws.write_string(r, first, text, fmt)


def chart_blocks(tables: ComparisonTables) -> list[ChartBlock]:
    """One block per charted input: all its groups, or when there are more than MAX_CHART_GROUPS the
    flagged ones and those with the smallest adjusted p-values, in table order."""
    slopes = tables.slopes
    labels = np.array(group_labels(slopes.iloc[:, :tables.key_count]), dtype=object)
    out = []
    for name in tables.inputs[:MAX_CHARTS]:
        rows = np.flatnonzero(slopes[INPUT].astype(str).to_numpy() == name)
        part = slopes.iloc[rows]
        flagged = part[HOW_IT_DIFFERS].astype(str).to_numpy() != ""
        if len(rows) > MAX_CHART_GROUPS:
            p = pd.to_numeric(part[ADJUSTED_P], errors="coerce").fillna(2.0).to_numpy()
            keep = np.sort(np.lexsort((p, ~flagged))[:MAX_CHART_GROUPS])
            rows, part, flagged = rows[keep], part.iloc[keep], flagged[keep]
        reference = _numbers(part, OTHERS_SLOPE)
        # the interval of the difference drawn around the group's slope (reference + [low, high]): a bar
        # that misses the reference's dash is a difference whose interval leaves out 0
        out.append(ChartBlock(name, [cell_text(s, 255) for s in labels[rows]], _numbers(part, GROUP_SLOPE), flagged,
                              reference + _numbers(part, INTERVAL_LOW), reference + _numbers(part, INTERVAL_HIGH),
                              reference, int((slopes[INPUT].astype(str) == name).sum())))
    return out


def _numbers(table: pd.DataFrame, header: str) -> np.ndarray:
    """A column of `table` as floats (NaN where empty)."""
    return pd.to_numeric(table[header], errors="coerce").to_numpy(dtype=float)


def fill_chart_data(ws: Any, blocks: Sequence[ChartBlock]) -> None:
    """The chart cells, one block of DATA_COLUMNS columns per input, written row by row."""
    width = len(DATA_COLUMNS) + 1
    for i, block in enumerate(blocks):
        for j, head in enumerate(DATA_COLUMNS):
            ws.write_string(0, i * width + j, head if j else f"group ({cell_text(block.label, 200)})")
    for r in range(max(len(b.groups) for b in blocks)):
        for i, block in enumerate(blocks):
            if r >= len(block.groups):
                continue
            c0, flagged = i * width, bool(block.flagged[r])
            ws.write_string(r + 1, c0, block.groups[r])
            cells = {1 + int(flagged): block.slope[r], 3: block.high[r] - block.slope[r],
                     4: block.slope[r] - block.low[r], 5: block.reference[r]}
            for j, value in sorted(cells.items()):
                if np.isfinite(value):
                    ws.write_number(r + 1, c0 + j, float(value))


def slope_chart(ctx: WriteContext, data: str, i: int, block: ChartBlock, level: float) -> Any:
    """A line chart without lines: each group's slope with error bars, and the slope of the others."""
    n, c0 = len(block.groups), i * (len(DATA_COLUMNS) + 1)
    quoted = quote_sheetname(data)

    def cells(j: int) -> list:
        return [data, 1, c0 + j, n, c0 + j]

    bars = {"type": "custom", "plus_values": f"={quoted}!{xl_range_abs(1, c0 + 3, n, c0 + 3)}",
            "minus_values": f"={quoted}!{xl_range_abs(1, c0 + 4, n, c0 + 4)}", "end_style": 1}
    chart = ctx.add_chart({"type": "line"})
    for j, name, colour in ((1, "group slope", S.OVERVIEW_OK), (2, "group slope, flagged", S.OVERVIEW_FLAGGED)):
        chart.add_series({"name": name, "categories": cells(0), "values": cells(j), "line": {"none": True},
                          "marker": {"type": "circle", "size": 6, "fill": {"color": colour},
                                     "border": {"color": colour}},
                          "y_error_bars": {**bars, "line": {"color": colour, "width": 1.25}}})
    chart.add_series({"name": "slope of the other groups", "categories": cells(0), "values": cells(5),
                      "line": {"none": True},
                      "marker": {"type": "dash", "size": 10, "fill": {"color": S.FITTED},
                                 "border": {"color": S.FITTED}}})
    label = cell_text(block.label, LABEL_CHARS)
    shown = f" ({n} of {block.total} groups)" if n < block.total else ""
    chart.set_title(S.chart_title(f"slope on {label}, {100 * level:g}% intervals{shown}"))
    chart.set_x_axis(S.axis("group", num_font={"size": 8, "rotation": -45, "name": S.FONT},
                            major_gridlines={"visible": False}))
    chart.set_y_axis(S.axis(f"slope on {label}"))
    chart.set_legend({"position": "bottom", "font": {"size": S.CHART_AXIS_SIZE, "name": S.FONT}})
    chart.set_size({"width": min(max(CHART_W, 160 + 18 * n), 1400), "height": CHART_H})
    chart.set_chartarea({"border": {"color": "#BFBFBF"}})
    return chart
