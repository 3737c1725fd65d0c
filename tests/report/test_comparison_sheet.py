"""The across-groups sheet (sheetfit.report.comparison), written through `write_results` and read back
with openpyxl and from the xlsx archive. The numbers are those of sheetfit.results.comparison (tested
against statsmodels in tests/test_model_pooled.py); here: what lands where, and that it stays text."""

from __future__ import annotations

import functools
import re
import zipfile

import numpy as np
import openpyxl
import pandas as pd
import pytest

import sheetfit.report as report
from sheetfit.job import Thresholds
from sheetfit.report import write_results
from sheetfit.report.comparison import DATA_COLUMNS, DATA_SHEET, SHEET, TESTS_TITLE, comparison_sheet
from sheetfit.results.comparison import (EQUAL_SLOPES, HOW_IT_DIFFERS, IN_REFERENCE, SLOPE_HEADERS, STATISTIC, TEST,
                                         compare_across_groups, comparison_tables)

SITES = ["=1+2", "North", "South", "East", "West", "Harbour", "Depot", "Mill"]
STEEP = "Depot"


def comparison(ok=None, intercept: bool = True, noisy: bool = False):
    """Eight sites, inputs CDD and pallets; Depot responds about twice as strongly to CDD; `noisy`: Mill
    responds three times as strongly with ten times the residual sd."""
    rng = np.random.default_rng(21)
    n, G = 24, len(SITES)
    codes = np.repeat(np.arange(G), n)
    cdd, pallets = rng.uniform(50, 400, G * n), rng.uniform(1000, 6000, G * n)
    slope = np.where(codes == SITES.index(STEEP), 6.0, 3.0)
    sd = np.full(G * n, 60.0)
    if noisy:
        mill = codes == SITES.index("Mill")
        slope, sd = np.where(mill, 9.0, slope), np.where(mill, 600.0, sd)
    y = 800 + 40 * codes + slope * cdd + 0.05 * pallets + rng.normal(0, 1, G * n) * sd
    X = np.column_stack([np.ones(G * n), cdd, pallets])
    ok = np.ones(G, bool) if ok is None else ok
    comp = compare_across_groups(y, X, codes, ok, intercept=intercept, thresholds=Thresholds(), level=0.95)
    return comparison_tables(comp, pd.DataFrame({"site": SITES}), ["CDD", "pallets"], Thresholds())


def write(make_results, tmp_path, monkeypatch, tables):
    monkeypatch.setattr(report, "_extra_sheets", lambda: [])        # core sheets only: a faster write
    out = tmp_path / "out.xlsx"
    write_results(make_results(), out, extra_sheets=[functools.partial(comparison_sheet, tables=tables)])
    return out


@pytest.fixture
def written(make_results, tmp_path, monkeypatch):
    tables = comparison()
    return write(make_results, tmp_path, monkeypatch, tables), tables


def header_row(ws) -> int:
    return next(r for r in range(1, ws.max_row + 1) if ws.cell(r, 1).value == "site")


def test_sheet_holds_tests_table_and_flag_words(written):
    path, tables = written
    wb = openpyxl.load_workbook(path)
    ws = wb[SHEET]
    top = header_row(ws)
    assert [c.value for c in ws[top]][:len(SLOPE_HEADERS) + 1] == ["site", *SLOPE_HEADERS]
    rows = {ws.cell(r, 1).value: r for r in range(top + 1, top + 1 + len(SITES))}
    how = SLOPE_HEADERS.index(HOW_IT_DIFFERS) + 2
    assert ws.cell(rows[STEEP], how).value == "responds more strongly to CDD than the other groups"
    assert ws.cell(rows["North"], how).value is None
    assert ws.cell(rows["=1+2"], 1).data_type == "s"               # a label that looks like a formula stays text
    assert ws.freeze_panes == f"A{top + 1}"
    assert ws.auto_filter.ref.startswith(f"A{top}:")
    # the tests block above the table: its name and statistic as written by results.comparison
    labels = {ws.cell(r, 1).value: r for r in range(1, top)}
    assert TESTS_TITLE in labels
    r = labels[EQUAL_SLOPES]
    statistic = float(tables.tests.set_index(TEST).loc[EQUAL_SLOPES, STATISTIC])
    assert ws.cell(r, 3).value == pytest.approx(statistic, rel=1e-12)
    # flagged rows shaded: a formula rule on the words column over the table's rows
    rules = [rule.formula[0] for cf in ws.conditional_formatting for rule in cf.rules]
    assert any(re.fullmatch(rf"LEN\(\$[A-Z]+{top + 1}\)>0", f) for f in rules)


def test_charts_show_each_groups_slope_with_error_bars(written):
    path, tables = written
    with zipfile.ZipFile(path) as z:
        charts = [z.read(n).decode() for n in z.namelist() if re.fullmatch(r"xl/charts/chart\d+\.xml", n)]
    ours = [c for c in charts if "slope of the other groups" in c]
    assert len(ours) == 2                                            # one per input
    assert all(c.count("<c:errBars>") == 2 and f"'{DATA_SHEET}'!" in c for c in ours)
    wb = openpyxl.load_workbook(path)
    data = wb[DATA_SHEET]
    assert data.sheet_state == "hidden"
    assert [c.value for c in data[1]][1:len(DATA_COLUMNS)] == list(DATA_COLUMNS[1:])
    cells = {data.cell(r, 1).value: [data.cell(r, j).value for j in range(2, 7)] for r in range(2, 2 + len(SITES))}
    s = tables.slopes[tables.slopes["input"] == "CDD"].set_index("site")
    slope, flagged, above, below, ref = cells[STEEP]
    assert slope is None and flagged == pytest.approx(s.loc[STEEP, "slope in this group"], rel=1e-12)
    assert ref == pytest.approx(s.loc[STEEP, "slope of the others"], rel=1e-12)
    # the bar spans the difference's interval, drawn around the group's slope
    assert flagged + above == pytest.approx(ref + s.loc[STEEP, "interval high"], rel=1e-12)
    assert flagged - below == pytest.approx(ref + s.loc[STEEP, "interval low"], rel=1e-12)
    assert cells["North"][1] is None and cells["North"][0] is not None


def test_no_comparison_writes_the_reason(make_results, tmp_path, monkeypatch):
    tables = comparison(intercept=False)
    path = write(make_results, tmp_path, monkeypatch, tables)
    ws = openpyxl.load_workbook(path)[SHEET]
    texts = [ws.cell(r, 1).value for r in range(1, ws.max_row + 1)]
    assert texts[1] == f"Not compared: {tables.reason}."
    assert "no constant" in tables.reason


def test_sheet_says_the_reference_is_weighted_by_precision(make_results, tmp_path, monkeypatch):
    tables = comparison(noisy=True)
    path = write(make_results, tmp_path, monkeypatch, tables)
    ws = openpyxl.load_workbook(path)[SHEET]
    assert "weighted by each group's precision" in ws.cell(2, 1).value      # the reference note, first
    assert "each group's own residual variance" in tables.notes[1]
    top = header_row(ws)
    inside = SLOPE_HEADERS.index(IN_REFERENCE) + 2
    how = SLOPE_HEADERS.index(HOW_IT_DIFFERS) + 2
    rows = range(top + 1, top + 1 + 2 * len(SITES))
    aside = {ws.cell(r, 1).value for r in rows if ws.cell(r, inside).value == "no"}
    flagged = {ws.cell(r, 1).value for r in rows if ws.cell(r, how).value}
    assert STEEP in aside and aside <= flagged                    # every site set aside is flagged on the sheet
