"""The `explorer` sheet: pick a fitted group from a drop-down and see its rows, fit figures and charts.

The `explorer data` sheet (written by explorer_data.fill_data) holds every fitted group's used rows,
sorted by group and then by the first input, with an index of each group's first row and row count. The explorer block fills by
index arithmetic, INDEX(column, first + k − 1), so choosing a group costs one MATCH, not a scan.
Rows beyond the group's size show nothing; chart cells there hold #N/A (not plotted, not shown).
A change-point run also shows the chosen group's shape and change points among its fit figures.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ..results.change_points import SHAPE
from ..results.headers import (FITTED, INPUT, P_VALUE, REASONS, RESIDUAL, ROWS_USED, STATUS, USED, YES,
    shown_names)
from ..results.observations import model_value_headers
from ..results.store import group_codes, unique_labels
from ..terms import source_columns
from . import styles as S
from .book import WriteContext
from .columns import P_VALUE_FORMAT, SCIENTIFIC, number_format
from .explorer_data import (CHANGE_POINT_METRICS, COEF, HIGHEST, LOWEST, TEXT_METRICS, Explorer, block_headers,
    coefficient_columns, data_header, fill_data, shown_metrics)
from .formulas import Cells, area, lookup, ref

MAX_BLOCK = 500             # rows the block shows; larger groups show an even sample of this many
MAX_ROWS = 100_000          # rows on the data sheet at most: with many groups, fewer rows per group…
MIN_PER_GROUP = 20          # …but not fewer than this; groups beyond the total are left out
CHART_W, CHART_H = 440, 300
TOP = 9                     # first metric row (0-based)


def plan_explorer(res: Any) -> Explorer:
    """Every fitted group's used rows, sorted by group, first input and source row, with an index."""
    k = len(res.group_columns)
    g = res.groups
    fitted = (g[g[STATUS].astype(str).eq("fitted")] if STATUS in g.columns else g).reset_index(drop=True)
    G = len(fitted)
    sources = list(source_columns(res.terms))
    user = [*sources, res.y]
    headers = dict(zip(user, shown_names(user, ("group", "source row", FITTED, RESIDUAL))))
    cols = ["source row", *(headers[c] for c in user), FITTED, RESIDUAL]
    everyone = [*res.group_columns, *res.number_columns]
    shown = model_value_headers(everyone, res.info.date_columns)
    where = {"source row": "source row", FITTED: FITTED, RESIDUAL: RESIDUAL,
             **{headers[c]: shown[c] for c in user}}      # column of `rows` → of observations (day counts for dates)
    obs = res.observations
    used = obs[USED].astype(str).eq(YES) if USED in obs.columns else pd.Series(True, index=obs.index)
    fit = pd.to_numeric(obs.get(FITTED, pd.Series(np.nan, index=obs.index)), errors="coerce")
    obs = obs.loc[used & fit.notna()]
    code = group_codes(obs, fitted, k)
    obs, code = obs[code >= 0], code[code >= 0]
    table = pd.DataFrame({c: (pd.to_numeric(obs[where[c]], errors="coerce").to_numpy(np.float64)
                              if where[c] in obs.columns else np.full(len(obs), np.nan)) for c in cols})
    order = np.lexsort((table["source row"].to_numpy(), table[headers[sources[0]]].to_numpy(), code))
    table, code = table.iloc[order].reset_index(drop=True), code[order]
    counts = np.bincount(code, minlength=G)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    cap = int(min(MAX_BLOCK, max(MIN_PER_GROUP, MAX_ROWS // max(int((counts > 0).sum()), 1))))
    take = np.ones(len(code), dtype=bool)
    big = np.flatnonzero(counts > cap)
    for gi in big:                        # larger groups: an even sample across the first input
        mask = np.zeros(counts[gi], dtype=bool)
        mask[np.linspace(0, counts[gi] - 1, cap).round().astype(int)] = True
        take[starts[gi]:starts[gi] + counts[gi]] = mask
    shown = np.bincount(code[take], minlength=G)
    include = (shown > 0) & (np.cumsum(shown) <= MAX_ROWS)
    take &= include[code]
    table, code = table[take].reset_index(drop=True), code[take]
    gi = np.flatnonzero(include)
    key_text = [fitted.iloc[:, j].astype(str) for j in range(k)]
    kept = [tuple(col.iloc[i] for col in key_text) for i in gi]
    labels = list(unique_labels(kept))
    n_shown = shown[gi]
    idx = pd.DataFrame({"group": labels, "first row": 1 + np.concatenate(([0], np.cumsum(n_shown)[:-1])),
                        "rows": n_shown})
    metrics = shown_metrics(fitted)
    for mtr in metrics:
        idx[mtr] = fitted[mtr].to_numpy()[gi] if mtr in fitted.columns else np.nan
    fv = table[FITTED].to_numpy()
    at = np.concatenate(([0], np.cumsum(n_shown)[:-1])).astype(np.intp)
    idx[LOWEST] = np.minimum.reduceat(fv, at) if len(fv) else np.empty(0)
    idx[HIGHEST] = np.maximum.reduceat(fv, at) if len(fv) else np.empty(0)
    terms = list(res.term_labels)
    coef = res.coefficients
    coefficient_columns(idx, coef, fitted, gi, terms, k)
    table.insert(0, "group", np.asarray(labels, dtype=object)[np.repeat(np.arange(len(gi)), n_shown)])
    ex = Explorer(labels, idx, table, sources, res.y, terms, int(n_shown.max()) if len(gi) else 0,
                  sampled=int(len(big)), cap=cap, left_out=int(((shown > 0) & ~include).sum()), headers=headers,
                  metrics=metrics)
    for c in cols[1:]:
        ex.formats[c] = number_format(c, table[c].to_numpy(np.float64))
    for mtr in metrics:
        if mtr not in TEXT_METRICS and mtr in fitted.columns:
            ex.figure_formats[mtr] = number_format(mtr, pd.to_numeric(idx[mtr], errors="coerce").to_numpy(np.float64))
    for c in COEF:
        vals = pd.to_numeric(coef[c], errors="coerce").to_numpy(np.float64) if c in coef.columns else np.empty(0)
        fmt = P_VALUE_FORMAT if c == P_VALUE else number_format(c, vals)
        ex.figure_formats[c] = SCIENTIFIC if fmt == "General" else fmt     # General overflows narrow cells
    return ex


def _floor(ex: Explorer) -> dict[str, Any]:
    """A fixed lower bound for the fit chart's y axis when every group's values are positive.

    Axis bounds cannot follow the chosen group, and automatic scaling starts positive data at
    zero, which squashes groups whose values lie far from zero; the lowest value over all
    groups keeps every group's points in view.
    """
    v = pd.to_numeric(pd.concat([ex.rows[ex.header(ex.y)], ex.rows[FITTED]]), errors="coerce").to_numpy(np.float64)
    v = v[np.isfinite(v)]
    if not v.size or v.min() <= 0:
        return {}
    lo = float(v.min())
    step = 10 ** math.floor(math.log10(lo))
    floor = math.floor(lo / step) * step
    if floor >= lo:
        floor -= step
    return {"min": floor} if floor > 0 else {}


def explorer_sheet(ctx: WriteContext, group: str | None = None, cache: bool = True) -> None:
    """The `explorer` sheet and its `explorer data` sheet; `group` presets the drop-down (default: the
    first fitted group); `cache=False` leaves formula results empty (for recalculation tests)."""
    res = ctx.results
    st = ctx.styles
    ex = plan_explorer(res)
    ws = ctx.add_sheet("explorer")
    if not ex.labels:
        ws.set_column(0, 0, 100)
        ws.write_string(0, 0, "No group explorer: no group could be fitted (see the groups sheet).", st.title)
        return
    data = ctx.reserve_data_sheet("explorer data", lambda sheet: fill_data(sheet, ex, st, ctx.add_bulk))
    g = ex.labels.index(group) if group is not None else 0
    cells = Cells(cache)
    spots = _layout(ctx, cells, ex, data, g)
    block_top = spots.block_top
    for c, h in enumerate(block_headers(ex)):
        coef = ([INPUT, *COEF][c] if c <= len(COEF) else "")
        ws.set_column(c, c, 30 if c == 0 else min(max(15, len(h) + 3, len(coef) + 3), 32))
    ws.hide_gridlines(2)
    ws.set_landscape()
    ws.fit_to_pages(1, 0)
    ws.repeat_rows(block_top - 1)
    cells.flush(ws)
    last = block_top + ex.block - 1
    ws.data_validation(3, 1, 3, 1, {"validate": "list", "source": "=" + area(data, 3, 0, 2 + len(ex.labels), 0),
                                    "error_title": "not a fitted group",
                                    "error_message": "Choose one of the fitted groups from the list."})
    ncol = len(block_headers(ex))
    ws.conditional_format(block_top, 0, last, ncol - 1, {
        "type": "formula", "criteria": f"=ISNA({ref(None, block_top, 0, False)})", "format": st.quiet})
    _charts(ctx, ws, ex, spots)
    note = (f"choose one of {len(ex.labels)} fitted groups in the pale straw cell; the block shows up to "
            f"{ex.block} rows (cells for the charts hold #N/A, shown blank, beyond the group's rows)"
            + (f"; {ex.sampled} groups larger than {ex.cap} rows show an even sample of {ex.cap}"
               if ex.sampled else "")
            + (f"; {ex.left_out} fitted groups left out (the data sheet keeps at most {MAX_ROWS:,} rows)"
               if ex.left_out else "") + f"; rows are on sheet '{data}'")
    ctx.note("explorer", note)


@dataclass(frozen=True)
class Spots:
    """Rows (0-based) the charts need: the zero-line cells, the chart row, the block's first row."""

    zero_row: int
    chart_row: int
    block_top: int


@dataclass(frozen=True)
class Chosen:
    """The preset group's index entry and how formulas reach the chosen group's entry on the data sheet."""

    entry: pd.Series       # the preset group's row of the index (the cached results)
    columns: list[str]     # the index's columns
    index_area: str        # the index on the data sheet
    pos: str               # the cell holding the chosen group's position in the index

    def pick(self, name: str) -> str:
        """The chosen group's value in index column `name`."""
        return f"INDEX({self.index_area},{self.pos},{self.columns.index(name) + 1})"


def _layout(ctx: WriteContext, cells: Cells, ex: Explorer, data: str, g: int) -> Spots:
    """Fill `cells` with the explorer's text and formulas; returns where the charts go."""
    st = ctx.styles
    idx_cols = list(ex.index.columns)
    ch = Chosen(ex.index.iloc[g], idx_cols, area(data, 3, 0, 2 + len(ex.labels), len(idx_cols) - 1),
                ref(None, 5, 1))
    _choice_cells(cells, st, ex, data, g, ch)
    r, zero_row = _fit_cells(cells, st, ex, ch)
    r = _coefficient_cells(cells, st, ex, ch, r + 1)
    r += 2
    cells.formula(r, 0, f'=IF(ISNA({ch.pos}),"","charts and rows of "&{ref(None, 3, 1)})', st.section,
                  f"charts and rows of {ex.labels[g]}")
    block_top = r + 2 + math.ceil(CHART_H / 20) + 2
    _block_cells(cells, st, ex, data, ch, block_top)
    return Spots(zero_row, r + 1, block_top)


def _choice_cells(cells: Cells, st: Any, ex: Explorer, data: str, g: int, ch: Chosen) -> None:
    """Title, note, the group drop-down, rows shown, and where the group sits on the data sheet."""
    chosen, pos = ch.entry, ch.pos
    cells.text(0, 0, "Group explorer", st.title)
    cells.text(1, 0, "Choose a group in the shaded cell: its fit figures, coefficients, charts and rows follow "
                     f"(rows used in the fit, sorted by {ex.sources[0]}).", st.note)
    cells.text(3, 0, "group", st.group_label)
    cells.text(3, 1, ex.labels[g], st.input)
    cells.text(3, 2, "(list of fitted groups)", st.note)
    cells.text(4, 0, "rows shown", st.group_label)
    cells.formula(4, 1, f"=IF(ISNA({pos}),0,{ch.pick('rows')})", st.number("0"), int(chosen["rows"]))
    n_all = int(chosen[ROWS_USED]) if ROWS_USED in chosen and pd.notna(chosen[ROWS_USED]) else int(chosen["rows"])
    sample_note = (f"an even sample of the {n_all} rows used" if n_all > int(chosen["rows"]) else "")
    cells.formula(4, 2, f'=IF(ISNA({pos}),"choose a fitted group from the list in cell B4",'
                        f'IF({ref(None, 4, 1)}<{ch.pick(ROWS_USED)},"an even sample of the "&{ch.pick(ROWS_USED)}&" rows used",""))',
                  st.note, sample_note)
    cells.text(5, 0, "position in the list", st.note)
    cells.formula(5, 1, "=" + lookup(ref(None, 3, 1), area(data, 3, 0, 2 + len(ex.labels), 0)), st.note, g + 1)
    cells.text(6, 0, f"first row on sheet '{data}'", st.note)
    cells.formula(6, 1, f"=IF(ISNA({pos}),1,{ch.pick('first row')})", st.note, int(chosen["first row"]))


def _fit_cells(cells: Cells, st: Any, ex: Explorer, ch: Chosen) -> tuple[int, int]:
    """The fit figures from row TOP, then the lowest and highest fitted values; returns (next row, zero row)."""
    cells.text(TOP - 1, 0, "fit", st.header)
    cells.text(TOP - 1, 1, "value", st.header_number)
    r = TOP
    for mtr in [m for m in ex.metrics if m in ch.columns]:
        v = ch.entry[mtr]
        fmt = st.number(ex.figure_formats[mtr]) if mtr in ex.figure_formats else None
        cells.text(r, 0, mtr, st.text if mtr == REASONS else None)
        text = mtr in TEXT_METRICS    # &"" keeps an empty text cell empty instead of showing 0
        at = ch.pick(mtr)
        if mtr in CHANGE_POINT_METRICS and not text:     # no change point: an empty cell, not 0
            at = f'IF(ISNUMBER({at}),{at},"")'
        formula = at + ('&""' if text else "")
        cells.formula(r, 1, "=" + formula, st.wrap if mtr == REASONS else fmt,
                      "" if pd.isna(v) else (str(v) if text else v))
        if mtr == REASONS:
            cells.merge(r, 1, len(COEF), height=48)
        r += 1
    zero = st.number(";;;")
    for label in (LOWEST, HIGHEST):
        cells.text(r, 0, label)
        cells.formula(r, 1, "=" + ch.pick(label), st.number(ex.formats.get(FITTED, "General")), ch.entry[label])
        cells.number(r, 2, 0.0, zero)       # the residual chart's zero line runs through these cells
        r += 1
    return r, r - 2


def _coefficient_cells(cells: Cells, st: Any, ex: Explorer, ch: Chosen, r: int) -> int:
    """The coefficient table with its header at row `r`; returns its last row. In a change-point run a
    term the chosen group's shape does not use shows empty cells, not 0."""
    cells.text(r, 0, INPUT, st.header)
    for c, name in enumerate(COEF, start=1):
        cells.text(r, c, name, st.header_number)     # numbers below: header over their right edge
    for t in ex.terms:
        r += 1
        cells.text(r, 0, t)
        for c, name in enumerate(COEF, start=1):
            v = ch.entry[f"{name}: {t}"]
            at = ch.pick(f"{name}: {t}")
            at = f'IF(ISNUMBER({at}),{at},"")' if SHAPE in ex.metrics else at
            cells.formula(r, c, "=" + at, st.number(ex.figure_formats[name]), "" if pd.isna(v) else float(v))
    return r


def _block_cells(cells: Cells, st: Any, ex: Explorer, data: str, ch: Chosen, block_top: int) -> None:
    """The block of the chosen group's rows under its header row (block_top − 1), by index arithmetic."""
    cnt, first = ref(None, 4, 1), ref(None, 6, 1)
    head = block_headers(ex)
    for c, h in enumerate(head):
        cells.text(block_top - 1, c, h, st.header_number)   # all numbers: headers over their right edge
    d0 = data_header(ex) + 1
    d1 = d0 + max(len(ex.rows), 1) - 1
    m = len(ex.sources)
    chart_cols = {0, m, m + 1, m + 2}
    fmts = [st.number(ex.formats[h]) for h in head[:-1]] + [st.number("0")]
    start = int(ch.entry["first row"]) - 1
    cached = ex.rows.iloc[start:start + int(ch.entry["rows"])]
    for k in range(1, ex.block + 1):
        rr = block_top + k - 1
        for c, h in enumerate(head):
            d = list(ex.rows.columns).index(h)
            rng = area(data, d0, d, d1, d)
            empty = "NA()" if c in chart_cols else '""'
            value: Any = cached.iloc[k - 1][h] if k <= len(cached) else ("#N/A" if c in chart_cols else "")
            if isinstance(value, float) and math.isnan(value):
                value = ""
            cells.formula(rr, c, f"=IF({k}<={cnt},INDEX({rng},{first}+{k - 1}),{empty})", fmts[c], value)


def _charts(ctx: WriteContext, ws: Any, ex: Explorer, spots: Spots) -> None:
    m = len(ex.sources)
    block_top = spots.block_top
    last = block_top + ex.block - 1
    sheet = ws.name
    x_col, y_col, f_col, r_col = 0, m, m + 1, m + 2

    def col(c: int) -> list:
        return [sheet, block_top, c, last, c]

    one = m == 1
    fit = ctx.add_chart({"type": "scatter"})
    fit.set_title(S.chart_title(f"{ex.y} against {ex.sources[0]}"))   # literal text (WriteContext.add_chart)
    fit.add_series({**S.point_series("observations"), "categories": col(x_col), "values": col(y_col)})
    fitted = (S.line_series("fitted") if one else
              {"name": "fitted values", "line": {"none": True},
               "marker": {"type": "x", "size": 6, "border": {"color": S.FITTED, "width": 1.25}}})
    fit.add_series({**fitted, "categories": col(x_col), "values": col(f_col)})
    fit.set_x_axis(S.axis(ex.sources[0]))
    fit.set_y_axis(S.axis(ex.y, **_floor(ex)))
    fit.set_legend({"position": "bottom", "font": {"size": S.CHART_AXIS_SIZE - 1, "name": S.FONT}})
    resid = ctx.add_chart({"type": "scatter"})
    resid.set_title(S.chart_title("residuals against fitted values"))
    resid.add_series({**S.point_series("residuals"), "categories": col(f_col), "values": col(r_col)})
    z = spots.zero_row
    resid.add_series({**S.line_series("zero", colour=S.REFERENCE, width=1.0),
                      "categories": [sheet, z, 1, z + 1, 1], "values": [sheet, z, 2, z + 1, 2]})
    resid.set_x_axis(S.axis(FITTED))
    resid.set_y_axis(S.axis("residual"))
    resid.set_legend({"none": True})
    top = spots.chart_row
    for k, chart in enumerate((fit, resid)):
        chart.set_size({"width": CHART_W, "height": CHART_H})
        chart.set_chartarea({"border": {"color": "#BFBFBF"}})
        chart.show_na_as_empty_cell()
        ws.insert_chart(top, 0, chart, {"x_offset": 4 + k * (CHART_W + 14), "y_offset": 4, "object_position": 3})
