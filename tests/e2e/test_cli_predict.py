"""End to end: `sheetfit fit` then `sheetfit predict` through the real CLI; predictions checked
against statsmodels get_prediction (reference library)."""

from __future__ import annotations

import subprocess
import sys

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
        np.testing.assert_allclose(row["predicted value"], sf["mean"].iloc[0], rtol=1e-9)
        np.testing.assert_allclose(row["range for one new row, low"], sf["obs_ci_lower"].iloc[0], rtol=1e-9)
        np.testing.assert_allclose(row["range for the average, high"], sf["mean_ci_upper"].iloc[0], rtol=1e-9)
    assert str(body[0]["extrapolation"]).startswith("no")
    assert str(body[1]["extrapolation"]).startswith("yes")
    assert body[2]["predicted value"] is None and "East" in body[2]["reason"]


def test_predict_with_missing_results_workbook_is_one_line(tmp_path):
    new = tmp_path / "plan.xlsx"
    with xlsxwriter.Workbook(str(new)) as wb:
        wb.add_worksheet("Plan").write_row(0, 0, ["Site", "x"])
    res = run("predict", tmp_path / "missing.xlsx", new, cwd=tmp_path)
    assert res.returncode == 1
    assert len(res.stderr.strip().splitlines()) == 1 and "Traceback" not in res.stderr


def _fitted(tmp_path):
    """A results workbook of three sites (Site, kWh against Degree days) written by the real CLI."""
    from tests.e2e.test_cli_errors import FIT, write_book

    book = write_book(tmp_path / "usage.xlsx")
    fit = run("fit", book, *FIT, cwd=tmp_path)
    assert fit.returncode == 0, fit.stderr
    return tmp_path / "usage-fit.xlsx"


def _new_rows(path, sheets):
    with xlsxwriter.Workbook(str(path)) as wb:
        for name, rows in sheets:
            ws = wb.add_worksheet(name)
            for i, r in enumerate(rows):
                ws.write_row(i, 0, r)
    return path


def test_predict_summary_level_and_quiet(tmp_path):
    results = _fitted(tmp_path)
    new = _new_rows(tmp_path / "plan.xlsx", [("Plan", [["Site", "Degree days"], ["North", 20.0],
                                                       ["Nowhere", 20.0], ["South", 1e308]])])
    proc = run("predict", results, new, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr == ""
    out = tmp_path / "plan-predicted.xlsx"
    assert proc.stdout.splitlines() == [f"predictions: {out}",
                                        "3 rows: 1 predicted, 2 with a reason (see the reason column)"]
    body = list(openpyxl.load_workbook(out, read_only=True)["predictions"].values)
    head = list(body[0])
    row = dict(zip(head, body[1]))
    wide = row["range for the average, high"] - row["range for the average, low"]
    assert "too large to compute" in dict(zip(head, body[3]))["reason"]      # 1e308 gets a reason
    quiet = run("predict", results, new, "--level", "0.5", "--quiet", "--overwrite", cwd=tmp_path)
    assert quiet.returncode == 0, quiet.stderr
    assert quiet.stdout.splitlines() == [f"predictions: {out}"]
    row = dict(zip(head, list(openpyxl.load_workbook(out, read_only=True)["predictions"].values)[1]))
    assert row["range for the average, high"] - row["range for the average, low"] < wide / 2                # 50 % against 95 %
    for bad in ("nan", "1", "inf", "0.2"):
        err = one_error_line(run("predict", results, new, "--level", bad, "--overwrite", cwd=tmp_path))
        assert "--level" in err


def one_error_line(proc) -> str:
    assert proc.returncode == 1, (proc.returncode, proc.stderr)
    lines = proc.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("sheetfit: error: ") and "Traceback" not in proc.stderr, proc.stderr
    return lines[0]


def test_predict_fails_when_nothing_can_be_predicted(tmp_path):
    results = _fitted(tmp_path)
    cases = {
        "lacking.xlsx": ([("Plan", [["Site", "Degree"], ["North", 20.0]])],
                         'input column "Degree days" not found', 'closest match: "Degree"'),
        "case.xlsx": ([("Plan", [["site", "Degree days"], ["North", 20.0]])],
                      'group column "Site" not found', 'closest match: "site"'),
        "notes.xlsx": ([("Notes", [["read me first"]]), ("Plan", [["Site", "Degree days"], ["North", 20.0]])],
                       'group column "Site" not found in sheet "Notes"', '--sheet names another: "Plan"'),
        "unknown.xlsx": ([("Plan", [["Site", "Degree days"], ["Nowhere", 20.0]])],
                         "none of the 1 new rows", 'no fitted model for group "Nowhere"'),
    }
    for name, (sheets, what, hint) in cases.items():
        new = _new_rows(tmp_path / name, sheets)
        err = one_error_line(run("predict", results, new, cwd=tmp_path))
        assert what in err and hint in err, err
        assert not new.with_name(new.stem + "-predicted.xlsx").exists()
    ok = run("predict", results, tmp_path / "notes.xlsx", "--sheet", "Plan", cwd=tmp_path)
    assert ok.returncode == 0 and "1 rows: 1 predicted, 0 with a reason" in ok.stdout


def test_predict_output_name_too_long_is_one_line(tmp_path):
    results = _fitted(tmp_path)
    new = _new_rows(tmp_path / "plan.xlsx", [("Plan", [["Site", "Degree days"], ["North", 20.0]])])
    # not through run_cli: its input guard stats every argument, and this name cannot be stat'ed
    long_name = tmp_path / ("p" * 300 + ".xlsx")
    proc = subprocess.run([sys.executable, "-m", "sheetfit", "predict", str(results), str(new), "--out",
                           str(long_name)], cwd=tmp_path, capture_output=True, text=True, timeout=300,
                          stdin=subprocess.DEVNULL)
    err = one_error_line(proc)
    assert "too long for the file system" in err and "--out" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plan.xlsx", "usage-fit.xlsx", "usage.xlsx"]
