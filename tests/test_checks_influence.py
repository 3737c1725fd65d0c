"""Influence: the group-level checks (Bonferroni outlier test, Cook's distance cut-off) and the row flags,
against statsmodels, scipy and Cook (1977)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.stats.outliers_influence import OLSInfluence

import sheetfit
from tests.oracle import assert_close, seeded_groups, statsmodels_fit
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


# --- row highlights: the words in `row flags`, by hand from statsmodels' influence measures -------------

LOOK_HERE = ("leverage 1", "outlying", "moves the fit")


def expected_flags(ref, cutoff: float = 3.0, leverage_factor: float = 2.0, cooks_factor: float = 4.0) -> list[str]:
    """Row flags of one group's rows by hand: statsmodels OLSInfluence for leverage, externally studentized
    residuals and Cook's distance; scipy's F median as the cut for "moves the fit" (Cook 1977); the
    high-leverage and influential cut-offs are common practice."""
    infl = OLSInfluence(ref)                                                    # statsmodels
    n, p = int(ref.nobs), int(ref.df_model + ref.k_constant)
    cut = stats.f.ppf(0.5, p, n - p)                                            # scipy
    with np.errstate(invalid="ignore"):
        h, t, d = infl.hat_matrix_diag, infl.resid_studentized_external, infl.cooks_distance[0]
    out = []
    for hi, ti, di in zip(h, t, d):
        words = [w for w, on in (("leverage 1", hi >= 1 - 1e-10), ("outlying", abs(ti) > cutoff),
                                 ("moves the fit", di > cut), ("high leverage", hi > leverage_factor * p / n),
                                 ("influential", di > cooks_factor / n)) if on]
        out.append("; ".join(words))
    return out


def planted_groups(k: int) -> pd.DataFrame:
    """Seeded groups with a wild response in g0 and a far input pulled off the line in g2."""
    frame = seeded_groups(seed=40 + k, k=k, sizes=(15, 33, 50, 24))
    g0 = frame.index[frame["grp"] == "g0"]
    frame.loc[g0[5], "y"] += 12.0                       # g0's noise has sd 1: far off the line
    g2 = frame.index[frame["grp"] == "g2"]
    frame.loc[g2[-1], "x1"] += 40.0
    frame.loc[g2[-1], "y"] -= 60.0                      # g2's noise has sd 3
    return frame


@pytest.mark.parametrize("k", [1, 2])
@pytest.mark.parametrize("intercept", [True, False])
def test_row_flags_match_a_hand_computation(k, intercept):
    frame = planted_groups(k)
    xs = [f"x{i + 1}" for i in range(k)]
    res = sheetfit.fit_frame(frame, y="y", x=xs, group="grp", intercept=intercept)
    obs = res.observations
    seen = set()
    for g, sub in frame.groupby("grp", sort=False):
        want = expected_flags(statsmodels_fit(sub, "y", xs, intercept))
        got = obs.loc[obs["grp"] == g, "row flags"].tolist()
        assert got == want, g
        seen |= {w for f in want for w in f.split("; ") if w}
        row = res.groups[res.groups["grp"] == g].iloc[0]
        for column, word in (("high-leverage rows", "high leverage"), ("outlying rows", "outlying"),
                             ("influential rows", "influential")):
            assert row[column] == sum(word in f.split("; ") for f in want), (g, column)
    assert {"outlying", "moves the fit", "high leverage", "influential"} <= seen    # the planted rows show


def test_moves_the_fit_marks_every_row_behind_a_failed_influence_check():
    frame = planted_groups(2)
    res = sheetfit.fit_frame(frame, y="y", x=["x1", "x2"], group="grp")
    checks = res.checks[res.checks["check"] == "influence (Cook's distance)"].set_index("grp")
    obs = res.observations
    for g in checks.index:
        rows = obs[obs["grp"] == g]
        moves = rows["row flags"].str.split("; ").map(lambda w: "moves the fit" in w)
        # the group check compares the largest Cook's distance with the same cut (Cook 1977, scipy above)
        assert moves.any() == (checks.loc[g, "verdict"] == "fail"), g
        assert (moves == (rows["Cook's distance"] > checks.loc[g, "threshold"])).all(), g
    assert (checks["verdict"] == "fail").any()


@pytest.mark.filterwarnings("ignore::statsmodels.tools.sm_exceptions.SingularMatrixWarning")  # its leave-one-out
def test_a_row_with_leverage_one_is_flagged_for_it():
    rng = np.random.default_rng(3)
    n = 25
    d = np.zeros(n)
    d[7] = 1.0                                            # an input non-zero in one row only: leverage 1
    x = rng.uniform(0, 5, n)
    frame = pd.DataFrame({"x": x, "d": d, "y": 1 + x + 3 * d + rng.normal(size=n)})
    res = sheetfit.fit_frame(frame, y="y", x=["x", "d"])
    ref = statsmodels_fit(frame, "y", ["x", "d"], True)
    assert ref.get_influence().hat_matrix_diag[7] == pytest.approx(1.0, abs=1e-10)   # statsmodels
    got = res.observations["row flags"].tolist()
    assert got[7].split("; ")[0] == "leverage 1"
    assert [f for i, f in enumerate(got) if i != 7] == [f for i, f in enumerate(expected_flags(ref)) if i != 7]


def test_a_failed_outlier_test_always_points_at_an_outlying_row_under_the_defaults():
    # Bonferroni p = n · 2·P(T > |t|) with n − p − 1 degrees of freedom (scipy). For it to fall below the
    # default alpha 0.05 (adjusting across groups only raises it), |t| must exceed 3, the default cut-off
    # of "outlying", for every group size: the smallest such |t| over n = 3 … 10⁶ (p = 1, the most degrees
    # of freedom) is about 3.48.
    n = np.unique(np.geomspace(3, 1e6, 4000).astype(int))
    smallest = stats.t.isf(0.05 / (2 * n), n - 2)
    assert smallest.min() > 3.0
