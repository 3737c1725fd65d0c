"""End to end: `sheetfit fit` on a calibration run, then `sheetfit predict --inverse` reading unknown
samples back through the real CLI, results read with openpyxl.

Oracle: the published worked example of Massart et al., Handbook of Chemometrics and Qualimetrics
(1997): x = 0, 10, …, 50; y = 4.0, 21.2, 44.6, 61.8, 78.0, 105.2; a response of 15 reads back as
6.1 ± 4.9 and 90 as 43.9 ± 4.9 at 95 %.
"""

from __future__ import annotations

import openpyxl
import pytest
import xlsxwriter

from tests.conftest import run_cli as run

X = [0, 10, 20, 30, 40, 50]
Y = [4.0, 21.2, 44.6, 61.8, 78.0, 105.2]


def _book(path, sheets):
    with xlsxwriter.Workbook(str(path)) as wb:
        for name, rows in sheets.items():
            ws = wb.add_worksheet(name)
            for i, r in enumerate(rows):
                ws.write_row(i, 0, r)
    return path


def test_standards_then_unknowns_read_back(tmp_path):
    book = _book(tmp_path / "run.xlsx", {
        "standards": [["Instrument", "conc", "signal"], *[["A", x, y] for x, y in zip(X, Y)]],
        "unknowns": [["Instrument", "signal"], ["A", 15.0], ["A", 90.0], ["B", 50.0], ["A", "n/a"]],
    })
    fit = run("fit", book, "--sheet", "standards", "--group", "Instrument", "--y", "signal", "--x", "conc",
              cwd=tmp_path)
    assert fit.returncode == 0, fit.stderr
    r = run("predict", tmp_path / "run-fit.xlsx", book, "--sheet", "unknowns", "--inverse", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    ws = openpyxl.load_workbook(tmp_path / "run-predicted.xlsx", read_only=True).worksheets[0]
    rows = list(ws.values)
    head = list(rows[0])
    body = [dict(zip(head, v)) for v in rows[1:]]
    value, low, high = "read-back input value", "read-back low", "read-back high"
    # Massart et al. (1997): 6.1 ± 4.9 and 43.9 ± 4.9
    assert round(body[0][value], 1) == 6.1 and round(body[0][value] - body[0][low], 1) == 4.9
    assert round(body[1][value], 1) == 43.9 and round(body[1][high] - body[1][value], 1) == 4.9
    assert body[2][value] is None and "B" in body[2]["reason"]          # unknown instrument: a reason
    assert body[3][value] is None and body[3]["reason"]                 # not a number: a reason


def test_inverse_needs_a_straight_line_and_replicates_need_inverse(tmp_path):
    book = _book(tmp_path / "run.xlsx", {
        "standards": [["conc", "signal"], *[[x, y] for x, y in zip(X, Y)]],
        "unknowns": [["signal", "n"], [15.0, 2]],
    })
    assert run("fit", book, "--sheet", "standards", "--y", "signal", "--x", "conc", "--x", "conc^2",
               cwd=tmp_path).returncode == 0
    r = run("predict", tmp_path / "run-fit.xlsx", book, "--sheet", "unknowns", "--inverse", cwd=tmp_path)
    assert r.returncode == 1 and r.stderr.count("\n") == 1 and "straight line" in r.stderr
    r = run("predict", tmp_path / "run-fit.xlsx", book, "--sheet", "unknowns", "--replicates", "n", cwd=tmp_path)
    assert r.returncode == 1 and "--replicates needs --inverse" in r.stderr
    assert not (tmp_path / "run-predicted.xlsx").exists()


@pytest.mark.parametrize("m", [1, 3])
def test_api_read_back_matches_the_cli_formula(m):
    import numpy as np
    import pandas as pd
    from scipy import stats

    import sheetfit

    res = sheetfit.fit_frame(pd.DataFrame({"conc": X, "signal": Y}), y="signal", x="conc")
    out = sheetfit.read_back(res, pd.DataFrame({"signal": [15.0], "n": [m]}), replicates="n")
    x, y = np.array(X, float), np.array(Y, float)
    b1, b0 = np.polyfit(x, y, 1)                                            # numpy
    s = np.sqrt(np.sum((y - b0 - b1 * x) ** 2) / 4)
    x0 = (15.0 - b0) / b1
    se = s / abs(b1) * np.sqrt(1 / m + 1 / 6 + (15.0 - y.mean()) ** 2 / (b1**2 * np.sum((x - x.mean()) ** 2)))
    assert out["read-back input value"].iloc[0] == pytest.approx(x0, rel=1e-12)
    assert out["read-back high"].iloc[0] - x0 == pytest.approx(stats.t.ppf(0.975, 4) * se, rel=1e-10)  # scipy


def test_api_read_back_refuses_like_the_cli():
    import pandas as pd

    import sheetfit
    from sheetfit.errors import ColumnNotFoundError, JobError

    frame = pd.DataFrame({"conc": X, "signal": Y})
    curved = sheetfit.fit_frame(frame, y="signal", x=["conc", "conc^2"])
    with pytest.raises(JobError, match="straight line"):
        sheetfit.read_back(curved, pd.DataFrame({"signal": [15.0]}))
    line = sheetfit.fit_frame(frame, y="signal", x="conc")
    with pytest.raises(ColumnNotFoundError, match="signal"):
        sheetfit.read_back(line, pd.DataFrame({"sig": [15.0]}))
    with pytest.raises(ColumnNotFoundError, match="nope"):
        sheetfit.read_back(line, pd.DataFrame({"signal": [15.0]}), replicates="nope")
