"""The savings sheet of the predictions workbook: avoided use per group, with the cautions it needs.

Computes nothing: the numbers come from `sheetfit.prediction.savings.reporting_savings`. The
sheet opens with a title, the cautions and the shading rule, then the per-group table. Shading
means "look here" and stays rare: a group is lit only when something changes how its total reads
(see `shading_rules`). The table layout here (headers wrapped in a tall header row, widths from
the formatted values, every cell of a row top-aligned, long notes wrapped) is shared with the
predictions sheet.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from xlsxwriter.utility import xl_col_to_name

from ..prediction.savings import (ACTUAL_USE, ADJUSTED_BASELINE, APPROX_FSU, APPROX_FSU_NOTE,
    AVOIDED_LOW, AVOIDED_STD_ERROR, AVOIDED_TOTAL, AVOIDED_USE, BASELINE_TOTAL, FRACTIONAL_SAVINGS,
    FSU_FACTOR, FSU_SOURCE, LEFT_OUT_BECAUSE, MORE_USE, NO_ROWS, ROWS_IN_TOTALS, ROWS_OUTSIDE, SAVING,
    VERDICT, WITHIN_NOISE, Savings)
from ..results.headers import PREDICTED, cell_text
from .columns import BOLD, FILTER_BUTTON, MAX_WIDTH, Column, shown_width
from .styles import HEADER_FILL, HEADER_RULE, HEADER_TEXT, HIGHLIGHTS, NOTE_TEXT, Styles
from .tables import BLOCK_ROWS, ROW_HEIGHT, wrapped_lines

SHEET = "savings by group"
TITLE = "Avoided energy use over the reporting period, per group"
TEXT_WIDTHS = {VERDICT: 20, APPROX_FSU_NOTE: 44}   # these columns hold sentences: wrapped at this width
PERCENT_FORMAT = "0.0"
EXTRAPOLATED_SHARE = 0.25     # a group is shaded when at least this share of its rows in the totals extrapolate
HEADER_LINES = 3              # a header wraps onto at most this many lines (longer ones widen their column)
MIN_WIDTH = 8                 # characters: the narrowest column
HEADER_PAD = 3                # points below a header's last line, for its rule
HEADER_GAP = "#FFFFFF"        # a hairline between header cells
SIDE_MARGIN = 0.4             # inches left and right on a printed page (a wide table prints larger)


# --- a table with wrapped headers (the savings and the predictions sheets) ------------------------

@dataclass(frozen=True)
class TableLook:
    """The formats a wrapped-header table needs beside `Styles` (whose numbers it uses): wrapped
    headers, top-aligned text cells, wrapped notes. Every text cell is top-aligned, as the numbers
    are, so a row made taller by a wrapped cell reads across at one height. Indented text says
    `align: left` outright: with the general alignment some applications indent only the lines
    after the first."""

    header: Any             # text column: left
    header_indent: Any      # text column right after a number column: one space in
    header_number: Any      # number column: right, over the numbers
    text: dict[bool, Any]   # text cell, by indented
    wrap: dict[bool, Any]   # wrapped text cell, by indented
    note: Any               # a wrapped italic note (cautions above a table)


def table_look(workbook: Any) -> TableLook:
    """The formats of `TableLook` in `workbook`, the headers in the palette's header colours."""
    head = {"bold": True, "font_color": HEADER_TEXT, "bg_color": HEADER_FILL, "bottom": 2,
            "bottom_color": HEADER_RULE, "text_wrap": True, "valign": "bottom",
            "right": 1, "right_color": HEADER_GAP}       # wrapped neighbours never read as one header
    indent = {"align": "left", "indent": 1}
    top = {"valign": "top"}
    return TableLook(workbook.add_format(head), workbook.add_format({**head, **indent}),
                     workbook.add_format({**head, "align": "right"}),
                     {False: workbook.add_format(top), True: workbook.add_format({**top, **indent})},
                     {False: workbook.add_format({**top, "text_wrap": True}),
                      True: workbook.add_format({**top, "text_wrap": True, **indent})},
                     workbook.add_format({"italic": True, "font_color": NOTE_TEXT, "text_wrap": True,
                                          "valign": "top"}))


@dataclass(frozen=True)
class TableLayout:
    """Per column: width, cell format, header format; the columns that wrap; the header's lines."""

    widths: list[float]
    formats: list[Any]
    heads: list[Any]
    wrapped: list[tuple[int, float]]      # (column, width) of the columns whose text wraps
    header_lines: int

    @property
    def total_width(self) -> float:
        return sum(self.widths)


def header_wrap(header: str, width: float) -> list[int]:
    """Characters on each line of a bold `header` wrapped at `width` (about; words kept whole)."""
    per_line = (width - 1) / BOLD
    lines: list[int] = []
    for word in header.split():
        if lines and lines[-1] + 1 + len(word) <= per_line:
            lines[-1] += 1 + len(word)
        else:
            lines.append(len(word))
    return lines or [0]


def column_width(col: Column, cap: float = MAX_WIDTH, indent: bool = False) -> tuple[float, bool]:
    """A width showing the widest formatted value (text longer than `cap` wraps at `cap`) and the
    header on at most HEADER_LINES lines, a text header's last line clear of the filter button;
    and whether the column's cells wrap."""
    if col.kind == "number":
        content = shown_width(col.values(0, col.n_rows), col.num_format or "General") + 2
    else:
        content = col.widest + 2 + int(indent)
    wraps = col.kind == "text" and content > cap
    longest_word = max((len(w) for w in col.header.split()), default=0)
    width = max(min(content, cap), MIN_WIDTH, math.ceil(longest_word * BOLD) + 1)
    while width < MAX_WIDTH:
        lines = header_wrap(col.header, width)
        clear = col.kind == "number" or lines[-1] * BOLD <= width - FILTER_BUTTON
        if len(lines) <= HEADER_LINES and clear:
            break
        width += 1
    return float(width), wraps


def plan_table(st: Styles, look: TableLook, columns: Sequence[Column],
               caps: dict[str, float]) -> TableLayout:
    """Widths and formats: every data cell top-aligned (numbers, text and wrapped text alike), a text
    column after a number column one space in so the two do not touch."""
    widths, formats, heads, wrapped = [], [], [], []
    lines = 1
    for j, col in enumerate(columns):
        indent = col.kind != "number" and j > 0 and columns[j - 1].kind == "number"
        width, wraps = column_width(col, caps.get(col.header, MAX_WIDTH), indent)
        if col.num_format:
            fmt = st.number(col.num_format)
        elif wraps:
            fmt = look.wrap[indent]
            wrapped.append((j, width))
        else:
            fmt = look.text[indent]
        widths.append(width)
        formats.append(fmt)
        heads.append(look.header_number if col.kind == "number" else look.header_indent if indent else look.header)
        lines = max(lines, len(header_wrap(col.header, width)))
    return TableLayout(widths, formats, heads, wrapped, lines)


def print_wide(ws: Any) -> None:
    """Printed landscape with narrow side margins, every column on the page width (a wide table prints larger)."""
    ws.set_landscape()
    ws.set_margins(left=SIDE_MARGIN, right=SIDE_MARGIN)
    ws.fit_to_pages(1, 0)


def set_columns(ws: Any, layout: TableLayout) -> None:
    """Each column's width and the format its cells take."""
    for j, (width, fmt) in enumerate(zip(layout.widths, layout.formats)):
        ws.set_column(j, j, width, fmt)


def write_header(ws: Any, layout: TableLayout, headers: Sequence[str], row: int) -> None:
    """The header row at `row`, tall enough for its wrapped headers (applications do not grow it on opening)."""
    ws.set_row(row, ROW_HEIGHT * layout.header_lines + HEADER_PAD)
    for j, (text, fmt) in enumerate(zip(headers, layout.heads)):
        ws.write_string(row, j, text, fmt)


def write_rows(ws: Any, layout: TableLayout, columns: Sequence[Column], first_row: int, lo: int, hi: int) -> None:
    """Rows lo..hi of `columns` from sheet row `first_row` on, each as tall as its wrapped text needs."""
    r = first_row
    for start in range(lo, hi, BLOCK_ROWS):
        stop = min(hi, start + BLOCK_ROWS)
        for row in zip(*(c.block(start, stop) for c in columns)):
            lines = max((wrapped_lines(row[j], w) for j, w in layout.wrapped), default=1)
            if lines > 1:
                ws.set_row(r, ROW_HEIGHT * lines)
            ws.write_row(r, 0, row)
            r += 1


# --- the savings sheet ---------------------------------------------------------------------------

def cautions(level: float) -> tuple[str, ...]:
    """The lines above the table: what the numbers are and what they are not, and what shading means."""
    return (
        "These results support, never replace, the measurement-and-verification plan, the applicable "
        "protocol or contract, and licensed professional judgement.",
        "A difference from the baseline is an association, not proof of cause: anything that changed "
        "between the periods and is not an input of the baseline (occupancy, production, equipment, "
        "metering) shows up here too.",
        f"Extrapolation: rows outside the baseline's observed input range (counted in '{ROWS_OUTSIDE}') use "
        "the baseline where it was never fitted; the more of them a group has, the less its total can be trusted.",
        f"Intervals at confidence level {level:g}. The std error is exact for the fitted baseline, taking "
        "its change points (if any) as known and the reporting rows' deviations as independent with the "
        "baseline's residual variance; the approximate uncertainty beside it is a rough guide "
        f"({FSU_SOURCE}; see about).",
        f"Shading: {shading_legend()}.",
    )


def shading_legend() -> str:
    """The shading rule in words, as the sheet and the about sheet state it."""
    return (f"{_colour('check_failed')}, look at this group: it used more than its baseline ('{MORE_USE}'), or "
            f"{EXTRAPOLATED_SHARE:.0%} or more of its rows in the totals lie outside the baseline's range; "
            f"{_colour('left_out')}: no reporting row of the group could be used; other groups are not shaded")


def header_row() -> int:
    """The row (0-based) of the table's header: after the title, the cautions and one empty row."""
    return 1 + len(cautions(0.95)) + 1


def shading_rules(headers: Sequence[str], first_row: int) -> list[tuple[str, str]]:
    """(formula, palette key) per shading rule, the first that holds winning; cell references are
    anchored on sheet row `first_row` (1-based), the table's first data row."""
    def cell(header: str) -> str:
        return f"${xl_col_to_name(list(headers).index(header))}{first_row}"

    said, used, outside = cell(VERDICT), cell(ROWS_IN_TOTALS), cell(ROWS_OUTSIDE)
    return [(f'{said}="{NO_ROWS}"', "left_out"),
            (f'OR({said}="{MORE_USE}",AND({used}>0,{outside}>={EXTRAPOLATED_SHARE:g}*{used}))', "check_failed")]


def savings_sheet(ws: Any, st: Styles, look: TableLook, savings: Savings) -> None:
    """Title, cautions, then the per-group table (written row by row, as constant_memory needs)."""
    table = savings.groups
    top, n = header_row(), len(table)
    columns = [Column(str(h), table.iloc[:, j], n) for j, h in enumerate(table.columns)]
    for col in columns:
        if col.header in (FRACTIONAL_SAVINGS, APPROX_FSU):
            col.set_format(PERCENT_FORMAT)
    layout = plan_table(st, look, columns, TEXT_WIDTHS)
    set_columns(ws, layout)
    ws.write_string(0, 0, TITLE, st.title)
    last = len(columns) - 1
    for r, line in enumerate(cautions(savings.level), start=1):
        ws.set_row(r, ROW_HEIGHT * wrapped_lines(line, layout.total_width))   # a merged cell does not grow
        if last > 0:
            ws.merge_range(r, 0, r, last, line, look.note)
        else:
            ws.write_string(r, 0, line, look.note)
    headers = [c.header for c in columns]
    write_header(ws, layout, headers, top)
    write_rows(ws, layout, columns, top + 1, 0, n)
    ws.freeze_panes(top + 1, 0)
    ws.autofilter(top, 0, top + max(n, 1), last)
    print_wide(ws)
    ws.repeat_rows(top)
    if n and {VERDICT, ROWS_IN_TOTALS, ROWS_OUTSIDE} <= set(headers):
        for formula, key in shading_rules(headers, top + 2):
            ws.conditional_format(top + 1, 0, top + n, last, {
                "type": "formula", "criteria": "=" + formula, "format": st.highlight[key], "stop_if_true": True})


def savings_about_lines(savings: Savings) -> list[tuple[str, str]]:
    """What every savings column means, for the predictions workbook's about sheet."""
    counts = savings.verdict_counts()
    return [
        ("actual use column", cell_text(savings.actual_column)),
        ("savings", f"{len(savings.groups)} groups: " + ", ".join(f"{counts[v]} {v}" for v in
                                                               (SAVING, WITHIN_NOISE, MORE_USE))
         + f"; {savings.rows_in_totals} rows in the totals"),
        (ADJUSTED_BASELINE, f"the baseline's {PREDICTED} at the reporting row's inputs: the use expected "
         "without the change"),
        (ACTUAL_USE, f"the measured use read from \"{cell_text(savings.actual_column, 200)}\""),
        (AVOIDED_USE, f"{ADJUSTED_BASELINE} − {ACTUAL_USE}: positive when less was used than the baseline"),
        (LEFT_OUT_BECAUSE, "why a row is not in its group's totals (no adjusted baseline, or no usable actual "
         "use); such rows are counted on the savings sheet"),
        (ROWS_IN_TOTALS, "m: reporting rows with both an adjusted baseline and an actual use"),
        (f"{BASELINE_TOTAL}, {AVOIDED_TOTAL}", f"Σ {ADJUSTED_BASELINE}, Σ {AVOIDED_USE} over those m rows"),
        (AVOIDED_STD_ERROR, "√(s² · (m + d'(X'X)⁻¹d)), s² the baseline's residual variance, d = Σ x over the "
         "m rows' term values: exact for the fitted baseline (change points taken as known)"),
        (f"{AVOIDED_LOW} / high", f"{AVOIDED_TOTAL} ∓ t · {AVOIDED_STD_ERROR}, t at the confidence level with "
         "the baseline's residual degrees of freedom"),
        (FRACTIONAL_SAVINGS, f"100 · {AVOIDED_TOTAL} / {BASELINE_TOTAL}"),
        (VERDICT, f"'{SAVING}' when the whole interval is above 0, '{MORE_USE}' when it is below 0, "
         f"else '{WITHIN_NOISE}'"),
        (APPROX_FSU, f"approximate, after {FSU_SOURCE}: 100 · t · {FSU_FACTOR} · CV · √((n/n′)(1 + 2/n′)/m) "
         "/ |F|, CV = residual std error / mean baseline use, n the baseline rows, n′ = n(1 − ρ)/(1 + ρ) with ρ the "
         "lag-1 autocorrelation of the baseline residuals (ρ ≤ 0 taken as 0; empty when n′ < 1), F = "
         f"{FRACTIONAL_SAVINGS} / 100; a rough guide beside the exact {AVOIDED_STD_ERROR}; this is the "
         "formula as sheetfit applies it: check it against the guideline's edition in force"),
        (ROWS_OUTSIDE, "rows in the totals with an input outside the baseline's observed range "
         "(extrapolation)"),
        ("colours (savings)", f"on '{SHEET}': {shading_legend()} (the share is our rule, not a standard's); "
         f"on the predictions, {_colour('left_out')} rows are also those left out of the totals"),
    ]


def _colour(key: str) -> str:
    """The legend's name of a highlight colour."""
    return next(h.colour_name for h in HIGHLIGHTS if h.key == key)
