"""Reporting-period savings (sheetfit.prediction.savings) and their sheet (sheetfit.report.savings).

Oracles: statsmodels OLS get_prediction on the summed design row d gives dᵀcov d, so the avoided
total's variance is m·s² + se_mean² (the m reporting deviations and the baseline's own error);
scipy.stats.t for the intervals; numpy sums for the totals; a hand computation of the approximate
fractional savings uncertainty formula as written in the module's docstring (ASHRAE Guideline 14,
Annex B, from memory).
"""

from __future__ import annotations

import copy
import dataclasses
import datetime as dt
import re
import zipfile

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from sheetfit.api import fit_frame
from sheetfit.errors import ColumnNotFoundError, NoUsableDataError
from sheetfit.prediction import compute
from sheetfit.prediction import savings as sv
from sheetfit.prediction.summary import PredictionSummary, nothing_to_total
from sheetfit.report import predictions, write_results
from sheetfit.report import savings as sheet
from sheetfit.report.columns import BOLD, shown_width
from sheetfit.report.styles import CHECK_FAILED_FILL, LEFT_OUT_FILL
from sheetfit.report.tables import ROW_HEIGHT, wrapped_lines
from sheetfit.results.store import store_from_results
from sheetfit.terms import Term, design_matrix, with_change_point_terms

LEVEL = 0.9


def baseline_frame(seed: int = 11) -> pd.DataFrame:
    """Three sites: use rises with x (say degree-days) and z (say production), with noise."""
    rng = np.random.default_rng(seed)
    parts = []
    for g, n, b in (("A", 30, 3.0), ("B", 42, 2.0), ("C", 25, 4.0)):
        x = rng.uniform(0, 20, n)
        z = rng.uniform(5, 15, n)
        parts.append(pd.DataFrame({"g": g, "x": x, "z": z, "y": 80 + b * x + 1.5 * z + rng.normal(0, 4, n)}))
    return pd.concat(parts, ignore_index=True)


@pytest.fixture(scope="module")
def data() -> pd.DataFrame:
    return baseline_frame()


@pytest.fixture(scope="module")
def store(data):
    return store_from_results(fit_frame(data, y="y", x=["x", "z"], group="g"))


def design_of(frame: pd.DataFrame) -> np.ndarray:
    return np.column_stack([np.ones(len(frame)), frame["x"], frame["z"]])


def oracle_fit(data: pd.DataFrame, g: str):
    d = data[data["g"] == g]
    return sm.OLS(d["y"].to_numpy(), design_of(d)).fit()


def positions(store, keys) -> np.ndarray:
    lookup = {k[0]: i for i, k in enumerate(store.keys)}
    return np.array([lookup.get(str(k), -1) for k in keys], dtype=np.int64)


def rows_design(store, frame: pd.DataFrame) -> np.ndarray:
    """Raw design rows from the store's terms (sheetfit.terms.design_matrix; NaN inputs stay NaN)."""
    source = {c: pd.to_numeric(frame[c], errors="coerce").to_numpy(np.float64) for c in store.sources}
    return design_matrix(store.terms, store.intercept, source)


def with_baseline_stats(store, mean, lag1):
    """The store with the baseline's response mean and residual lag-1 autocorrelation set (or None)."""
    if {"response_mean", "residual_lag1"} <= {f.name for f in dataclasses.fields(store)}:
        return dataclasses.replace(store, response_mean=mean, residual_lag1=lag1)
    out = copy.copy(store)                   # a ModelStore without these fields yet
    object.__setattr__(out, "response_mean", mean)
    object.__setattr__(out, "residual_lag1", lag1)
    return out


def reporting_rows(seed: int, g: str, m: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame({"g": g, "x": rng.uniform(1, 19, m), "z": rng.uniform(6, 14, m)})


def group_row(result: sv.Savings, key: str) -> pd.Series:
    return result.groups.set_index(result.groups.columns[0]).loc[key]


# --- the exact std error of the avoided total ---------------------------------------------------------

@pytest.mark.parametrize("g, m", [("A", 12), ("B", 1), ("C", 30)])
def test_avoided_total_and_std_error_match_statsmodels(data, store, g, m):
    new = reporting_rows(5, g, m)
    res = oracle_fit(data, g)
    Xr = design_of(new)
    actual = res.predict(Xr) - np.random.default_rng(9).normal(6, 5, m)
    out = sv.reporting_savings(store, positions(store, new["g"]), rows_design(store, new), list(actual), LEVEL)
    row = group_row(out, g)
    yhat = res.predict(Xr)
    # numpy sums of statsmodels' predictions
    np.testing.assert_allclose(row[sv.BASELINE_TOTAL], yhat.sum(), rtol=1e-10)
    np.testing.assert_allclose(row[sv.ACTUAL_TOTAL], actual.sum(), rtol=1e-12)
    np.testing.assert_allclose(row[sv.AVOIDED_TOTAL], (yhat - actual).sum(), rtol=1e-9)
    np.testing.assert_allclose(out.rows[sv.AVOIDED_USE], yhat - actual, rtol=1e-9, atol=1e-9)
    # statsmodels get_prediction on the summed row d: se_mean² = dᵀ cov d = s²·dᵀ(X'X)⁻¹d
    d = Xr.sum(axis=0)
    se_mean = res.get_prediction(d[None, :]).se_mean[0]
    expected_var = m * res.scale + se_mean**2
    np.testing.assert_allclose(row[sv.AVOIDED_STD_ERROR] ** 2, expected_var, rtol=1e-9)
    # the interval: scipy's t quantile with the baseline's residual df
    t_q = stats.t.ppf(0.5 + LEVEL / 2, res.df_resid)
    np.testing.assert_allclose([row[sv.AVOIDED_LOW], row[sv.AVOIDED_HIGH]],
                               (yhat - actual).sum() + np.array([-1, 1]) * t_q * np.sqrt(expected_var), rtol=1e-9)
    np.testing.assert_allclose(row[sv.FRACTIONAL_SAVINGS], 100 * (yhat - actual).sum() / yhat.sum(), rtol=1e-9)
    assert row[sv.ROWS_IN_TOTALS] == m and row[sv.ROWS_LEFT_OUT] == 0


def hinge_frame(tau: float, seed: int = 4) -> pd.DataFrame:
    """One heating site: flat above τ, rising as it gets colder; h = max(0, τ − T) built by hand."""
    rng = np.random.default_rng(seed)
    T = rng.uniform(-8, 28, 36)
    h = np.maximum(0.0, tau - T)
    return pd.DataFrame({"T": T, "h": h, "y": 120 + 6.5 * h + rng.normal(0, 5, 36)})


def test_heating_hinge_at_a_given_change_point_matches_statsmodels():
    tau = 14.0
    base = hinge_frame(tau)
    hinge_store = store_from_results(fit_frame(base, y="y", x=["h"]))
    # count τ as a parameter: df n − k − 1 and RSS / (n − k − 1), as a change-point fit does
    df = hinge_store.df - 1
    counted = dataclasses.replace(hinge_store, df=df, sigma2=hinge_store.sigma2 * hinge_store.df / df)
    # the same baseline as a change-point run stores it: slots (T below, T above, T), only 'below' active
    p_all = 4
    beta = np.full((1, p_all), np.nan)
    beta[0, :2] = counted.beta[0]
    inv = np.zeros((1, p_all, p_all))
    inv[0, :2, :2] = counted.xtx_inv[0]
    temperature = Term("T", "T")
    cp_store = dataclasses.replace(counted, terms=with_change_point_terms((temperature,), temperature),
                                   beta=beta, xtx_inv=inv)
    rng = np.random.default_rng(8)
    T_new = rng.uniform(-5, 25, 20)
    m = len(T_new)
    design = design_matrix(cp_store.terms, True, {"T": T_new},
                           {"below": np.full(m, tau), "above": np.full(m, np.nan)})
    res = sm.OLS(base["y"].to_numpy(), sm.add_constant(base["h"].to_numpy())).fit()   # hinge column by hand
    Xr = sm.add_constant(np.maximum(0.0, tau - T_new))
    actual = res.predict(Xr) * 0.85
    out = sv.reporting_savings(cp_store, np.zeros(m, dtype=np.int64), design, list(actual), LEVEL)
    row = out.groups.iloc[0]
    n, k = len(base), 2
    se_mean = res.get_prediction(Xr.sum(axis=0)[None, :]).se_mean[0]
    # statsmodels treats τ as known (df n − k); counting τ gives n − k − 1, so its variance scales by
    # (n − k)/(n − k − 1)
    scale = (n - k) / (n - k - 1)
    expected_var = m * res.scale * scale + se_mean**2 * scale
    np.testing.assert_allclose(row[sv.AVOIDED_STD_ERROR] ** 2, expected_var, rtol=1e-9)
    np.testing.assert_allclose(row[sv.AVOIDED_TOTAL], (res.predict(Xr) - actual).sum(), rtol=1e-9)
    t_q = stats.t.ppf(0.5 + LEVEL / 2, n - k - 1)          # scipy
    np.testing.assert_allclose(row[sv.AVOIDED_HIGH] - row[sv.AVOIDED_LOW], 2 * t_q * np.sqrt(expected_var),
                               rtol=1e-9)
    assert row[sv.VERDICT] == sv.SAVING          # 15 % less use, far outside the noise (interval above 0)
    assert row[sv.AVOIDED_LOW] > 0


# --- verdicts, totals and rows left out -----------------------------------------------------------

def test_verdicts_follow_the_interval(data, store):
    new = pd.concat([reporting_rows(1, "A", 12), reporting_rows(2, "B", 12), reporting_rows(3, "C", 12)],
                    ignore_index=True)
    shift = {"A": -25.0, "B": 25.0, "C": 0.3}            # per row: far less use, far more use, about the same
    yhat = np.concatenate([oracle_fit(data, g).predict(design_of(new[new["g"] == g])) for g in "ABC"])
    actual = yhat + new["g"].map(shift).to_numpy()
    out = sv.reporting_savings(store, positions(store, new["g"]), rows_design(store, new), list(actual), 0.95)
    for g in "ABC":
        res = oracle_fit(data, g)
        part = new[new["g"] == g]
        Xr = design_of(part)
        avoided = -shift[g] * len(part)
        se = np.sqrt(len(part) * res.scale + res.get_prediction(Xr.sum(axis=0)[None, :]).se_mean[0] ** 2)
        half = stats.t.ppf(0.975, res.df_resid) * se     # scipy
        expected = (sv.SAVING if avoided - half > 0 else sv.MORE_USE if avoided + half < 0 else sv.WITHIN_NOISE)
        assert group_row(out, g)[sv.VERDICT] == expected
    assert [group_row(out, g)[sv.VERDICT] for g in "ABC"] == [sv.SAVING, sv.MORE_USE, sv.WITHIN_NOISE]
    assert out.verdict_counts()[sv.SAVING] == 1


def test_bad_actuals_unknown_groups_and_extrapolation_are_counted(data, store):
    new = pd.DataFrame({
        "g": ["A", "A", "A", "A", "A", "Z", "B", "B", "B", "A"],
        "x": [5.0, 6.0, 7.0, 30.0, 8.0, 5.0, 4.0, None, 9.0, 10.0],
        "z": [8.0, 9.0, 10.0, 10.0, 11.0, 8.0, 7.0, 8.0, 40.0, 12.0],
    })
    actual = [100.0, None, "n/a", 150.0, "1,234.5", 90.0, 95.0, 99.0, 120.0, dt.date(2024, 5, 1)]
    group_pos = positions(store, new["g"])
    lo, hi = store.lo[group_pos], store.hi[group_pos]
    xz = new[["x", "z"]].to_numpy(np.float64)
    outside = ((xz < lo) | (xz > hi)).any(axis=1) & (group_pos >= 0)
    out = sv.reporting_savings(store, group_pos, rows_design(store, new), actual, LEVEL, outside=outside,
                               actual_column="kWh")
    why = out.rows[sv.LEFT_OUT_BECAUSE].tolist()
    used = [w == "" for w in why]
    assert used == [True, False, False, True, True, False, True, False, True, False]
    assert why[1] == 'actual use ("kWh"): empty cell'
    assert why[2].startswith('actual use ("kWh"): ')
    assert "no adjusted baseline" in why[5] and "no adjusted baseline" in why[7]
    assert why[9] == 'actual use ("kWh"): a date or time, not a number'
    assert out.rows[sv.ACTUAL_USE][4] == 1234.5                   # a number stored as text still counts
    a, b = group_row(out, "A"), group_row(out, "B")
    assert (a[sv.ROWS_IN_TOTALS], a[sv.ROWS_LEFT_OUT], a[sv.ROWS_OUTSIDE]) == (3, 3, 1)   # x = 30 above range
    assert (b[sv.ROWS_IN_TOTALS], b[sv.ROWS_LEFT_OUT], b[sv.ROWS_OUTSIDE]) == (2, 1, 1)   # z = 40 above range
    assert list(out.groups.iloc[:, 0]) == ["A", "B"]           # the unknown group Z has no row here
    assert out.unknown_group_rows == 1 and out.rows_in_totals == 5 and out.rows_outside == 2
    # numpy sums over the rows used, with statsmodels' predictions
    for g, row in (("A", a), ("B", b)):
        keep = (new["g"] == g).to_numpy() & np.array(used)
        yhat = oracle_fit(data, g).predict(design_of(new[keep]))
        acts = np.array([float(str(v).replace(",", "")) for v, k in zip(actual, keep) if k])
        np.testing.assert_allclose(row[sv.BASELINE_TOTAL], yhat.sum(), rtol=1e-10)
        np.testing.assert_allclose(row[sv.AVOIDED_TOTAL], (yhat - acts).sum(), rtol=1e-9)


def test_a_group_with_no_usable_row_says_so(store):
    new = pd.DataFrame({"g": ["C", "C"], "x": [3.0, 4.0], "z": [8.0, 9.0]})
    out = sv.reporting_savings(store, positions(store, new["g"]), rows_design(store, new), [None, "-"])
    row = out.groups.iloc[0]
    assert row[sv.ROWS_IN_TOTALS] == 0 and row[sv.ROWS_LEFT_OUT] == 2 and row[sv.VERDICT] == sv.NO_ROWS
    assert np.isnan(row[sv.AVOIDED_TOTAL]) and np.isnan(row[sv.AVOIDED_STD_ERROR])
    assert pd.isna(row[sv.ROWS_OUTSIDE])          # not told which rows extrapolate: left empty, not 0
    err = nothing_to_total(out, np.array([2, 3]), 'sheet "new"')
    assert isinstance(err, NoUsableDataError) and "row 2: actual use" in str(err)


# --- the approximate fractional savings uncertainty -------------------------------------------------

def lag1(e: np.ndarray) -> float:
    return float(np.sum(e[1:] * e[:-1]) / np.sum(e * e))


@pytest.mark.parametrize("rho_kind", ["fitted", "positive", "negative"])
def test_approximate_fsu_against_a_hand_computation(data, store, rho_kind):
    g, m = "A", 12
    res = oracle_fit(data, g)
    y = data.loc[data["g"] == g, "y"].to_numpy()
    rho = {"fitted": lag1(res.resid), "positive": 0.3, "negative": -0.2}[rho_kind]
    means, lags = np.full(len(store), np.nan), np.full(len(store), np.nan)
    i = store.keys.index((g,))
    means[i], lags[i] = y.mean(), rho
    new = reporting_rows(7, g, m)
    Xr = design_of(new)
    yhat = res.predict(Xr)
    actual = yhat * 0.9
    out = sv.reporting_savings(with_baseline_stats(store, means, lags), positions(store, new["g"]),
                               rows_design(store, new), list(actual), LEVEL)
    row = group_row(out, g)
    # the formula by hand: FSU = t · 1.26 · CV · √((n/n′)(1 + 2/n′)/m) / |F|
    n = len(y)
    cv = np.sqrt(res.scale) / y.mean()
    r = max(rho, 0.0)
    n_eff = n * (1 - r) / (1 + r)
    F = (yhat - actual).sum() / yhat.sum()
    t_q = stats.t.ppf(0.5 + LEVEL / 2, res.df_resid)
    expected = 100 * t_q * 1.26 * cv * np.sqrt((n / n_eff) * (1 + 2 / n_eff) / m) / abs(F)
    np.testing.assert_allclose(row[sv.APPROX_FSU], expected, rtol=1e-9)
    assert row[sv.APPROX_FSU_NOTE].startswith(f"approximate ({sv.FSU_SOURCE})")
    assert ("taken as 0" in row[sv.APPROX_FSU_NOTE]) == (rho <= 0)


def test_approximate_fsu_is_empty_with_a_reason(store):
    new = pd.DataFrame({"g": ["A", "B"], "x": [5.0, 6.0], "z": [8.0, 9.0]})
    args = (positions(store, new["g"]), rows_design(store, new), [100.0, 100.0], LEVEL)
    G = len(store)
    for mean, lag, note in ((None, None, sv.NOT_STORED),                         # no such fields
                            (np.full(G, np.nan), np.full(G, np.nan), sv.NOT_STORED),   # an older workbook
                            (np.full(G, 120.0), np.full(G, 0.97), "too strongly autocorrelated"),
                            (np.full(G, 120.0), np.full(G, np.nan), "undefined"),
                            (np.full(G, -3.0), np.full(G, 0.1), "positive mean")):
        out = sv.reporting_savings(with_baseline_stats(store, mean, lag), *args)
        assert out.groups[sv.APPROX_FSU].isna().all()
        assert all(note in text for text in out.groups[sv.APPROX_FSU_NOTE]), note


# --- the workbook ---------------------------------------------------------------------------------

def test_predictions_workbook_has_the_savings_sheet_first(data, store, tmp_path):
    new = pd.concat([reporting_rows(1, "A", 6), reporting_rows(2, "C", 4)], ignore_index=True)
    new["kWh"] = [150.0, 160.0, None, 170.0, 140.0, 155.0, 120.0, 130.0, 125.0, 135.0]
    raw = {c: new[c].tolist() for c in ("g", "x", "z")}
    preds = compute.predict_cells(store, raw, len(new))
    out = sv.reporting_savings(store, positions(store, new["g"]), rows_design(store, new), new["kWh"].tolist(),
                               LEVEL, outside=sv.extrapolated(preds), actual_column="kWh")
    target = tmp_path / "p.xlsx"
    names = predictions.write_predictions(target, False, store, new, np.arange(2, 2 + len(new)), preds,
                                          (("new rows", "n.xlsx"),), out)
    wb = openpyxl.load_workbook(target, read_only=True)
    assert wb.sheetnames == [sheet.SHEET, *names, "about"]
    cells = list(wb[sheet.SHEET].iter_rows(values_only=True))
    assert cells[0][0] == sheet.TITLE
    texts = " ".join(str(r[0]) for r in cells[1:sheet.header_row()] if r and r[0])
    for words in ("support, never replace", "protocol or contract", "licensed professional judgement",
                  "not proof of cause", "Extrapolation", f"confidence level {LEVEL:g}", sv.FSU_SOURCE):
        assert words in texts
    header = list(cells[sheet.header_row()])
    assert header[:2] == ["g", sv.ROWS_IN_TOTALS] and sv.APPROX_FSU in header
    body = {r[0]: dict(zip(header, r)) for r in cells[sheet.header_row() + 1:]}
    assert list(body) == ["A", "C"]
    for g, m in (("A", 5), ("C", 4)):
        keep = (new["g"] == g) & new["kWh"].notna()
        yhat = oracle_fit(data, g).predict(design_of(new[keep]))       # statsmodels
        assert body[g][sv.ROWS_IN_TOTALS] == m
        np.testing.assert_allclose(body[g][sv.AVOIDED_TOTAL], (yhat - new.loc[keep, "kWh"]).sum(), rtol=1e-9)
        np.testing.assert_allclose(body[g][sv.AVOIDED_STD_ERROR], group_row(out, g)[sv.AVOIDED_STD_ERROR], rtol=1e-15)
        assert body[g][sv.VERDICT] == group_row(out, g)[sv.VERDICT]
    assert body["A"][sv.ROWS_LEFT_OUT] == 1
    rows = list(wb[names[0]].iter_rows(values_only=True))
    head = list(rows[0])
    assert head[-4:] == list(sv.ROW_COLUMNS)
    assert rows[3][head.index(sv.LEFT_OUT_BECAUSE)] == 'actual use ("kWh"): empty cell'
    np.testing.assert_allclose(rows[1][head.index(sv.ADJUSTED_BASELINE)], rows[1][head.index("predicted value")],
                               rtol=1e-12)
    about = dict(wb["about"].iter_rows(values_only=True))
    assert "1.26" in about[sv.APPROX_FSU] and "Guideline 14" in about[sv.APPROX_FSU]
    wb.close()


# --- the savings sheet: shading means "look here", and the table reads and prints ------------------

def oracle_verdict(data: pd.DataFrame, g: str, part: pd.DataFrame, actual: np.ndarray, level: float) -> str:
    """The verdict from statsmodels' fit and scipy's t: the avoided total's interval against 0."""
    res = oracle_fit(data, g)
    Xr = design_of(part)
    avoided = float((res.predict(Xr) - actual).sum())
    se = np.sqrt(len(part) * res.scale + res.get_prediction(Xr.sum(axis=0)[None, :]).se_mean[0] ** 2)
    half = stats.t.ppf(0.5 + level / 2, res.df_resid) * se
    return sv.SAVING if avoided - half > 0 else sv.MORE_USE if avoided + half < 0 else sv.WITHIN_NOISE


def savings_book(store, new: pd.DataFrame, actual: list, path):
    """The predictions workbook of `new` with its savings, written as `sheetfit predict --actual` writes it."""
    raw = {c: new[c].tolist() for c in ("g", "x", "z")}
    preds = compute.predict_cells(store, raw, len(new))
    out = sv.reporting_savings(store, positions(store, new["g"]), rows_design(store, new), actual, LEVEL,
                               outside=sv.extrapolated(preds), actual_column="kWh")
    frame = new.assign(kWh=actual)
    predictions.write_predictions(path, False, store, frame, np.arange(2, 2 + len(new)), preds,
                                  (("new rows", "n.xlsx"),), out)
    return out


def shaded_rows(ws, first: int, last: int) -> dict[int, str]:
    """Sheet row → fill colour of the first conditional rule that holds there, evaluating the two forms
    the savings sheet writes: `$V9="text"` and `OR($V9="text",AND($M9>0,$O9>=share*$M9))`, whose row
    numbers are relative to the first data row (an empty cell counts as 0, as in a spreadsheet)."""
    from openpyxl.utils import column_index_from_string

    def value(col: str, row: int):
        v = ws.cell(row, column_index_from_string(col)).value
        return 0 if v is None else v

    rules = sorted((r for cf in ws.conditional_formatting for r in cf.rules), key=lambda r: r.priority)
    out = {}
    for row in range(first, last + 1):
        for rule in rules:
            f = rule.formula[0]
            equal = re.fullmatch(r'\$([A-Z]+)%d="([^"]*)"' % first, f)
            either = re.fullmatch(r'OR\(\$([A-Z]+)%d="([^"]*)",AND\(\$([A-Z]+)%d>0,\$([A-Z]+)%d>=([0-9.]+)\*'
                                  r'\$([A-Z]+)%d\)\)' % (first, first, first, first), f)
            assert equal or either, f
            if equal:
                holds = value(equal[1], row) == equal[2]
            else:
                m = value(either[3], row)
                holds = value(either[1], row) == either[2] or (m > 0 and value(either[4], row) >= float(either[5]) * m)
            if holds:
                out[row] = rule.dxf.fill.bgColor.rgb[-6:]
                break
    return out


def test_only_groups_whose_reading_changes_are_shaded(data, store, tmp_path):
    # A: 3 of 8 rows beyond the baseline's x range (a large share); B: 25 more per row (more use);
    # C: 1 of 12 rows beyond the range and 10 % less use; D in a second book: no usable actual use
    a, b, c = reporting_rows(1, "A", 8), reporting_rows(2, "B", 12), reporting_rows(3, "C", 12)
    a.loc[:2, "x"] = 30.0
    c.loc[0, "x"] = 30.0
    new = pd.concat([a, b, c], ignore_index=True)
    yhat = {g: oracle_fit(data, g).predict(design_of(p)) for g, p in (("A", a), ("B", b), ("C", c))}
    actual = {"A": yhat["A"] + np.random.default_rng(4).normal(0, 2, len(a)), "B": yhat["B"] + 25.0,
              "C": 0.9 * yhat["C"]}
    out = savings_book(store, new, list(np.concatenate([actual[g] for g in "ABC"])), tmp_path / "s.xlsx")
    wb = openpyxl.load_workbook(tmp_path / "s.xlsx")
    ws = wb[sheet.SHEET]
    top = sheet.header_row() + 1                                     # 1-based header row
    keys = [ws.cell(r, 1).value for r in range(top + 1, top + 4)]
    assert keys == ["A", "B", "C"]
    shaded = {keys[r - top - 1]: colour for r, colour in shaded_rows(ws, top + 1, top + 3).items()}
    expected = {}
    for g, part in (("A", a), ("B", b), ("C", c)):
        d = data[data["g"] == g]
        outside = ((part["x"] < d["x"].min()) | (part["x"] > d["x"].max()) |            # numpy, by hand
                   (part["z"] < d["z"].min()) | (part["z"] > d["z"].max())).sum()
        said = oracle_verdict(data, g, part, actual[g], LEVEL)
        assert group_row(out, g)[sv.VERDICT] == said and group_row(out, g)[sv.ROWS_OUTSIDE] == outside
        if said == sv.MORE_USE or outside >= sheet.EXTRAPOLATED_SHARE * len(part):
            expected[g] = CHECK_FAILED_FILL[1:]
    assert expected == {"A": CHECK_FAILED_FILL[1:], "B": CHECK_FAILED_FILL[1:]}    # C (1 of 12 outside) is not
    assert shaded == expected
    cf = next(iter(ws.conditional_formatting))
    assert str(cf.sqref) == f"A{top + 1}:{openpyxl.utils.get_column_letter(ws.max_column)}{top + 3}"
    legend = " ".join(str(ws.cell(r, 1).value) for r in range(2, top - 1))
    assert "Shading: " + sheet.shading_legend() in legend and "25%" in legend and sv.MORE_USE in legend
    about = dict(wb["about"].iter_rows(values_only=True))
    assert sheet.shading_legend() in about["colours (savings)"]
    wb.close()
    d = reporting_rows(5, "C", 3)
    savings_book(store, d, [None, "-", None], tmp_path / "none.xlsx")
    ws = openpyxl.load_workbook(tmp_path / "none.xlsx")[sheet.SHEET]
    assert shaded_rows(ws, top + 1, top + 1) == {top + 1: LEFT_OUT_FILL[1:]}


def column_widths(ws) -> dict[str, float]:
    """Column letter → width, grouped column ranges expanded."""
    out = {}
    for dim in ws.column_dimensions.values():
        for i in range(dim.min, dim.max + 1):
            out[openpyxl.utils.get_column_letter(i)] = dim.width
    return out


def sheet_xml(path, position: int) -> str:
    with zipfile.ZipFile(path) as z:
        return z.read(f"xl/worksheets/sheet{position}.xml").decode()


def test_the_savings_table_reads_on_screen_and_prints_one_page_wide(data, store, tmp_path):
    new = pd.concat([reporting_rows(1, "A", 6), reporting_rows(2, "C", 4)], ignore_index=True)
    new["when"] = [dt.date(2025, 1, 1) + dt.timedelta(days=30 * i) for i in range(len(new))]
    path = tmp_path / "p.xlsx"
    savings_book(store, new, list(np.linspace(140, 180, len(new))), path)
    wb = openpyxl.load_workbook(path)
    for name, top in ((sheet.SHEET, sheet.header_row() + 1), ("predictions", 1)):
        ws = wb[name]
        widths = column_widths(ws)
        head = list(ws[top])
        lines = 1
        for c in head:                     # headers wrap, each word whole, in a row tall enough
            width = widths[c.column_letter]
            assert c.alignment.wrap_text, (name, c.value)
            assert max(len(w) for w in c.value.split()) * BOLD <= width, (name, c.value)
            lines = max(lines, len(sheet.header_wrap(c.value, width)))
        assert lines <= sheet.HEADER_LINES
        assert ws.row_dimensions[top].height >= ROW_HEIGHT * lines
        for row in ws.iter_rows(min_row=top + 1):
            cells = [c for c in row if c.value is not None]
            assert {c.alignment.vertical for c in cells} == {"top"}, (name, row[0].row)   # one alignment a row
            for c in cells:
                if isinstance(c.value, (int, float)):             # columns.shown_width, as on the results sheets
                    assert shown_width(np.array([float(c.value)]), c.number_format) + 1 <= widths[c.column_letter]
                elif isinstance(c.value, str) and c.alignment.wrap_text:
                    need = wrapped_lines(c.value, widths[c.column_letter])
                    assert need == 1 or ws.row_dimensions[c.row].height >= ROW_HEIGHT * need - 1
                elif isinstance(c.value, str):
                    assert len(c.value) + 1 <= widths[c.column_letter], (name, c.value)
    ws = wb[sheet.SHEET]
    note = [c.value for c in ws[sheet.header_row() + 1]].index(sv.APPROX_FSU_NOTE)
    letter = openpyxl.utils.get_column_letter(note + 1)
    assert column_widths(ws)[letter] <= 50 and ws.cell(sheet.header_row() + 2, note + 1).alignment.wrap_text
    # one landscape page width holds about 140 characters of column width at full size; the table's 13
    # numbers and 2 sentences stay within 215 (printed at about 65 %, still legible), where unwrapped
    # headers took over 400 (about 30 %): our rule of thumb for a legible print
    assert sum(column_widths(ws).values()) <= 215
    pred = wb["predictions"]
    head = [c.value for c in pred[1]]
    g = pred.cell(2, head.index("g") + 1)                            # text after a number: one space in
    assert (g.alignment.horizontal, g.alignment.indent) == ("left", 1)
    when = pred.cell(2, head.index("when") + 1)                      # a column of dates is written as dates
    assert isinstance(when.value, dt.datetime) and when.number_format == "yyyy-mm-dd"
    about = wb["about"]
    for row in about.iter_rows(min_row=2):
        need = max(wrapped_lines(c.value, column_widths(about)[c.column_letter]) for c in row)
        assert need == 1 or about.row_dimensions[row[0].row].height >= ROW_HEIGHT * need
    wb.close()
    for position in (1, 2, 3):                                       # savings, predictions, about
        xml = sheet_xml(path, position)
        assert 'orientation="landscape"' in xml and 'fitToHeight="0"' in xml, position


def test_summary_adds_a_total_line_and_an_extrapolation_warning(store, tmp_path):
    new = pd.DataFrame({"g": ["A", "A", "B", "C"], "x": [5.0, 40.0, 6.0, 7.0], "z": [8.0, 9.0, 9.0, 9.0]})
    out = sv.reporting_savings(store, positions(store, new["g"]), rows_design(store, new),
                               [10.0, 10.0, None, 500.0], LEVEL,
                               outside=np.array([False, True, False, False]))
    lines = PredictionSummary(tmp_path / "p.xlsx", 4, 4, ("predictions",), out).lines()
    counts = out.verdict_counts()
    assert lines[1] == (f"savings in 3 groups: {counts[sv.SAVING]} saving, {counts[sv.WITHIN_NOISE]} within the "
                        f"noise of the baseline, {counts[sv.MORE_USE]} using more, 1 cannot say; 1 rows left out "
                        f"of the totals (see '{sv.LEFT_OUT_BECAUSE}')")
    assert lines[2] == ("warning: 1 rows in the totals of 1 groups lie outside their baseline's input range "
                        "(extrapolation)")
    assert len(PredictionSummary(tmp_path / "p.xlsx", 4, 4, ("predictions",)).lines()) == 1


def test_the_actual_column_must_exist_and_not_be_an_input(store):
    with pytest.raises(ColumnNotFoundError, match='actual-use column "kwh" not found in the new rows.*"kWh"'):
        sv.check_actual_column(["g", "x", "z", "kWh"], "kwh", store, "the new rows")
    with pytest.raises(ColumnNotFoundError, match="is an input of the model"):
        sv.check_actual_column(["g", "x", "z"], "x", store, "the new rows")
    sv.check_actual_column(["g", "x", "z", "kWh"], "kWh", store, "the new rows")


# --- through the public entry points ------------------------------------------------------------------

def test_frame_savings_matches_the_direct_computation(data, store):
    new = pd.concat([reporting_rows(1, "A", 6), reporting_rows(2, "B", 5)], ignore_index=True)
    new["kWh"] = np.linspace(100, 200, len(new))
    per_row, per_group = sv.frame_savings(store, new, "kWh", level=LEVEL)
    direct = sv.reporting_savings(store, positions(store, new["g"]), rows_design(store, new), new["kWh"].tolist(),
                                  LEVEL)
    pd.testing.assert_frame_equal(per_group.drop(columns=[sv.ROWS_OUTSIDE]),
                                  direct.groups.drop(columns=[sv.ROWS_OUTSIDE]), rtol=1e-12)
    np.testing.assert_allclose(per_row[sv.ADJUSTED_BASELINE], per_row["predicted value"], rtol=1e-12)
    assert (per_group[sv.ROWS_OUTSIDE] == 0).all()


def test_a_change_point_fit_through_the_api_and_its_results_workbook(tmp_path):
    # a heating baseline fitted by sheetfit's change-point search; the oracle is statsmodels on the hinge
    # column built by hand at the τ found, with its variance scaled by (n − k)/(n − k − 1) for the counted τ
    rng = np.random.default_rng(21)
    T = rng.uniform(-6, 27, 40)
    base = pd.DataFrame({"site": "S", "T": T, "kWh": 210 + 6.0 * np.maximum(0, 13.0 - T) + rng.normal(0, 5, 40)})
    fitted = fit_frame(base, y="kWh", x=["T"], group="site", change_point="heating")
    new = pd.DataFrame({"site": "S", "T": np.linspace(-10, 24, 9)})     # −10 °C: colder than any baseline day
    new["metered"] = 205 + 5.0 * np.maximum(0, 12.0 - new["T"])
    store = store_from_results(fitted)
    tau = store.change_points[0, 0]
    res = sm.OLS(base["kWh"].to_numpy(), sm.add_constant(np.maximum(0, tau - T))).fit()
    Xr = sm.add_constant(np.maximum(0, tau - new["T"].to_numpy()))
    n, k, m = 40, 2, len(new)
    expected_var = (m * res.scale + res.get_prediction(Xr.sum(axis=0)[None, :]).se_mean[0] ** 2) * (n - k) / (n - k - 1)
    path = write_results(fitted, tmp_path / "fit.xlsx")
    for source in (fitted, path):
        per_row, per_group = sv.frame_savings(source, new, "metered", level=LEVEL)
        row = per_group.iloc[0]
        np.testing.assert_allclose(per_row[sv.ADJUSTED_BASELINE], res.predict(Xr), rtol=1e-9)
        np.testing.assert_allclose(row[sv.AVOIDED_STD_ERROR] ** 2, expected_var, rtol=1e-9)
        assert row[sv.ROWS_OUTSIDE] == ((new["T"] < T.min()) | (new["T"] > T.max())).sum() == 1    # numpy
        assert np.isfinite(row[sv.APPROX_FSU])                    # a change-point store keeps mean and lag-1
    ordinary = fit_frame(base, y="kWh", x=["T"], group="site")
    _, per_group = sv.frame_savings(write_results(ordinary, tmp_path / "plain.xlsx"), new, "metered")
    assert np.isfinite(per_group[sv.APPROX_FSU]).all()              # every store keeps mean and lag-1
