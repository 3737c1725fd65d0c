"""Change-point models on the live prediction sheet, the model store sheet and the charts.

The live prediction sheet is recalculated by LibreOffice Calc (headless, a profile that recalculates
on load; see tests/lo.py) with each shape's group chosen and inputs on both sides of its change
points. Oracle: `sheetfit.predict` on the same results (itself checked against statsmodels in
tests/test_change_point_store.py) and the hinge values max(0, τ − T), max(0, T − τ) by hand.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import openpyxl
import pandas as pd
import pytest

import sheetfit
import sheetfit.report as report
from sheetfit.report import write_results
from sheetfit.report.chartdata import plan_charts
from sheetfit.report.explorer import explorer_sheet
from sheetfit.report.live_prediction import SHAPE_LABEL, live_prediction_sheet, tau_label
from sheetfit.results.change_points import CHANGE_POINT, SHAPE, UPPER_CHANGE_POINT
from sheetfit.results.store import store_from_results
from sheetfit.results.store_layout import INACTIVE_NOTE, STORE_SHEET
from tests.lo import SKIP_REASON, SOFFICE, convert, make_profile
from tests.test_change_point_store import T, Z, change_point_results

RESULTS = ("predicted value", "std error of the fitted mean", "range for the average, low",
           "range for the average, high", "range for one new row, low", "range for one new row, high")
# (site, temperature, units): each shape on both sides of its change point(s); heating-cooling also in its flat band
CASES = [("H", 4.0, 210.0), ("H", 24.0, 380.0), ("C", 26.0, 250.0), ("C", 2.5, 300.0), ("HC", 1.0, 320.0),
         ("HC", 15.0, 150.0), ("HC", 29.0, 450.0), ("TS", 7.5, 260.0), ("L", 12.0, 330.0)]


def probe(ctx) -> None:
    """A formula whose cached result is deliberately wrong: only a recalculation makes it 2."""
    ctx.add_sheet("probe").write_formula(0, 0, "=1+1", None, 999)


def label_rows(ws, col: int = 1) -> dict[str, int]:
    """Text in column `col` (1-based) → its first row."""
    out: dict[str, int] = {}
    for row in ws.iter_rows(min_col=col, max_col=col):
        if isinstance(row[0].value, str):
            out.setdefault(row[0].value, row[0].row)
    return out


def ours(res, site: str, t: float, z: float) -> pd.Series:
    return sheetfit.predict(res, pd.DataFrame({"site": [site], T: [t], Z: [z]})).iloc[0]


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    return change_point_results(tmp_path_factory.mktemp("cp"))[0]


@pytest.fixture(scope="module")
def recalculated(built, tmp_path_factory) -> list[openpyxl.Workbook]:
    if SOFFICE is None:
        pytest.skip(SKIP_REASON)
    folder = tmp_path_factory.mktemp("lo")
    paths = []
    for i, (site, t, z) in enumerate(CASES):
        builders = [functools.partial(explorer_sheet, group=site, cache=False),
                    functools.partial(live_prediction_sheet, group=site, inputs={T: t, Z: z}, cache=False), probe]
        with pytest.MonkeyPatch.context() as mp:
            mp.setattr(report, "_extra_sheets", lambda b=builders: b)
            paths.append(write_results(built, folder / f"case{i}.xlsx"))
    outs, _ = convert(paths, "xlsx", folder / "out", make_profile(folder / "profile"))
    return [openpyxl.load_workbook(p, data_only=True) for p in outs]


@pytest.mark.skipif(SOFFICE is None, reason=SKIP_REASON)
@pytest.mark.parametrize("case", range(len(CASES)), ids=[f"{c[0]} at {c[1]}" for c in CASES])
def test_recalculated_live_sheet_equals_predict(built, recalculated, case):
    site, t, z = CASES[case]
    wb = recalculated[case]
    assert wb["probe"]["A1"].value == 2                       # LibreOffice did recalculate
    ws = wb["live prediction"]
    rows = label_rows(ws)
    expected = ours(built, site, t, z)
    for label in RESULTS:
        assert ws.cell(rows[label], 2).value == pytest.approx(expected[label], rel=1e-12), label
    store = store_from_results(built)
    g = store.labels.index(site)
    beside = label_rows(ws, 4)
    assert ws.cell(beside[SHAPE_LABEL], 5).value == store.shapes[g]
    for i, kind in enumerate(("below", "above")):
        tau = store.change_points[g, i]
        cell = ws.cell(beside[tau_label(store, kind)], 5).value
        assert (cell == tau) if math.isfinite(tau) else cell in (None, "")
        # the term's value on the calculation table: max(0, τ − T) or max(0, T − τ) by hand, 0 without τ
        term = next(x.label for x in store.terms if x.kind == kind)
        want = 0.0 if not math.isfinite(tau) else max(0.0, tau - t) if kind == "below" else max(0.0, t - tau)
        assert ws.cell(rows[term], 2).value == pytest.approx(want, abs=1e-12)


@pytest.mark.skipif(SOFFICE is None, reason=SKIP_REASON)
@pytest.mark.parametrize("case", [0, 2, 4, 8], ids=["heating", "cooling", "heating-cooling", "line"])
def test_recalculated_explorer_shows_the_chosen_groups_shape_and_change_points(built, recalculated, case):
    site = CASES[case][0]
    ws = recalculated[case]["explorer"]
    rows = label_rows(ws)
    g = built.groups[built.groups["site"] == site].iloc[0]
    assert ws.cell(rows[SHAPE], 2).value == g[SHAPE]
    for name in (CHANGE_POINT, UPPER_CHANGE_POINT):
        want = g[name]
        cell = ws.cell(rows[name], 2).value
        assert cell == want if math.isfinite(want) else cell in (None, "")
    # a term the group's shape does not use shows no coefficient
    unused = f"{T} above change point" if site == "H" else f"{T} below change point"
    if site in ("H", "C", "L"):
        assert ws.cell(rows[unused], 2).value in (None, "")


def test_cached_live_sheet_shows_sheetfits_own_results(built, tmp_path):
    # the cached results (shown before any recalculation) are sheetfit.predict's, for a cooling group
    builders = [functools.partial(live_prediction_sheet, group="C", inputs={T: 27.0, Z: 240.0})]
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(report, "_extra_sheets", lambda b=builders: b)
        path = write_results(built, tmp_path / "fit.xlsx")
    values = openpyxl.load_workbook(path, data_only=True)["live prediction"]
    formulas = openpyxl.load_workbook(path)["live prediction"]
    rows = label_rows(values)
    expected = ours(built, "C", 27.0, 240.0)
    for label in RESULTS:
        assert values.cell(rows[label], 2).value == pytest.approx(expected[label], rel=1e-12), label
    above = f"{T} above change point"
    assert "MAX(0," in formulas.cell(rows[above], 2).value
    assert values.cell(rows[above], 2).value == pytest.approx(27.0 - 18.5, rel=1e-15)   # by hand
    assert values.cell(rows["residual degrees of freedom"], 3).value.strip() == "rows used − coefficients − change points"


def test_store_sheet_says_how_unused_terms_are_kept(built, tmp_path):
    path = write_results(built, tmp_path / "fit.xlsx")
    ws = openpyxl.load_workbook(path, read_only=True)[STORE_SHEET]
    first = [r[0] for r in ws.iter_rows(max_col=1, values_only=True)]
    assert INACTIVE_NOTE in first


def test_charts_write_the_broken_line_with_its_change_points(tmp_path):
    res, _ = change_point_results(tmp_path / "one", others=False)
    plan = plan_charts(res)
    eq = {b.label: b.equation for b in plan.blocks}
    assert eq["H"].startswith("kWh = ") and f"·max(0, 14 − {T})" in eq["H"]
    assert f"·max(0, {T} − 18.5)" in eq["C"] and "max(0," not in eq["L"]
    assert f"max(0, 9 − {T})" in eq["HC"] and f"max(0, {T} − 21)" in eq["HC"]
    block = next(b for b in plan.blocks if b.label == "TS")
    assert block.one_input and 15.5 in block.cols[5]        # the grid holds the change point itself
    path = write_results(res, tmp_path / "fit.xlsx")
    assert "charts" in openpyxl.load_workbook(path, read_only=True).sheetnames


def test_no_change_point_cells_on_an_ordinary_live_sheet(tmp_path):
    rng = np.random.default_rng(4)
    df = pd.DataFrame({"g": np.repeat(["a", "b"], 15), "x": rng.uniform(0, 5, 30)})
    df["y"] = 1 + df["x"] + rng.normal(0, 0.3, 30)
    path = write_results(sheetfit.fit_frame(df, y="y", x=["x"], group="g"), tmp_path / "fit.xlsx")
    ws = openpyxl.load_workbook(path)["live prediction"]
    assert SHAPE_LABEL not in label_rows(ws, 4)
    assert not any("MAX(0," in str(c.value) for r in ws.iter_rows() for c in r)
