"""End to end: `sheetfit fit` then `sheetfit predict` through the real CLI; predictions checked
against statsmodels get_prediction (reference library)."""

from __future__ import annotations

import numpy as np
import openpyxl
import pandas as pd
import statsmodels.api as sm
import xlsxwriter

from tests.conftest import run_cli as run


def test_fit_then_predict(tmp_path):
    rng = np.random.default_rng(42)
    rows = []
    for site in ("North", "South"):
        x = rng.uniform(0, 20, 25)
        for xi, yi in zip(x, 3 + 1.5 * x + rng.normal(size=25)):
            rows.append((site, xi, yi))
    book = tmp_path / "data.xlsx"
    with xlsxwriter.Workbook(str(book)) as wb:
        ws = wb.add_worksheet("runs")
        ws.write_row(0, 0, ["Site", "x", "y"])
        for i, r in enumerate(rows, start=1):
            ws.write_row(i, 0, r)
    fit = run("fit", book, "--sheet", "runs", "--group", "Site", "--y", "y", "--x", "x", cwd=tmp_path)
    assert fit.returncode == 0, fit.stderr
    results = tmp_path / "data-fit.xlsx"
    new = tmp_path / "plan.xlsx"
    with xlsxwriter.Workbook(str(new)) as wb:
        ws = wb.add_worksheet("Plan")
        ws.write_row(0, 0, ["Site", "x"])
        ws.write_row(1, 0, ["North", 5.0])
        ws.write_row(2, 0, ["South", 30.0])        # outside the observed range
        ws.write_row(3, 0, ["East", 5.0])          # no such group
    pred = run("predict", results, new, "--sheet", "Plan", cwd=tmp_path)
    assert pred.returncode == 0, pred.stderr
    out = tmp_path / "plan-predicted.xlsx"
    ws = openpyxl.load_workbook(out, read_only=True).worksheets[0]
    table = list(ws.values)
    head = list(table[0])
    body = [dict(zip(head, r)) for r in table[1:]]
    frame = pd.DataFrame(rows, columns=["Site", "x", "y"])
    for row in body[:2]:
        sub = frame[frame["Site"] == row["Site"]]
        ref = sm.OLS(sub["y"], sm.add_constant(sub["x"])).fit()          # statsmodels
        sf = ref.get_prediction(np.array([[1.0, row["x"]]])).summary_frame(0.05)
        np.testing.assert_allclose(row["predicted"], sf["mean"].iloc[0], rtol=1e-9)
        np.testing.assert_allclose(row["prediction low"], sf["obs_ci_lower"].iloc[0], rtol=1e-9)
        np.testing.assert_allclose(row["mean CI high"], sf["mean_ci_upper"].iloc[0], rtol=1e-9)
    assert str(body[0]["extrapolation"]).startswith("no")
    assert str(body[1]["extrapolation"]).startswith("yes")
    assert body[2]["predicted"] is None and "East" in body[2]["reason"]


def test_predict_with_missing_results_workbook_is_one_line(tmp_path):
    new = tmp_path / "plan.xlsx"
    with xlsxwriter.Workbook(str(new)) as wb:
        wb.add_worksheet("Plan").write_row(0, 0, ["Site", "x"])
    res = run("predict", tmp_path / "missing.xlsx", new, cwd=tmp_path)
    assert res.returncode == 1
    assert len(res.stderr.strip().splitlines()) == 1 and "Traceback" not in res.stderr
