"""Energy-baseline criteria (checks/baseline.py) and the change-point columns of results.

Oracles: statsmodels OLS (residuals, R², scale) and NMBE / CV(RMSE) computed here by hand from their
measurement-and-verification definitions, CV(RMSE) = 100·√(RSS/(n − p))/ȳ and
NMBE = 100·Σ(y − ŷ)/((n − p)·ȳ); numpy for the residuals' lag-1 autocorrelation. Data are seeded.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import sheetfit
from sheetfit.results.change_points import residual_lag1
from sheetfit.terms import Term, design_matrix, with_change_point_terms

BASELINE_CHECKS = ("baseline: CV(RMSE) within limit", "baseline: NMBE within limit", "baseline: R² at least limit")


def _frame(seed: int = 11) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    parts = []
    for site, spread in (("tight", 5.0), ("loose", 120.0)):
        x = rng.uniform(5, 40, 30)
        parts.append(pd.DataFrame({"site": site, "x": x, "y": 300 + 8 * x + rng.normal(0, spread, 30)}))
    return pd.concat(parts, ignore_index=True)


def _check(res, site: str, name: str) -> pd.Series:
    c = res.checks
    return c[(c["site"] == site) & (c["check"] == name)].iloc[0]


def test_baseline_checks_only_when_asked():
    df = _frame()
    plain = sheetfit.fit_frame(df, y="y", x="x", group="site")
    assert not plain.checks["check"].isin(BASELINE_CHECKS).any() and "NMBE %" not in plain.groups
    asked = sheetfit.fit_frame(df, y="y", x="x", group="site", baseline_checks=True)
    assert asked.checks["check"].isin(BASELINE_CHECKS).sum() == 2 * 3


@pytest.mark.parametrize("intercept", [True, False])
def test_cv_rmse_nmbe_and_r2_against_hand_computation(intercept):
    df = _frame()
    res = sheetfit.fit_frame(df, y="y", x="x", group="site", baseline_checks=True, intercept=intercept,
                             max_cv_rmse=10.0)
    for site in ("tight", "loose"):
        g = df[df["site"] == site]
        X = sm.add_constant(g["x"].to_numpy()) if intercept else g[["x"]].to_numpy()
        ref = sm.OLS(g["y"].to_numpy(), X).fit()                                      # statsmodels
        n, p, ybar = len(g), X.shape[1], g["y"].mean()
        cv = 100 * np.sqrt(ref.ssr / (n - p)) / ybar                                  # by hand
        nmbe = 100 * ref.resid.sum() / ((n - p) * ybar)                               # by hand
        row = _check(res, site, "baseline: CV(RMSE) within limit")
        assert row["statistic"] == pytest.approx(cv, rel=1e-9)
        assert row["verdict"] == ("fail" if cv > 10.0 else "pass")
        row = _check(res, site, "baseline: NMBE within limit")
        assert row["statistic"] == pytest.approx(abs(nmbe), rel=1e-6, abs=1e-9)
        grp = res.groups[res.groups["site"] == site].iloc[0]
        assert grp["NMBE %"] == pytest.approx(nmbe, rel=1e-6, abs=1e-9)
        row = _check(res, site, "baseline: R² at least limit")
        assert row["statistic"] == pytest.approx(ref.rsquared, rel=1e-9)
    loose = res.groups[res.groups["site"] == "loose"].iloc[0]
    assert "too much scatter for a baseline" in loose["reasons"]


def test_change_point_counts_in_cv_rmse():
    rng = np.random.default_rng(7)
    t = rng.uniform(-5, 25, 36)
    df = pd.DataFrame({"site": "A", "t": t, "y": 500 + 30 * np.maximum(0, 12 - t) + rng.normal(0, 10, 36)})
    res = sheetfit.fit_frame(df, y="y", x="t", group="site", change_point="heating")
    tau = res.groups["change point"].iloc[0]
    ref = sm.OLS(df["y"].to_numpy(), sm.add_constant(np.maximum(0, tau - t))).fit()  # statsmodels at that τ
    cv = 100 * np.sqrt(ref.ssr / (36 - 2 - 1)) / df["y"].mean()                        # n − k − c
    assert _check(res, "A", "baseline: CV(RMSE) within limit")["statistic"] == pytest.approx(cv, rel=1e-9)
    assert res.groups["CV(RMSE) %"].iloc[0] == pytest.approx(cv, rel=1e-9)


def test_residual_lag1_against_numpy():
    rng = np.random.default_rng(2)
    e = rng.normal(size=40)
    codes = np.repeat([0, 1, 2], [18, 20, 2])
    got = residual_lag1(e, codes, 3)
    for g in (0, 1):
        r = e[codes == g]
        assert got[g] == pytest.approx((r[1:] * r[:-1]).sum() / (r * r).sum(), rel=1e-12)      # numpy
    assert np.isnan(got[2])                          # fewer than 3 rows
    assert np.isfinite(residual_lag1(e * 1e300, codes, 3)[:2]).all()     # no overflow at large scale


def test_hinge_terms_and_their_design():
    t = Term("T", "T")
    terms = with_change_point_terms([Term("P", "P"), t], t)
    assert [x.label for x in terms] == ["P", "T below change point", "T above change point", "T"]
    temp = np.array([-2.0, 10.0, 20.0])
    D = design_matrix(terms, True, {"T": temp, "P": np.ones(3)},
                      {"below": np.array([12.0, 12.0, np.nan]), "above": np.array([15.0, 15.0, 15.0])})
    np.testing.assert_array_equal(D[:, 2], [14.0, 2.0, 0.0])      # max(0, τ − T); τ missing → 0
    np.testing.assert_array_equal(D[:, 3], [0.0, 0.0, 5.0])       # max(0, T − τ)
    np.testing.assert_array_equal(D[:, 4], temp)
