"""Change-point models through the model store, `sheetfit predict` and the result tables.

Oracle: statsmodels OLS fitted on hinge columns max(0, τ − T) and max(0, T − τ) built by hand at
each group's change points, with the model's residual degrees of freedom set to n − k − c (k
coefficients, c change points counted as parameters): its `get_prediction(...).summary_frame`
(mean, mean_se, mean_ci_lower/upper, obs_ci_lower/upper) and `normalized_cov_params` ((X'X)⁻¹).
The results are hand-made FitResults shaped like a change-point run (see `change_point_results`).
"""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm

import sheetfit
from sheetfit.errors import ResultsWorkbookError
from sheetfit.job import FitJob
from sheetfit.model.inference import inference
from sheetfit.model.patterns import fit_patterns
from sheetfit.prediction.compute import design_for_rows
from sheetfit.read.tidy import ReadInfo
from sheetfit.report import fastrows, write_results
from sheetfit.results import tables
from sheetfit.results.change_points import CHANGE_POINT, SHAPE, UPPER_CHANGE_POINT
from sheetfit.results.headers import (ADJUSTED_R2, AIC, AVERAGE_HIGH, AVERAGE_LOW, BIC, COEFFICIENT,
    COEFFICIENT_COUNT, CV_RMSE, F_P_VALUE, F_STAT, FITTED, FLAGS, INPUT, INTERVAL_HIGH, INTERVAL_LOW, P_VALUE, R2,
    REASONS, RESIDUAL_STD_ERROR, RMSE, ROWS_NOT_USED, ROWS_USED, STATUS, STD_ERROR, T_STAT)
from sheetfit.results.store import store_from_results, store_layout
from sheetfit.results.store_read import read_store
from sheetfit.results.store_layout import EXTRA_HEADERS, STORE_SHEET
from sheetfit.results.types import FitResults
from sheetfit.terms import Term, coefficient_labels, with_change_point_terms

Y, T, Z = "kWh", "outdoor temp", "units"
ORACLE = {"predicted value": "mean", "std error of the fitted mean": "mean_se",
          "range for the average, low": "mean_ci_lower", "range for the average, high": "mean_ci_upper",
          "range for one new row, low": "obs_ci_lower", "range for one new row, high": "obs_ci_upper"}
NAN = math.nan
# site, shape, (τ of the 'below' term, τ of the 'above' term), rows; "X" cannot be fitted (2 rows)
SITES = (("H", "heating", (14.0, NAN), 30), ("C", "cooling", (NAN, 18.5), 34), ("X", "", (NAN, NAN), 2),
         ("HC", "heating-cooling", (9.0, 21.0), 40), ("TS", "two-slopes", (15.5, 15.5), 28),
         ("L", "line", (NAN, NAN), 26))


def hinge_design(shape: str, tau: tuple[float, float], t: np.ndarray, z: np.ndarray | None) -> np.ndarray:
    """The columns a shape uses, built by hand: constant, hinge(s) or T, then the other input."""
    cols = [np.ones(len(t))]
    if shape in ("heating", "two-slopes", "heating-cooling"):
        cols.append(np.maximum(tau[0] - t, 0.0))
    if shape in ("cooling", "two-slopes", "heating-cooling"):
        cols.append(np.maximum(t - tau[1], 0.0))
    if shape == "line":
        cols.append(t.astype(np.float64))
    if z is not None:
        cols.append(z)
    return np.column_stack(cols)


def active_slots(shape: str, others: bool) -> np.ndarray:
    """Which of (constant, T below, T above, T, other input) a shape uses."""
    below = shape in ("heating", "two-slopes", "heating-cooling")
    above = shape in ("cooling", "two-slopes", "heating-cooling")
    return np.array([True, below, above, shape == "line"] + ([True] if others else []))


def change_point_count(shape: str) -> int:
    return {"heating": 1, "cooling": 1, "two-slopes": 1, "heating-cooling": 2}.get(shape, 0)


def oracle_fit(shape: str, tau: tuple[float, float], d: pd.DataFrame, others: bool):
    """statsmodels OLS on the hand-built columns, residual df n − k − c (change points counted)."""
    X = hinge_design(shape, tau, d[T].to_numpy(), d[Z].to_numpy() if others else None)
    model = sm.OLS(d[Y].to_numpy(), X)
    model.df_resid = len(d) - X.shape[1] - change_point_count(shape)
    return model.fit()


def site_data(seed: int = 13) -> pd.DataFrame:
    """Energy use against outdoor temperature per site, each site in its own shape (seeded)."""
    rng = np.random.default_rng(seed)
    parts = []
    for site, shape, (tb, ta), n in SITES:
        t = rng.uniform(-6.0, 33.0, n)
        z = rng.uniform(100.0, 500.0, n)
        y = 180 + 0.25 * z + rng.normal(0, 6.0, n)
        if shape == "line":
            y = y + 3.5 * t
        if math.isfinite(tb):
            y = y + 7.0 * np.maximum(tb - t, 0)
        if math.isfinite(ta):
            y = y + 9.0 * np.maximum(t - ta, 0)
        parts.append(pd.DataFrame({"site": site, T: t, Z: z, Y: y}))
    return pd.concat(parts, ignore_index=True)


def _group_row(site: str, shape: str, tau: tuple[float, float], fit, d: pd.DataFrame) -> dict:
    """One row of `groups` from the oracle fit (the figures the store and the writer need), with the
    change-point columns a change-point run's groups table has (results.change_points)."""
    n = len(d)
    k = len(fit.params)
    rse = math.sqrt(fit.scale)
    return {"site": site, STATUS: "fitted", FLAGS: 0, REASONS: "", R2: fit.rsquared, ADJUSTED_R2: fit.rsquared_adj,
            F_STAT: fit.fvalue, F_P_VALUE: fit.f_pvalue, RESIDUAL_STD_ERROR: rse, RMSE: math.sqrt(fit.ssr / n),
            CV_RMSE: 100 * rse / d[Y].mean(), ROWS_USED: n, ROWS_NOT_USED: 0,
            COEFFICIENT_COUNT: k + change_point_count(shape), AIC: fit.aic, BIC: fit.bic, SHAPE: shape,
            CHANGE_POINT: tau[1] if shape == "cooling" else tau[0],
            UPPER_CHANGE_POINT: tau[1] if shape == "heating-cooling" else NAN}


def _table_rows(site: str, shape: str, fit, d: pd.DataFrame, labels: list[str], act: np.ndarray, grid: bool,
                tau: tuple[float, float]) -> dict[str, list]:
    """The coefficient, (X'X)⁻¹, observation, curve and quantile rows of one fitted site."""
    used = [lab for lab, a in zip(labels, act) if a]
    ci = fit.conf_int(0.05)
    out: dict[str, list] = {"coef": [], "xtx": [], "obs": [], "curves": [], "quant": []}
    for j, lab in enumerate(used):
        out["coef"].append({"site": site, INPUT: lab, COEFFICIENT: fit.params[j], INTERVAL_LOW: ci[j, 0],
                            INTERVAL_HIGH: ci[j, 1], STD_ERROR: fit.bse[j], T_STAT: fit.tvalues[j],
                            P_VALUE: fit.pvalues[j]})
        for i, other in enumerate(used):
            out["xtx"].append({"site": site, "row term": lab, "column term": other,
                               "value": fit.normalized_cov_params[j, i]})
    for i, (_, r) in enumerate(d.iterrows()):
        out["obs"].append({"site": site, "source sheet": "Data", "source row": int(r["row"]), Y: r[Y], T: r[T],
                           Z: r[Z], "used in fit": "yes", "reason": "", FITTED: fit.fittedvalues[i],
                           "residual": fit.resid[i], "row flags": ""})
    if grid:
        lo, hi = d[T].min(), d[T].max()
        xs, keep = tables.grid_with_change_points(np.linspace(lo, hi, 25)[None, :], np.array([tau]),
                                                  np.array([lo]), np.array([hi]))
        xs = xs[keep]
        pred = fit.get_prediction(hinge_design(shape, tau, xs, None)).summary_frame(alpha=0.05)
        out["curves"] = [{"site": site, "x": x, FITTED: m, AVERAGE_LOW: a, AVERAGE_HIGH: b}
                         for x, m, a, b in zip(xs, pred["mean"], pred["mean_ci_lower"], pred["mean_ci_upper"])]
    sr = np.sort(fit.resid / math.sqrt(fit.scale))
    out["quant"] = [{"site": site, "normal quantile": q, "standardized residual": v}
                    for q, v in zip(np.linspace(-2, 2, len(sr)), sr)]
    return out


def change_point_results(folder: Path, others: bool = True, seed: int = 13) -> tuple[FitResults, pd.DataFrame]:
    """FitResults of a change-point run built by hand from statsmodels fits, and the data behind them.

    Terms: the temperature as its three slots (below, above, plain) and, when `others`, one more input;
    each site uses only the slots of its shape. Site "X" has 2 rows and is not fitted.
    """
    folder.mkdir(parents=True, exist_ok=True)
    source = folder / "input.xlsx"
    source.write_bytes(b"a path the writer must not touch")
    data = site_data(seed)
    data["row"] = np.arange(2, len(data) + 2)
    base = (Term(T, T),) + ((Term(Z, Z),) if others else ())
    terms = with_change_point_terms(base, base[0])
    labels = list(coefficient_labels(terms, True))
    job = FitJob(workbook=source, y=Y, x=tuple(t.column for t in base), group=("site",), change_point="auto")
    groups, rows = [], {"coef": [], "xtx": [], "obs": [], "curves": [], "quant": [], "ranges": []}
    cps, means, lag1 = [], [], []
    for site, shape, tau, n in SITES:
        d = data[data["site"] == site].reset_index(drop=True)
        if n < 5:
            groups.append({"site": site, STATUS: "not fitted", FLAGS: 0, REASONS: "too few rows", ROWS_USED: 0,
                           ROWS_NOT_USED: n, COEFFICIENT_COUNT: 0, SHAPE: ""})
            cps.append((NAN, NAN)), means.append(NAN), lag1.append(NAN)
            continue
        fit = oracle_fit(shape, tau, d, others)
        groups.append(_group_row(site, shape, tau, fit, d))
        for key, part in _table_rows(site, shape, fit, d, labels, active_slots(shape, others), not others,
                                     tau).items():
            rows[key] += part
        for col in (T, Z) if others else (T,):
            rows["ranges"].append({"site": site, "column": col, "min": d[col].min(), "max": d[col].max()})
        e = fit.resid
        cps.append(tau), means.append(d[Y].mean()), lag1.append(float(e[1:] @ e[:-1] / (e @ e)))
    info = ReadInfo(file_name=source.name, file_sha256="0" * 64, file_format="xlsx", reader="test",
                    sheets=("Data",), region="whole sheet", header_row=1, rows_read=len(data))
    frame = pd.DataFrame
    res = FitResults(
        job=job, group_columns=("site",), y=Y, terms=terms, groups=frame(groups),
        coefficients=frame(rows["coef"], columns=["site", INPUT, COEFFICIENT, INTERVAL_LOW, INTERVAL_HIGH,
                                                  STD_ERROR, T_STAT, P_VALUE]),
        checks=frame(columns=["site", "check", "statistic", "p-value", "adjusted p-value", "threshold", "verdict",
                              "note"]),
        observations=frame(rows["obs"]),
        curves=frame(rows["curves"], columns=["site", "x", FITTED, AVERAGE_LOW, AVERAGE_HIGH]),
        quantiles=frame(rows["quant"], columns=["site", "normal quantile", "standardized residual"]),
        xtx_inverse=frame(rows["xtx"], columns=["site", "row term", "column term", "value"]),
        input_ranges=frame(rows["ranges"], columns=["site", "column", "min", "max"]),
        info=info, change_points=np.array(cps, dtype=np.float64), response_mean=np.array(means),
        residual_lag1=np.array(lag1))
    return res, data


FITTED_SITES = [s for s in SITES if s[3] > 5]


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    return change_point_results(tmp_path_factory.mktemp("cp"))


def new_rows(d: pd.DataFrame, site: str) -> pd.DataFrame:
    """Temperatures across and beyond the site's range (so both sides of every change point), units inside."""
    t = np.r_[np.linspace(d[T].min() - 3, d[T].max() + 3, 11), 9.0, 14.0, 15.5, 18.5, 21.0]
    return pd.DataFrame({"site": site, T: t, Z: np.linspace(d[Z].min(), d[Z].max(), len(t))})


@pytest.mark.parametrize("site, shape, tau, n", FITTED_SITES, ids=[s[1] for s in FITTED_SITES])
def test_predictions_of_every_shape_match_statsmodels(built, site, shape, tau, n):
    res, data = built
    d = data[data["site"] == site].reset_index(drop=True)
    new = new_rows(d, site)
    pred = sheetfit.predict(res, new)
    assert (pred["reason"] == "").all()
    fit = oracle_fit(shape, tau, d, True)
    expected = fit.get_prediction(hinge_design(shape, tau, new[T].to_numpy(), new[Z].to_numpy())
                                  ).summary_frame(alpha=0.05)
    for ours, theirs in ORACLE.items():
        np.testing.assert_allclose(pred[ours].to_numpy(np.float64), expected[theirs].to_numpy(), rtol=1e-9,
                                   err_msg=f"{shape}: {ours}")
    # extrapolation: the input outside the site's observed range, in today's words
    outside = (new[T] < d[T].min()) | (new[T] > d[T].max())
    assert pred["extrapolation"][outside].str.startswith(f"yes: {T} ").all()
    assert (pred["extrapolation"][~outside] == "no").all()


def test_design_rows_use_each_rows_own_change_points(built):
    res, data = built
    store = store_from_results(res)
    new = pd.concat([new_rows(data[data["site"] == s], s) for s, *_ in FITTED_SITES], ignore_index=True)
    odd = pd.DataFrame({"site": ["nowhere", "H"], T: [5.0, "warm"], Z: [200.0, 200.0]})
    raw = {c: new[c].tolist() + odd[c].tolist() for c in new.columns}
    pos, D, reasons = design_for_rows(store, raw, len(new) + 2)
    assert pos[-2] == -1 and 'no fitted model for group "nowhere"' in reasons[-2][0]
    assert reasons[-1] == [f'{T}: text "warm" is not a number'] and pos[-1] == store.labels.index("H")
    assert np.isnan(D[-2:]).all()
    for site, shape, tau, _ in FITTED_SITES:
        rows = np.flatnonzero(new["site"] == site)
        assert (pos[rows] == store.labels.index(site)).all() and not any(reasons[r] for r in rows)
        # the hand-built design (numpy) placed on the slots the shape uses; 0 on the others
        act = active_slots(shape, True)
        want = np.zeros((len(rows), len(act)))
        want[:, act] = hinge_design(shape, tau, new[T].to_numpy(np.float64)[rows], new[Z].to_numpy(np.float64)[rows])
        np.testing.assert_array_equal(D[rows][:, act], want[:, act])
        np.testing.assert_array_equal(D[rows][:, 1:3][:, ~act[1:3]], 0.0)


def test_store_keeps_unused_slots_as_zero_and_leaves_out_the_unfitted(built):
    res, data = built
    store = store_from_results(res)
    assert store.labels == tuple(s for s, *_ in FITTED_SITES)
    assert store.format == 3 and store.has_change_points
    assert store.shapes == tuple(s[1] for s in FITTED_SITES)
    for g, (site, shape, tau, _) in enumerate(FITTED_SITES):
        act = active_slots(shape, True)
        fit = oracle_fit(shape, tau, data[data["site"] == site].reset_index(drop=True), True)
        np.testing.assert_array_equal(store.beta[g, act], fit.params)          # statsmodels, as given
        assert (store.beta[g, ~act] == 0).all()
        np.testing.assert_array_equal(store.xtx_inv[g][np.ix_(act, act)], fit.normalized_cov_params)
        assert (store.xtx_inv[g][~act] == 0).all() and (store.xtx_inv[g][:, ~act] == 0).all()
        assert store.df[g] == fit.df_resid                                     # n − k − c
        np.testing.assert_array_equal(store.change_points[g], tau)


@pytest.mark.parametrize("bulk", [None, 0], ids=["bulk path off elsewhere", "bulk path everywhere"])
def test_store_round_trip_keeps_change_points_mean_and_lag1_exactly(built, tmp_path, monkeypatch, bulk):
    res, data = built
    monkeypatch.setattr(fastrows, "THRESHOLD", bulk)
    path = write_results(res, tmp_path / "fit.xlsx")
    back, direct = read_store(path), store_from_results(res)
    assert back.labels == direct.labels and back.shapes == direct.shapes
    assert [t.kind for t in back.terms] == ["below", "above", "column", "column"]
    for name in ("change_points", "response_mean", "residual_lag1", "beta", "xtx_inv", "sigma2", "df", "lo", "hi"):
        np.testing.assert_array_equal(getattr(back, name), getattr(direct, name), err_msg=name)
    # the lag-1 autocorrelation as defined: Σ e_t e_(t−1) / Σ e_t² of the oracle's residuals (numpy)
    e = oracle_fit("heating", (14.0, NAN), data[data["site"] == "H"].reset_index(drop=True), True).resid
    assert back.residual_lag1[0] == pytest.approx(np.sum(e[1:] * e[:-1]) / np.sum(e * e), rel=1e-12)
    new = pd.concat([new_rows(data[data["site"] == s], s) for s, *_ in FITTED_SITES], ignore_index=True)
    pd.testing.assert_frame_equal(sheetfit.predict(path, new), sheetfit.predict(res, new), rtol=0, atol=0)


def test_store_sheet_is_format_3_with_the_new_columns_last(built, tmp_path):
    res, _ = built
    path = write_results(res, tmp_path / "fit.xlsx")
    direct = store_from_results(res)
    lay = store_layout(direct)
    ws = openpyxl.load_workbook(path, read_only=True)[STORE_SHEET]
    rows = [list(r) for r in ws.iter_rows(values_only=True)]
    settings = {r[0]: r[1] for r in rows[lay.first_setting:lay.first_setting + 8]}
    assert settings["store format"] == 3
    header = rows[lay.group_header]
    first_new = lay.col_max(lay.m - 1) + 1
    assert tuple(header[first_new:first_new + len(EXTRA_HEADERS)]) == EXTRA_HEADERS
    # every format-1 position is where format 1 has it: the last observed maximum just before the new columns;
    # format 3's weight mean and sums come after format 2's columns, the last one y'y
    assert header[lay.col_max(lay.m - 1)] == f"max: {Z}"
    assert header[lay.col_weight_mean()] == "weight mean" and header[lay.width - 1] == "sum y·y"
    heating = rows[lay.first]
    assert heating[lay.col_coef(2)] == 0 and heating[lay.col_change_point(1)] is None
    assert heating[lay.col_extra("shape")] == "heating"


def _as_format(path, out, version=1):
    """The same results workbook as an older sheetfit wrote it: store format 1 (or 2), without the newer columns."""
    wb = openpyxl.load_workbook(path)
    ws = wb[STORE_SHEET]
    store = read_store(path)
    lay = store_layout(store)
    for r in range(1, ws.max_row + 1):
        if ws.cell(r, 1).value == "store format":
            ws.cell(r, 2).value = version
    first_gone = lay.col_min(lay.m) + (len(EXTRA_HEADERS) if version == 2 else 0)
    ws.delete_cols(first_gone + 1, lay.width - first_gone)
    wb.save(out)
    return out


def test_an_ordinary_run_keeps_mean_and_lag1_and_an_older_store_still_predicts(tmp_path):
    rng = np.random.default_rng(8)
    df = pd.DataFrame({"g": np.repeat(["a", "b"], 20), "x": rng.uniform(0, 9, 40)})
    df["y"] = 2 + 0.7 * df["x"] + rng.normal(0, 0.4, 40)
    res = sheetfit.fit_frame(df, y="y", x=["x"], group="g")
    path = write_results(res, tmp_path / "fit.xlsx")
    store = read_store(path)
    assert store.format == 3 and np.isnan(store.change_points).all()
    new = pd.DataFrame({"g": ["a", "b"], "x": [1.0, 8.5]})
    older = read_store(_as_format(path, tmp_path / "older.xlsx"))
    assert np.isnan(older.response_mean).all() and np.isnan(older.residual_lag1).all()
    second = read_store(_as_format(path, tmp_path / "second.xlsx", version=2))
    assert not second.has_sums and np.allclose(second.response_mean, store.response_mean)
    for i, g in enumerate("ab"):
        d = df[df["g"] == g]
        fit = sm.OLS(d["y"].to_numpy(), sm.add_constant(d["x"].to_numpy())).fit()
        assert store.response_mean[i] == pytest.approx(d["y"].mean(), rel=1e-12)          # numpy mean
        e = fit.resid
        assert store.residual_lag1[i] == pytest.approx((e[1:] * e[:-1]).sum() / (e * e).sum(), rel=1e-9)
        expected = fit.get_prediction(np.array([[1.0, new["x"][i]]])).summary_frame(alpha=0.05).iloc[0]
        for source in (path, tmp_path / "older.xlsx", tmp_path / "second.xlsx"):
            pred = sheetfit.predict(source, new)
            for ours, theirs in ORACLE.items():
                assert pred[ours][i] == pytest.approx(expected[theirs], rel=1e-9)   # statsmodels


def test_a_newer_store_format_is_refused_in_one_line(built, tmp_path):
    res, _ = built
    path = write_results(res, tmp_path / "fit.xlsx")
    wb = openpyxl.load_workbook(path)
    ws = wb[STORE_SHEET]
    cell = next(r[1] for r in ws.iter_rows() if r[0].value == "store format")
    cell.value = 4
    wb.save(tmp_path / "newer.xlsx")
    with pytest.raises(ResultsWorkbookError, match="format 4; this sheetfit reads formats 1, 2 and 3"):
        read_store(tmp_path / "newer.xlsx")


# --- the result tables of an engine fit with per-group slots ------------------------------------

@pytest.fixture(scope="module")
def engine_run():
    """An engine fit of the one-input sites at their change points (hinge columns built by hand)."""
    data = site_data(29)
    data = data[data["site"] != "X"].reset_index(drop=True)
    sites = list(FITTED_SITES)
    codes = data["site"].map({s[0]: i for i, s in enumerate(sites)}).to_numpy()
    tau = np.array([s[2] for s in sites])
    t = data[T].to_numpy()
    cols = {T: t, "below": np.where(np.isnan(tau[codes, 0]), 0, np.maximum(tau[codes, 0] - t, 0)),
            "above": np.where(np.isnan(tau[codes, 1]), 0, np.maximum(t - tau[codes, 1], 0))}
    engine_terms = [Term("b", "below"), Term("a", "above"), Term(T, T)]
    active = np.array([active_slots(s[1], False) for s in sites])
    count = np.array([change_point_count(s[1]) for s in sites])
    fit = fit_patterns(data[Y].to_numpy(), cols, codes, len(sites), engine_terms, True, active, count)
    keys = pd.DataFrame({"site": [s[0] for s in sites]})
    return data, sites, tau, fit, inference(fit, 0.95), keys


def test_coefficient_and_xtx_tables_list_only_the_slots_a_group_uses(engine_run):
    data, sites, tau, fit, inf, keys = engine_run
    terms = with_change_point_terms((Term(T, T),), Term(T, T))
    labels = coefficient_labels(terms, True)
    coef = tables.coefficients_table(keys, fit, inf, labels, {})
    xtx = tables.xtx_table(keys, fit, labels)
    assert coef[COEFFICIENT].notna().all() and xtx["value"].notna().all()
    for site, shape, tc, _ in sites:
        d = data[data["site"] == site].reset_index(drop=True)
        fit_sm = oracle_fit(shape, tc, d, False)
        mine = coef[coef["site"] == site]
        used = [lab for lab, a in zip(labels, active_slots(shape, False)) if a]
        assert mine[INPUT].tolist() == used
        np.testing.assert_allclose(mine[COEFFICIENT], fit_sm.params, rtol=1e-9)    # statsmodels
        np.testing.assert_allclose(mine[STD_ERROR], fit_sm.bse, rtol=1e-9)
        inv = xtx[xtx["site"] == site]["value"].to_numpy().reshape(len(used), len(used))
        np.testing.assert_allclose(inv, fit_sm.normalized_cov_params, rtol=1e-9)


def test_curves_bend_exactly_at_the_change_points_and_match_statsmodels(engine_run):
    data, sites, tau, fit, inf, keys = engine_run
    terms = with_change_point_terms((Term(T, T),), Term(T, T))
    codes = data["site"].map({s[0]: i for i, s in enumerate(sites)}).to_numpy()
    ranges = tables.observed_ranges({T: data[T].to_numpy()}, codes, len(sites))
    cur = tables.curves_table(keys, fit, inf, terms, ranges, change_points=tau)
    for g, (site, shape, tc, _) in enumerate(sites):
        d = data[data["site"] == site].reset_index(drop=True)
        c = cur[cur["site"] == site]
        x = c["x"].to_numpy()
        assert (np.diff(x) > 0).all() and x[0] == d[T].min() and x[-1] == d[T].max()
        kinks = {v for v in tc if math.isfinite(v)}
        assert kinks <= set(x.tolist())                  # every kink is a grid point, exactly
        assert len(x) == 25 + len(kinks)
        expected = oracle_fit(shape, tc, d, False).get_prediction(hinge_design(shape, tc, x, None)
                                                                  ).summary_frame(alpha=0.05)
        np.testing.assert_allclose(c[FITTED], expected["mean"], rtol=1e-9)                 # statsmodels
        np.testing.assert_allclose(c[AVERAGE_LOW], expected["mean_ci_lower"], rtol=1e-9)
        np.testing.assert_allclose(c[AVERAGE_HIGH], expected["mean_ci_upper"], rtol=1e-9)


def test_number_of_coefficients_counts_the_change_points(engine_run):
    data, sites, tau, fit, inf, keys = engine_run
    n = np.bincount(data["site"].map({s[0]: i for i, s in enumerate(sites)}), minlength=len(sites))
    groups = tables.groups_table(keys, fit, inf, np.zeros(len(sites)), np.full(len(sites), "", dtype=object),
                                 (n, np.zeros(len(sites), dtype=np.int64)), {})
    want = [active_slots(s[1], False).sum() + change_point_count(s[1]) for s in sites]
    assert groups[COEFFICIENT_COUNT].tolist() == want
    for g, (site, shape, tc, _) in enumerate(sites):     # residual std error with df n − k − c (statsmodels)
        d = data[data["site"] == site].reset_index(drop=True)
        assert groups[RESIDUAL_STD_ERROR][g] == pytest.approx(math.sqrt(oracle_fit(shape, tc, d, False).scale),
                                                               rel=1e-9)


def test_fitted_results_store_shapes_from_change_points_when_groups_say_nothing(built):
    res, _ = built
    bare = dataclasses.replace(res, groups=res.groups.drop(columns=[SHAPE]))
    assert store_from_results(bare).shapes == tuple(s[1] for s in FITTED_SITES)
