"""The checks as a whole (run_checks): which checks a run applies, in what order, and n/a with a note.

Each family of checks is tested against statsmodels / scipy in its own file (test_checks_<module>.py);
the helpers they share are here.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

import sheetfit
from sheetfit import checks
from tests.oracle import seeded_groups, statsmodels_fit

RTOL = 1e-8


def check_value(res, grp, name, column):
    """One cell of the checks table: the row of this group and check."""
    c = res.checks
    return c[(c["grp"] == grp) & (c["check"] == name)][column].iloc[0]


def seeded_checks(k: int, intercept: bool):
    """Our results for seeded groups (no p-value adjustment), and per group (key, rows, statsmodels OLS fit)."""
    frame = seeded_groups(seed=20 + k, k=k, sizes=(15, 33, 50, 24))
    xs = [f"x{i + 1}" for i in range(k)]
    res = sheetfit.fit_frame(frame, y="y", x=xs, group="grp", intercept=intercept, adjust="none")
    groups = [(g, sub, statsmodels_fit(sub, "y", xs, intercept)) for g, sub in frame.groupby("grp", sort=False)]
    return res, groups, xs


def test_every_group_gets_every_check_in_the_sheet_order():
    # The order is the contract with the checks sheet (and the demo workbook's recorded cells).
    frame = seeded_groups(seed=3, k=2, sizes=(20, 30))
    res = sheetfit.fit_frame(frame, y="y", x=["x1", "x2"], group="grp")
    want = ["model F-test", "R² below threshold", "enough data", "normal residuals (Jarque–Bera)",
            "normal residuals (Shapiro–Wilk)", "constant variance (Breusch–Pagan)", "constant variance (White)",
            "independent residuals (Durbin–Watson)", "independent residuals (Breusch–Godfrey)",
            "linear form (RESET)", "lack of fit (replicates)", "outlier (Bonferroni)", "influence (Cook's distance)", "single-row leverage",
            "collinearity (VIF)", "collinearity (condition number)"]
    for _, sub in res.checks.groupby("grp", sort=False):
        assert list(sub["check"]) == want


def test_check_families_name_the_checks_that_pick_robust_errors():
    assert checks.VARIANCE_CHECKS == ("breusch_pagan", "white")
    assert checks.INDEPENDENCE_CHECKS == ("durbin_watson", "breusch_godfrey")


def test_condition_number_column_is_the_condition_check():
    # statistic_of picks the check by key: the groups sheet shows the very same numbers.
    frame = seeded_groups(seed=4, k=2, sizes=(20, 30))
    res = sheetfit.fit_frame(frame, y="y", x=["x1", "x2"], group="grp")
    cond = res.checks[res.checks["check"] == "collinearity (condition number)"]["statistic"].to_numpy()
    np.testing.assert_array_equal(res.groups["condition number"].to_numpy(), cond)


def test_checks_that_cannot_run_are_na_with_a_note():
    rng = np.random.default_rng(2)
    x = np.repeat([0.0, 1.0], 10)                     # two distinct values: RESET cannot be computed
    frame = pd.DataFrame({"x": x, "y": 1 + x + rng.normal(size=20)})
    res = sheetfit.fit_frame(frame, y="y", x=["x"])
    row = res.checks[res.checks["check"] == "linear form (RESET)"].iloc[0]
    assert row["verdict"] == "n/a" and "distinct" in row["note"]
    assert (res.checks["verdict"].isin(["pass", "fail", "n/a"])).all()
    assert (res.checks.loc[res.checks["verdict"] == "n/a", "note"].str.len() > 0).all()
