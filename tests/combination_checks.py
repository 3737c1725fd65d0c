"""The oracle of the combination matrix (tests/test_combinations.py), part two: the expected statistic and
p-value of every check on the residuals √w·e of a group's fit (tests/combination_oracle.py: the fits and row
measures), the lack-of-fit F against the cell-means model, a category's all-levels F, and the condition
number, VIFs and NMBE the groups and coefficients sheets show; and the checks sheet compared with them
(which checks may be n/a, the robust covariance the verdicts choose, the Benjamini–Hochberg adjusted
p-values by statsmodels multipletests).

Oracles: statsmodels diagnostics (Jarque–Bera, Breusch–Pagan in Koenker's form, White, Durbin–Watson
statistic, Breusch–Godfrey, RESET F form, VIF, `compare_f_test`, `f_test`), scipy (Shapiro–Wilk, t and chi²
laws; the exact Durbin–Watson p-value by Imhof's formula with scipy.integrate.quad over numpy eigenvalues).
Where the README's definition for a weighted fit is not a statsmodels routine (Breusch–Godfrey with the
uncentred R², the VIF from a weighted R²), it is computed by hand from that definition with statsmodels
regressions, and the comment says so.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import statsmodels.api as sm
from scipy import integrate, stats
from statsmodels.stats.diagnostic import (
    acorr_breusch_godfrey,
    het_breuschpagan,
    het_white,
)
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.outliers_influence import variance_inflation_factor
from statsmodels.stats.stattools import durbin_watson, jarque_bera
from statsmodels.tools.sm_exceptions import SingularMatrixWarning

from tests.combination_cases import key_of, num, of_group, text
from tests.combination_oracle import RTOL, GroupReference, close, robust_fits
from tests.combinations import Case

# the names of checks the comparisons single out (the baseline criteria run with --change-point only)
BASELINE = ("baseline: CV(RMSE) within limit", "baseline: NMBE within limit", "baseline: R² at least limit")
LACK_OF_FIT = "lack of fit (replicates)"


def levels_differ(gr: GroupReference, column: str) -> tuple[float, float]:
    """The groups sheet's all-levels test of a category: statsmodels f_test of the group's indicators jointly
    zero (classic covariance); NaN where the group estimates none."""
    slots = gr.indicators.get(column, [])
    if not slots:
        return np.nan, np.nan
    test = gr.fit.f_test(np.eye(gr.k)[slots])                                  # statsmodels
    return float(np.squeeze(test.fvalue)), float(np.squeeze(test.pvalue))


# ---------------------------------------------------------------- collinearity and NMBE

def condition_number(gr: GroupReference) -> float:
    """README: the condition number of the (whitened, √w·X) design with unit-length columns (numpy); NaN for
    a design with fewer than two non-constant columns (sheetfit/checks/collinearity.py: the check is n/a,
    'collinearity does not arise')."""
    Xw = np.asarray(gr.white.model.exog)
    if gr.k - int(gr.fit.k_constant) < 2:
        return np.nan
    return np.linalg.cond(Xw / np.linalg.norm(Xw, axis=0))


def coefficient_vifs(case: Case, gr: GroupReference) -> np.ndarray:
    """The VIF per coefficient (NaN for the constant and where the design has fewer than two non-constant
    columns). Unweighted: statsmodels variance_inflation_factor on the design as fitted. Weighted (README:
    VIF_j = [(X'WX)⁻¹]_jj·Σw(x_j − x̄_w)², uncentred without a constant): 1/(1 − R²_j) with R²_j the
    statsmodels WLS R² of column j on the others (centred about the weighted mean with a constant)."""
    off = int(case.intercept)
    out = np.full(gr.k, np.nan)
    if gr.k - off < 2:
        return out
    for j in range(off, gr.k):
        if gr.weighted:
            r2 = sm.WLS(gr.X[:, j], np.delete(gr.X, j, axis=1), weights=gr.w).fit().rsquared
            out[j] = 1 / (1 - r2)
        else:
            with warnings.catch_warnings():       # a product beside its factors (condition ~1e4): statsmodels warns
                warnings.simplefilter("ignore", UserWarning)
                out[j] = variance_inflation_factor(gr.X, j, standardize=False)
    return out


def expected_gvif(gr: GroupReference, case: Case) -> float:
    """The VIF check: the largest GVIF^(1/df) over the inputs (README; Fox & Monette 1992). An input with
    one column: its VIF (coefficient_vifs); with several (x and x², two hinges): det(R11)·det(R22)/det(R)
    on the correlation matrix of the non-constant columns (numpy; uncentred without an intercept; about
    the weighted means with the weights in a weighted fit)."""
    X, root = gr.X[:, int(case.intercept):], np.sqrt(gr.w)[:, None]
    Z = root * (X - np.average(X, axis=0, weights=gr.w)) if case.intercept else root * X
    R = (Z.T @ Z) / np.outer(*[np.linalg.norm(Z, axis=0)] * 2)
    vifs = coefficient_vifs(case, gr)[int(case.intercept):]
    out = []
    for source in dict.fromkeys(gr.sources):
        own = [j for j, s in enumerate(gr.sources) if s == source]
        rest = [j for j in range(X.shape[1]) if j not in own]
        if len(own) == 1:
            out.append(vifs[own[0]])
        else:
            gvif = np.linalg.det(R[np.ix_(own, own)]) * np.linalg.det(R[np.ix_(rest, rest)]) / np.linalg.det(R)
            out.append(gvif ** (1 / len(own)))
    return max(out)


def nmbe(gr: GroupReference) -> tuple[float, float]:
    """README / sheetfit/checks/baseline.py: NMBE % = 100·Σ(y − ŷ)/((n − k − c)·ȳ), by hand from the
    statsmodels residuals; and its scale (the same with |y| in place of the residuals)."""
    y, df = gr.y, gr.fit.df_resid
    return 100 * gr.fit.resid.sum() / (df * y.mean()), 100 * np.abs(y).sum() / (df * abs(y.mean()))


# ---------------------------------------------------------------- the checks

def expected_checks(case: Case, gr: GroupReference, rm: dict, chosen) -> dict:
    """Statistic and p-value of every check that needs no n/a decision, on the residuals √w·e."""
    ref, n, k, c = gr.fit, len(gr.rows), gr.k, gr.c
    e = np.asarray(gr.white.resid)
    exog_c = gr.X if case.intercept else sm.add_constant(gr.X, has_constant="add")   # the tests need a constant
    jb, sw = jarque_bera(e), stats.shapiro(e)                                   # statsmodels, scipy
    # statsmodels (Koenker): README regresses the squared weighted residuals on the inputs themselves
    bp = het_breuschpagan(e, exog_c, robust=True)
    # Bonferroni outlier test with sheetfit's documented df: t(n − k − c − 1) (sheetfit/checks/influence.py
    # outlier_test) on the studentized residuals of row_measures; scipy
    t_max = np.nanmax(np.abs(rm["studentized"])) if np.isfinite(rm["studentized"]).any() else np.nan
    want = {
        "model F-test": (chosen.fvalue, chosen.f_pvalue),   # fvalue first: a robust F caches its Wald F p-value
        "R² below threshold": (ref.rsquared, None),         # statsmodels WLS: 1 − Σw·e²/Σw·(y − ȳw)²
        "enough data": (n / (k + c), None),                 # README: rows per estimated parameter, c counted
        "normal residuals (Jarque–Bera)": (jb[0], jb[1]),
        "normal residuals (Shapiro–Wilk)": (sw.statistic, sw.pvalue),
        "constant variance (Breusch–Pagan)": (bp[0], bp[1]),
        "independent residuals (Durbin–Watson)": (durbin_watson(e), durbin_watson_p(gr, durbin_watson(e))),
        "outlier (Bonferroni)": (t_max, np.minimum(1.0, n * 2 * stats.t.sf(t_max, n - k - c - 1))),
        "influence (Cook's distance)": (np.nanmax(rm["cooks"]), None),
        "single-row leverage": (rm["leverage"].max(), None),
        "collinearity (condition number)": (condition_number(gr), None),
    }
    if case.change_point != "none":     # README: CV(RMSE) and NMBE over n − p, p = k + c; R²
        want.update({BASELINE[0]: (100 * np.sqrt(ref.scale) / gr.y.mean(), None),
                     BASELINE[1]: (abs(nmbe(gr)[0]), None), BASELINE[2]: (ref.rsquared, None)})
    return want


def durbin_watson_p(gr: GroupReference, d: float) -> float:
    """Two-sided p-value of the Durbin–Watson statistic d under independent normal errors, 2·min(F, 1 − F)
    (sheetfit's about sheet), F = P(DW ≤ d) = P(Σ(λ_i − d)·z_i² ≤ 0) exactly (Durbin & Watson 1971): λ_i the
    n − k non-zero eigenvalues of M·A·M (numpy; M the residual maker of the whitened design, A = DᵀD of the
    first differences), F by Imhof's (1961) inversion formula integrated with scipy.integrate.quad. With two
    weights μ₊ > 0 > μ₋, z₁/z₂ is standard Cauchy and F = (2/π)·arctan(√(−μ₋/μ₊)) in closed form; with one,
    DW is the constant λ₁ whatever the errors, so there is nothing to test (NaN)."""
    Xw = np.asarray(gr.white.model.exog)
    n, k = Xw.shape
    Q = np.linalg.qr(Xw)[0]
    M = np.eye(n) - Q @ Q.T
    D = np.diff(np.eye(n), axis=0)
    mu = np.sort(np.linalg.eigvalsh(M @ D.T @ D @ M))[k:] - d
    if len(mu) < 2:
        return np.nan
    if (mu >= 0).all() or (mu <= 0).all():
        low = float((mu <= 0).all())
    elif len(mu) == 2:
        low = 2 / np.pi * np.arctan(np.sqrt(-mu.min() / mu.max()))
    else:
        def integrand(u: float) -> float:
            return np.sin(0.5 * np.arctan(mu * u).sum()) / (u * np.prod((1 + (mu * u) ** 2) ** 0.25))

        low = 0.5 - integrate.quad(integrand, 0, np.inf, limit=2000, epsabs=1e-13, epsrel=1e-12)[0] / np.pi
    return min(1.0, 2 * min(low, 1 - low))


def white(case: Case, gr: GroupReference):
    """statsmodels het_white of the residuals √w·e on the inputs themselves (README)."""
    with warnings.catch_warnings():      # x·x repeats the x^2 column: statsmodels counts the rank
        warnings.simplefilter("ignore", SingularMatrixWarning)
        exog_c = gr.X if case.intercept else sm.add_constant(gr.X, has_constant="add")
        return het_white(np.asarray(gr.white.resid), exog_c)[:2]                # statsmodels


def white_rank(case: Case, gr: GroupReference) -> int:
    """The rank of White's auxiliary design as statsmodels het_white builds it (every product x_i·x_j, i ≤ j,
    of the design with a constant), by numpy matrix_rank on the non-zero columns scaled to unit length:
    with n ≤ rank the squared residuals are fitted exactly and White's test has nothing left to test."""
    exog_c = gr.X if case.intercept else sm.add_constant(gr.X, has_constant="add")
    i, j = np.triu_indices(exog_c.shape[1])
    Z = exog_c[:, i] * exog_c[:, j]
    norms = np.linalg.norm(Z, axis=0)
    return int(np.linalg.matrix_rank(Z[:, norms > 0] / norms[norms > 0]))


def breusch_godfrey(case: Case, gr: GroupReference):
    """Lag 1. Unweighted: statsmodels acorr_breusch_godfrey. Weighted (README: the weighted model's own
    design, which holds no constant): n·(uncentred R²) of √w·e on [√w·X, √w·e lagged once, 0 first], by
    hand from the RSS of the statsmodels OLS auxiliary fit; p from chi²(1) (scipy)."""
    if not gr.weighted:
        bg = acorr_breusch_godfrey(gr.fit, nlags=1, result_object=True)         # statsmodels
        return bg.lm, bg.lmpval
    e = np.asarray(gr.white.resid)
    aux = sm.OLS(e, np.column_stack([gr.white.model.exog, np.r_[0.0, e[:-1]]])).fit()
    lm = len(e) * (1 - aux.ssr / (e @ e))
    return lm, stats.chi2.sf(lm, 1)


def reset(case: Case, gr: GroupReference):
    """RESET, F form with fitted² and fitted³ (Ramsey 1969): statsmodels' F of the augmented fit against the
    fit, both with the change points counted (sheetfit/checks/linear_form.py: df n − k − c − 2). Weighted:
    the raw ŷ² and ŷ³ join the WLS design, so √w·ŷ² and √w·ŷ³ join the whitened one (README)."""
    f = np.asarray(gr.fit.fittedvalues)
    Z = np.column_stack([gr.X, f**2, f**3])
    aug = gr.regression(gr.y, Z, gr.fit.df_resid - 2)
    F, p, _ = aug.fit().compare_f_test(gr.fit)                                   # statsmodels
    # F is a difference of two residual sums of squares of a design whose fitted² and fitted³ columns are
    # nearly collinear with the inputs: neither statsmodels nor any double-precision method holds more than
    # about κ²·eps of it relative (κ the condition number of the unit-length columns); a few cases with one
    # residual degree of freedom reach that (exact rational arithmetic puts both within it, not within 1e-9)
    Zs = Z / np.linalg.norm(Z, axis=0)
    kappa = np.linalg.cond(Zs)
    return F, p, kappa**2 * np.finfo(float).eps


def lack_of_fit(case: Case, gr: GroupReference) -> tuple[float, float] | str:
    """README: F = (SS_LOF/(m − p))/(SS_PE/(n − m)), m distinct input points, p = k + c; the F-test of the
    fit against the cell-means model (one mean per input point, weighted alike), statsmodels
    compare_f_test (NIST/SEMATECH e-Handbook 4.6.1). Where it cannot run: why (no replicates, m ≤ p)."""
    point = gr.rows.groupby(gr.inputs, sort=False).ngroup().to_numpy()
    n, m = len(point), int(point.max()) + 1
    if n - m <= 0:
        return "no repeated input values"
    if m - (gr.k + gr.c) <= 0:
        return "too few distinct input values"
    cells = gr.regression(gr.y, np.eye(m)[point]).fit()                         # statsmodels
    F, p, _ = cells.compare_f_test(gr.fit)
    return F, p


# ---------------------------------------------------------------- the checks sheet against them

def compare_checks(case: Case, gr: GroupReference, t: dict, rm: dict) -> tuple[dict, list]:
    """Every check of the group on `checks`; returns whether robust std errors apply and the comparisons
    a known fault breaks (run last)."""
    checks, label = of_group(t["checks"], gr.key), gr.label

    def value(check, column):
        hit = checks[checks["check"] == check]
        assert len(hit) == 1, f"{label}: check {check!r} appears {len(hit)} times"
        return num([hit[column].iloc[0]])[0]

    def verdict(check):
        return checks[checks["check"] == check]["verdict"].iloc[0]

    def not_applicable(check):
        note = text(checks[checks["check"] == check]["note"].iloc[0]).strip()
        return np.isnan(value(check, "statistic")) and verdict(check) == "n/a" and bool(note)

    het = any(verdict(c) == "fail" for c in ("constant variance (Breusch–Pagan)", "constant variance (White)"))
    dep = any(verdict(c) == "fail" for c in ("independent residuals (Durbin–Watson)",
                                             "independent residuals (Breusch–Godfrey)"))
    hc, hac, lag = robust_fits(gr.fit, len(gr.rows))
    robust = case.inference == "robust" and (het or dep)
    chosen = hac if (robust and dep) else hc if robust else gr.fit
    want = expected_checks(case, gr, rm, chosen)
    if case.change_point == "none":
        assert not checks["check"].isin(BASELINE).any(), f"{label}: baseline checks without --change-point"

    # White, Breusch–Godfrey and RESET are n/a (with a note) when the rows are too few for their auxiliary
    # regressions (README): for White, when they are no more than the rank of its products (statsmodels would
    # fit the squared residuals exactly), for the others in the tiny groups; elsewhere they match statsmodels
    def optional(check, compute, too_few: bool):
        if np.isnan(value(check, "statistic")):
            assert not_applicable(check), f"{label}: {check} blank without n/a and a note"
            assert too_few, f"{label}: {check} n/a with {len(gr.rows)} rows"
        else:
            want[check] = compute(case, gr)

    def white_last():                    # kind "white" of KNOWN_FAULTS (tests/test_combinations.py)
        optional("constant variance (White)", white, len(gr.rows) <= white_rank(case, gr))
        compare_values({k: v for k, v in want.items() if k == "constant variance (White)"}, value, label)

    later = [("white", white_last)]
    optional("independent residuals (Breusch–Godfrey)", breusch_godfrey, case.sizes == "tiny")
    optional("linear form (RESET)", reset, case.sizes == "tiny")
    if np.isnan(want["collinearity (condition number)"][0]):
        assert not_applicable("collinearity (condition number)"), f"{label}: condition number of one column"
    # The VIF check judges inputs (source columns): n/a for one input (CDD with CDD^2, or CDD's hinges with CDD^2)
    if len(set(gr.sources)) < 2:
        assert np.isnan(value("collinearity (VIF)", "statistic")) and verdict("collinearity (VIF)") == "n/a", \
            f"{label}: VIF check on one input"
    else:
        want["collinearity (VIF)"] = (expected_gvif(gr, case), None)
    found = lack_of_fit(case, gr)            # README: n/a with a note without replicates
    if isinstance(found, str):
        assert not_applicable(LACK_OF_FIT), f"{label}: lack of fit not n/a with a note ({found})"
    else:
        want[LACK_OF_FIT] = found
    compare_values(want, value, label)
    close(value("influence (Cook's distance)", "threshold"), rm["cut"], f"{label} Cook's distance threshold", 1)
    return {"het": het, "dep": dep, "hc": hc, "hac": hac, "lag": lag, "chosen": chosen}, later


def compare_values(want: dict, value, label: str) -> None:
    """Each expected (statistic, p-value) of `want` against the sheet's; a p-value of None is not compared."""
    for check, (stat, pval, *accuracy) in want.items():
        scale = max(1.0, accuracy[0] / RTOL * abs(float(np.squeeze(stat)))) if accuracy else 1
        close(value(check, "statistic"), np.squeeze(stat), f"{label} {check} statistic", scale)
        if pval is not None:
            close(value(check, "p-value"), np.squeeze(pval), f"{label} {check} p-value", 1)


def compare_adjusted_p_values(case: Case, refs: list[GroupReference], t: dict[str, pd.DataFrame]) -> None:
    """adjusted p-value = Benjamini–Hochberg across all groups (every response's and file's), per check
    (statsmodels multipletests)."""
    for name, rows in t["checks"].groupby("check", sort=False):
        at = {key_of(case, r): i for i, (_, r) in enumerate(rows.iterrows())}
        rows = rows.iloc[[at[r.key] for r in refs]]
        pv = num(rows["p-value"])
        ok = np.isfinite(pv)
        if not ok.any():
            continue
        want = np.full(len(pv), np.nan)
        want[ok] = multipletests(pv[ok], method="fdr_bh")[1]                    # statsmodels
        close(num(rows["adjusted p-value"]), want, f"{name} adjusted p-value", 1)
