"""Robust covariances (HC0–HC3, Newey–West) and robust inference against statsmodels."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import sheetfit
from sheetfit.checks import robust
from sheetfit.model.engine import fit_groups
from sheetfit.terms import parse_terms
from tests.oracle import assert_close, seeded_groups, statsmodels_fit
from tests.test_checks import RTOL


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
    assert_close(res.coefficients["interval low"], np.asarray(ref.conf_int(0.05))[:, 0], RTOL)
    assert (res.coefficients["std error used"] == "HC3").all()
