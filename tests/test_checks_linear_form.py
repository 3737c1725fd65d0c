"""Linear-form check (RESET, F form) against statsmodels."""

from __future__ import annotations

import pytest
from statsmodels.stats.diagnostic import linear_reset

from tests.oracle import assert_close
from tests.test_checks import check_value, seeded_checks


@pytest.mark.parametrize("k", [1, 2, 3])
@pytest.mark.parametrize("intercept", [True, False])
def test_reset_matches_statsmodels(k, intercept):
    res, groups, _ = seeded_checks(k, intercept)
    for g, _sub, ref in groups:
        rr = linear_reset(ref, power=3, use_f=True)                                # statsmodels, F form
        assert_close(check_value(res, g, "linear form (RESET)", "statistic"), rr.fvalue, 1e-7)
        assert_close(check_value(res, g, "linear form (RESET)", "p-value"), rr.pvalue, 1e-7)
