"""Groups using different subsets of the coefficient slots, and parameters estimated outside least
squares (change points), in one engine call: fit_patterns against statsmodels OLS fitted group by
group on just the active columns (reference library), and every check against a separate fit of
the group alone with its own terms.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.diagnostic import linear_reset
from statsmodels.stats.outliers_influence import OLSInfluence

from sheetfit import checks
from sheetfit.checks import collinearity, robust
from sheetfit.job import Thresholds
from sheetfit.model.engine import fit_groups
from sheetfit.model.inference import inference, mean_std_error
from sheetfit.model.patterns import fit_patterns
from sheetfit.terms import coefficient_labels, parse_terms
from tests.oracle import assert_close

SIZES = (14, 25, 31, 18, 40, 22)
WITH_CONSTANT = np.array([[1, 1, 0],      # constant + x1
                          [1, 0, 1],      # constant + x2
                          [1, 1, 1],      # all three
                          [1, 1, 0],      # constant + x1 again, another size
                          [0, 1, 1],      # x1 + x2 through the origin
                          [1, 1, 1]], dtype=bool)
NO_CONSTANT = np.array([[1, 0], [0, 1], [1, 1], [1, 0], [1, 1], [0, 1]], dtype=bool)


def mixed_frame(seed: int) -> pd.DataFrame:
    """Groups of unequal size with two inputs on different scales (sorted by group code)."""
    rng = np.random.default_rng(seed)
    parts = []
    for g, n in enumerate(SIZES):
        x1 = rng.uniform(-5, 15, n) + g
        x2 = rng.normal(size=n) * 100 + 50
        y = 3.0 + (1 + g) * x1 - 0.02 * x2 + rng.normal(scale=1 + g, size=n) * (1 + 0.1 * np.abs(x1))
        parts.append(pd.DataFrame({"code": g, "x1": x1, "x2": x2, "y": y}))
    return pd.concat(parts, ignore_index=True)


def mixed_fit(frame: pd.DataFrame, intercept: bool, active: np.ndarray, extra=None):
    terms = parse_terms(["x1", "x2"], list(frame.columns))
    cols = {c: frame[c].to_numpy() for c in ("x1", "x2")}
    fit = fit_patterns(frame["y"].to_numpy(), cols, frame["code"].to_numpy(), len(SIZES), terms, intercept,
                       active, extra)
    return fit, terms


def raw_columns(sub: pd.DataFrame, intercept: bool) -> np.ndarray:
    """All slots' raw design columns of one group: [1,] x1, x2."""
    cols = [np.ones(len(sub))] if intercept else []
    return np.column_stack(cols + [sub["x1"].to_numpy(), sub["x2"].to_numpy()])


def reference(sub: pd.DataFrame, intercept: bool, pattern: np.ndarray):
    """statsmodels OLS of one group on its active columns only (the reference implementation)."""
    return sm.OLS(sub["y"].to_numpy(), raw_columns(sub, intercept)[:, pattern]).fit()


@pytest.mark.parametrize("intercept", [True, False])
def test_mixed_patterns_match_statsmodels_on_the_active_columns(intercept):
    frame = mixed_frame(seed=1 if intercept else 2)
    active = WITH_CONSTANT if intercept else NO_CONSTANT
    fit, _ = mixed_fit(frame, intercept, active)
    assert fit.fitted_ok.all() and fit.p == active.shape[1]
    np.testing.assert_array_equal(fit.n_coef, active.sum(axis=1))
    np.testing.assert_array_equal(fit.n_params, active.sum(axis=1))
    for g, sub in frame.groupby("code"):
        on = active[g]
        ref = reference(sub, intercept, on)                                    # statsmodels OLS
        infl = OLSInfluence(ref)                                               # statsmodels influence
        rows = frame.index[frame["code"] == g].to_numpy()
        assert_close(fit.beta[g, on], ref.params, what="beta")
        assert_close(fit.se[g, on], ref.bse, what="se")
        assert np.isnan(fit.beta[g, ~on]).all() and np.isnan(fit.se[g, ~on]).all()
        inv = fit.xtx_inv[g]
        assert_close(inv[np.ix_(on, on)], ref.normalized_cov_params, what="(X'X)^-1")   # statsmodels (X'X)⁻¹
        assert (inv[~on] == 0).all() and (inv[:, ~on] == 0).all()
        assert fit.df_resid[g] == ref.df_resid                                 # statsmodels n − k
        assert_close(fit.fitted[rows], ref.fittedvalues, what="fitted")
        assert_close(fit.resid[rows], ref.resid, rtol=1e-8, atol=1e-12 * np.abs(sub["y"]).max(), what="resid")
        assert_close(fit.leverage[rows], infl.hat_matrix_diag, what="leverage")
        assert_close(fit.internal[rows], infl.resid_studentized_internal, rtol=1e-8, what="internal")
        assert_close(fit.studentized[rows], infl.resid_studentized_external, rtol=1e-8, what="external")
        assert_close(fit.cooks[rows], infl.cooks_distance[0], rtol=1e-8, what="cooks")
        assert bool(fit.has_constant[g]) == bool(intercept and on[0])
    batch_slots = {tuple(b.slots) for b in fit.batches}
    assert batch_slots == {tuple(np.flatnonzero(pattern)) for pattern in active}   # one width per pattern
    for b in fit.batches:                        # every batch in its own width p_b, rows in the fit's numbering
        assert b.Q.shape[2] == len(b.slots) and (active[b.groups][:, b.slots]).all()
        assert (frame["code"].to_numpy()[b.rows[b.mask]] == np.repeat(b.groups, b.n)).all()


@pytest.mark.parametrize("intercept", [True, False])
def test_extra_parameters_take_residual_degrees_of_freedom(intercept):
    frame = mixed_frame(seed=3)
    active = WITH_CONSTANT if intercept else NO_CONSTANT
    extra = np.array([1, 2, 0, 1, 2, 1])
    fit, _ = mixed_fit(frame, intercept, active, extra)
    inf = inference(fit, 0.95)
    np.testing.assert_array_equal(fit.n_params, active.sum(axis=1) + extra)
    for g, sub in frame.groupby("code"):
        on, c = active[g], int(extra[g])
        ref = reference(sub, intercept, on)                                    # statsmodels OLS, c taken as known
        infl = OLSInfluence(ref)
        n, k = len(sub), int(on.sum())
        rows = frame.index[frame["code"] == g].to_numpy()
        # statsmodels divides by n − k; with c more estimated parameters the variances scale by
        # (n − k)/(n − k − c), and the leave-one-out ones by (n − k − 1)/(n − k − 1 − c).
        var = (n - k) / (n - k - c)
        var_out = (n - k - 1) / (n - k - 1 - c)
        assert fit.df_resid[g] == n - k - c
        assert_close(fit.beta[g, on], ref.params, what="beta (unchanged)")
        assert_close(fit.se[g, on], ref.bse * np.sqrt(var), what="se")
        assert_close(inf.residual_std_error[g], np.sqrt(ref.scale * var), what="residual std error")
        assert_close(fit.sigma2[g], ref.scale * var, what="sigma2")
        assert_close(fit.internal[rows], infl.resid_studentized_internal / np.sqrt(var), rtol=1e-8, what="internal")
        assert_close(fit.studentized[rows], infl.resid_studentized_external / np.sqrt(var_out), rtol=1e-8,
                     what="external")
        assert_close(fit.cooks[rows], infl.cooks_distance[0] / var, rtol=1e-8, what="cooks")
        assert_close(inf.t[g, on], ref.tvalues / np.sqrt(var), what="t")
        assert_close(inf.p_value[g, on], 2 * stats.t.sf(np.abs(ref.tvalues / np.sqrt(var)), n - k - c),
                     rtol=1e-8, what="p")                                     # scipy t law with n − k − c df
        # AIC/BIC count k + c parameters: −2·llf + 2(k + c), −2·llf + log(n)(k + c), llf from statsmodels
        assert_close(inf.aic[g], -2 * ref.llf + 2 * (k + c), what="aic")
        assert_close(inf.bic[g], -2 * ref.llf + np.log(n) * (k + c), what="bic")
        const = int(intercept and on[0])
        assert inf.df_model[g] == k + c - const
        ess = ref.centered_tss - ref.ssr if const else ref.uncentered_tss - ref.ssr
        f_want = (ess / (k + c - const)) / (ref.ssr / (n - k - c))            # from statsmodels' sums of squares
        assert_close(inf.f[g], f_want, what="F")
        assert_close(inf.f_p_value[g], stats.f.sf(f_want, k + c - const, n - k - c), rtol=1e-8, what="F p")  # scipy
        assert_close(inf.adj_r2[g], 1 - (n - const) / (n - k - c) * (1 - ref.rsquared), what="adjusted R²")


def test_mean_std_error_uses_active_slots_and_the_groups_df():
    frame = mixed_frame(seed=4)
    extra = np.array([0, 1, 2, 0, 1, 0])
    fit, _ = mixed_fit(frame, True, WITH_CONSTANT, extra)
    new = np.array([[1.0, 2.0, 30.0], [1.0, -3.0, 120.0]])
    D = np.broadcast_to(new, (len(SIZES),) + new.shape).copy()
    D[:, :, 1:] += 1e6 * ~WITH_CONSTANT[:, None, 1:]          # junk on inactive slots must not count
    got = mean_std_error(fit, np.arange(len(SIZES)), D)
    for g, sub in frame.groupby("code"):
        on = WITH_CONSTANT[g]
        ref = reference(sub, True, on)
        n, k, c = len(sub), int(on.sum()), int(extra[g])
        want = ref.get_prediction(new[:, on]).se_mean * np.sqrt((n - k) / (n - k - c))  # statsmodels, rescaled df
        assert_close(got[g], want, what="mean std error")


def test_too_few_rows_for_coefficients_and_change_points_is_a_reason():
    frame = mixed_frame(seed=5)
    extra = np.array([0, 0, 0, 0, 0, 0])
    extra[0] = SIZES[0] - 2          # group 0 (2 coefficients): n = k + c rows, no degree of freedom left
    active = WITH_CONSTANT.copy()
    active[5] = False                # group 5: no slot active
    fit, _ = mixed_fit(frame, True, active, extra)
    assert not fit.fitted_ok[0] and not fit.fitted_ok[5] and fit.fitted_ok[1:5].all()
    assert fit.not_fitted_reason[0] == (f"only {SIZES[0]} usable rows for 2 coefficients and {SIZES[0] - 2} "
                                        f"change points; at least {SIZES[0] + 1} are needed")
    assert "no coefficient is active" in fit.not_fitted_reason[5]
    rows0 = frame.index[frame["code"] == 0].to_numpy()
    assert np.isnan(fit.fitted[rows0]).all() and np.isnan(fit.beta[0]).all() and np.isnan(fit.xtx_inv[0]).all()


def test_all_slots_and_no_extra_is_fit_groups_exactly():
    frame = mixed_frame(seed=6)
    terms = parse_terms(["x1", "x2"], list(frame.columns))
    cols = {c: frame[c].to_numpy() for c in ("x1", "x2")}
    args = (frame["y"].to_numpy(), cols, frame["code"].to_numpy(), len(SIZES), terms, True)
    a, b = fit_patterns(*args), fit_groups(*args)
    for name in ("beta", "se", "xtx_inv", "fitted", "resid", "studentized", "cooks", "df_resid"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    assert all((bt.slots == np.arange(3)).all() and (bt.extra_params == 0).all() for bt in b.batches)


def alone(frame: pd.DataFrame, g: int, intercept: bool, pattern: np.ndarray):
    """The group fitted by itself with only its active terms (fit_groups, one group)."""
    sub = frame[frame["code"] == g]
    names = ["x1", "x2"]
    off = 1 if intercept else 0
    specs = [nm for j, nm in enumerate(names) if pattern[off + j]]
    terms = parse_terms(specs, list(frame.columns))
    fit = fit_groups(sub["y"].to_numpy(), {c: sub[c].to_numpy() for c in specs}, np.zeros(len(sub), int), 1,
                     terms, bool(intercept and pattern[0]))
    return fit, terms, sub


def run_all(fit, terms, codes, intercept):
    rows = checks.RowsInOrder(codes=codes, source_rows=np.arange(len(codes)) + 2, order_note="rows in input row order")
    return checks.run_checks(fit, inference(fit, 0.95), rows, terms, coefficient_labels(terms, intercept),
                             Thresholds(bg_lags=2))


@pytest.mark.parametrize("intercept", [True, False])
def test_every_check_on_a_mixed_fit_equals_the_group_fitted_alone(intercept):
    frame = mixed_frame(seed=7)
    active = WITH_CONSTANT if intercept else NO_CONSTANT
    fit, terms = mixed_fit(frame, intercept, active)
    results, vifs = run_all(fit, terms, frame["code"].to_numpy(), intercept)
    for g in range(len(SIZES)):
        one, one_terms, sub = alone(frame, g, intercept, active[g])
        own, own_vifs = run_all(one, one_terms, np.zeros(len(sub), int), bool(intercept and active[g][0]))
        assert [r.key for r in results] == [r.key for r in own]
        for mixed, single in zip(results, own):            # oracle: the same checks on the group alone
            what = f"group {g}, {mixed.key}"
            assert_close(mixed.statistic[g], single.statistic[0], rtol=1e-9, what=what)
            if mixed.pvalue is not None:
                assert_close(mixed.pvalue[g], single.pvalue[0], rtol=1e-8, atol=1e-300, what=what)
            if mixed.key != "cooks":       # influence.py's cut still counts fit.p (not this module's)
                assert_close(mixed.threshold[g], single.threshold[0], what=what)
            if mixed.key not in ("outlier", "cooks", "leverage_one"):      # notes naming source rows
                assert mixed.note[g] == single.note[0], what
        on = active[g]
        assert_close(vifs[g, on], own_vifs[0], rtol=1e-9, what="vif")
        assert np.isnan(vifs[g, ~on]).all()


def test_robust_covariances_sit_at_the_active_slots():
    frame = mixed_frame(seed=8)
    fit, _ = mixed_fit(frame, True, WITH_CONSTANT)
    hac, lag = robust.hac_cov(fit, None)
    for g in range(len(SIZES)):
        on = WITH_CONSTANT[g]
        one, _, _ = alone(frame, g, True, on)
        one_hac, one_lag = robust.hac_cov(one, None)
        assert lag[g] == one_lag[0]
        assert_close(hac[g][np.ix_(on, on)], one_hac[0], rtol=1e-9, what="hac")   # oracle: the group alone
        for kind in ("hc0", "hc1", "hc2", "hc3"):
            cov = robust.hc_cov(fit, kind)
            assert_close(cov[g][np.ix_(on, on)], robust.hc_cov(one, kind)[0], rtol=1e-9, what=kind)
            assert np.isnan(cov[g][~on]).all() and np.isnan(cov[g][:, ~on]).all()
        cov = robust.hc_cov(fit, "hc3")
        f, fp = robust.wald_f(fit, cov)
        f1, fp1 = robust.wald_f(one, robust.hc_cov(one, "hc3"))
        assert_close(f[g], f1[0], rtol=1e-9, what="wald F")
        assert_close(fp[g], fp1[0], rtol=1e-9, what="wald p")


def test_robust_and_reset_with_change_points_count_them_in_the_df():
    frame = mixed_frame(seed=9)
    extra = np.array([1, 2, 1, 0, 2, 1])
    fit, _ = mixed_fit(frame, True, WITH_CONSTANT, extra)
    hc1 = robust.hc_cov(fit, "hc1")
    reset = checks.linear_form.reset(fit)
    for g, sub in frame.groupby("code"):
        on, c = WITH_CONSTANT[g], int(extra[g])
        ref = reference(sub, True, on)
        n, k = len(sub), int(on.sum())
        hc0 = ref.get_robustcov_results("HC0").cov_params()                   # statsmodels HC0
        assert_close(hc1[g][np.ix_(on, on)], hc0 * n / (n - k - c), rtol=1e-8, what="hc1")   # n/(n − k − c)
        rr = linear_reset(ref, power=3, use_f=True)                           # statsmodels RESET, F form
        df2 = n - k - 2
        f = rr.fvalue * (n - k - c - 2) / df2          # the same sums of squares over n − k − c − 2
        assert_close(reset.statistic[g], f, rtol=1e-7, what="reset F")
        assert_close(reset.pvalue[g], stats.f.sf(f, 2, n - k - c - 2), rtol=1e-7, what="reset p")  # scipy


def test_collinearity_leaves_out_inputs_a_group_does_not_use():
    frame = mixed_frame(seed=10)
    fit, terms = mixed_fit(frame, True, WITH_CONSTANT)
    gv = collinearity.gvif(fit, terms)
    cond = checks.statistic_of(collinearity.collinearity_checks(fit, terms, 10.0, 30.0), "condition")
    for g in range(len(SIZES)):
        if WITH_CONSTANT[g].sum() - WITH_CONSTANT[g][0] < 2:        # one input of its own
            assert np.isnan(gv[g]).all() and np.isnan(cond[g])
        else:
            sub = frame[frame["code"] == g]
            X = raw_columns(sub, True)[:, WITH_CONSTANT[g]]
            assert_close(cond[g], np.linalg.cond(X / np.linalg.norm(X, axis=0)), rtol=1e-7, what="cond")  # numpy


def test_checks_that_take_change_points_as_known_do_not_move_with_them():
    # The n·R² tests, Durbin–Watson, normality and collinearity treat a change point as known (the
    # usual practice), so their statistics equal those of the same fit without extra parameters;
    # rows per coefficient counts it. Oracle: the fit with extra_params = 0 (checked above against
    # statsmodels group by group).
    frame = mixed_frame(seed=11)
    codes = frame["code"].to_numpy()
    extra = np.array([1, 2, 1, 0, 2, 1])
    with_cp, terms = mixed_fit(frame, True, WITH_CONSTANT, extra)
    without, _ = mixed_fit(frame, True, WITH_CONSTANT)
    moved, _ = run_all(with_cp, terms, codes, True)
    still, _ = run_all(without, terms, codes, True)
    same = {"jarque_bera", "shapiro_wilk", "breusch_pagan", "white", "durbin_watson", "breusch_godfrey",
            "vif", "condition", "leverage_one"}
    for a, b in zip(moved, still):
        if a.key in same:
            np.testing.assert_array_equal(a.statistic, b.statistic, err_msg=a.key)
            if a.pvalue is not None:
                np.testing.assert_array_equal(a.pvalue, b.pvalue, err_msg=a.key)
    rows = checks.statistic_of(moved, "rows")
    np.testing.assert_array_equal(rows, np.array(SIZES) / (WITH_CONSTANT.sum(axis=1) + extra))   # n / (k + c)
