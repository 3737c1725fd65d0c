"""The `explorer` sheet and its `explorer data` sheet, read back with openpyxl.

Oracle: the observations table of the FitResults (each group's used rows); recalculation after
choosing another group is tested in test_libreoffice.py.
"""

from __future__ import annotations

import functools

import numpy as np
import openpyxl
import pandas as pd
import pytest

import sheetfit.report as report
import sheetfit.report.explorer as explorer
from sheetfit.api import fit_frame
from sheetfit.report import write_results
from sheetfit.report.explorer import explorer_sheet


def frame(sizes=(("a", 12), ("b", 30), ("c", 7)), seed: int = 4) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    parts = []
    for g, n in sizes:
        x = rng.uniform(0, 10, n)
        w = rng.uniform(1, 3, n)
        parts.append(pd.DataFrame({"grp": g, "x": x, "w": w, "y": 2 + x + 5 * w + rng.normal(0, 1, n)}))
    return pd.concat(parts, ignore_index=True)


@pytest.fixture(scope="module")
def results():
    return fit_frame(frame(), y="y", x=["x", "w"], group="grp")


@pytest.fixture(scope="module")
def book(results, tmp_path_factory):
    path = write_results(results, tmp_path_factory.mktemp("e") / "fit.xlsx")
    return openpyxl.load_workbook(path), openpyxl.load_workbook(path, data_only=True)


def block(ws):
    """The explorer block as a list of rows (values), under its header row (the one ending in 'source row')."""
    top = next(r[0].row for r in ws.iter_rows() if "source row" in [c.value for c in r])
    head = [c.value for c in ws[top] if c.value is not None]
    rows = [[c.value for c in ws[r]][:len(head)] for r in range(top + 1, ws.max_row + 1)]
    return top, head, rows


def test_sheets_validation_and_formulas(book):
    wb, _ = book
    assert {"explorer", "explorer data"} <= set(wb.sheetnames)
    ws = wb["explorer"]
    assert ws["B4"].value == "a"
    assert ws["B6"].value.endswith(",'explorer data'!$A$4:$A$6,0)") and "MATCH(" in ws["B6"].value
    dv = [d for d in ws.data_validations.dataValidation if "B4" in str(d.sqref)]
    assert dv and dv[0].type == "list" and dv[0].formula1 == "'explorer data'!$A$4:$A$6"
    top, head, rows = block(ws)
    assert head == ["x", "w", "y", "fitted value", "residual", "source row"]
    assert len(rows) == 30                               # the largest group's size
    assert rows[0][0] == "=IF(1<=$B$5,INDEX('explorer data'!$C$9:$C$57,$B$7+0),NA())"
    assert rows[29][5] == "=IF(30<=$B$5,INDEX('explorer data'!$B$9:$B$57,$B$7+29),\"\")"
    assert len(ws._charts) == 2
    assert any(cf.rules[0].formula == [f"ISNA(A{top + 1})"] for cf in ws.conditional_formatting)


def test_data_sheet_is_sorted_with_first_rows_and_counts(book, results):
    _, vals = book
    ws = vals["explorer data"]
    index = [[c.value for c in ws[r]][:3] for r in (4, 5, 6)]
    assert index == [["a", 1, 12], ["b", 13, 30], ["c", 43, 7]]
    data = [[c.value for c in ws[r]][:6] for r in range(9, 9 + 49)]
    obs = results.observations
    for label, first, count in index:
        rows = data[first - 1:first - 1 + count]
        assert {r[0] for r in rows} == {label}
        xs = [r[2] for r in rows]
        assert xs == sorted(xs)                          # sorted by the first input within the group
        mine = obs[obs["grp"] == label].sort_values("x")
        np.testing.assert_allclose([r[4] for r in rows], mine["y"], rtol=1e-15)
        np.testing.assert_allclose([r[5] for r in rows], mine["fitted value"], rtol=1e-15)


def test_cached_block_shows_the_default_group(book, results):
    _, vals = book
    ws = vals["explorer"]
    _, head, rows = block(ws)
    a = results.observations[results.observations["grp"] == "a"].sort_values("x")
    np.testing.assert_allclose([r[head.index("residual")] for r in rows[:12]], a["residual"], rtol=1e-15)
    assert [r[head.index("source row")] for r in rows[:12]] == a["source row"].tolist()
    assert all(r[head.index("y")] == "#N/A" and r[head.index("source row")] in ("", None) for r in rows[12:])
    assert ws["B5"].value == 12


def test_large_groups_show_an_even_sample(tmp_path, monkeypatch):
    monkeypatch.setattr(explorer, "MAX_BLOCK", 10)
    res = fit_frame(frame((("a", 25), ("b", 8))), y="y", x=["x", "w"], group="grp")
    monkeypatch.setattr(report, "_extra_sheets", lambda: [functools.partial(explorer_sheet, group="a")])
    path = write_results(res, tmp_path / "cap.xlsx")
    ws = openpyxl.load_workbook(path, data_only=True)["explorer"]
    _, head, rows = block(ws)
    assert len(rows) == 10 and ws["B5"].value == 10
    assert ws["C5"].value == "an even sample of the 25 rows used"
    xs = np.sort(res.observations[res.observations["grp"] == "a"]["x"].to_numpy())
    shown = [r[0] for r in rows]
    assert shown[0] == xs[0] and shown[-1] == xs[-1]     # the sample spans the whole range


def test_a_date_input_shows_the_days_the_model_used(tmp_path):
    rng = np.random.default_rng(9)
    days = np.sort(rng.choice(300, size=20, replace=False)).astype(float)
    when = pd.Timestamp("2024-02-01") + pd.to_timedelta(days, unit="D")
    res = fit_frame(pd.DataFrame({"when": when, "y": 3 + 0.2 * days + rng.normal(0, 1, 20)}), y="y", x=["when"])
    wb = openpyxl.load_workbook(write_results(res, tmp_path / "dated.xlsx"), read_only=True)
    rows = list(wb["explorer data"].iter_rows(values_only=True))
    head = next(i for i, r in enumerate(rows) if r[:2] == ("group", "source row"))
    shown = [r[rows[head].index("when")] for r in rows[head + 1:] if r[0] is not None]
    # oracle: the day counts built here (days since the earliest date), in the block's sorted order
    np.testing.assert_allclose(shown, np.sort(days - days.min()), rtol=0, atol=1e-9)
