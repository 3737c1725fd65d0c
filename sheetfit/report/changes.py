"""The `since previous run` sheet: each group against its fit in an earlier results workbook.

Computes nothing: the tables come from `sheetfit.results.changes.compare_runs`. A title and notes,
then the per-group table (what changed, the Chow test, flags and rows before and now), then the
per-coefficient changes with their intervals. A group whose relation changed, or that is newly
flagged, is shaded.
"""

from __future__ import annotations

import pandas as pd
from xlsxwriter.utility import xl_col_to_name

from ..results.changes import CHANGED, NEWLY_FLAGGED, WHAT_CHANGED, RunChanges
from .book import WriteContext
from .columns import Column
from .savings import plan_table, print_wide, set_columns, table_look, write_header, write_rows
from .tables import ROW_HEIGHT, wrapped_lines

SHEET = "since previous run"
COEFFICIENT_SHEET = "coefficient changes"
TITLE = "What changed since the previous run"
TEXT_WIDTHS = {WHAT_CHANGED: 30, "note": 40}
NOTE_WIDTH = 120


def notes(changes: RunChanges) -> list[str]:
    """The lines above the tables: what was compared, how, and how to read it."""
    pct = f"{changes.level * 100:g} %"
    return [
        f"This run compared with {changes.previous}, group by group, from the models both results workbooks store "
        f"(the earlier rows are not needed).",
        "Chow F tests whether one relation fits both runs' rows of the group as well as two separate ones; it "
        "assumes the same residual scatter in both runs. p-values are adjusted across groups like every check; "
        "'relation changed' means the adjusted p-value is below the run's alpha.",
        f"Each coefficient's change is now minus before, with its std error from the two runs' pooled residual "
        f"variance and a {pct} interval. 'new group' and 'gone' are groups fitted in one run only.",
        "Many groups tested at once produce false alarms, and a change in a fitted relation says nothing about "
        "its cause: check what happened to the site, line or instrument before acting on it.",
    ]


def changes_sheet(ctx: WriteContext) -> None:
    """Write the sheet when the run was compared with an earlier one (`--previous`)."""
    changes: RunChanges | None = getattr(ctx.results, "changes", None)
    if changes is None:
        return
    st, look = ctx.styles, table_look(ctx.workbook)
    ws = ctx.add_sheet(SHEET)
    print_wide(ws)
    groups = _columns(changes.groups)
    layout = plan_table(st, look, groups, TEXT_WIDTHS)
    set_columns(ws, layout)
    ws.write_string(0, 0, TITLE, st.title)
    r = 1
    for line in notes(changes):
        ws.set_row(r, ROW_HEIGHT * wrapped_lines(line, NOTE_WIDTH))
        ws.merge_range(r, 0, r, max(len(groups) - 1, 6), line, look.note)
        r += 1
    top = r + 1
    write_header(ws, layout, [c.header for c in groups], top)
    n = len(changes.groups)
    write_rows(ws, layout, groups, top + 1, 0, n)
    ws.freeze_panes(top + 1, 0)
    ws.autofilter(top, 0, top + max(n, 1), len(groups) - 1)
    if n:
        what = xl_col_to_name([c.header for c in groups].index(WHAT_CHANGED))
        ws.conditional_format(top + 1, 0, top + n, len(groups) - 1, {
            "type": "formula", "format": st.highlight["check_failed"],
            "criteria": f'=OR(ISNUMBER(SEARCH("{CHANGED}",${what}{top + 2})),'
                        f'ISNUMBER(SEARCH("{NEWLY_FLAGGED}",${what}{top + 2})))'})
    _coefficient_sheet(ctx, changes)
    counts = ", ".join(f"{v} {k}" for k, v in changes.counts.items() if v) or "nothing changed"
    ctx.note(ws.name, f"each group against its fit in {changes.previous}: {counts}")


def _coefficient_sheet(ctx: WriteContext, changes: RunChanges) -> None:
    """The coefficients of every group fitted in both runs: before, now, the change and its interval."""
    st, look = ctx.styles, table_look(ctx.workbook)
    ws = ctx.add_sheet(COEFFICIENT_SHEET)
    print_wide(ws)
    columns = _columns(changes.coefficients)
    layout = plan_table(st, look, columns, TEXT_WIDTHS)
    set_columns(ws, layout)
    write_header(ws, layout, [c.header for c in columns], 0)
    write_rows(ws, layout, columns, 1, 0, len(changes.coefficients))
    ws.freeze_panes(1, 0)
    ws.autofilter(0, 0, max(len(changes.coefficients), 1), len(columns) - 1)
    ctx.note(ws.name, f"each coefficient now minus before ({changes.previous}), with its std error and interval")


def _columns(table: pd.DataFrame) -> list[Column]:
    return [Column(str(h), table.iloc[:, j], len(table)) for j, h in enumerate(table.columns)]
