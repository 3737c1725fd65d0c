"""Normality checks (Jarque–Bera, Shapiro–Wilk) against statsmodels and scipy."""

from __future__ import annotations

import pytest
from scipy import stats
from statsmodels.stats.stattools import jarque_bera

from tests.oracle import assert_close
from tests.test_checks import RTOL, check_value, seeded_checks


@pytest.mark.parametrize("k", [1, 2, 3])
@pytest.mark.parametrize("intercept", [True, False])
def test_normality_tests_match_statsmodels_and_scipy(k, intercept):
    res, groups, _ = seeded_checks(k, intercept)
    for g, _sub, ref in groups:
        e = ref.resid
        jb, jbp, _, _ = jarque_bera(e)                                            # statsmodels
        assert_close(check_value(res, g, "normal residuals (Jarque–Bera)", "statistic"), jb, RTOL)
        assert_close(check_value(res, g, "normal residuals (Jarque–Bera)", "p-value"), jbp, RTOL)
        sw = stats.shapiro(e)                                                     # scipy
        assert_close(check_value(res, g, "normal residuals (Shapiro–Wilk)", "statistic"), sw.statistic, 1e-6)
        assert_close(check_value(res, g, "normal residuals (Shapiro–Wilk)", "p-value"), sw.pvalue, 1e-5)
