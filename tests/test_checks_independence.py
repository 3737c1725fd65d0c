"""Independence checks (Durbin–Watson, Breusch–Godfrey) against statsmodels and a numpy simulation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.stats.diagnostic import acorr_breusch_godfrey
from statsmodels.stats.stattools import durbin_watson

import sheetfit
from tests.oracle import assert_close, seeded_groups, statsmodels_fit
from tests.test_checks import RTOL, check_value, seeded_checks


@pytest.mark.parametrize("k", [1, 2, 3])
@pytest.mark.parametrize("intercept", [True, False])
def test_independence_tests_match_statsmodels(k, intercept):
    res, groups, _ = seeded_checks(k, intercept)
    for g, _sub, ref in groups:
        assert_close(check_value(res, g, "independent residuals (Durbin–Watson)", "statistic"),
                     durbin_watson(ref.resid), RTOL)                               # statsmodels
        bg = acorr_breusch_godfrey(ref, nlags=1, result_object=True)               # statsmodels
        assert_close(check_value(res, g, "independent residuals (Breusch–Godfrey)", "statistic"), bg.lm, RTOL)
        assert_close(check_value(res, g, "independent residuals (Breusch–Godfrey)", "p-value"), bg.lmpval, RTOL)


@pytest.mark.parametrize("lags", [1, 3])
def test_breusch_godfrey_lags(lags):
    frame = seeded_groups(seed=5, k=2, sizes=(40, 55))
    res = sheetfit.fit_frame(frame, y="y", x=["x1", "x2"], group="grp", bg_lags=lags, adjust="none")
    for g, sub in frame.groupby("grp", sort=False):
        bg = acorr_breusch_godfrey(statsmodels_fit(sub, "y", ["x1", "x2"], True), nlags=lags,
                                   result_object=True)                              # statsmodels
        assert_close(check_value(res, g, "independent residuals (Breusch–Godfrey)", "statistic"), bg.lm, RTOL)


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
