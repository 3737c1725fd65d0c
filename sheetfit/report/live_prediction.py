"""The `live prediction` sheet: predictions for typed-in inputs, computed by cell formulas over `model store`.

The store holds one row per fitted group (see sheetfit.results.store_layout for where each number
sits; report.store_sheet writes it and sheetfit.results.store_read.read_store reads it back for
`sheetfit predict`). The live prediction sheet finds the chosen group's row once with MATCH and takes
every number from that row with INDEX, so it works in any common spreadsheet application.
In a change-point run the sheet also shows the chosen group's shape and change points beside
the group, and computes the terms max(0, τ − T) and max(0, T − τ) with τ from the store row.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from ..prediction.compute import predict_cells
from ..results.headers import (AVERAGE_HIGH, AVERAGE_LOW, COEFFICIENT, INPUT, MEAN_STD_ERROR, NEW_ROW_HIGH,
    NEW_ROW_LOW, NEW_ROW_STD_ERROR, PREDICTED, cell_text)
from ..results.store import ModelStore, store_from_results, store_layout
from ..results.store_layout import INACTIVE_NOTE, SHAPE_HEADER, STORE_SHEET, StoreLayout
from ..terms import HINGES, design_matrix
from .book import WriteContext
from .columns import SCIENTIFIC, number_format
from .formulas import Cells, area, lookup, ref
from .live_formulas import ABOVE, BELOW, check_formula, check_text, level_check, term_formula
from .store_sheet import fill_store

MAX_COLUMNS = 16_384
SHEET = "live prediction"
TOP_INPUT = 8          # first input row (0-based) on the live prediction sheet
GROUP_ROW, LEVEL_ROW, STORE_ROW = 3, 4, 5     # the chosen group, the level, its row in the store
SHAPE_COL = 3          # change-point runs: shape and change points beside the group (labels here, values right)
SHAPE_LABEL = "shape of the chosen group"


@dataclass(frozen=True)
class PredictSheet:
    """The preset state of the live prediction sheet and where its formulas find the stored numbers."""

    store: ModelStore
    lay: StoreLayout
    name: str              # the store sheet's name
    g: int                 # preset group
    values: list[Any]      # preset inputs, one per source column (a category's level name as text)
    level: float           # preset confidence level

    @property
    def row(self) -> str:
        """The cell holding the chosen group's row number in the store."""
        return ref(None, STORE_ROW, 1)

    def pick(self, col: int) -> str:
        """The chosen group's value in store column `col`."""
        table = area(self.name, self.lay.first, 0, self.lay.last, self.lay.width - 1)
        return f"INDEX({table},{self.row},{col + 1})"

    def tau(self, kind: str) -> str:
        """The cell showing the chosen group's change point of the 'below' or 'above' term (empty when none)."""
        return ref(None, LEVEL_ROW + HINGES.index(kind), SHAPE_COL + 1)

    @property
    def taus(self) -> tuple[float, float]:
        """The preset group's change points of the 'below' and the 'above' term (NaN where none)."""
        return float(self.store.change_points[self.g, 0]), float(self.store.change_points[self.g, 1])


def live_prediction_sheet(ctx: WriteContext, group: str | None = None, inputs: Mapping[str, float] | None = None,
                 level: float | None = None, cache: bool = True) -> None:
    """The `live prediction` sheet plus the `model store` data sheet.

    `group`, `inputs` (source column → value) and `level` preset the input cells (default: the
    first fitted group at the middle of its observed ranges, the fit's level); `cache=False` leaves
    formula results empty so only a recalculating application can fill them.
    """
    res = ctx.results
    st = ctx.styles
    store = store_from_results(res)
    ws = ctx.add_sheet(SHEET)
    lay = store_layout(store)
    if len(store) == 0 or lay.width > MAX_COLUMNS:
        why = ("no group has a stored model (coefficients and (X'X)⁻¹)" if len(store) == 0
               else f"the model has too many terms to store one group per row ({lay.p} coefficients)")
        ws.set_column(0, 0, 110)
        ws.write_string(0, 0, f"No live predictions: {why}.", st.title)
        ctx.note(SHEET, f"not written: {why}")
        return
    name = ctx.reserve_data_sheet(STORE_SHEET, lambda sheet: fill_store(sheet, store, lay, st, ctx.add_bulk))
    g = store.labels.index(group) if group is not None else 0
    level = store.level if level is None else level
    categories = store.category_columns
    reference = dict(r.partition("=")[::2] for r in store.reference)
    values = [str((inputs or {}).get(c, reference.get(c, ""))) if c in categories
              else float((inputs or {}).get(c, _mid(store.lo[g, j], store.hi[g, j])))
              for j, c in enumerate(store.sources)]
    cells = Cells(cache)
    _predict_cells(ctx, cells, PredictSheet(store, lay, name, g, values, level))
    ws.set_column(0, 0, 34)
    ws.set_column(1, 2, 17)
    for j, t in enumerate(store.term_labels):
        ws.set_column(3 + j, 3 + j, min(max(15, len(f"(X'X)⁻¹: {t}") + 2), 40))
    ws.set_column(3 + lay.p, 3 + lay.p, 15)
    if store.has_change_points:
        ws.set_column(SHAPE_COL, SHAPE_COL, max(len(f"(X'X)⁻¹: {store.term_labels[0]}") + 2,
                                                *(len(tau_label(store, k)) + 2 for k in hinge_kinds(store))))
    ws.set_landscape()
    ws.fit_to_pages(1, 0)
    ws.hide_gridlines(2)
    cells.flush(ws)
    _input_rules(ws, st, lay, name)
    _level_lists(ws, store)
    ctx.note(SHEET, f"predictions for typed-in inputs, {len(store)} fitted groups: pale straw cells take your "
                    f"input, every other cell is a formula over the stored models on sheet '{name}'; a highlighted "
                    "range check means an input lies outside the group's observed range")


def _input_rules(ws: Any, st: Any, lay: StoreLayout, name: str) -> None:
    """Drop-down and level validation on the input cells; highlighted checks and range-check warnings."""
    ws.data_validation(GROUP_ROW, 1, GROUP_ROW, 1, {
        "validate": "list", "source": "=" + area(name, lay.first, 0, lay.last, 0),
        "error_title": "not a fitted group", "error_message": "Choose one of the fitted groups from the list."})
    ws.data_validation(LEVEL_ROW, 1, LEVEL_ROW, 1, {
        "validate": "decimal", "criteria": "between", "minimum": 0.5, "maximum": 0.9999,
        "error_title": "confidence level", "error_message": "Type a level between 0.5 and 0.9999, e.g. 0.95."})
    m = lay.m
    ws.conditional_format(TOP_INPUT, 4, TOP_INPUT + m - 1, 4, {
        "type": "formula", "criteria": f'=LEN({ref(None, TOP_INPUT, 4, False)})>0',
        "format": st.highlight["check_failed"]})
    warn = ref(None, TOP_INPUT + m, 1, False)
    ws.conditional_format(TOP_INPUT + m, 1, TOP_INPUT + m, 1, {
        "type": "formula", "criteria": f'=OR(LEFT({warn},7)="caution",LEFT({warn},6)="choose")',
        "format": st.sample["check_failed"]})


def _level_lists(ws: Any, store: ModelStore) -> None:
    """A drop-down of its levels on each category input's value cell (when the list fits a cell's rule)."""
    for j, col in enumerate(store.sources):
        names = sorted(store.level_codes(col)) if col in store.category_columns else []
        if names and sum(len(n) + 1 for n in names) <= 255:
            ws.data_validation(TOP_INPUT + j, 1, TOP_INPUT + j, 1, {
                "validate": "list", "source": names, "error_title": "not a level",
                "error_message": f"Choose one of the levels of {col} the fit saw."})


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


def hinge_kinds(store: ModelStore) -> list[str]:
    """The change-point term kinds ('below', 'above') the store's terms hold, in HINGES order."""
    return [k for k in HINGES if any(t.kind == k for t in store.terms)]


def tau_label(store: ModelStore, kind: str) -> str:
    """The label of a change point: τ in max(0, τ − T) ('below') or in max(0, T − τ) ('above')."""
    col = next(t.column for t in store.terms if t.kind == kind)
    return cell_text(f"τ in max(0, τ − {col})" if kind == "below" else f"τ in max(0, {col} − τ)")


def _predict_cells(ctx: WriteContext, cells: Cells, ps: PredictSheet) -> None:
    """Every cell of the live prediction sheet: the choice, inputs and range check, results, calculation table."""
    st = ctx.styles
    res = ctx.results
    y_vals = pd.to_numeric(res.observations.get(res.observation_header(res.y), pd.Series(dtype=float)),
                           errors="coerce").to_numpy(np.float64)
    yf = st.number(number_format(PREDICTED, y_vals))
    _choice_cells(cells, st, ps)
    if ps.store.has_change_points:
        _shape_cells(cells, st, ps)
    checks = _input_cells(cells, st, ps)
    w = TOP_INPUT + ps.lay.m
    _range_check_cells(cells, st, ps, checks, w)
    top = w + 2
    calc = top + 13                      # header row of the calculation table
    _result_cells(cells, st, ps, yf, top, calc)
    _calculation_cells(cells, st, ps, calc)


def _choice_cells(cells: Cells, st: Any, ps: PredictSheet) -> None:
    """Title, note, the group drop-down, the confidence level and the group's row in the store."""
    store, g = ps.store, ps.g
    cells.text(0, 0, f"Live prediction of {store.y}", st.title)
    cells.text(1, 0, "Choose a group and type input values in the shaded cells; every other cell is a formula "
                     f"over the stored models on sheet '{ps.name}'.", st.note)
    cells.text(GROUP_ROW, 0, "group", st.group_label)
    cells.text(GROUP_ROW, 1, store.labels[g], st.input)
    cells.text(GROUP_ROW, 2, "(list of fitted groups)", st.note)
    cells.text(LEVEL_ROW, 0, "confidence level", st.group_label)
    cells.number(LEVEL_ROW, 1, ps.level, st.input_percent)
    keys = area(ps.name, ps.lay.first, 0, ps.lay.last, 0)
    cells.text(STORE_ROW, 0, "row of the group in the model store", st.note)
    cells.formula(STORE_ROW, 1, "=" + lookup(ref(None, GROUP_ROW, 1), keys), st.note, g + 1)


def _shape_cells(cells: Cells, st: Any, ps: PredictSheet) -> None:
    """Beside the group: its shape and change points, looked up in its store row (empty where none)."""
    store, lay, row = ps.store, ps.lay, ps.row
    cells.text(GROUP_ROW, SHAPE_COL, SHAPE_LABEL, st.group_label)
    cells.formula(GROUP_ROW, SHAPE_COL + 1, f'=IF(ISNA({row}),"",{ps.pick(lay.col_extra(SHAPE_HEADER))}&"")', None,
                  store.shapes[ps.g])
    for kind in hinge_kinds(store):
        i = HINGES.index(kind)
        at = ps.pick(lay.col_change_point(i))
        cells.text(LEVEL_ROW + i, SHAPE_COL, tau_label(store, kind), st.group_label)
        value = ps.taus[i]
        cells.formula(LEVEL_ROW + i, SHAPE_COL + 1, f'=IF(ISNUMBER({at}),{at},"")', None,
                      value if math.isfinite(value) else "")


def _input_cells(cells: Cells, st: Any, ps: PredictSheet) -> list[tuple[str, str, str, str]]:
    """One row per input: name, value, observed range, check; returns (name cell, check cell, name, check)."""
    store, g, lay = ps.store, ps.g, ps.lay
    for c, h in enumerate(["input", "value", "observed min", "observed max", "check"]):
        cells.text(TOP_INPUT - 1, c, h, st.header)
    checks = []
    for j, col in enumerate(store.sources):
        r = TOP_INPUT + j
        x, lo, hi = ref(None, r, 1), ref(None, r, 2), ref(None, r, 3)
        cells.text(r, 0, col)
        if col in store.category_columns:
            cells.text(r, 1, str(ps.values[j]), st.input)
            cells.text(r, 2, "a category: choose a level", st.note)
        else:
            cells.number(r, 1, ps.values[j], st.input)
            cells.formula(r, 2, "=" + ps.pick(lay.col_min(j)), None, store.lo[g, j])
            cells.formula(r, 3, "=" + ps.pick(lay.col_max(j)), None, store.hi[g, j])
        if col in store.category_columns:
            text = "" if ps.values[j] in store.level_codes(col) else "not a level of the fit"
            cells.formula(r, 4, level_check(store, col, x, ps.row), None, text)
            checks.append((ref(None, r, 0), ref(None, r, 4), col, text))
            continue
        text = check_text(store, g, j, ps.values[j])
        cells.formula(r, 4, check_formula(store, j, x, lo, hi, ps.row), None, text)
        checks.append((ref(None, r, 0), ref(None, r, 4), col, text))
    return checks


def _range_check_cells(cells: Cells, st: Any, ps: PredictSheet, checks: list[tuple[str, str, str, str]],
                       w: int) -> None:
    """The range check row `w`: every input's check in one sentence, or that all lie within range."""
    row = ps.row
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


def _result_cells(cells: Cells, st: Any, ps: PredictSheet, yf: Any, top: int, calc: int) -> None:
    """The results table at row `top`: prediction, standard errors, intervals, df, variance, t."""
    store, g, lay, p = ps.store, ps.g, ps.lay, ps.lay.p
    d_rng = area(None, calc + 1, 1, calc + p, 1)
    b_rng = area(None, calc + 1, 2, calc + p, 2)
    quad = ref(None, calc + p + 1, 1)
    r_pred, r_se, r_seo, r_df, r_s2, r_t = (ref(None, top + k, 1) for k in (1, 2, 3, 8, 9, 10))
    pre = _preset_predictions(ps)
    # cached results for the preset state: the half-widths of the intervals give t and the new-row std error
    t_val = stats.t.ppf(0.5 + ps.level / 2, float(store.df[g]))
    se_obs = (pre[NEW_ROW_HIGH] - pre[PREDICTED]) / t_val
    lines = [
        (PREDICTED, f"=SUMPRODUCT({b_rng},{d_rng})", pre[PREDICTED], yf, "Σ coefficient × term value"),
        (MEAN_STD_ERROR, f"=SQRT({r_s2}*{quad})", pre[MEAN_STD_ERROR], yf,
         "√(residual variance × x'(X'X)⁻¹x)"),
        (NEW_ROW_STD_ERROR, f"=SQRT({r_s2}*(1+{quad}))", se_obs, yf,
         "√(residual variance × (1 + x'(X'X)⁻¹x))" + (
             "; weighted fit: for a row of average weight (sheetfit predict uses each row's own weight)"
             if store.weights else "")),
        (AVERAGE_LOW, f"={r_pred}-{r_t}*{r_se}", pre[AVERAGE_LOW], yf,
         "where the group's average lies at these inputs (confidence interval of the mean)"),
        (AVERAGE_HIGH, f"={r_pred}+{r_t}*{r_se}", pre[AVERAGE_HIGH], yf, ""),
        (NEW_ROW_LOW, f"={r_pred}-{r_t}*{r_seo}", pre[NEW_ROW_LOW], yf,
         "where one new row lies (prediction interval)"),
        (NEW_ROW_HIGH, f"={r_pred}+{r_t}*{r_seo}", pre[NEW_ROW_HIGH], yf, ""),
        ("residual degrees of freedom", "=" + ps.pick(lay.col_df()), float(store.df[g]), st.number("0"),
         "rows used − coefficients − change points" if store.has_change_points
         else "rows used − number of coefficients"),
        ("residual variance", "=" + ps.pick(lay.col_s2()), float(store.sigma2[g]), st.number(SCIENTIFIC),
         "RSS / residual degrees of freedom"),
        ("t quantile", f"=T.INV.2T(1-{ref(None, LEVEL_ROW, 1)},{r_df})", t_val, st.number("0.0000"),
         "two-sided, at the confidence level"),
    ]
    for c, h in enumerate(["result", "value", "how"]):
        cells.text(top, c, h, st.header)
    cells.blank(top, 3, st.header)
    for k, (label, formula, value, fmt, how) in enumerate(lines, start=1):
        cells.text(top + k, 0, label, st.group_label if k == 1 else None)
        cells.formula(top + k, 1, formula, fmt, value)
        if how:
            cells.text(top + k, 2, "   " + how, st.note)


def _preset_predictions(ps: PredictSheet) -> pd.Series:
    """sheetfit's own prediction for the preset group, inputs and level: the results' cached values."""
    store = ps.store
    at_level = store if ps.level == store.level else dataclasses.replace(store, level=ps.level)
    if store.weights:        # the sheet's new-row range is for a row of average weight (w0 = 1)
        at_level = dataclasses.replace(at_level, weights="")
    raw = {**{c: [k] for c, k in zip(store.group_columns, store.keys[ps.g])},
           **{c: [v] for c, v in zip(store.sources, ps.values)}}
    return predict_cells(at_level, raw, 1).iloc[0]


def _calculation_cells(cells: Cells, st: Any, ps: PredictSheet, calc: int) -> None:
    """The calculation table at row `calc`: term values, coefficients, (X'X)⁻¹ and x'(X'X)⁻¹x."""
    store, g, lay, p = ps.store, ps.g, ps.lay, ps.lay.p
    d_rng = area(None, calc + 1, 1, calc + p, 1)
    v_rng = area(None, calc + 1, 3 + p, calc + p, 3 + p)
    labels = store.term_labels
    taus = {kind: np.array([ps.taus[i]]) for i, kind in enumerate(HINGES)}
    coded = [float(store.level_codes(c).get(str(v), np.nan)) if c in store.category_columns else v
             for c, v in zip(store.sources, ps.values)]
    d_vals = design_matrix(store.terms, store.intercept, {c: np.array([v]) for c, v in zip(store.sources, coded)},
                           taus)[0]
    inv = store.xtx_inv[g]
    cells.text(calc - 1, 0, "calculation for the chosen group", st.section)
    head = [INPUT, "input value x", COEFFICIENT, *[f"(X'X)⁻¹: {t}" for t in labels], "(X'X)⁻¹·x"]
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
            tau = ps.tau(term.kind) if term.kind in HINGES else None
            cells.formula(r, 1, "=" + term_formula(term, src_cell[term.column], tau, src_cell.get(term.by)), None,
                          d_vals[i])
        cells.formula(r, 2, "=" + ps.pick(lay.col_coef(i)), sci, float(store.beta[g, i]))
        for j in range(p):
            cells.formula(r, 3 + j, "=" + ps.pick(lay.col_inv(i, j)), sci, float(inv[i, j]))
        # (X'X)⁻¹ is symmetric, so its column i times x equals row i times x
        cells.formula(r, 3 + p, f"=SUMPRODUCT({area(None, calc + 1, 3 + i, calc + p, 3 + i)},{d_rng})", sci,
                      float(inv[i] @ d_vals))
    cells.text(calc + p + 1, 0, "x'(X'X)⁻¹x", st.group_label)
    cells.formula(calc + p + 1, 1, f"=SUMPRODUCT({v_rng},{d_rng})", sci, float(d_vals @ inv @ d_vals))
    cells.text(calc + p + 3, 0, "Intervals use the t distribution with the group's residual degrees of freedom. "
                                "Outside the observed input ranges the model was not fitted: treat such "
                                "predictions with caution.", st.note)
    if store.has_change_points:
        cells.text(calc + p + 4, 0, INACTIVE_NOTE, st.note)
