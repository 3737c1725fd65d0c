"""Terms with a restricted domain (log, sqrt) when groups of different sizes share a padded batch.

Padding slots must never meet log(0): every group must come out exactly as statsmodels fits it
alone, and every check and robust covariance that reads the padded arrays must be finite.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.stats.diagnostic import (
    acorr_breusch_godfrey,
    het_breuschpagan,
    het_white,
    linear_reset,
)
from statsmodels.stats.outliers_influence import OLSInfluence
from statsmodels.stats.stattools import durbin_watson

import sheetfit
from sheetfit.checks import robust
from sheetfit.model.engine import fit_groups
from sheetfit.terms import parse_terms
from tests.oracle import assert_close
from tests.test_checks import check_value

SIZES = {"a": 20, "b": 25}      # one batch (25 ≤ 1.3·20): group a has 5 padding rows


def log_groups(seed: int = 17) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    parts = []
    for g, n in SIZES.items():
        x = rng.uniform(0.5, 40.0, n)
        z = rng.uniform(1.0, 9.0, n)
        y = 3.0 + 2.0 * np.log(x) - 1.5 * np.sqrt(z) + rng.normal(scale=0.4, size=n)
        parts.append(pd.DataFrame({"grp": g, "x": x, "z": z, "y": y}))
    return pd.concat(parts, ignore_index=True)


def reference(sub: pd.DataFrame, intercept: bool = True):
    """statsmodels OLS of one group with the transformed columns built by hand."""
    X = np.column_stack([np.log(sub["x"]), np.sqrt(sub["z"])])
    if intercept:
        X = sm.add_constant(X, has_constant="add")
    return sm.OLS(sub["y"].to_numpy(), X).fit()


@pytest.mark.parametrize("x", [["log(x)"], ["log(x)", "sqrt(z)"]])
def test_log_term_with_groups_of_different_sizes_fits(x):
    # Before the fix: numpy LinAlgError "SVD did not converge" (log of the zero padding).
    frame = log_groups()
    res = sheetfit.fit_frame(frame, y="y", x=x, group="grp", adjust="none")
    assert (res.groups["status"] == "fitted").all()
    for g, sub in frame.groupby("grp"):
        cols = [np.log(sub["x"])] + ([np.sqrt(sub["z"])] if len(x) == 2 else [])
        ref = sm.OLS(sub["y"].to_numpy(), sm.add_constant(np.column_stack(cols))).fit()   # statsmodels
        coef = res.coefficients[res.coefficients["grp"] == g]
        assert_close(coef["coefficient"], ref.params, what="params")
        assert_close(coef["std error"], ref.bse, what="bse")
        assert_close(res.groups.loc[res.groups["grp"] == g, "R²"], ref.rsquared, what="R²")


def test_every_check_on_padded_log_groups_matches_statsmodels():
    frame = log_groups()
    res = sheetfit.fit_frame(frame, y="y", x=["log(x)", "sqrt(z)"], group="grp", adjust="none")
    fitted_checks = res.checks[~res.checks["check"].isin(["model F-test", "R² below threshold", "enough data"])]
    no_replicates = fitted_checks["check"].eq("lack of fit (replicates)")     # continuous inputs never repeat
    assert (fitted_checks.loc[no_replicates, "verdict"] == "n/a").all()
    fitted_checks = fitted_checks[~no_replicates]
    assert fitted_checks["statistic"].notna().all(), fitted_checks[fitted_checks["statistic"].isna()]
    for g, sub in frame.groupby("grp"):
        ref = reference(sub)
        e, exog = ref.resid, ref.model.exog
        obs = res.observations[res.observations["grp"] == g]
        infl = OLSInfluence(ref)                                                         # statsmodels
        assert_close(obs["leverage"], infl.hat_matrix_diag, what="leverage")
        assert_close(obs["Cook's distance"], infl.cooks_distance[0], rtol=1e-8, what="cooks")
        assert_close(obs["studentized residual"], infl.resid_studentized_external, rtol=1e-8, what="stud")
        lm = het_breuschpagan(e, exog, robust=True)[0]                                   # statsmodels
        assert_close(check_value(res, g, "constant variance (Breusch–Pagan)", "statistic"), lm, 1e-8)
        wl = het_white(e, exog)[0]                                                       # statsmodels
        assert_close(check_value(res, g, "constant variance (White)", "statistic"), wl, 1e-8)
        rr = linear_reset(ref, power=3, use_f=True)                                      # statsmodels
        assert_close(check_value(res, g, "linear form (RESET)", "statistic"), rr.fvalue, 1e-7)
        assert_close(check_value(res, g, "independent residuals (Durbin–Watson)", "statistic"),
                     durbin_watson(e), 1e-8)                                             # statsmodels
        bg = acorr_breusch_godfrey(ref, nlags=1, result_object=True)                     # statsmodels
        assert_close(check_value(res, g, "independent residuals (Breusch–Godfrey)", "statistic"), bg.lm, 1e-8)


@pytest.mark.parametrize("intercept", [True, False])
def test_robust_covariances_on_padded_log_groups_match_statsmodels(intercept):
    frame = log_groups(seed=23)
    terms = parse_terms(["log(x)", "sqrt(z)"], list(frame.columns))
    codes = (frame["grp"] == "b").astype(int).to_numpy()
    fit = fit_groups(frame["y"].to_numpy(), {c: frame[c].to_numpy() for c in ("x", "z")}, codes, 2,
                     terms, intercept)
    for b in fit.batches:                       # no NaN or inf anywhere, padding slots included
        for f in dataclasses.fields(b):
            arr = getattr(b, f.name)
            assert arr is None or arr.dtype.kind != "f" or np.isfinite(arr).all(), f.name   # None: unweighted
    hc3 = robust.hc_cov(fit, "hc3")
    hac, _ = robust.hac_cov(fit, 2)
    for gi, (_g, sub) in enumerate(frame.groupby("grp")):
        ref = reference(sub, intercept)
        assert np.isfinite(hc3[gi]).all() and np.isfinite(hac[gi]).all()
        assert_close(hc3[gi], ref.get_robustcov_results("HC3").cov_params(), 1e-8)             # statsmodels
        assert_close(hac[gi], ref.get_robustcov_results("HAC", maxlags=2).cov_params(), 1e-8)  # statsmodels
