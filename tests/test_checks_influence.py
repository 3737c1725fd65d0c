"""Group-level influence checks (Bonferroni outlier test, Cook's distance cut-off) against statsmodels and Cook (1977)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from tests.oracle import assert_close
from tests.test_checks import RTOL, check_value, seeded_checks


@pytest.mark.parametrize("k", [1, 2, 3])
@pytest.mark.parametrize("intercept", [True, False])
def test_influence_checks_match_statsmodels(k, intercept):
    res, groups, _ = seeded_checks(k, intercept)
    for g, _sub, ref in groups:
        ot = ref.outlier_test(method="bonf")                                        # statsmodels
        assert_close(check_value(res, g, "outlier (Bonferroni)", "p-value"), np.asarray(ot)[:, 2].min(), RTOL)
        assert_close(check_value(res, g, "influence (Cook's distance)", "threshold"),
                     stats.f.ppf(0.5, ref.df_model + intercept, ref.df_resid), RTOL)  # Cook (1977) cut-off
