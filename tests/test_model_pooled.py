"""Slopes compared across groups (sheetfit.model.pooled).

Oracles: statsmodels OLS / WLS on designs built by hand (one indicator column per group for the own
intercepts, group × input product columns for the own slopes) and `compare_f_test` between nested
fits; `normalized_cov_params` of those fits for the (X'X)⁻¹ blocks; statsmodels WLS with weights
w_i/σ_h² (σ_h² of each group's own statsmodels fit) for the precision-weighted reference and its std
error; Welch–Satterthwaite degrees of freedom computed term by term with numpy; scipy.stats.bartlett;
numpy's QR of the stacked rows; NIST StRD Longley certified values.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from sheetfit.checks.verdicts import adjust_pvalues
from sheetfit.model.pooled import (FLAT_INPUT, NO_CONSTANT, NO_INPUT, NOT_FITTED, TOO_FEW_GROUPS, compare_groups,
                                   equal_variance_test, leave_one_out)

NIST = Path(__file__).resolve().parent / "data" / "nist"
REL = 1e-9


def bh(p: np.ndarray) -> np.ndarray:
    return adjust_pvalues(p, "bh")


def grouped(seed: int, sizes=(12, 20, 31, 17), k: int = 1, spread=(1.0, 1.5, 2.0, 2.5), steep: dict | None = None,
            weighted: bool = False):
    """Rows of groups of unequal size: own intercepts, slopes (2, −1, …) unless `steep` says otherwise,
    noise sd per group; weighted: the weights too, with noise variance proportional to 1 / weight."""
    rng = np.random.default_rng(seed)
    n = sum(sizes)
    w = rng.uniform(0.5, 2.0, n) if weighted else np.ones(n)
    steep = steep or {}
    codes = np.repeat(np.arange(len(sizes)), sizes)
    Z = rng.uniform(0, 10, (len(codes), k))
    slopes = np.array([2.0, -1.0, 0.5][:k])
    b = np.array([steep.get(g, slopes) for g in codes])
    sd = np.asarray(spread)[codes]
    y = 3.0 + 2.0 * codes + np.einsum("ij,ij->i", Z, b) + rng.normal(0, 1, len(codes)) * sd / np.sqrt(w)
    return y, np.column_stack([np.ones(len(y)), Z]), codes, (w if weighted else None)


def indicators(codes: np.ndarray, groups) -> np.ndarray:
    return np.column_stack([(codes == g).astype(float) for g in groups])


def ols(y, design, weights=None):
    return (sm.OLS(y, design) if weights is None else sm.WLS(y, design, weights=weights)).fit()


def rel(a, b) -> float:
    a, b = np.asarray(a, float), np.asarray(b, float)
    return float(np.max(np.abs(a - b) / np.maximum(np.abs(b), 1e-300)))


@pytest.mark.parametrize("k", [1, 2])
@pytest.mark.parametrize("weighted", [False, True])
def test_f_tests_match_nested_statsmodels_fits(k, weighted):
    y, X, codes, w = grouped(1, k=k, weighted=weighted)
    G, Z = 4, X[:, 1:]
    comp = compare_groups(y, X, codes, np.ones(G, bool), intercept=True, adjust=bh, weights=w)
    D = indicators(codes, range(G))
    # oracle: statsmodels OLS/WLS, separate lines = indicators + indicator × input columns
    separate = ols(y, np.column_stack([D, *(D * Z[:, [j]] for j in range(k))]), w)
    common_slopes = ols(y, np.column_stack([D, Z]), w)
    one_line = ols(y, sm.add_constant(Z), w)
    for ours, restricted in ((comp.equal_slopes, common_slopes), (comp.common_line, one_line)):
        f, p, df_diff = separate.compare_f_test(restricted)
        assert rel(ours.statistic, f) < REL and rel(ours.pvalue, p) < REL
        assert ours.df1 == df_diff and ours.df2 == separate.df_resid
    # oracle: each group's own statsmodels fit for its slopes and residual variance
    for g in range(G):
        rows = codes == g
        own = ols(y[rows], X[rows], None if w is None else w[rows])
        assert rel(comp.slope[g], own.params[1:]) < REL
        assert rel(comp.sigma2[g], own.scale) < REL
    assert comp.weighted == weighted


@pytest.mark.parametrize("k", [1, 2])
@pytest.mark.parametrize("weighted", [False, True])
def test_difference_from_the_other_groups_matches_an_own_slope_column(k, weighted):
    y, X, codes, w = grouped(2, k=k, spread=(1.0, 1.0, 1.0, 1.0), weighted=weighted)
    G, Z = 4, X[:, 1:]
    comp = compare_groups(y, X, codes, np.ones(G, bool), intercept=True, adjust=bh, weights=w)
    assert comp.in_reference.all() and not comp.own_used          # plain leave-one-out here
    D = indicators(codes, range(G))
    sigma2 = float(comp.sigma2 @ (comp.n - k - 1)) / float((comp.n - k - 1).sum())   # RSS_sep / df_sep
    for g in range(G):
        # oracle: statsmodels with all groups' own intercepts, one shared slope, and g's extra slope:
        # the extra slope's coefficient is g's slope minus the others' common slope
        mine = (codes == g).astype(float)[:, None] * Z
        fit = ols(y, np.column_stack([D, Z, mine]), w)
        assert rel(comp.difference[g], fit.params[-k:]) < REL
        assert rel(comp.reference[g], fit.params[G:G + k]) < REL
        # its (X'X)⁻¹ block is S_g⁻¹ + (S − S_g)⁻¹; with σ² = RSS_sep / df_sep (numpy):
        factor = np.diag(fit.normalized_cov_params)[-k:]
        assert rel(comp.common_variance.se[g], np.sqrt(sigma2 * factor)) < REL
        # scipy.stats.t for p-value and interval on df_sep
        df = float((comp.n - k - 1).sum())
        t = comp.difference[g] / comp.common_variance.se[g]
        assert rel(comp.common_variance.pvalue[g], 2 * stats.t.sf(np.abs(t), df)) < REL
        half = stats.t.ppf(0.975, df) * comp.common_variance.se[g]
        assert rel(comp.common_variance.high[g], comp.difference[g] + half) < REL


def test_groups_that_stand_apart_leave_the_reference():
    sizes = (25,) * 8
    y, X, codes, _ = grouped(3, sizes=sizes, spread=(1.0,) * 8, steep={2: np.array([3.5]), 6: np.array([3.6])})
    comp = compare_groups(y, X, codes, np.ones(8, bool), intercept=True, adjust=bh)
    assert comp.in_reference.tolist() == [g not in (2, 6) for g in range(8)]
    members = [g for g in range(8) if comp.in_reference[g]]
    for g in range(8):
        # oracle: statsmodels on the rows of the reference groups and g, g with its own extra slope
        groups = sorted(set(members) | {g})
        rows = np.isin(codes, groups)
        D = indicators(codes[rows], groups)
        mine = (codes[rows] == g).astype(float)[:, None] * X[rows, 1:]
        fit = ols(y[rows], np.column_stack([D, X[rows, 1:], mine]))
        assert rel(comp.difference[g], fit.params[-1:]) < REL
        assert rel(comp.reference[g], fit.params[len(groups):len(groups) + 1]) < REL


def check_precision_weighted(y, X, codes, w, comp):
    """Each group against the other reference members pooled by precision, with the own-variance std error
    and Welch–Satterthwaite degrees of freedom, for every compared group (members and set-aside ones)."""
    G, k, Z = len(comp.codes), X.shape[1] - 1, X[:, 1:]
    ww = np.ones(len(y)) if w is None else w
    fits = [ols(y[codes == g], X[codes == g], None if w is None else w[codes == g]) for g in range(G)]
    sigma2, nu = np.array([f.scale for f in fits]), np.array([f.df_resid for f in fits])
    for g in range(G):
        others = [h for h in range(G) if comp.in_reference[h] and h != g]
        rows = np.isin(codes, others)
        design = np.column_stack([indicators(codes[rows], others), Z[rows]])
        # oracle: statsmodels WLS of the other members' rows, own intercepts (indicator columns), one shared
        # slope per input, weights w_i / σ_h² with σ_h² each group's own statsmodels fit's residual variance
        fit = ols(y[rows], design, ww[rows] / sigma2[codes[rows]])
        assert rel(comp.own_variances.reference[g], fit.params[-k:]) < REL
        A_inv = fit.normalized_cov_params[-k:, -k:]                   # (Σ S_h / σ_h²)⁻¹
        own = np.diag(fits[g].cov_params())[1:]                       # σ_g² [S_g⁻¹]_jj
        var = own + np.diag(A_inv)
        assert rel(comp.own_variances.se[g], np.sqrt(var)) < REL
        # Welch–Satterthwaite (numpy): c_h = u'(S_h/σ_h²)u, u = A⁻¹e_j, each on its ν_h = n_h − p
        parts = []
        for h in others:
            Dh = design[codes[rows] == h]
            Sh = Dh.T @ (ww[codes == h][:, None] * Dh) / sigma2[h]
            Sh = Sh[-k:, -k:] - Sh[-k:, :-k] @ np.linalg.pinv(Sh[:-k, :-k]) @ Sh[:-k, -k:]   # centred on own mean
            parts.append(np.einsum("ij,jl,li->i", A_inv, Sh, A_inv) ** 2 / nu[h])
        df = var**2 / (own**2 / nu[g] + sum(parts))
        assert rel(comp.own_variances.df[g], df) < 1e-8
        t = (comp.slope[g] - comp.own_variances.reference[g]) / np.sqrt(var)
        assert rel(comp.own_variances.pvalue[g], 2 * stats.t.sf(np.abs(t), df)) < 1e-8


@pytest.mark.parametrize("weighted", [False, True])
def test_own_variances_pool_the_reference_by_precision(weighted):
    y, X, codes, w = grouped(4, k=2, spread=(0.5, 1.0, 3.0, 6.0), weighted=weighted)
    comp = compare_groups(y, X, codes, np.ones(4, bool), intercept=True, adjust=bh, weights=w)
    assert comp.own_used and comp.in_reference.all()              # Bartlett rejects: own variances used
    assert np.array_equal(comp.reference, comp.own_variances.reference)
    check_precision_weighted(y, X, codes, w, comp)


def test_own_variances_with_groups_set_aside():
    y, X, codes, _ = grouped(5, sizes=(25,) * 8, spread=(0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 5.0, 6.0),
                             steep={2: np.array([3.5]), 6: np.array([0.5])})
    comp = compare_groups(y, X, codes, np.ones(8, bool), intercept=True, adjust=bh)
    assert comp.own_used and comp.in_reference.tolist() == [g not in (2, 6) for g in range(8)]
    check_precision_weighted(y, X, codes, None, comp)
    # the way the rule did not pick keeps the equal-weight common slope of the same other members:
    # statsmodels OLS with own intercepts and one shared slope
    for g in range(8):
        others = [h for h in range(8) if comp.in_reference[h] and h != g]
        rows = np.isin(codes, others)
        fit = ols(y[rows], np.column_stack([indicators(codes[rows], others), X[rows, 1:]]))
        assert rel(comp.common_variance.reference[g], fit.params[-1:]) < REL


def test_an_exact_fit_among_noisy_groups_stays_finite():
    y, X, codes, _ = grouped(6, sizes=(12, 15, 18))
    y[codes == 0] = 1.0 + 3.0 * X[codes == 0, 1]                  # group 0 fits exactly: σ² = 0
    comp = compare_groups(y, X, codes, np.ones(3, bool), intercept=True, adjust=bh)
    assert comp.own_used                                           # Bartlett: one zero variance, p = 0
    assert np.isfinite(comp.reference).all() and np.isfinite(comp.used.se).all()
    # the exact group carries (nearly) all the precision: the others' reference is its slope, 3
    assert np.allclose(comp.reference[1:], 3.0, rtol=1e-6)


def test_bartlett_with_residual_degrees_of_freedom_matches_scipy():
    rng = np.random.default_rng(7)
    samples = [rng.normal(0, s, n) for s, n in ((1.0, 8), (1.3, 15), (0.7, 11), (2.0, 30))]
    ours = equal_variance_test(np.array([np.var(a, ddof=1) for a in samples]),
                               np.array([len(a) - 1.0 for a in samples]))
    ref = stats.bartlett(*samples)            # oracle: scipy, variances on n − 1 degrees of freedom
    assert rel(ours.statistic, ref.statistic) < REL and rel(ours.pvalue, ref.pvalue) < REL


def test_longley_twice_gives_the_certified_slopes():
    """Longley's rows as two groups (the second shifted: own intercept, other input levels): each group's
    slopes, residual sd and the difference's std error against NIST's certified values."""
    cert = json.loads((NIST / "certified.json").read_text())["datasets"]["longley"]
    frame = pd.read_csv(NIST / "longley.csv", dtype=str).astype(float)   # NIST StRD Longley
    Z = frame[[f"x{i}" for i in range(1, 7)]].to_numpy()
    y = frame["y"].to_numpy()
    Z2, y2 = Z + np.array([10.0, 5e4, 300.0, 200.0, 1e4, 16.0]), y + 2.5e4      # exact shifts
    X = np.column_stack([np.ones(32), np.vstack([Z, Z2])])
    comp = compare_groups(np.concatenate([y, y2]), X, np.repeat([0, 1], 16), np.ones(2, bool), intercept=True,
                          adjust=bh)
    for g in range(2):
        assert rel(comp.slope[g], cert["coefficients"][1:]) < 1e-9
        assert rel(np.sqrt(comp.sigma2[g]), cert["residual_sd"]) < 1e-9
        # both groups hold the same information: Var d = 2 · certified sd²
        assert rel(comp.common_variance.se[g], np.sqrt(2) * np.array(cert["coefficient_sds"][1:])) < 1e-9
    assert comp.equal_slopes.statistic < 1e-12 and comp.equal_slopes.pvalue > 0.999


def test_longley_scale_f_tests_match_statsmodels():
    frame = pd.read_csv(NIST / "longley.csv", dtype=str).astype(float)   # NIST StRD Longley, three inputs
    Z = frame[["x1", "x2", "x6"]].to_numpy()
    y = frame["y"].to_numpy()
    codes = np.repeat([0, 1], 8)
    comp = compare_groups(y, np.column_stack([np.ones(16), Z]), codes, np.ones(2, bool), intercept=True, adjust=bh)
    D = indicators(codes, range(2))
    # oracle: statsmodels nested OLS fits
    separate = ols(y, np.column_stack([D, *(D * Z[:, [j]] for j in range(3))]))
    assert rel(comp.equal_slopes.statistic, separate.compare_f_test(ols(y, np.column_stack([D, Z])))[0]) < 1e-9
    assert rel(comp.common_line.statistic, separate.compare_f_test(ols(y, sm.add_constant(Z)))[0]) < 1e-9


def test_leave_one_out_factors_match_qr_of_the_stacked_others():
    rng = np.random.default_rng(8)
    for C in (2, 3, 5, 8, 13):
        F = np.linalg.qr(rng.normal(size=(C, 6, 3)), mode="r")
        loo, everyone = leave_one_out(F)
        for g in range(C):
            # oracle: numpy QR of the other factors stacked; R'R is unique whatever the signs
            R = np.linalg.qr(np.concatenate([F[h] for h in range(C) if h != g]), mode="r")
            assert np.allclose(loo[g].T @ loo[g], R.T @ R, rtol=1e-12, atol=1e-12)
        R = np.linalg.qr(F.reshape(-1, 3), mode="r")
        assert np.allclose(everyone.T @ everyone, R.T @ R, rtol=1e-12, atol=1e-12)


def test_groups_left_out_and_comparisons_not_made():
    y, X, codes, _ = grouped(9, sizes=(12, 2, 20, 15))
    X[codes == 3, 1] = 4.0                                        # an input constant within group 3
    ok = np.array([True, True, True, True])
    comp = compare_groups(y, X, codes, ok, intercept=True, adjust=bh)
    assert comp.compared and comp.codes.tolist() == [0, 2]
    assert "only 2 usable rows" in comp.left_out[1] and comp.left_out[3] == FLAT_INPUT
    ok[0] = False
    comp = compare_groups(y, X, codes, ok, intercept=True, adjust=bh)
    assert comp.reason == TOO_FEW_GROUPS and comp.left_out[0] == NOT_FITTED
    assert compare_groups(y, X, codes, np.ones(4, bool), intercept=False, adjust=bh).reason == NO_CONSTANT
    assert compare_groups(y, X[:, :1], codes, np.ones(4, bool), intercept=True, adjust=bh).reason == NO_INPUT
    with pytest.raises(ValueError):
        compare_groups(y, X, codes, np.ones(4, bool), intercept=True, adjust=bh, weights=np.zeros(len(y)))
