"""The `predict` sheet and the `model store` sheet, read back with openpyxl.

Oracles: statsmodels OLS get_prediction for the cached results of the default state of the live prediction sheet;
the FitResults tables for the stored numbers. Recalculation in a real spreadsheet application is
tested in test_libreoffice.py.
"""

from __future__ import annotations

import functools

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm

import sheetfit.report as report
from sheetfit.api import fit_frame
from sheetfit.report import write_results
from sheetfit.report.explorer import explorer_sheet
from sheetfit.report.live_prediction import live_prediction_sheet


def demo_frame(seed: int = 8) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    parts = []
    for g, n in (("north", 20), ("south", 28)):
        x = rng.uniform(2, 9, n)
        z = rng.uniform(1, 30, n)
        parts.append(pd.DataFrame({"site": g, "x": x, "z": z,
                                   "y": 40 + 3 * x + 0.4 * x**2 - 6 * np.log(z) + rng.normal(0, 1, n)}))
    return pd.concat(parts, ignore_index=True)


@pytest.fixture(scope="module")
def data() -> pd.DataFrame:
    return demo_frame()


@pytest.fixture(scope="module")
def results(data):
    return fit_frame(data, y="y", x=["x", "x^2", "log(z)"], group="site")


@pytest.fixture(scope="module")
def book(results, tmp_path_factory):
    path = write_results(results, tmp_path_factory.mktemp("w") / "fit.xlsx")
    return openpyxl.load_workbook(path), openpyxl.load_workbook(path, data_only=True)


def label_rows(ws) -> dict[str, int]:
    """Column-A text → row number (first occurrence)."""
    out: dict[str, int] = {}
    for row in ws.iter_rows(min_col=1, max_col=1):
        v = row[0].value
        if isinstance(v, str) and v not in out:
            out[v] = row[0].row
    return out


def test_sheets_and_formulas_present(book):
    wb, _ = book
    assert {"live prediction", "model store"} <= set(wb.sheetnames)
    ws = wb["live prediction"]
    rows = label_rows(ws)
    assert ws["B4"].value == "north" and ws["B5"].value == 0.95
    assert ws["B6"].value.startswith('=MATCH(SUBSTITUTE(SUBSTITUTE(SUBSTITUTE($B$4,"~","~~"),"*","~*"),"?","~?"),'
                                     "'model store'!$A$")
    formulas = [c.value for row in ws.iter_rows() for c in row if isinstance(c.value, str) and c.value.startswith("=")]
    joined = " ".join(formulas)
    for fn in ("MATCH(", "INDEX(", "SUMPRODUCT(", "T.INV.2T(", "SQRT(", "LN("):
        assert fn in joined, fn
    assert "_xlfn.T.INV.2T" in joined          # written as a future function, so LibreOffice knows it
    assert ws.cell(rows["predicted value"], 2).value.startswith("=SUMPRODUCT(")
    dv = [d for d in ws.data_validations.dataValidation if "B4" in str(d.sqref)]
    assert dv and dv[0].type == "list" and dv[0].formula1.startswith("'model store'!$A$")


def test_cached_results_match_statsmodels(book, data):
    """The default state (first group, mid-range inputs) carries correct cached results."""
    wb, vals = book
    ws = vals["live prediction"]
    rows = label_rows(ws)
    x, z = ws.cell(rows["x"], 2).value, ws.cell(rows["z"], 2).value
    d = data[data["site"] == "north"]
    design = lambda f: np.column_stack([np.ones(len(f)), f["x"], f["x"] ** 2, np.log(f["z"])])  # noqa: E731
    fit = sm.OLS(d["y"].to_numpy(), design(d)).fit()
    exp = fit.get_prediction(design(pd.DataFrame({"x": [x], "z": [z]}))).summary_frame(alpha=0.05).iloc[0]
    for label, col in (("predicted value", "mean"), ("std error of the fitted mean", "mean_se"), ("range for the average, low", "mean_ci_lower"),
                       ("range for the average, high", "mean_ci_upper"), ("range for one new row, low", "obs_ci_lower"),
                       ("range for one new row, high", "obs_ci_upper")):
        assert ws.cell(rows[label], 2).value == pytest.approx(exp[col], rel=1e-9), label
    assert ws.cell(rows["residual degrees of freedom"], 2).value == len(d) - 4
    assert ws.cell(rows["range check"], 2).value == "all inputs lie within the group's observed range"


def test_store_holds_the_fit(book, results):
    _, vals = book
    ws = vals["model store"]
    rows = label_rows(ws)
    assert ws["A1"].value == "sheetfit model store"
    assert ws.cell(rows["confidence level"], 2).value == 0.95
    assert ws.cell(rows["intercept"], 2).value == "yes"
    head = [c.value for c in ws[rows["group"]]]
    south = [c.value for c in ws[rows["group"] + 2]]
    rec = dict(zip(head, south))
    coef = results.coefficients[results.coefficients["site"] == "south"].set_index("input")["coefficient"]
    for term, value in coef.items():
        assert rec[f"coefficient: {term}"] == pytest.approx(value, rel=1e-15)
    g = results.groups.set_index("site").loc["south"]
    assert rec["residual variance"] == pytest.approx(g["residual std error"] ** 2, rel=1e-15)
    assert rec["residual degrees of freedom"] == g["rows used"] - g["number of coefficients"]
    rng = results.input_ranges
    assert rec["max: z"] == pytest.approx(rng[(rng["site"] == "south") & (rng["column"] == "z")]["max"].iloc[0],
                                          rel=1e-15)   # xlsxwriter writes 16 significant digits


def test_preset_state_and_extrapolation_warning(results, tmp_path, monkeypatch):
    builder = functools.partial(live_prediction_sheet, group="south", inputs={"x": 20.0, "z": 0.5}, level=0.9)
    monkeypatch.setattr(report, "_extra_sheets", lambda: [explorer_sheet, builder])
    path = write_results(results, tmp_path / "preset.xlsx")
    ws = openpyxl.load_workbook(path, data_only=True)["live prediction"]
    rows = label_rows(ws)
    assert ws["B4"].value == "south" and ws["B5"].value == 0.9
    warning = ws.cell(rows["range check"], 2).value
    assert warning == "caution, extrapolation: x above the observed range; z below the observed range"
    pred = __import__("sheetfit").predict(results, pd.DataFrame({"site": ["south"], "x": [20.0], "z": [0.5]}))
    assert ws.cell(rows["predicted value"], 2).value == pytest.approx(pred["predicted value"][0], rel=1e-12)


def test_without_cache_formula_cells_are_empty_until_recalculated(results, tmp_path, monkeypatch):
    monkeypatch.setattr(report, "_extra_sheets", lambda: [functools.partial(live_prediction_sheet, cache=False)])
    path = write_results(results, tmp_path / "nocache.xlsx")
    ws = openpyxl.load_workbook(path, data_only=True)["live prediction"]
    assert ws.cell(label_rows(ws)["predicted value"], 2).value is None


def test_results_without_stored_models_still_write(make_results, tmp_path):
    """Hand-built results without (X'X)⁻¹ get a live prediction sheet that says why it is empty."""
    path = write_results(make_results(), tmp_path / "bare.xlsx")
    wb = openpyxl.load_workbook(path)
    assert "model store" not in wb.sheetnames
    assert wb["live prediction"]["A1"].value.startswith("No live predictions: no group has a stored model")
