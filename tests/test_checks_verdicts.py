"""Verdicts: p-values adjusted across groups, against statsmodels' multipletests."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from sheetfit.checks.verdicts import adjust_pvalues
from tests.oracle import assert_close


@pytest.mark.parametrize("method,sm_name", [("bh", "fdr_bh"), ("holm", "holm")])
def test_adjustment_matches_multipletests(method, sm_name):
    rng = np.random.default_rng(1)
    p = np.concatenate([rng.uniform(size=60), rng.uniform(0, 0.01, size=15), [np.nan, np.nan]])
    ours = adjust_pvalues(p, method)
    ref = multipletests(p[:-2], method=sm_name)[1]                                  # statsmodels
    assert_close(ours[:-2], ref, 1e-12)
    assert np.isnan(ours[-2:]).all()
