"""Fit-quality checks (model F-test, R² threshold, rows per coefficient) against statsmodels."""

from __future__ import annotations

import pytest

from tests.oracle import assert_close
from tests.test_checks import RTOL, check_value, seeded_checks


@pytest.mark.parametrize("k", [1, 2, 3])
@pytest.mark.parametrize("intercept", [True, False])
def test_fit_quality_matches_statsmodels(k, intercept):
    res, groups, _ = seeded_checks(k, intercept)
    for g, sub, ref in groups:
        assert_close(check_value(res, g, "model F-test", "statistic"), ref.fvalue, RTOL)       # statsmodels
        assert_close(check_value(res, g, "model F-test", "p-value"), ref.f_pvalue, RTOL)       # statsmodels
        assert_close(check_value(res, g, "R² below threshold", "statistic"), ref.rsquared, RTOL)  # statsmodels
        p = len(ref.params)
        assert check_value(res, g, "enough data", "statistic") == pytest.approx(len(sub) / p, rel=1e-15)  # n / p
