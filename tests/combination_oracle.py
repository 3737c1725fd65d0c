"""The oracle of the combination matrix (tests/test_combinations.py): per group, the design built by hand
from the README's definitions and fitted by statsmodels (OLS; WLS with the case's weights divided by
their group's mean), the brute-force change-point search, and the expected value of every check, row
measure, lack-of-fit test, category test and calibration column.

A group is a (response, file, --group value) as the results show it (README: several responses and several
files are group keys): statsmodels per response on the rows where that response, every input and the
weight are usable. A category input becomes, per group, the indicators of the levels its rows show against
the run's reference (its own first level where it lacks the reference; none where it shows one level), a
product `A by CAT` A times each of those indicators, `A by B` the product column.

A weighted group (weights that vary; README: equal weights give the ordinary fit) is judged as the
weighted model √w·y = √w·X·b: statsmodels `WLS(y, X, weights=w)` for the fit, its statsmodels OLS twin
on √w·y and √w·X (`GroupReference.white`) for influence and the residuals √w·e every check tests.
Where the README's definition for a weighted fit is not a statsmodels routine (Breusch–Godfrey with
the uncentred R², the VIF from a weighted R²), it is computed by hand from that definition with
statsmodels regressions, and the comment says so.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import statsmodels.api as sm
from scipy import integrate, stats
from statsmodels.stats.diagnostic import (
    acorr_breusch_godfrey,
    het_breuschpagan,
    het_white,
)
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor
from statsmodels.stats.stattools import durbin_watson, jarque_bera
from statsmodels.tools.sm_exceptions import SingularMatrixWarning

from tests.combination_cases import Key, with_file_rows
from tests.combinations import (
    CATEGORY_TERMS,
    CHANGE_POINTS,
    FILE_KEY,
    INPUTS,
    REFERENCE_COLUMNS,
    RESPONSE_KEY,
    SEQ,
    SLOPES_BY_LEVEL,
    SOURCE,
    TEMPERATURE,
    Case,
    level_label,
    numbers,
    reference_weights,
    run_levels,
)

BASELINE = ("baseline: CV(RMSE) within limit", "baseline: NMBE within limit", "baseline: R² at least limit")
ALPHA = 0.05                       # README: the default --alpha
LOD_FACTOR, LOQ_FACTOR = 3.3, 10.0  # ICH Q2(R1), 6.3 and 7.3: 3.3·σ/S and 10·σ/S from the calibration line
BACK_CALC_LIMIT, BACK_CALC_LIMIT_LOWEST = 15.0, 20.0   # README defaults; common practice in method validation


@dataclass(frozen=True)
class Shape:
    """A group's shape as sheetfit reports it: 'line' or a README shape, with τ of the max(0, τ − T)
    column (`below`) and of the max(0, T − τ) column (`above`); NaN where the shape has none."""

    name: str = "line"
    below: float | np.ndarray = np.nan
    above: float | np.ndarray = np.nan

    @property
    def change_points(self) -> int:
        return CHANGE_POINTS.get(self.name, 0)


def temperature_columns(t: np.ndarray, shape: Shape) -> list[np.ndarray]:
    """README: a shape's columns in place of T, max(0, τ − T) before max(0, T − τ); T itself for a line."""
    cols = []
    if shape.name in ("heating", "two-slopes", "heating-cooling"):
        cols.append(np.maximum(0.0, shape.below - t))
    if shape.name in ("cooling", "two-slopes", "heating-cooling"):
        cols.append(np.maximum(0.0, t - shape.above))
    return cols or [t]


@dataclass
class GroupReference:
    """One group's usable rows in sequence, its design and its statsmodels fit."""

    key: Key
    response: str
    rows: pd.DataFrame          # usable rows in the order the fit sees them (`_file`, `_file_row`: where each is)
    X: np.ndarray               # design as fitted (intercept column first when there is one)
    labels: list[str]           # the coefficients' names (README), one per column of X
    fit: object                 # statsmodels OLS or WLS results, change points counted in its df
    dropped: int                # rows of the group the model could not use
    shape: Shape                # the change-point shape the design was built at
    sources: list[str]          # the input of every non-constant design column (for the GVIF)
    others: np.ndarray          # the design without the temperature's columns (the brute-force search)
    w: np.ndarray               # weights as fitted: divided by their mean (README); ones when they do not vary
    white: object               # statsmodels OLS of √w·y on √w·X (the fit itself when unweighted)
    inputs: list[str]           # the columns the terms read (an input point for lack of fit: a row's values in all)
    indicators: dict[str, list[int]] = field(default_factory=dict)   # category → its indicators' columns of X
    seen: dict[str, list[str]] = field(default_factory=dict)         # category → the levels the rows show
    levels: dict = field(default_factory=dict)       # category → (the run's levels, its reference): run_levels

    @property
    def label(self) -> str:
        return ", ".join(f"{c} {v}" for c, v in self.key) or "the group"

    @property
    def k(self) -> int:
        return self.X.shape[1]

    @property
    def c(self) -> int:
        return self.shape.change_points

    @property
    def y(self) -> np.ndarray:
        return numbers(self.rows, self.response)

    @property
    def weighted(self) -> bool:
        return bool((self.w != 1.0).any())

    def regression(self, endog: np.ndarray, exog: np.ndarray, df_resid: float | None = None):
        """A statsmodels model of the group's kind (WLS with its weights, else OLS); `df_resid` set before fit."""
        model = sm.WLS(endog, exog, weights=self.w) if self.weighted else sm.OLS(endog, exog)
        if df_resid is not None:
            model.df_resid = df_resid
        return model


def _fitted(model, case: Case, shape: Shape):
    """The model fitted with README's degrees of freedom. Change points count as parameters, residual df
    n − k − c: statsmodels keeps degrees of freedom set before fit() (RegressionModel.fit fills them only
    while None) and takes from them scale = RSS/df_resid, bse, t, p-values and conf_int (t with df_resid),
    F = (ESS/df_model)/scale with F(df_model, df_resid), adjusted R² and AIC/BIC (df_model + k_constant)."""
    n, k = model.exog.shape
    model.df_resid = n - k - shape.change_points
    model.df_model = k - int(case.intercept) + shape.change_points
    return model.fit()


def _usable(case: Case, g: pd.DataFrame, response: str) -> np.ndarray:
    """README: a row is used when its response is a number, every term is defined there (a category cell not
    blank) and its weight is a positive number."""
    ok = np.isfinite(numbers(g, response))
    given = reference_weights(case, g)
    ok &= np.isfinite(given) & (given > 0)
    with np.errstate(divide="ignore", invalid="ignore"):     # log(0) = −inf, sqrt(−3.5) = NaN
        for t in case.terms:
            if t in REFERENCE_COLUMNS:
                ok &= np.isfinite(REFERENCE_COLUMNS[t](g))
            number, col = SLOPES_BY_LEVEL.get(t, (None, CATEGORY_TERMS.get(t)))
            ok &= (g[col].map(level_label) != "").to_numpy() if col else True
            ok &= np.isfinite(numbers(g, number)) if number else True
    return ok


def design(case: Case, g: pd.DataFrame, ok: np.ndarray, shape: Shape, levels: dict) -> dict:
    """The group's design by hand on its usable rows `g[ok]`, term by term in the order given: the constant,
    number terms (a product A·B), T's hinge columns under a shape, and per category, for each level of the run
    but its reference that the rows show, the level's indicator (or A times it); where the rows lack the
    reference their own first level is left out instead, and where they show one level only nothing (README)."""
    rows = g.loc[ok]
    out = {"cols": [np.ones(len(rows))] if case.intercept else [], "labels": ["constant"] if case.intercept else [],
           "sources": [], "others": [], "indicators": {}, "seen": {}}
    with np.errstate(divide="ignore", invalid="ignore"):
        for t in case.terms:
            number, col = SLOPES_BY_LEVEL.get(t, (None, CATEGORY_TERMS.get(t)))
            if col:
                all_levels, ref = levels[col]
                labels = rows[col].map(level_label).to_numpy()
                seen = sorted(set(labels))
                own = ref if ref in seen or not seen else seen[0]
                out["seen"][col] = seen
                new = [(f"{col}: {v} vs {ref}" if number is None else f"{number} by {col}: {v} vs {ref}",
                        (labels == v) * (1.0 if number is None else numbers(rows, number)))
                       for v in all_levels if v != ref and v != own and v in seen and len(seen) > 1]
                if number is None:
                    first = len(out["cols"])
                    out["indicators"][col] = list(range(first, first + len(new)))
            elif t == TEMPERATURE and shape.name != "line":
                words = {"heating": ["below"], "cooling": ["above"]}.get(shape.name, ["below", "above"])
                new = list(zip([f"{t} {w} change point" for w in words],
                               temperature_columns(REFERENCE_COLUMNS[t](g)[ok], shape)))
            else:
                new = [(t, REFERENCE_COLUMNS[t](g)[ok])]
            out["labels"] += [name for name, _ in new]
            out["cols"] += [values for _, values in new]
            out["sources"] += [SOURCE[t]] * len(new)
            out["others"] += [] if t == TEMPERATURE else [values for _, values in new]
    return out


def reference_fits(case: Case, table: pd.DataFrame, shapes: dict | None = None) -> list[GroupReference]:
    """statsmodels OLS or WLS (the reference implementation) of every group, response by response, at the
    shape and change points `shapes` gives per group key (sheetfit's; a straight line without)."""
    table = with_file_rows(case, table)
    levels = run_levels(case, table)
    by = ["_file"] * (case.files > 1) + case.group
    keyed = list(table.groupby(by, sort=False)) if by else [((), table)]
    names = [FILE_KEY] * (case.files > 1) + case.group
    out = []
    for response in case.ys:
        for values, g in keyed:
            key = ((RESPONSE_KEY, response),) * (case.responses > 1) + tuple(
                zip(names, map(str, values if isinstance(values, tuple) else (values,))))
            shape = (shapes or {}).get(key, Shape()) if case.change_point != "none" else Shape()
            out.append(_group_fit(case, g, key, response, shape, levels))
    return out


def _group_fit(case: Case, g: pd.DataFrame, key: Key, response: str, shape: Shape, levels: dict) -> GroupReference:
    """One group's usable rows in sequence (README: --order, else the file's row order), design and fits."""
    ok = _usable(case, g, response)
    seq = g[SEQ].to_numpy() if case.order else g["_file_row"].to_numpy()
    sort = np.argsort(seq[ok], kind="stable")
    g = pd.concat([g.loc[ok].iloc[sort], g.loc[~ok]])          # usable rows in sequence first
    ok = np.r_[np.ones(sort.size, dtype=bool), np.zeros(int((~ok).sum()), dtype=bool)]
    d = design(case, g, ok, shape, levels)
    rows = g.iloc[: sort.size]
    X, y, given = np.column_stack(d["cols"]), numbers(rows, response), reference_weights(case, rows)
    # README: weights are divided by their mean within the group; all equal: the ordinary fit
    w = given / given.mean() if given.max() > given.min() else np.ones(len(rows))
    weighted = bool((w != 1.0).any())
    fit = _fitted(sm.WLS(y, X, weights=w) if weighted else sm.OLS(y, X), case, shape)
    root = np.sqrt(w)
    white = _fitted(sm.OLS(root * y, root[:, None] * X), case, shape) if weighted else fit
    others = d["others"] + ([np.ones(len(rows))] if case.intercept else [])
    return GroupReference(key=key, response=response, rows=rows, X=X, labels=d["labels"], fit=fit,
                          dropped=len(g) - len(rows), shape=shape, sources=d["sources"],
                          others=np.column_stack(others) if others else X[:, :0], w=w, white=white,
                          inputs=list(dict.fromkeys(c for t in case.terms for c in INPUTS[t])),
                          indicators=d["indicators"], seen=d["seen"], levels=levels)


def levels_differ(gr: GroupReference, column: str) -> tuple[float, float]:
    """The groups sheet's all-levels test of a category: statsmodels f_test of the group's indicators jointly
    zero (classic covariance); NaN where the group estimates none."""
    slots = gr.indicators.get(column, [])
    if not slots:
        return np.nan, np.nan
    test = gr.fit.f_test(np.eye(gr.k)[slots])                                  # statsmodels
    return float(np.squeeze(test.fvalue)), float(np.squeeze(test.pvalue))


# ---------------------------------------------------------------- change points

def hinge_rss(gr: GroupReference, shape: Shape) -> np.ndarray:
    """RSS of the least-squares fit of y on the group's other columns and the hinge columns of `shape`
    at every candidate (arrays of below/above τ): numpy SVD, minimum norm where rank-deficient."""
    t, y = gr.rows[TEMPERATURE].to_numpy(float), gr.y
    below, above = np.atleast_1d(shape.below)[:, None], np.atleast_1d(shape.above)[:, None]
    hinges = temperature_columns(t[None, :], Shape(shape.name, below, above))
    m = max(len(below), len(above))
    X = np.concatenate([np.broadcast_to(gr.others, (m, *gr.others.shape)),
                        np.stack(np.broadcast_arrays(*hinges), axis=2)], axis=2)
    U, sv, _ = np.linalg.svd(X, full_matrices=False)
    U = U * (sv > 1e-12 * sv[:, :1])[:, None, :]
    fitted = np.einsum("bnk,bk->bn", U, np.einsum("bnk,n->bk", U, y))
    return ((y - fitted) ** 2).sum(axis=1)


def grid_search(gr: GroupReference, name: str, steps: int) -> tuple[Shape, np.ndarray, float, float]:
    """Brute-force change points of a shape: every observed T in the admissible range (README: 3 rows on
    each side, from the 3rd smallest to the 3rd largest T) and `steps` points spread evenly over it (for
    heating-cooling every pair τh ≤ τc of them); the candidates, their RSS and the range's ends."""
    t = np.sort(gr.rows[TEMPERATURE].to_numpy(float))
    lo, hi = t[2], t[-3]
    taus = np.union1d(t[(t >= lo) & (t <= hi)], np.linspace(lo, hi, steps))
    i, j = np.triu_indices(len(taus)) if name == "heating-cooling" else (np.arange(len(taus)),) * 2
    grid = Shape(name, taus[i], taus[j])
    return grid, hinge_rss(gr, grid), lo, hi


# ---------------------------------------------------------------- rows, collinearity, robust fits

def robust_fits(ref, n: int):
    """statsmodels HC3 and Newey–West results (lag floor(4·(n/100)^(2/9)), at most n − 1; common practice);
    of a WLS fit they are those of the whitened model (statsmodels takes wexog and wresid)."""
    lag = int(min(np.floor(4 * (n / 100) ** (2 / 9)), n - 1))
    return ref.get_robustcov_results("HC3", use_t=True), ref.get_robustcov_results("HAC", maxlags=lag, use_t=True), lag


def row_measures(gr: GroupReference) -> dict:
    """Per row: leverage and Cook's distance of the (whitened) model (statsmodels OLSInfluence: its scale is
    RSS/(n − k − c) from the fit's df, its divisor the k columns, as README's D = e²h/(p·s²·(1 − h)²) with
    p = k), and the externally studentized residual. statsmodels refits without each row on n − 1 − k df;
    README and sheetfit/model/engine.py (_influence) count the change points: s₍ᵢ₎² = (RSS − e²/(1 − h))/
    (n − k − c − 1), so each leave-one-out RSS of statsmodels is divided by that df instead. Also the Cook's
    cut, the median of F(k, n − k − c) (scipy; Cook 1977, sheetfit/checks/influence.py cooks_cut). A row of
    leverage 1 (to 1e-10) alone fixes a coefficient: both of its measures divide by 1 − h = 0, so README
    leaves them undefined (NaN)."""
    with warnings.catch_warnings(), np.errstate(divide="ignore", invalid="ignore"):
        warnings.simplefilter("ignore", SingularMatrixWarning)      # leaving out a leverage-1 row: rank-deficient
        warnings.simplefilter("ignore", RuntimeWarning)
        infl = OLSInfluence(gr.white)                                            # statsmodels
        n, k, c = len(gr.rows), gr.k, gr.c
        h = infl.hat_matrix_diag
        one = h >= 1 - 1e-10
        s2_without = infl.sigma2_not_obsi * (n - 1 - k) / (n - 1 - k - c)
        studentized = np.asarray(gr.white.resid) / np.sqrt(s2_without * (1 - h))
        cooks = np.asarray(infl.cooks_distance[0], dtype=float)
    return {"leverage": h, "cooks": np.where(one, np.nan, cooks), "cut": stats.f.ppf(0.5, k, n - k - c),
            "studentized": np.where(one, np.nan, studentized)}


def expected_row_flags(gr: GroupReference, rm: dict) -> list[str]:
    """Row flags per README: leverage 1, |studentized| > 3, Cook's > the cut, then the common-practice
    leverage > 2p/n and Cook's > 4/n, p = k (change points do not enter the hat matrix:
    sheetfit/checks/influence.py row_highlights)."""
    n, out = len(gr.rows), []
    for hi, ti, di in zip(rm["leverage"], rm["studentized"], rm["cooks"]):
        words = [w for w, on in (("leverage 1", hi >= 1 - 1e-10), ("outlying", abs(ti) > 3),
                                 ("moves the fit", di > rm["cut"]), ("high leverage", hi > 2 * gr.k / n),
                                 ("influential", di > 4 / n)) if on]
        out.append("; ".join(words))
    return out


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
    aug = gr.regression(gr.y, np.column_stack([gr.X, f**2, f**3]), gr.fit.df_resid - 2)
    F, p, _ = aug.fit().compare_f_test(gr.fit)                                   # statsmodels
    return F, p


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


# ---------------------------------------------------------------- calibration lines

def calibration_limits(gr: GroupReference, slope_p: float) -> tuple[float, float]:
    """ICH Q2(R1): limit of detection 3.3·s/|b1| and of quantification 10·s/|b1|, s the residual std error
    (√scale of the fit), b1 the slope; README: empty when the slope's p-value is not below alpha."""
    s, b1 = np.sqrt(gr.fit.scale), gr.fit.params[1]
    if not slope_p < ALPHA:
        return np.nan, np.nan
    return LOD_FACTOR * s / abs(b1), LOQ_FACTOR * s / abs(b1)


def back_calculation(gr: GroupReference, slope_p: float) -> dict[str, np.ndarray]:
    """Per used row, by hand (README): the back-calculated input (y − b0)/b1, its deviation 100·(back − x)/x
    in % (empty at x = 0), and whether the row says something: deviation beyond ±15 % (±20 % at the group's
    lowest non-zero standard; common practice), or not read back where the slope's p ≥ alpha."""
    x, y = gr.rows[TEMPERATURE].to_numpy(float), gr.y
    b0, b1 = gr.fit.params[0], gr.fit.params[1]
    if not slope_p < ALPHA:
        nan = np.full(len(x), np.nan)
        return {"back": nan, "deviation": nan, "says": np.ones(len(x), dtype=bool)}
    back = (y - b0) / b1
    with np.errstate(divide="ignore", invalid="ignore"):
        dev = np.where(x != 0, 100 * (back - x) / x, np.nan)
    lowest = np.abs(x[x != 0]).min() if (x != 0).any() else np.nan
    cut = np.where(np.abs(x) == lowest, BACK_CALC_LIMIT_LOWEST, BACK_CALC_LIMIT)
    return {"back": back, "deviation": dev, "says": np.nan_to_num(np.abs(dev), nan=0.0) > cut}
