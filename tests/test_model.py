"""The batched engine against statsmodels OLS fitted group by group (reference library)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.outliers_influence import OLSInfluence

import sheetfit
from tests.oracle import assert_close, seeded_groups, statsmodels_fit


@pytest.mark.parametrize("k", [1, 2, 3])
@pytest.mark.parametrize("intercept", [True, False])
def test_every_group_matches_statsmodels(k, intercept):
    frame = seeded_groups(seed=10 + k, k=k)
    xs = [f"x{i + 1}" for i in range(k)]
    res = sheetfit.fit_frame(frame, y="y", x=xs, group="grp", intercept=intercept)
    for g, sub in frame.groupby("grp", sort=False):
        ref = statsmodels_fit(sub, "y", xs, intercept)                     # statsmodels OLS
        row = res.groups[res.groups["grp"] == g].iloc[0]
        coef = res.coefficients[res.coefficients["grp"] == g]
        obs = res.observations[res.observations["grp"] == g]
        assert row["status"] == "fitted"
        assert_close(coef["coefficient"], ref.params, what="params")
        assert_close(coef["std error"], ref.bse, what="bse")
        assert_close(coef["t"], ref.tvalues, what="t")
        assert_close(coef["p-value"], ref.pvalues, what="p")
        ci = ref.conf_int(0.05)
        assert_close(coef["interval low"], ci[:, 0], what="ci low")
        assert_close(coef["interval high"], ci[:, 1], what="ci high")
        for ours, theirs in [("R²", ref.rsquared), ("adjusted R²", ref.rsquared_adj), ("F", ref.fvalue),
                             ("F p-value", ref.f_pvalue), ("AIC", ref.aic), ("BIC", ref.bic),
                             ("residual std error", np.sqrt(ref.scale)),
                             ("RMSE", np.sqrt(ref.ssr / ref.nobs))]:
            assert_close(row[ours], theirs, what=ours)
        infl = OLSInfluence(ref)                                            # statsmodels influence
        assert_close(obs["fitted value"], ref.fittedvalues, what="fitted value")
        assert_close(obs["residual"], ref.resid, rtol=1e-8, atol=1e-12 * np.abs(sub["y"]).max(), what="resid")
        assert_close(obs["leverage"], infl.hat_matrix_diag, what="leverage")
        assert_close(obs["Cook's distance"], infl.cooks_distance[0], rtol=1e-8, what="cooks")
        assert_close(obs["studentized residual"], infl.resid_studentized_external, rtol=1e-8, what="stud")


def test_residuals_sum_to_zero_and_line_passes_through_means():
    # Facts of the trade (common practice): with an intercept, Σ residuals = 0 and ŷ(x̄) = ȳ.
    frame = seeded_groups(seed=3, k=1)
    res = sheetfit.fit_frame(frame, y="y", x=["x1"], group="grp")
    for g, sub in frame.groupby("grp"):
        obs = res.observations[res.observations["grp"] == g]
        assert abs(obs["residual"].sum()) < 1e-9 * np.abs(sub["y"]).sum()
        b = res.coefficients[res.coefficients["grp"] == g]["coefficient"].to_numpy()
        assert b[0] + b[1] * sub["x1"].mean() == pytest.approx(sub["y"].mean(), rel=1e-12, abs=1e-12)


def test_groups_that_cannot_be_fitted_get_reasons_and_the_run_goes_on():
    rng = np.random.default_rng(0)
    good = pd.DataFrame({"grp": "ok", "a": rng.normal(size=20), "b": rng.normal(size=20)})
    few = pd.DataFrame({"grp": "few", "a": [1.0, 2.0], "b": [0.0, 1.0]})
    const = pd.DataFrame({"grp": "const", "a": [5.0] * 6, "b": rng.normal(size=6)})
    a = rng.normal(size=8)
    coll = pd.DataFrame({"grp": "coll", "a": a, "b": 2 * a + 1})
    frame = pd.concat([good, few, const, coll], ignore_index=True)
    frame["y"] = rng.normal(size=len(frame))
    res = sheetfit.fit_frame(frame, y="y", x=["a", "b"], group="grp")
    status = dict(zip(res.groups["grp"], res.groups["status"]))
    reasons = dict(zip(res.groups["grp"], res.groups["reasons"]))
    assert status == {"ok": "fitted", "few": "not fitted", "const": "not fitted", "coll": "not fitted"}
    assert "only 2 usable rows for 3 coefficients" in reasons["few"]
    assert "input a takes the same value" in reasons["const"]
    assert "exact collinearity" in reasons["coll"]
    unused = res.observations[res.observations["grp"] != "ok"]
    assert (unused["used in fit"] == "no").all() and unused["reason"].str.startswith("group not fitted").all()


def test_integer_inputs_do_not_overflow_in_powers():
    # int64 powers overflow silently; 10^5 ** 4 = 1e20 > 2^63 (numpy semantics).
    x = np.arange(1, 31, dtype=np.int64) * 100_000
    y = 1.0 + 1e-20 * x.astype(float) ** 4 + np.sin(np.arange(30))
    frame = pd.DataFrame({"x": x, "y": y})
    res = sheetfit.fit_frame(frame, y="y", x=["x", "x^2", "x^3", "x^4"])
    s = x.astype(float) / 1e6   # same column space, well scaled for the reference fit
    ref = statsmodels_fit(pd.DataFrame({"y": y, "a": s, "b": s**2, "c": s**3, "d": s**4}),
                          "y", ["a", "b", "c", "d"], True)
    assert res.groups["status"].iloc[0] == "fitted"
    assert_close(res.groups["R²"].iloc[0], ref.rsquared, rtol=1e-7)


def test_a_collinear_group_in_a_batch_with_fittable_groups():
    # Groups of similar size share a batch; dropping the collinear one must leave the others
    # exactly as they are fitted without it (and fitted as statsmodels fits them).
    rng = np.random.default_rng(5)
    a = rng.normal(size=8)
    coll = pd.DataFrame({"grp": "coll", "a": a, "b": 2 * a + 1})
    good = [pd.DataFrame({"grp": f"ok{i}", "a": rng.normal(size=n), "b": rng.normal(size=n)})
            for i, n in enumerate((8, 9))]
    frame = pd.concat([coll, *good], ignore_index=True)
    frame["y"] = rng.normal(size=len(frame))
    res = sheetfit.fit_frame(frame, y="y", x=["a", "b"], group="grp")
    alone = sheetfit.fit_frame(frame[frame["grp"] != "coll"], y="y", x=["a", "b"], group="grp")
    status = dict(zip(res.groups["grp"], res.groups["status"]))
    assert status == {"coll": "not fitted", "ok0": "fitted", "ok1": "fitted"}
    ours = res.coefficients[res.coefficients["grp"] != "coll"]["coefficient"].to_numpy()
    np.testing.assert_array_equal(ours, alone.coefficients["coefficient"].to_numpy())
    for g, sub in frame[frame["grp"] != "coll"].groupby("grp"):
        ref = statsmodels_fit(sub, "y", ["a", "b"], True)                  # statsmodels OLS
        assert_close(res.coefficients[res.coefficients["grp"] == g]["coefficient"], ref.params, what="params")
