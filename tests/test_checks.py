"""Every check statistic and p-value against statsmodels / scipy reference implementations."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.diagnostic import (
    acorr_breusch_godfrey,
    het_breuschpagan,
    het_white,
    linear_reset,
)
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.outliers_influence import variance_inflation_factor
from statsmodels.stats.stattools import durbin_watson, jarque_bera

import sheetfit
from sheetfit.checks import robust
from sheetfit.checks.verdicts import adjust_pvalues
from sheetfit.model.engine import fit_groups
from sheetfit.terms import parse_terms
from tests.oracle import assert_close, seeded_groups, statsmodels_fit

RTOL = 1e-8


def check_value(res, grp, name, column):
    c = res.checks
    return c[(c["grp"] == grp) & (c["check"] == name)][column].iloc[0]


@pytest.mark.parametrize("k", [1, 2, 3])
@pytest.mark.parametrize("intercept", [True, False])
def test_assumption_tests_match_statsmodels(k, intercept):
    frame = seeded_groups(seed=20 + k, k=k, sizes=(15, 33, 50, 24))
    xs = [f"x{i + 1}" for i in range(k)]
    res = sheetfit.fit_frame(frame, y="y", x=xs, group="grp", intercept=intercept, adjust="none")
    for g, sub in frame.groupby("grp", sort=False):
        ref = statsmodels_fit(sub, "y", xs, intercept)
        e = ref.resid
        exog_c = sm.add_constant(sub[xs].to_numpy(float), has_constant="add")   # tests need a constant
        jb, jbp, _, _ = jarque_bera(e)                                            # statsmodels
        assert_close(check_value(res, g, "normal residuals (Jarque–Bera)", "statistic"), jb, RTOL)
        assert_close(check_value(res, g, "normal residuals (Jarque–Bera)", "p-value"), jbp, RTOL)
        sw = stats.shapiro(e)                                                     # scipy
        assert_close(check_value(res, g, "normal residuals (Shapiro–Wilk)", "statistic"), sw.statistic, 1e-6)
        assert_close(check_value(res, g, "normal residuals (Shapiro–Wilk)", "p-value"), sw.pvalue, 1e-5)
        lm, lmp, _, _ = het_breuschpagan(e, exog_c, robust=True)                  # statsmodels (Koenker)
        assert_close(check_value(res, g, "constant variance (Breusch–Pagan)", "statistic"), lm, RTOL)
        assert_close(check_value(res, g, "constant variance (Breusch–Pagan)", "p-value"), lmp, RTOL)
        wl, wp, _, _ = het_white(e, exog_c)                                        # statsmodels
        assert_close(check_value(res, g, "constant variance (White)", "statistic"), wl, RTOL)
        assert_close(check_value(res, g, "constant variance (White)", "p-value"), wp, RTOL)
        assert_close(check_value(res, g, "independent residuals (Durbin–Watson)", "statistic"),
                     durbin_watson(e), RTOL)                                       # statsmodels
        bg = acorr_breusch_godfrey(ref, nlags=1, result_object=True)               # statsmodels
        assert_close(check_value(res, g, "independent residuals (Breusch–Godfrey)", "statistic"), bg.lm, RTOL)
        assert_close(check_value(res, g, "independent residuals (Breusch–Godfrey)", "p-value"), bg.lmpval, RTOL)
        rr = linear_reset(ref, power=3, use_f=True)                                # statsmodels, F form
        assert_close(check_value(res, g, "linear form (RESET)", "statistic"), rr.fvalue, 1e-7)
        assert_close(check_value(res, g, "linear form (RESET)", "p-value"), rr.pvalue, 1e-7)
        ot = ref.outlier_test(method="bonf")                                        # statsmodels
        assert_close(check_value(res, g, "outlier (Bonferroni)", "p-value"), np.asarray(ot)[:, 2].min(), RTOL)
        assert_close(check_value(res, g, "influence (Cook's distance)", "threshold"),
                     stats.f.ppf(0.5, ref.df_model + intercept, ref.df_resid), RTOL)  # Cook (1977) cut-off
        if k >= 2:
            exog = ref.model.exog
            off = 1 if intercept else 0
            vifs = [variance_inflation_factor(exog, j, standardize=False)   # statsmodels, design as fitted
                    for j in range(off, exog.shape[1])]
            coef = res.coefficients[res.coefficients["grp"] == g]
            assert_close(coef["VIF"].to_numpy()[off:], vifs, RTOL)
            X = ref.model.exog
            assert_close(check_value(res, g, "collinearity (condition number)", "statistic"),
                         np.linalg.cond(X / np.linalg.norm(X, axis=0)), 1e-7)       # numpy


@pytest.mark.parametrize("lags", [1, 3])
def test_breusch_godfrey_lags(lags):
    frame = seeded_groups(seed=5, k=2, sizes=(40, 55))
    res = sheetfit.fit_frame(frame, y="y", x=["x1", "x2"], group="grp", bg_lags=lags, adjust="none")
    for g, sub in frame.groupby("grp", sort=False):
        bg = acorr_breusch_godfrey(statsmodels_fit(sub, "y", ["x1", "x2"], True), nlags=lags,
                                   result_object=True)                              # statsmodels
        assert_close(check_value(res, g, "independent residuals (Breusch–Godfrey)", "statistic"), bg.lm, RTOL)


def test_white_on_a_polynomial_counts_each_product_once():
    rng = np.random.default_rng(4)
    x = rng.uniform(0, 10, 40)
    frame = pd.DataFrame({"x": x, "y": 1 + x - 0.1 * x**2 + rng.normal(size=40) * (1 + x / 5)})
    res = sheetfit.fit_frame(frame, y="y", x=["x", "x^2"], adjust="none")
    ref = statsmodels_fit(pd.DataFrame({"y": frame["y"], "a": x, "b": x**2}), "y", ["a", "b"], True)
    wl, wp, _, _ = het_white(ref.resid, ref.model.exog)                             # statsmodels (rank-aware df)
    assert_close(res.checks.loc[res.checks["check"] == "constant variance (White)", "statistic"].iloc[0], wl, 1e-7)
    assert_close(res.checks.loc[res.checks["check"] == "constant variance (White)", "p-value"].iloc[0], wp, 1e-7)


@pytest.mark.parametrize("intercept", [True, False])
def test_robust_covariances_match_statsmodels(intercept):
    frame = seeded_groups(seed=9, k=2, sizes=(25, 40, 70))
    terms = parse_terms(["x1", "x2"], list(frame.columns))
    codes = frame["grp"].str[1:].astype(int).to_numpy()
    fit = fit_groups(frame["y"].to_numpy(), {c: frame[c].to_numpy() for c in ("x1", "x2")}, codes, 3,
                     terms, intercept)
    hac, lag = robust.hac_cov(fit, None)
    for kind in ("hc0", "hc1", "hc2", "hc3"):
        cov = robust.hc_cov(fit, kind)
        for g, sub in frame.groupby("grp", sort=True):
            ref = statsmodels_fit(sub, "y", ["x1", "x2"], intercept)
            gi = int(g[1:])
            assert_close(cov[gi], ref.get_robustcov_results(kind.upper()).cov_params(), 1e-8)  # statsmodels
    for g, sub in frame.groupby("grp", sort=True):
        gi = int(g[1:])
        ref = statsmodels_fit(sub, "y", ["x1", "x2"], intercept)
        want = ref.get_robustcov_results("HAC", maxlags=int(lag[gi])).cov_params()           # statsmodels
        assert_close(hac[gi], want, 1e-8)
        assert lag[gi] == int(np.floor(4 * (len(sub) / 100) ** (2 / 9)))                     # common practice


def test_robust_covariances_for_chosen_groups_only():
    # Asking for some groups gives exactly the full computation's values there and NaN elsewhere.
    frame = seeded_groups(seed=11, k=2, sizes=(25, 40, 70, 33, 26))
    terms = parse_terms(["x1", "x2"], list(frame.columns))
    codes = frame["grp"].str[1:].astype(int).to_numpy()
    fit = fit_groups(frame["y"].to_numpy(), {c: frame[c].to_numpy() for c in ("x1", "x2")}, codes, 5,
                     terms, True)
    only = np.array([True, False, True, False, True])
    full_hac, full_lag = robust.hac_cov(fit, None)
    hac, lag = robust.hac_cov(fit, None, only=only)
    np.testing.assert_array_equal(hac[only], full_hac[only])
    np.testing.assert_array_equal(lag[only], full_lag[only])
    assert np.isnan(hac[~only]).all() and (lag[~only] == -1).all()
    hc = robust.hc_cov(fit, "hc1", only=only)
    np.testing.assert_array_equal(hc[only], robust.hc_cov(fit, "hc1")[only])
    assert np.isnan(hc[~only]).all()
    assert np.isnan(robust.hc_cov(fit, "hc3", only=np.zeros(5, bool))).all()


@pytest.mark.parametrize("method,sm_name", [("bh", "fdr_bh"), ("holm", "holm")])
def test_adjustment_matches_multipletests(method, sm_name):
    rng = np.random.default_rng(1)
    p = np.concatenate([rng.uniform(size=60), rng.uniform(0, 0.01, size=15), [np.nan, np.nan]])
    ours = adjust_pvalues(p, method)
    ref = multipletests(p[:-2], method=sm_name)[1]                                  # statsmodels
    assert_close(ours[:-2], ref, 1e-12)
    assert np.isnan(ours[-2:]).all()


def test_durbin_watson_p_value_against_simulation():
    # Reference: the null distribution of DW simulated with numpy for the same design
    # (independent normal errors); the beta approximation should agree within 0.01.
    rng = np.random.default_rng(11)
    n = 30
    x = np.linspace(0, 1, n) + rng.normal(scale=0.1, size=n)
    y = 1 + 2 * x + rng.normal(size=n)
    res = sheetfit.fit_frame(pd.DataFrame({"x": x, "y": y}), y="y", x=["x"], adjust="none")
    row = res.checks[res.checks["check"] == "independent residuals (Durbin–Watson)"].iloc[0]
    X = sm.add_constant(x)
    M = np.eye(n) - X @ np.linalg.solve(X.T @ X, X.T)
    e = M @ rng.normal(size=(n, 100_000))
    sims = (np.diff(e, axis=0) ** 2).sum(axis=0) / (e**2).sum(axis=0)
    low = (sims <= row["statistic"]).mean()
    assert row["p-value"] == pytest.approx(2 * min(low, 1 - low), abs=0.01)


def test_checks_that_cannot_run_are_na_with_a_note():
    rng = np.random.default_rng(2)
    x = np.repeat([0.0, 1.0], 10)                     # two distinct values: RESET cannot be computed
    frame = pd.DataFrame({"x": x, "y": 1 + x + rng.normal(size=20)})
    res = sheetfit.fit_frame(frame, y="y", x=["x"])
    row = res.checks[res.checks["check"] == "linear form (RESET)"].iloc[0]
    assert row["verdict"] == "n/a" and "distinct" in row["note"]
    assert (res.checks["verdict"].isin(["pass", "fail", "n/a"])).all()
    assert (res.checks.loc[res.checks["verdict"] == "n/a", "note"].str.len() > 0).all()


def test_robust_inference_uses_robust_wald_f_and_intervals():
    rng = np.random.default_rng(31)
    n = 60
    x = rng.uniform(0, 10, n)
    frame = pd.DataFrame({"x": x, "y": 1 + 0.3 * x + rng.normal(size=n) * 0.05 * x**2})
    res = sheetfit.fit_frame(frame, y="y", x=["x"], inference="robust", adjust="none")
    assert (res.checks.loc[res.checks["check"].str.startswith("constant variance"), "verdict"] == "fail").any()
    ref = sm.OLS(frame["y"], sm.add_constant(frame["x"])).fit(cov_type="HC3", use_t=True)   # statsmodels
    f_row = res.checks[res.checks["check"] == "model F-test"].iloc[0]
    assert_close(f_row["statistic"], np.squeeze(ref.fvalue), RTOL)
    assert_close(f_row["p-value"], np.squeeze(ref.f_pvalue), 1e-7)
    assert_close(res.coefficients["CI low"], np.asarray(ref.conf_int(0.05))[:, 0], RTOL)
    assert (res.coefficients["std error used"] == "HC3").all()
