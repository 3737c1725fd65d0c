"""Result tables built from the engine's arrays."""

from __future__ import annotations

import numpy as np
import pandas as pd
from statsmodels.graphics.gofplots import ProbPlot

import sheetfit
from tests.oracle import assert_close, seeded_groups, statsmodels_fit


def test_quantile_table_matches_statsmodels_probability_plot():
    # Blom positions (i − 3/8)/(n + 1/4) are statsmodels' ProbPlot with a = 3/8 (statsmodels);
    # groups of unequal size, sorted within each group, in group order.
    frame = seeded_groups(seed=5, k=2, sizes=(12, 30, 47, 9, 60, 31))
    res = sheetfit.fit_frame(frame, y="y", x=["x1", "x2"], group="grp")
    q = res.quantiles
    assert list(q["grp"].drop_duplicates()) == [f"g{i}" for i in range(6)]
    for g, sub in frame.groupby("grp", sort=True):
        ref = statsmodels_fit(sub, "y", ["x1", "x2"], True)
        internal = ref.get_influence().resid_studentized_internal                     # statsmodels
        plot = ProbPlot(internal, a=0.375)                                              # statsmodels
        mine = q[q["grp"] == g]
        assert_close(mine["standardized residual"], plot.sample_quantiles, 1e-9)
        assert_close(mine["normal quantile"], plot.theoretical_quantiles, 1e-12)


def test_quantile_table_leaves_out_unfitted_groups_and_rows_with_leverage_one():
    rng = np.random.default_rng(3)
    x = np.arange(12.0)
    only_last = (x == 11).astype(float)      # an input set in one row only: that row has leverage 1
    frame = pd.DataFrame({"grp": ["a"] * 12 + ["b"] * 3, "x": np.r_[x, 1.0, 2.0, 3.0],
                          "d": np.r_[only_last, 0.0, 1.0, 0.0],
                          "y": np.r_[2 + x + rng.normal(size=12), 1.0, 2.0, 4.0]})
    res = sheetfit.fit_frame(frame, y="y", x=["x", "d"], group="grp")
    obs = res.observations
    assert obs.loc[11, "leverage"] > 1 - 1e-9
    q = res.quantiles
    assert set(q["grp"]) == {"a"}                    # group b (3 rows, 3 coefficients) is not fitted
    assert len(q) == 11
    assert np.all(np.diff(q["standardized residual"].to_numpy()) >= 0)
    ref = statsmodels_fit(frame.iloc[:12], "y", ["x", "d"], True)
    with np.errstate(invalid="ignore", divide="ignore"):
        internal = ref.get_influence().resid_studentized_internal                     # statsmodels
    assert_close(q["standardized residual"], np.sort(internal[:11]), 1e-9)
