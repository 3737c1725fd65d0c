"""Collinearity: VIF per coefficient and the condition number of the scaled design, against statsmodels and numpy."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.outliers_influence import variance_inflation_factor

from tests.oracle import assert_close
from tests.test_checks import RTOL, check_value, seeded_checks


@pytest.mark.parametrize("k", [2, 3])
@pytest.mark.parametrize("intercept", [True, False])
def test_vif_and_condition_number_match_references(k, intercept):
    res, groups, _ = seeded_checks(k, intercept)
    for g, _sub, ref in groups:
        exog = ref.model.exog
        off = 1 if intercept else 0
        vifs = [variance_inflation_factor(exog, j, standardize=False)   # statsmodels, design as fitted
                for j in range(off, exog.shape[1])]
        coef = res.coefficients[res.coefficients["grp"] == g]
        assert_close(coef["VIF"].to_numpy()[off:], vifs, RTOL)
        X = ref.model.exog
        assert_close(check_value(res, g, "collinearity (condition number)", "statistic"),
                     np.linalg.cond(X / np.linalg.norm(X, axis=0)), 1e-7)       # numpy
