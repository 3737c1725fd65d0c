"""The `predict` sheet (live what-if predictions in cell formulas) and the `model store` sheet behind it.

The store holds one row per fitted group: keys, n, residual df and variance, coefficients,
(X'X)⁻¹ and the observed range of each input. `sheetfit predict` reads it back
(sheetfit.results.store.read_store); the predict sheet finds the chosen group's row once with MATCH and
takes every number from that row with INDEX, so it works in any common spreadsheet application.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats
from xlsxwriter.utility import quote_sheetname, xl_rowcol_to_cell

from ..prediction.compute import predict_cells
from ..results.store import (
    GROUP_HEADER,
    STORE_FORMAT,
    STORE_SHEET,
    STORE_TITLE,
    TERM_HEADER,
    ModelStore,
    store_from_results,
)
from ..terms import INTERCEPT
from . import fastrows
from .book import WriteContext
from .columns import SCIENTIFIC, number_format

MAX_COLUMNS = 16_384
BELOW, ABOVE = "below the observed range", "above the observed range"
TOP_INPUT = 8          # first input row (0-based) on the predict sheet


class Cells:
    """Cells of one sheet gathered in any order, then written row by row (constant_memory)."""

    def __init__(self, cache: bool = True) -> None:
        self.cache = cache
        self._cells: dict[tuple[int, int], tuple[str, Any, Any, Any]] = {}
        self._merged: dict[tuple[int, int], int] = {}
        self._heights: dict[int, float] = {}

    def text(self, r: int, c: int, value: str, fmt: Any = None) -> None:
        self._cells[(r, c)] = ("text", value, fmt, None)

    def number(self, r: int, c: int, value: float, fmt: Any = None) -> None:
        self._cells[(r, c)] = ("number", value, fmt, None)

    def formula(self, r: int, c: int, formula: str, fmt: Any = None, value: Any = None) -> None:
        """`value` is the cached result shown before recalculation (dropped when cache is off)."""
        self._cells[(r, c)] = ("formula", formula, fmt, value)

    def blank(self, r: int, c: int, fmt: Any) -> None:
        self._cells[(r, c)] = ("blank", None, fmt, None)

    def merge(self, r: int, c: int, last_col: int, height: float | None = None) -> None:
        """Merge the cell at (r, c) across to `last_col` (its content and format stay); set the row height."""
        self._merged[(r, c)] = last_col
        if height:
            self._heights[r] = height

    def flush(self, ws: Any) -> None:
        row = -1
        for (r, c) in sorted(self._cells):
            kind, value, fmt, cached = self._cells[(r, c)]
            if r != row and r in self._heights:
                ws.set_row(r, self._heights[r])
            row = r
            if (r, c) in self._merged:
                ws.merge_range(r, c, r, self._merged[(r, c)], "", fmt)
            if kind == "text":
                ws.write_string(r, c, value, fmt)
            elif kind == "number":
                ws.write_number(r, c, value, fmt)
            elif kind == "blank":
                ws.write_blank(r, c, None, fmt)
            else:
                ws.write_formula(r, c, value, fmt, _cached(cached) if self.cache else "")


def _cached(v: Any) -> Any:
    if v is None:
        return ""
    if isinstance(v, (float, np.floating)):
        return "#N/A" if not math.isfinite(float(v)) else float(v)
    if isinstance(v, (np.integer,)):
        return int(v)
    return v


def lookup(cell: str, rng: str) -> str:
    """MATCH of a label in a list, with the wildcard characters * ? ~ escaped so labels match literally."""
    escaped = f'SUBSTITUTE(SUBSTITUTE(SUBSTITUTE({cell},"~","~~"),"*","~*"),"?","~?")'
    return f"MATCH({escaped},{rng},0)"


def ref(sheet: str | None, r: int, c: int, absolute: bool = True) -> str:
    cell = xl_rowcol_to_cell(r, c, row_abs=absolute, col_abs=absolute)
    return f"{quote_sheetname(sheet)}!{cell}" if sheet else cell


def area(sheet: str | None, r1: int, c1: int, r2: int, c2: int) -> str:
    a = f"{xl_rowcol_to_cell(r1, c1, True, True)}:{xl_rowcol_to_cell(r2, c2, True, True)}"
    return f"{quote_sheetname(sheet)}!{a}" if sheet else a


# --- the store ----------------------------------------------------------------------------------

@dataclass(frozen=True)
class StoreLayout:
    """Where things sit on the store sheet (0-based rows and columns)."""

    settings: list[tuple[str, list]]
    term_header: int
    group_header: int
    first: int            # first group row
    last: int             # last group row
    k: int
    p: int
    m: int

    @property
    def width(self) -> int:
        return 1 + self.k + 3 + self.p + self.p * self.p + 2 * self.m

    def col_n(self) -> int: return 1 + self.k
    def col_df(self) -> int: return 2 + self.k
    def col_s2(self) -> int: return 3 + self.k
    def col_coef(self, j: int) -> int: return 4 + self.k + j
    def col_inv(self, i: int, j: int) -> int: return 4 + self.k + self.p + i * self.p + j
    def col_min(self, j: int) -> int: return 4 + self.k + self.p + self.p * self.p + 2 * j
    def col_max(self, j: int) -> int: return self.col_min(j) + 1


def store_layout(store: ModelStore) -> StoreLayout:
    settings = [("store format", [STORE_FORMAT]), ("response", [store.y]),
                ("intercept", ["yes" if store.intercept else "no"]), ("confidence level", [store.level]),
                ("group columns", list(store.group_columns)), ("source columns", list(store.sources)),
                ("date/time inputs", list(store.date_columns)), ("fitted groups", [len(store)])]
    term_header = 4 + len(settings) + 1
    p = len(store.term_labels)
    group_header = term_header + p + 2
    return StoreLayout(settings, term_header, group_header, group_header + 1, group_header + max(len(store), 1),
                       len(store.group_columns), p, len(store.sources))


def fill_store(ws: Any, store: ModelStore, lay: StoreLayout, st: Any, bulk: Any = None) -> None:
    """Write the store sheet row by row; `bulk` (WriteContext.add_bulk) lets many groups take the fast path."""
    ws.set_column(0, 0, 26)
    ws.set_column(1, lay.width - 1, 16)
    ws.set_landscape()
    ws.fit_to_pages(1, 0)
    ws.write_string(0, 0, STORE_TITLE, st.title)
    ws.write_string(1, 0, "The fitted models, one row per group: the predict sheet and `sheetfit predict` read "
                          "them from here. Do not edit, sort, insert or delete cells.", st.note)
    ws.write_row(3, 0, ["setting", "value"], st.header)
    for i, (name, values) in enumerate(lay.settings):
        ws.write_string(4 + i, 0, name)
        for j, v in enumerate(values):
            (ws.write_string if isinstance(v, str) else ws.write_number)(4 + i, 1 + j, v)
    ws.write_row(lay.term_header, 0, [TERM_HEADER, "source column", "kind", "power"], st.header)
    rows = [[INTERCEPT, "", "intercept", 0]] if store.intercept else []
    rows += [[t.label, t.column, t.kind, t.power] for t in store.terms]
    for i, row in enumerate(rows):
        ws.write_string(lay.term_header + 1 + i, 0, row[0])
        ws.write_string(lay.term_header + 1 + i, 1, row[1])
        ws.write_string(lay.term_header + 1 + i, 2, row[2])
        ws.write_number(lay.term_header + 1 + i, 3, row[3])
    labels = store.term_labels
    head = [GROUP_HEADER, *store.group_columns, "n", "residual df", "residual variance"]
    head += [f"coefficient: {t}" for t in labels]
    head += [f"(X'X)⁻¹: {a} × {b}" for a in labels for b in labels]
    for c in store.sources:
        head += [f"min: {c}", f"max: {c}"]
    ws.write_row(lay.group_header, 0, head, st.header)
    sci = st.number(SCIENTIFIC)
    if bulk is not None and fastrows.use_fast(len(store), lay.width):
        bulk(ws, lay.first, _store_columns(store, lay, sci))
        ws.freeze_panes(0, 1)
        return
    for g in range(len(store)):
        r = lay.first + g
        ws.write_string(r, 0, store.labels[g])
        for j, key in enumerate(store.keys[g]):
            ws.write_string(r, 1 + j, key)
        ws.write_number(r, lay.col_n(), int(store.n[g]))
        ws.write_number(r, lay.col_df(), float(store.df[g]))
        ws.write_number(r, lay.col_s2(), float(store.sigma2[g]), sci)
        for j in range(lay.p):
            ws.write_number(r, lay.col_coef(j), float(store.beta[g, j]), sci)
        for v, c in zip(store.xtx_inv[g].ravel().tolist(), range(lay.col_inv(0, 0), lay.col_inv(0, 0) + lay.p ** 2)):
            ws.write_number(r, c, v, sci)
        for j in range(lay.m):
            for v, c in ((store.lo[g, j], lay.col_min(j)), (store.hi[g, j], lay.col_max(j))):
                if math.isfinite(v):
                    ws.write_number(r, c, float(v))
    ws.freeze_panes(0, 1)


def _store_columns(store: ModelStore, lay: StoreLayout, sci: Any) -> list[tuple[int, Any, Any]]:
    """The group rows of the store as (column, values, format) for the bulk writer; same cells as the loop."""
    G = len(store)
    cols: list[tuple[int, Any, Any]] = [(0, np.array(store.labels, dtype=object), None)]
    keys = np.array(store.keys, dtype=object).reshape(G, lay.k)
    cols += [(1 + j, keys[:, j], None) for j in range(lay.k)]
    cols += [(lay.col_n(), np.asarray(store.n, dtype=np.int64), None),
             (lay.col_df(), np.asarray(store.df, dtype=np.float64), None),
             (lay.col_s2(), np.asarray(store.sigma2, dtype=np.float64), sci)]
    cols += [(lay.col_coef(j), store.beta[:, j], sci) for j in range(lay.p)]
    inv = store.xtx_inv.reshape(G, lay.p * lay.p)
    cols += [(lay.col_inv(0, 0) + i, inv[:, i], sci) for i in range(lay.p * lay.p)]
    for j in range(lay.m):
        cols += [(lay.col_min(j), store.lo[:, j], None), (lay.col_max(j), store.hi[:, j], None)]
    return cols


# --- the predict sheet --------------------------------------------------------------------------

def whatif_sheet(ctx: WriteContext, group: str | None = None, inputs: Mapping[str, float] | None = None,
                 level: float | None = None, cache: bool = True) -> None:
    """The `predict` sheet plus the `model store` data sheet.

    `group`, `inputs` (source column → value) and `level` preset the input cells (default: the
    first fitted group at the middle of its observed ranges, the fit's level); `cache=False` leaves
    formula results empty so only a recalculating application can fill them.
    """
    res = ctx.results
    st = ctx.styles
    store = store_from_results(res)
    ws = ctx.add_sheet("predict")
    lay = store_layout(store)
    if len(store) == 0 or lay.width > MAX_COLUMNS:
        why = ("no group has a stored model (coefficients and (X'X)⁻¹)" if len(store) == 0
               else f"the model has too many terms to store one group per row ({lay.p} coefficients)")
        ws.set_column(0, 0, 110)
        ws.write_string(0, 0, f"No what-if predictions: {why}.", st.title)
        ctx.note("predict", f"not written: {why}")
        return
    name = ctx.reserve_data_sheet(STORE_SHEET, lambda sheet: fill_store(sheet, store, lay, st, ctx.add_bulk))
    g = store.labels.index(group) if group is not None else 0
    level = store.level if level is None else level
    values = [float((inputs or {}).get(c, _mid(store.lo[g, j], store.hi[g, j])))
              for j, c in enumerate(store.sources)]
    cells = Cells(cache)
    _predict_cells(ctx, cells, store, lay, name, g, values, level)
    ws.set_column(0, 0, 34)
    ws.set_column(1, 2, 17)
    for j, t in enumerate(store.term_labels):
        ws.set_column(3 + j, 3 + j, min(max(15, len(f"(X'X)⁻¹: {t}") + 2), 40))
    ws.set_column(3 + lay.p, 3 + lay.p, 15)
    ws.set_landscape()
    ws.fit_to_pages(1, 0)
    ws.hide_gridlines(2)
    cells.flush(ws)
    ws.data_validation(3, 1, 3, 1, {"validate": "list", "source": "=" + area(name, lay.first, 0, lay.last, 0),
                                    "error_title": "not a fitted group",
                                    "error_message": "Choose one of the fitted groups from the list."})
    ws.data_validation(4, 1, 4, 1, {"validate": "decimal", "criteria": "between", "minimum": 0.5,
                                    "maximum": 0.9999, "error_title": "confidence level",
                                    "error_message": "Type a level between 0.5 and 0.9999, e.g. 0.95."})
    m = lay.m
    ws.conditional_format(TOP_INPUT, 4, TOP_INPUT + m - 1, 4, {
        "type": "formula", "criteria": f'=LEN({ref(None, TOP_INPUT, 4, False)})>0',
        "format": st.highlight["check_failed"]})
    warn = ref(None, TOP_INPUT + m, 1, False)
    ws.conditional_format(TOP_INPUT + m, 1, TOP_INPUT + m, 1, {
        "type": "formula", "criteria": f'=OR(LEFT({warn},7)="caution",LEFT({warn},6)="choose")',
        "format": st.sample["check_failed"]})
    ctx.note("predict", f"what-if predictions for {len(store)} fitted groups: pale straw cells take your input, "
                        f"every other cell is a formula over the stored models on sheet '{name}'; an amber "
                        "range check means an input lies outside the group's observed range")


def _mid(lo: float, hi: float) -> float:
    """The middle of the observed range, rounded to the fewest digits that keep it inside the range."""
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return 1.0
    mid = (lo + hi) / 2
    for digits in range(3, 16):
        short = float(f"{mid:.{digits}g}")
        if lo <= short <= hi:
            return short
    return mid


def _term_formula(term: Any, x: str) -> str:
    if term.kind == "power":
        return f"IF(ISNUMBER({x}),{x}^{term.power},NA())"
    if term.kind == "log":
        return f"IF(AND(ISNUMBER({x}),{x}>0),LN({x}),NA())"
    if term.kind == "sqrt":
        return f"IF(AND(ISNUMBER({x}),{x}>=0),SQRT({x}),NA())"
    return f"IF(ISNUMBER({x}),{x},NA())"


def _check_formula(store: ModelStore, j: int, x: str, lo: str, hi: str, row: str) -> str:
    col = store.sources[j]
    inner = f'IF({x}<{lo},"{BELOW}",IF({x}>{hi},"{ABOVE}",""))'
    for t in store.terms:
        if t.column == col and t.kind == "log":
            inner = f'IF({x}<=0,"must be above 0 for {_quoted(t.label)}",{inner})'
        elif t.column == col and t.kind == "sqrt":
            inner = f'IF({x}<0,"must be 0 or more for {_quoted(t.label)}",{inner})'
    return f'=IF(ISNA({row}),"",IF(NOT(ISNUMBER({x})),"needs a number",{inner}))'


def _quoted(text: str) -> str:
    """Text for inside a formula's string literal: double quotes are doubled."""
    return text.replace('"', '""')


def _check_text(store: ModelStore, g: int, j: int, x: float) -> str:
    col = store.sources[j]
    for t in store.terms:
        if t.column == col and t.kind == "log" and x <= 0:
            return f"must be above 0 for {t.label}"
        if t.column == col and t.kind == "sqrt" and x < 0:
            return f"must be 0 or more for {t.label}"
    if x < store.lo[g, j]:
        return BELOW
    if x > store.hi[g, j]:
        return ABOVE
    return ""


def _predict_cells(ctx: WriteContext, cells: Cells, store: ModelStore, lay: StoreLayout, name: str, g: int,
                   values: list[float], level: float) -> None:
    st = ctx.styles
    res = ctx.results
    table = area(name, lay.first, 0, lay.last, lay.width - 1)
    keys = area(name, lay.first, 0, lay.last, 0)
    pre = predict_cells(_at_level(store, level), {**{c: [k] for c, k in zip(store.group_columns, store.keys[g])},
                                                   **{c: [v] for c, v in zip(store.sources, values)}}, 1).iloc[0]
    y_vals = pd.to_numeric(res.observations.get(res.y, pd.Series(dtype=float)), errors="coerce").to_numpy(np.float64)
    yf = st.number(number_format("predicted", y_vals))
    inp = st.input
    m, p = lay.m, lay.p
    cells.text(0, 0, f"What-if prediction of {store.y}", st.title)
    cells.text(1, 0, "Choose a group and type input values in the shaded cells; every other cell is a formula "
                     f"over the stored models on sheet '{name}'.", st.note)
    cells.text(3, 0, "group", st.group_label)
    cells.text(3, 1, store.labels[g], inp)
    cells.text(3, 2, "(list of fitted groups)", st.note)
    cells.text(4, 0, "confidence level", st.group_label)
    cells.number(4, 1, level, ctx.styles.input_percent)
    row = ref(None, 5, 1)
    cells.text(5, 0, "row of the group in the model store", st.note)
    cells.formula(5, 1, "=" + lookup(ref(None, 3, 1), keys), st.note, g + 1)

    def pick(col: int) -> str:
        return f"INDEX({table},{row},{col + 1})"

    cells_head = ["input", "value", "observed min", "observed max", "check"]
    for c, h in enumerate(cells_head):
        cells.text(TOP_INPUT - 1, c, h, st.header)
    checks = []
    for j, col in enumerate(store.sources):
        r = TOP_INPUT + j
        x, lo, hi = ref(None, r, 1), ref(None, r, 2), ref(None, r, 3)
        cells.text(r, 0, col)
        cells.number(r, 1, values[j], inp)
        cells.formula(r, 2, "=" + pick(lay.col_min(j)), None, store.lo[g, j])
        cells.formula(r, 3, "=" + pick(lay.col_max(j)), None, store.hi[g, j])
        text = _check_text(store, g, j, values[j])
        cells.formula(r, 4, _check_formula(store, j, x, lo, hi, row), None, text)
        checks.append((ref(None, r, 0), ref(None, r, 4), col, text))
    w = TOP_INPUT + m
    cat = "&".join(f'IF({e}="","","; "&{a}&" "&{e})' for a, e, _, _ in checks)
    cat_v = "".join(f"; {c} {t}" for _, _, c, t in checks if t)
    outside = f'COUNTIF({area(None, TOP_INPUT, 4, w - 1, 4)},"*observed range")>0'
    head_v = "caution, extrapolation: " if any(t in (BELOW, ABOVE) for *_, t in checks) else "caution: "
    cells.text(w, 0, "range check", st.text)
    cells.formula(w, 1, f'=IF(ISNA({row}),"choose a fitted group from the list in cell B4",IF(LEN({cat})=0,'
                        f'"all inputs lie within the group\'s observed range",IF({outside},'
                        f'"caution, extrapolation: ","caution: ")&MID({cat},3,1000)))',
                  st.wrap, head_v + cat_v[2:] if cat_v else "all inputs lie within the group's observed range")
    cells.merge(w, 1, 4, height=32)

    # results
    top = w + 2
    calc = top + 13                      # header row of the calculation table
    d_rng = area(None, calc + 1, 1, calc + p, 1)
    b_rng = area(None, calc + 1, 2, calc + p, 2)
    v_rng = area(None, calc + 1, 3 + p, calc + p, 3 + p)
    quad = ref(None, calc + p + 1, 1)
    r_pred, r_se, r_seo, r_df, r_s2, r_t = (ref(None, top + k, 1) for k in (1, 2, 3, 8, 9, 10))
    # cached results for the preset state: the half-widths of the intervals give t and the new-row std error
    t_val = stats.t.ppf(0.5 + level / 2, float(store.df[g]))
    se_obs = (pre["prediction high"] - pre["predicted"]) / t_val
    lines = [
        ("predicted", f"=SUMPRODUCT({b_rng},{d_rng})", pre["predicted"], yf, "Σ coefficient × term value"),
        ("std error of mean", f"=SQRT({r_s2}*{quad})", pre["std error of mean"], yf,
         "√(residual variance × x'(X'X)⁻¹x)"),
        ("std error of a new observation", f"=SQRT({r_s2}*(1+{quad}))", se_obs, yf,
         "√(residual variance × (1 + x'(X'X)⁻¹x))"),
        ("mean CI low", f"={r_pred}-{r_t}*{r_se}", pre["mean CI low"], yf, "where the group's mean lies"),
        ("mean CI high", f"={r_pred}+{r_t}*{r_se}", pre["mean CI high"], yf, ""),
        ("prediction low", f"={r_pred}-{r_t}*{r_seo}", pre["prediction low"], yf,
         "where one new observation lies"),
        ("prediction high", f"={r_pred}+{r_t}*{r_seo}", pre["prediction high"], yf, ""),
        ("residual df", "=" + pick(lay.col_df()), float(store.df[g]), st.number("0"), "n − number of coefficients"),
        ("residual variance", "=" + pick(lay.col_s2()), float(store.sigma2[g]), st.number(SCIENTIFIC),
         "RSS / residual df"),
        ("t quantile", f"=T.INV.2T(1-{ref(None, 4, 1)},{r_df})", t_val, st.number("0.0000"),
         "two-sided, at the confidence level"),
    ]
    cells.text(top, 0, "result", st.header)
    cells.text(top, 1, "value", st.header)
    cells.text(top, 2, "how", st.header)
    cells.blank(top, 3, st.header)
    for k, (label, formula, value, fmt, how) in enumerate(lines, start=1):
        cells.text(top + k, 0, label, st.group_label if k == 1 else None)
        cells.formula(top + k, 1, formula, fmt, value)
        if how:
            cells.text(top + k, 2, "   " + how, st.note)

    # how it is computed: term values, coefficients, (X'X)⁻¹
    labels = store.term_labels
    d_vals = _design(store, values)
    inv = store.xtx_inv[g]
    cells.text(calc - 1, 0, "calculation for the chosen group", st.section)
    head = ["term", "term value x", "coefficient", *[f"(X'X)⁻¹: {t}" for t in labels], "(X'X)⁻¹·x"]
    for c, h in enumerate(head):
        cells.text(calc, c, h, st.header)
    src_cell = {c: ref(None, TOP_INPUT + j, 1) for j, c in enumerate(store.sources)}
    terms = ([None] if store.intercept else []) + list(store.terms)
    sci = st.number(SCIENTIFIC)
    for i, term in enumerate(terms):
        r = calc + 1 + i
        cells.text(r, 0, labels[i])
        if term is None:
            cells.number(r, 1, 1.0)
        else:
            cells.formula(r, 1, "=" + _term_formula(term, src_cell[term.column]), None, d_vals[i])
        cells.formula(r, 2, "=" + pick(lay.col_coef(i)), sci, float(store.beta[g, i]))
        for j in range(p):
            cells.formula(r, 3 + j, "=" + pick(lay.col_inv(i, j)), sci, float(inv[i, j]))
        # (X'X)⁻¹ is symmetric, so its column i times x equals row i times x
        cells.formula(r, 3 + p, f"=SUMPRODUCT({area(None, calc + 1, 3 + i, calc + p, 3 + i)},{d_rng})", sci,
                      float(inv[i] @ d_vals))
    cells.text(calc + p + 1, 0, "x'(X'X)⁻¹x", st.group_label)
    cells.formula(calc + p + 1, 1, f"=SUMPRODUCT({v_rng},{d_rng})", sci, float(d_vals @ inv @ d_vals))
    cells.text(calc + p + 3, 0, "Intervals use the t distribution with the group's residual degrees of freedom. "
                                "Outside the observed input ranges the model was not fitted: treat such "
                                "predictions with caution.", st.note)


def _design(store: ModelStore, values: list[float]) -> np.ndarray:
    cols = {c: np.array([v]) for c, v in zip(store.sources, values)}
    parts = [1.0] if store.intercept else []
    parts += [float(t.values(cols[t.column])[0]) for t in store.terms]
    return np.asarray(parts, dtype=np.float64)


def _at_level(store: ModelStore, level: float) -> ModelStore:
    import dataclasses

    return store if level == store.level else dataclasses.replace(store, level=level)
