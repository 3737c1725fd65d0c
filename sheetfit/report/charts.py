"""The `charts` and `overview` sheets: native scatter and bar charts over the `chart data` sheet.

Per charted group, one row of three charts under the group's name: the fit (points, fitted line
and the 95% band of the mean for one-input models; actual against fitted otherwise), residuals
against fitted values, and a normal quantile plot of the residuals.
"""

from __future__ import annotations

import math
from typing import Any

from ..results.headers import CELL_LIMIT, cell_text, utf16_len
from . import styles as S
from .book import WriteContext
from .chartdata import (
    C_FIT,
    C_GF,
    C_GX,
    C_HI,
    C_LO,
    C_Q,
    C_REF_FIT,
    C_REF_Q,
    C_RES,
    C_SR,
    C_X,
    C_Y,
    C_ZX,
    C_ZY,
    ChartPlan,
    GroupBlock,
    layout,
    plan_charts,
    write_data_sheet,
)

CHART_W, CHART_H, GAP = 440, 300, 14          # pixels
ROW_PX, COL_PX = 20, 64                       # default row height and column width
GRID_COLUMNS = math.ceil((3 * CHART_W + 2 * GAP) / COL_PX)
ROWS_PER_GROUP = 2 + math.ceil(CHART_H / ROW_PX)   # label row, charts, one spare row
TITLE_MAX = 46                                # characters that fit one title line at 10 pt
LABEL_LINE, LABEL_MAX = 180, 340             # characters in one label line; in the whole label
COLUMN_BAR_MAX = 40                           # overview as bars up to this many groups, else points


def charts_sheets(ctx: WriteContext) -> None:
    """Create `charts` and `overview` now; the `chart data` sheet is reserved to come last."""
    res = ctx.results
    plan = plan_charts(res)
    layout(plan)
    cap = max(res.job.max_charts, 0)
    ws = ctx.add_sheet("charts")
    ov = ctx.add_sheet("overview") if cap and plan.overview else None
    if not (plan.blocks or ov):
        _charts_header(ctx, ws, plan, cap)
        return
    data = ctx.reserve_data_sheet("chart data", lambda sheet: write_data_sheet(sheet, plan, ctx.styles, res.y,
                                                                             ctx.add_bulk))
    _charts_header(ctx, ws, plan, cap)
    for k, block in enumerate(plan.blocks):
        _group_row(ctx, ws, data, block, top=3 + k * ROWS_PER_GROUP)
    if ov is not None:
        _overview(ctx, ov, data, plan)
    ctx.note("charts", f"charts for {len(plan.blocks)} of {plan.fitted_groups} fitted groups "
                       f"(cap --max-charts {cap}); chart cells are on sheet '{data}'")


def _charts_header(ctx: WriteContext, ws: Any, plan: ChartPlan, cap: int) -> None:
    st = ctx.styles
    ws.set_landscape()
    ws.fit_to_pages(1, 0)
    if plan.fitted_groups == 0:
        ws.write_string(0, 0, "No charts: no group could be fitted (see the groups sheet).", st.title)
        return
    if cap == 0:
        ws.write_string(0, 0, "No charts: --max-charts is 0.", st.title)
        return
    more = "" if len(plan.blocks) == plan.fitted_groups else " (raise --max-charts to see more)"
    ws.write_string(0, 0, f"charts for {len(plan.blocks)} of {plan.fitted_groups} groups; "
                          f"flagged groups first{more}", st.title)
    fit = ("the fit (points, fitted line, dashed 95% band of the mean)" if plan.blocks and plan.blocks[0].one_input
           else "actual against fitted (grey line: y = x)")
    ws.write_string(1, 0, f"Each row: {fit}, residuals against fitted values, normal quantile plot. "
                          "Teal name = flagged group; not-fitted groups have no charts.", st.note)


def _rng(sheet: str, first: int, count: int, col: int) -> list:
    return [sheet, first, col, first + max(count, 1) - 1, col]


def _group_row(ctx: WriteContext, ws: Any, data: str, b: GroupBlock, top: int) -> None:
    st = ctx.styles
    facts = f"n = {b.n}, R² = {b.r2:.4f}" if math.isfinite(b.r2) else f"n = {b.n}"
    tail = f"   {facts}   {b.equation}"
    if b.sampled_from:
        tail += f"   (plots show {b.n_points:,} of {b.sampled_from:,} rows: flagged rows and an even sample)"
    if b.flagged:
        tail += f"   flagged: {b.reasons}" if b.reasons else "   flagged"
    if len(b.label) + len(tail) > LABEL_MAX:
        tail = tail[: max(LABEL_MAX - len(b.label) - 40, 20)].rstrip() + " … (full reasons on the groups sheet)"
    # the label spans the chart grid in one merged, wrapping cell, so long reasons never widen the page
    cell = st.label_cell[b.flagged]
    if len(b.label) + len(tail) > LABEL_LINE:
        ws.set_row(top, 30)
    ws.merge_range(top, 0, top, GRID_COLUMNS - 1, "", cell)
    label = cell_text(b.label, CELL_LIMIT - utf16_len(tail))       # the whole cell stays within the limit
    if label:
        ws.write_rich_string(top, 0, st.label_name[b.flagged], label, st.label_tail[b.flagged], tail, cell)
    else:                                   # a rich string cannot hold an empty part (an empty label)
        ws.write_string(top, 0, tail.lstrip(), cell)
    charts = [_fit_chart(ctx, data, b), _residual_chart(ctx, data, b), _quantile_chart(ctx, data, b)]
    for k, chart in enumerate(charts):
        if chart is not None:
            ws.insert_chart(top + 1, 0, chart, {"x_offset": k * (CHART_W + GAP), "y_offset": 2,
                                                "object_position": 3})


def _new_chart(ctx: WriteContext, title: str, x_title: str, y_title: str,
               x_bounds: tuple, y_bounds: tuple, legend: bool = False) -> Any:
    chart = ctx.add_chart({"type": "scatter", "subtype": "straight"})
    chart.set_title(S.chart_title(title))
    chart.set_x_axis(S.axis(x_title, **_bounds(x_bounds)))
    chart.set_y_axis(S.axis(y_title, **_bounds(y_bounds)))
    chart.set_size({"width": CHART_W, "height": CHART_H})
    chart.set_chartarea({"border": {"color": "#BFBFBF"}})
    if legend:  # the upper band line (series 4) repeats the lower one's legend entry
        chart.set_legend({"position": "bottom", "delete_series": [3],
                          "font": {"size": S.CHART_AXIS_SIZE - 1, "name": S.FONT}})
    else:
        chart.set_legend({"none": True})
    return chart


def _fit_chart(ctx: WriteContext, data: str, b: GroupBlock) -> Any:
    res = ctx.results
    s0, c = b.start, b.cols
    if b.one_input:
        r2 = f"R² = {b.r2:.3f}" if math.isfinite(b.r2) else ""
        # a long equation stays in the label above the charts; the title keeps to one line
        title = f"{b.equation}   {r2}" if len(b.equation) + len(r2) + 3 <= TITLE_MAX else f"fitted curve   {r2}"
        chart = _new_chart(ctx, title.strip(), b.x_name, res.y, nice_bounds(c[C_X] + c[C_GX]),
                           nice_bounds(c[C_Y] + c[C_LO] + c[C_HI]), legend=True)
        chart.add_series({**S.point_series("observations"), "categories": _rng(data, s0, b.n_points, C_X),
                          "values": _rng(data, s0, b.n_points, C_Y)})
        chart.add_series({**S.line_series("fitted"), "categories": _rng(data, s0, b.n_grid, C_GX),
                          "values": _rng(data, s0, b.n_grid, C_GF)})
        for col, name in ((C_LO, "95% band (mean)"), (C_HI, "upper band")):
            chart.add_series({**S.line_series(name, width=1.0, dashed=True),
                              "categories": _rng(data, s0, b.n_grid, C_GX), "values": _rng(data, s0, b.n_grid, col)})
        return chart
    r2 = f", R² = {b.r2:.3f}" if math.isfinite(b.r2) else ""
    both = nice_bounds(c[C_Y] + c[C_FIT])
    chart = _new_chart(ctx, f"actual against fitted{r2}", "fitted value", res.y, both, both)
    return _points_and_reference(chart, data, b, ("observations", b.n_points, C_FIT, C_Y),
                                 ("y = x", C_REF_FIT, C_REF_FIT))


def _points_and_reference(chart: Any, data: str, b: GroupBlock, points: tuple[str, int, int, int],
                          reference: tuple[str, int, int]) -> Any:
    """Add a point series (name, count, x column, y column) and a two-point reference line
    (name, x column, y column) of block `b` to `chart`."""
    name, n, cx, cy = points
    chart.add_series({**S.point_series(name), "categories": _rng(data, b.start, n, cx),
                      "values": _rng(data, b.start, n, cy)})
    ref, rx, ry = reference
    chart.add_series({**S.line_series(ref, colour=S.REFERENCE, width=1.0),
                      "categories": _rng(data, b.start, 2, rx), "values": _rng(data, b.start, 2, ry)})
    return chart


def _residual_chart(ctx: WriteContext, data: str, b: GroupBlock) -> Any:
    c = b.cols
    res_vals = c[C_RES] + [0.0]
    chart = _new_chart(ctx, "residuals against fitted", "fitted value", "residual",
                       nice_bounds(c[C_FIT]), nice_bounds(res_vals, symmetric=True))
    return _points_and_reference(chart, data, b, ("residuals", b.n_points, C_FIT, C_RES), ("zero", C_ZX, C_ZY))


def _quantile_chart(ctx: WriteContext, data: str, b: GroupBlock) -> Any:
    if b.n_quantiles == 0:
        return None
    c = b.cols
    both = nice_bounds(c[C_Q] + c[C_SR], symmetric=True)
    chart = _new_chart(ctx, "normal quantile plot of residuals", "normal quantile", "standardized residual",
                       both, both)
    return _points_and_reference(chart, data, b, ("residuals", b.n_quantiles, C_Q, C_SR),
                                 ("y = x", C_REF_Q, C_REF_Q))


def _overview(ctx: WriteContext, ws: Any, data: str, plan: ChartPlan) -> None:
    st = ctx.styles
    n = len(plan.overview)
    flagged = sum(1 for _, _, f in plan.overview if f)
    ws.set_landscape()
    ws.fit_to_pages(1, 0)
    ws.write_string(0, 0, f"R² of every fitted group ({n:,}), lowest first; deep teal = flagged "
                          f"({flagged:,}), warm grey = no flags", st.title)
    s0 = plan.overview_start
    r2s = [r for _, r, _ in plan.overview]
    low = min(0.0, min(r2s))
    if n <= COLUMN_BAR_MAX:
        chart = ctx.add_chart({"type": "column"})
        width = min(max(560, 140 + 30 * n), 1400)
        for col, name, colour in ((2, "no flags", S.OVERVIEW_OK), (3, "flagged", S.OVERVIEW_FLAGGED)):
            chart.add_series({"name": name, "categories": [data, s0, 0, s0 + n - 1, 0],
                              "values": [data, s0, col, s0 + n - 1, col],
                              "fill": {"color": colour}, "border": {"none": True},
                              "overlap": 100, "gap": 40})
        chart.set_x_axis(S.axis("group", num_font={"size": 8, "rotation": -45, "name": S.FONT},
                                major_gridlines={"visible": False}))
    else:
        chart = ctx.add_chart({"type": "scatter"})
        width = 1000
        for col, name, colour, size in ((2, "no flags", S.OVERVIEW_OK, 4), (3, "flagged", S.OVERVIEW_FLAGGED, 6)):
            chart.add_series({**S.point_series(name, colour=colour, size=size),
                              "categories": [data, s0, 1, s0 + n - 1, 1],
                              "values": [data, s0, col, s0 + n - 1, col]})
        chart.set_x_axis(S.axis("groups ranked by R² (1 = lowest)", min=0, max=n + 1))
    chart.set_y_axis(S.axis("R²", min=low, max=1, major_unit=0.2 if low == 0 else None, num_format="0.0"))
    chart.set_title(S.chart_title("R² by group, lowest first"))
    chart.set_legend({"position": "top", "font": {"size": S.CHART_AXIS_SIZE, "name": S.FONT}})
    chart.set_size({"width": width, "height": 420})
    ws.insert_chart(2, 0, chart, {"x_offset": 4, "y_offset": 4, "object_position": 3})


def nice_bounds(values: list, symmetric: bool = False) -> tuple:
    """(min, max, step, number format) for an axis: round numbers, a little padding."""
    v = [x for x in values if x is not None and math.isfinite(x)]
    if not v:
        return ()
    lo, hi = min(v), max(v)
    if symmetric:
        m = max(abs(lo), abs(hi))
        lo, hi = -m, m
    if hi - lo <= 0:
        pad = abs(hi) * 0.1 or 1.0
        lo, hi = lo - pad, hi + pad
    step = _nice_step((hi - lo) / 5)
    lo_b = math.floor(lo / step - 1e-9) * step
    hi_b = math.ceil(hi / step + 1e-9) * step
    if lo_b == lo and lo != 0:
        lo_b -= step
    if hi_b == hi and hi != 0:
        hi_b += step
    decimals = max(0, -math.floor(math.log10(step) + 1e-9))
    if step >= 1e6 or step < 1e-4:
        fmt = "0.0E+0"
    elif decimals:
        fmt = "0." + "0" * decimals
    else:
        fmt = "#,##0" if hi_b >= 10_000 or lo_b <= -10_000 else "0"
    return (float(f"{lo_b:.12g}"), float(f"{hi_b:.12g}"), float(f"{step:.12g}"), fmt)


def _nice_step(raw: float) -> float:
    mag = 10 ** math.floor(math.log10(raw))
    for m in (1, 2, 5, 10):
        if raw <= m * mag * (1 + 1e-9):
            return m * mag
    return 10 * mag


def _bounds(b: tuple) -> dict[str, Any]:
    if not b:
        return {}
    lo, hi, step, fmt = b
    # "crossing" is where the other axis meets this one: the lower-left corner, so no axis line
    # runs through the data
    return {"min": lo, "max": hi, "major_unit": step, "num_format": fmt, "crossing": lo}
