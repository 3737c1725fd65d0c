"""Weighted least squares (--weights): engine, checks, store, predictions and reading back.

Oracles: statsmodels WLS (params, bse, conf_int, rsquared, fvalue, aic, bic, scale, get_prediction with
the new row's weight), statsmodels OLS and OLSInfluence on the whitened rows √w·y, √w·X (leverage,
studentized residuals, Cook's distance, Breusch–Godfrey's auxiliary regression), statsmodels
het_breuschpagan (Koenker) and linear_reset-style nested F computed with statsmodels fits, and the
weighted inverse-prediction formula written out with numpy. Data are seeded and invented.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.diagnostic import het_breuschpagan
from statsmodels.stats.outliers_influence import OLSInfluence

import sheetfit
import sheetfit.api
from sheetfit.errors import JobError
from sheetfit.model.engine import fit_groups
from sheetfit.prediction.savings import AVOIDED_STD_ERROR
from sheetfit.model.inference import inference
from sheetfit.read.tidy import REASON
from sheetfit.results.headers import COEFFICIENT, INPUT, STD_ERROR, USED, WEIGHT_USED, YES
from sheetfit.results.store_read import read_store
from sheetfit.terms import Term, WeightSpec, parse_weights

LEVELS = np.array([0.5, 1, 2, 5, 10, 20, 50, 100.0])


def calibration_frame(seed: int = 7, groups: int = 4, reps: int = 3) -> pd.DataFrame:
    """Invented calibration runs whose spread grows with the standard (the case for 1/x² weights)."""
    rng = np.random.default_rng(seed)
    rows = []
    for g in range(groups):
        for x in LEVELS:
            for _ in range(reps):
                y = 0.2 + (1.5 + 0.1 * g) * x + 0.02 * x**1.05 + rng.normal(0, 0.03 * x + 0.01)
                rows.append({"Unit": f"U{g}", "Std": x, "Signal": y, "Vol": rng.uniform(0.5, 2.0)})
    return pd.DataFrame(rows)


def wls(g: pd.DataFrame, w: np.ndarray, power: bool = False):
    X = np.column_stack([g["Std"], g["Std"] ** 2]) if power else g[["Std"]].to_numpy()
    X = sm.add_constant(X, has_constant="add")
    return X, sm.WLS(g["Signal"].to_numpy(), X, weights=w / w.mean()).fit()


@pytest.mark.parametrize("spec,power", [("1/Std^2", False), ("1/Std", True), ("Vol", False), ("1/Signal^2", False)])
def test_engine_matches_statsmodels_wls(spec, power):
    frame = calibration_frame()
    x = ["Std", "Std^2"] if power else ["Std"]
    res = sheetfit.fit_frame(frame, y="Signal", x=x, group="Unit", weights=spec)
    weight = parse_weights(spec, list(frame.columns))
    for unit, g in frame.groupby("Unit"):
        w = weight.values(g[weight.column].to_numpy())
        X, ref = wls(g, w, power)
        coef = res.coefficients[res.coefficients["Unit"] == unit]
        # statsmodels WLS: coefficients and std errors to 1e-9
        np.testing.assert_allclose(coef[COEFFICIENT].to_numpy(float), ref.params, rtol=1e-9)
        np.testing.assert_allclose(coef[STD_ERROR].to_numpy(float), ref.bse, rtol=1e-9)
        ci = ref.conf_int(0.05)
        np.testing.assert_allclose(coef["interval low"].to_numpy(float), ci[:, 0], rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(coef["interval high"].to_numpy(float), ci[:, 1], rtol=1e-9, atol=1e-12)
        row = res.groups[res.groups["Unit"] == unit].iloc[0]
        # statsmodels WLS: weighted R², F, AIC, BIC, residual std error √scale
        assert row["R²"] == pytest.approx(ref.rsquared, rel=1e-9)
        assert row["F"] == pytest.approx(ref.fvalue, rel=1e-9)
        assert row["AIC"] == pytest.approx(ref.aic, rel=1e-9)
        assert row["BIC"] == pytest.approx(ref.bic, rel=1e-9)
        assert row["residual std error"] == pytest.approx(np.sqrt(ref.scale), rel=1e-9)
        obs = res.observations[res.observations["Unit"] == unit]
        # residuals in the response's units; influence of the whitened OLS (statsmodels OLSInfluence)
        np.testing.assert_allclose(obs["residual"].to_numpy(float), ref.resid, rtol=1e-8, atol=1e-10)
        sw = np.sqrt(w / w.mean())
        infl = OLSInfluence(sm.OLS(sw * g["Signal"].to_numpy(), sw[:, None] * X).fit())
        np.testing.assert_allclose(obs["leverage"].to_numpy(float), infl.hat_matrix_diag, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(obs["studentized residual"].to_numpy(float), infl.resid_studentized_external,
                                   rtol=1e-8, atol=1e-10)
        np.testing.assert_allclose(obs["Cook's distance"].to_numpy(float), infl.cooks_distance[0],
                                   rtol=1e-8, atol=1e-12)
        np.testing.assert_allclose(obs[WEIGHT_USED].to_numpy(float), w / w.mean(), rtol=1e-14)


def test_checks_use_the_weighted_residuals():
    frame = calibration_frame(seed=11)
    res = sheetfit.fit_frame(frame, y="Signal", x=["Std"], group="Unit", weights="1/Std^2")
    checks = res.checks
    for unit, g in frame.groupby("Unit"):
        w = 1.0 / g["Std"].to_numpy() ** 2
        X, ref = wls(g, w)
        sw = np.sqrt(w / w.mean())
        e_w = sw * ref.resid
        mine = checks[checks["Unit"] == unit].set_index("check")
        # statsmodels het_breuschpagan (Koenker, robust=True): squared weighted residuals on [1, Std]
        lm, lm_p, _, _ = het_breuschpagan(e_w, X, robust=True)
        assert mine.loc["constant variance (Breusch–Pagan)", "statistic"] == pytest.approx(lm, rel=1e-8)
        # Breusch–Godfrey on the weighted model: n·uncentred R² of √w·e on [√w·X, lag 1] (statsmodels OLS)
        lag = np.r_[0.0, e_w[:-1]]
        aux = sm.OLS(e_w, np.column_stack([sw[:, None] * X, lag])).fit()
        bg = len(e_w) * (1 - aux.ssr / (e_w @ e_w))
        assert mine.loc["independent residuals (Breusch–Godfrey)", "statistic"] == pytest.approx(bg, rel=1e-7)
        # RESET: F of adding √w·ŷ² and √w·ŷ³ to the weighted model (statsmodels OLS nested fits)
        f = ref.fittedvalues / np.abs(ref.fittedvalues).max()
        full = sm.OLS(sw * g["Signal"].to_numpy(), np.column_stack([sw[:, None] * X, sw * f**2, sw * f**3])).fit()
        F = ((ref.ssr - full.ssr) / 2) / (full.ssr / full.df_resid)
        assert mine.loc["linear form (RESET)", "statistic"] == pytest.approx(F, rel=1e-7)
        # Jarque–Bera of the weighted residuals (scipy)
        assert mine.loc["normal residuals (Jarque–Bera)", "statistic"] == pytest.approx(
            stats.jarque_bera(e_w).statistic, rel=1e-8)
        # lack of fit: the WLS line against the WLS cell-means model (one mean per standard)
        cells = sm.WLS(g["Signal"].to_numpy(), pd.get_dummies(g["Std"]).to_numpy(float), weights=w / w.mean()).fit()
        m = g["Std"].nunique()
        F_lof = ((ref.ssr - cells.ssr) / (m - 2)) / (cells.ssr / (len(g) - m))
        assert mine.loc["lack of fit (replicates)", "statistic"] == pytest.approx(F_lof, rel=1e-8)


def test_vif_is_the_weighted_one():
    frame = calibration_frame(seed=3)
    res = sheetfit.fit_frame(frame, y="Signal", x=["Std", "Vol"], group="Unit", weights="1/Std")
    for unit, g in frame.groupby("Unit"):
        w = 1.0 / g["Std"].to_numpy()
        w = w / w.mean()
        X = sm.add_constant(g[["Std", "Vol"]].to_numpy())
        inv = np.linalg.inv(X.T @ (w[:, None] * X))
        xbar = (w[:, None] * X).sum(0) / w.sum()
        # weighted VIF: [(X'WX)⁻¹]_jj · Σ w (x_j − x̄_w)² (numpy)
        expected = np.diag(inv)[1:] * (w[:, None] * (X - xbar) ** 2).sum(0)[1:]
        coef = res.coefficients[res.coefficients["Unit"] == unit].set_index(INPUT)
        np.testing.assert_allclose(coef.loc[["Std", "Vol"], "VIF"].to_numpy(float), expected, rtol=1e-9)


def test_unusable_weights_are_reported_per_row():
    frame = calibration_frame(groups=2)
    frame.loc[[0, 5, 9], "Vol"] = [0.0, -1.0, np.nan]
    res = sheetfit.fit_frame(frame, y="Signal", x=["Std"], group="Unit", weights="Vol")
    obs = res.observations
    assert (obs[USED] == YES).sum() == len(frame) - 3
    assert "weight Vol is zero, negative or infinite" in obs.loc[0, REASON]
    assert "weight Vol is zero, negative or infinite" in obs.loc[5, REASON]
    assert "Vol" in obs.loc[9, REASON]


def test_weight_syntax():
    cols = ["Std", "Signal", "1/odd"]
    assert parse_weights("1/Std^2", cols) == WeightSpec("Std", 2)
    assert parse_weights(" 1 / Std ", cols) == WeightSpec("Std", 1)
    assert parse_weights("1/odd", cols) == WeightSpec("1/odd", 0)      # an exact column name wins
    with pytest.raises(Exception, match="Std|column"):
        parse_weights("1/Nope", cols)
    with pytest.raises(JobError, match="--change-point"):
        sheetfit.api.job_from("x.xlsx", y="Signal", x=["Std"], weights="Std", change_point="heating")


def test_equal_weights_give_the_ordinary_fit():
    frame = calibration_frame(groups=2).assign(Same=4.0)
    weighted = sheetfit.fit_frame(frame, y="Signal", x=["Std"], group="Unit", weights="Same")
    plain = sheetfit.fit_frame(frame, y="Signal", x=["Std"], group="Unit")
    # the same estimates bit for bit (a constant weight changes nothing once scaled to average 1)
    np.testing.assert_array_equal(weighted.coefficients[COEFFICIENT].to_numpy(float),
                                  plain.coefficients[COEFFICIENT].to_numpy(float))


def test_engine_weighted_and_unweighted_groups_in_one_call():
    rng = np.random.default_rng(5)
    G, n = 6, 15
    codes = np.repeat(np.arange(G), n)
    x = rng.uniform(1, 30, G * n)
    y = 1 + 2 * x + rng.normal(0, 0.05, G * n) * x
    w = np.where(codes % 2 == 0, 1 / x, 2.5)          # every other group has equal weights
    fit = fit_groups(y, {"x": x}, codes, G, [Term("x", "x")], True, weights=w)
    inf = inference(fit, 0.95)
    for g in range(G):
        s = codes == g
        ref = sm.WLS(y[s], sm.add_constant(x[s]), weights=w[s] / w[s].mean()).fit()   # statsmodels WLS
        np.testing.assert_allclose(fit.beta[g], ref.params, rtol=1e-10)
        np.testing.assert_allclose(fit.se[g], ref.bse, rtol=1e-10)
        assert inf.r2[g] == pytest.approx(ref.rsquared, rel=1e-10)


def test_store_predictions_and_reading_back(tmp_path):
    frame = calibration_frame(seed=21, groups=3)
    res = sheetfit.fit_frame(frame, y="Signal", x=["Std"], group="Unit", weights="1/Std^2", calibration=True)
    path = sheetfit.write_results(res, tmp_path / "fit.xlsx")
    store = read_store(path)
    assert store.weights == "1/Std^2"
    # sufficient statistics reproduce the coefficients (numpy solve of X'WX b = X'Wy)
    np.testing.assert_allclose(np.linalg.solve(store.xtx, store.xty[..., None])[..., 0], store.beta, rtol=1e-12)
    new = pd.DataFrame({"Unit": ["U0", "U1", "U2"], "Std": [3.0, 30.0, 75.0]})
    pred = sheetfit.predict(path, new)
    unknowns = pd.DataFrame({"Unit": ["U0", "U1", "U2"], "Signal": [4.0, 46.0, 120.0]})
    back = sheetfit.read_back(path, unknowns)
    for i, (unit, g) in enumerate(frame.groupby("Unit")):
        w = 1.0 / g["Std"].to_numpy() ** 2
        X, ref = wls(g, w)
        x0 = new["Std"][i]
        w0 = (1 / x0**2) / w.mean()
        # statsmodels WLS get_prediction with the new row's weight (scaled like the fit's)
        sf = ref.get_prediction(np.array([[1.0, x0]]), weights=np.array([w0])).summary_frame(alpha=0.05)
        assert pred["predicted value"][i] == pytest.approx(sf["mean"].iloc[0], rel=1e-10)
        assert pred["range for one new row, low"][i] == pytest.approx(sf["obs_ci_lower"].iloc[0], rel=1e-9)
        assert pred["range for one new row, high"][i] == pytest.approx(sf["obs_ci_upper"].iloc[0], rel=1e-9)
        # weighted inverse prediction written out: s_x0 = (s/|b1|)·√(1/w0 + 1/Σw + (y0 − ȳw)²/(b1²·Sxx,w))
        ww = w / w.mean()
        b0, b1 = ref.params
        y0 = unknowns["Signal"][i]
        xhat = (y0 - b0) / b1
        xw = (ww * g["Std"]).sum() / ww.sum()
        yw = (ww * g["Signal"]).sum() / ww.sum()
        sxx = (ww * (g["Std"] - xw) ** 2).sum()
        w0 = (1 / xhat**2) / w.mean()
        s_x0 = np.sqrt(ref.scale) / abs(b1) * np.sqrt(1 / w0 + 1 / ww.sum() + (y0 - yw) ** 2 / (b1**2 * sxx))
        assert back["read-back input value"][i] == pytest.approx(xhat, rel=1e-10)
        assert back["std error of read-back value"][i] == pytest.approx(s_x0, rel=1e-8)


def test_cli_weighted_run(tmp_path):
    from typer.testing import CliRunner

    from sheetfit.cli import app

    src = tmp_path / "runs.xlsx"
    calibration_frame(groups=2).to_excel(src, index=False)
    out = tmp_path / "fit.xlsx"
    r = CliRunner().invoke(app, ["fit", str(src), "--y", "Signal", "--x", "Std", "--group", "Unit",
                                 "--weights", "1/Std^2", "--out", str(out)])
    assert r.exit_code == 0, r.output
    about = pd.read_excel(out, sheet_name="about", header=None, engine="openpyxl")
    assert about[1].astype(str).str.contains("weighted least squares with weights 1/Std\\^2").any()
    bad = CliRunner().invoke(app, ["fit", str(src), "--y", "Signal", "--x", "Std", "--weights", "1/Nope"])
    assert bad.exit_code != 0 and "Nope" in bad.output and "Traceback" not in bad.output


def test_savings_of_a_weighted_baseline_use_each_rows_weight(tmp_path):
    rng = np.random.default_rng(3)
    base = pd.DataFrame({"Site": "a", "T": rng.uniform(0, 25, 36)})
    base["kWh"] = 200 + 8 * base["T"] + rng.normal(0, 1, 36) * base["T"]
    path = sheetfit.write_results(sheetfit.fit_frame(base, y="kWh", x=["T"], group="Site", weights="1/T"),
                                  tmp_path / "baseline.xlsx")
    new = pd.DataFrame({"Site": "a", "T": rng.uniform(1, 25, 12)})
    new["kWh"] = 0.9 * (200 + 8 * new["T"])
    _, groups = sheetfit.savings(path, new, "kWh")
    # Var(avoided total) = s²·(Σ 1/w0 + d'(X'WX)⁻¹d), w0 each row's weight over the baseline's mean weight,
    # with s² and (X'WX)⁻¹ from statsmodels WLS (weights w/mean(w))
    w = 1 / base["T"]
    ref = sm.WLS(base["kWh"], sm.add_constant(base["T"]), weights=w / w.mean()).fit()
    d = sm.add_constant(new["T"]).to_numpy().sum(axis=0)
    w0 = (1 / new["T"]) / w.mean()
    var = ref.scale * ((1 / w0).sum() + d @ ref.normalized_cov_params.to_numpy() @ d)
    assert groups[AVOIDED_STD_ERROR].iloc[0] == pytest.approx(np.sqrt(var), rel=1e-9)
