"""Constant-variance checks (Breusch–Pagan, White) against statsmodels."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.stats.diagnostic import het_breuschpagan, het_white

import sheetfit
from tests.oracle import assert_close, statsmodels_fit
from tests.test_checks import RTOL, check_value, seeded_checks


@pytest.mark.parametrize("k", [1, 2, 3])
@pytest.mark.parametrize("intercept", [True, False])
def test_variance_tests_match_statsmodels(k, intercept):
    res, groups, xs = seeded_checks(k, intercept)
    for g, sub, ref in groups:
        e = ref.resid
        exog_c = sm.add_constant(sub[xs].to_numpy(float), has_constant="add")   # tests need a constant
        lm, lmp, _, _ = het_breuschpagan(e, exog_c, robust=True)                  # statsmodels (Koenker)
        assert_close(check_value(res, g, "constant variance (Breusch–Pagan)", "statistic"), lm, RTOL)
        assert_close(check_value(res, g, "constant variance (Breusch–Pagan)", "p-value"), lmp, RTOL)
        wl, wp, _, _ = het_white(e, exog_c)                                        # statsmodels
        assert_close(check_value(res, g, "constant variance (White)", "statistic"), wl, RTOL)
        assert_close(check_value(res, g, "constant variance (White)", "p-value"), wp, RTOL)


def test_white_on_a_polynomial_counts_each_product_once():
    rng = np.random.default_rng(4)
    x = rng.uniform(0, 10, 40)
    frame = pd.DataFrame({"x": x, "y": 1 + x - 0.1 * x**2 + rng.normal(size=40) * (1 + x / 5)})
    res = sheetfit.fit_frame(frame, y="y", x=["x", "x^2"], adjust="none")
    ref = statsmodels_fit(pd.DataFrame({"y": frame["y"], "a": x, "b": x**2}), "y", ["a", "b"], True)
    wl, wp, _, _ = het_white(ref.resid, ref.model.exog)                             # statsmodels (rank-aware df)
    assert_close(res.checks.loc[res.checks["check"] == "constant variance (White)", "statistic"].iloc[0], wl, 1e-7)
    assert_close(res.checks.loc[res.checks["check"] == "constant variance (White)", "p-value"].iloc[0], wp, 1e-7)
