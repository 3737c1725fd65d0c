"""The oracle of the combination matrix (tests/test_combinations.py), part one: per group, the design built
by hand from the README's definitions and fitted by statsmodels (OLS; WLS with the case's weights divided
by their group's mean), the brute-force change-point search, the row measures and row flags, the robust
fits and the calibration columns; and `close`, the tolerance every comparison holds a value to. The
expected value of every check, the lack-of-fit and category tests and the groups sheet's condition number,
VIF and NMBE are part two, tests/combination_checks.py.

A group is a (response, file, --group value) as the results show it (README: several responses and several
files are group keys): statsmodels per response on the rows where that response, every input and the
weight are usable. A category input becomes, per group, the indicators of the levels its rows show against
the run's reference (its own first level where it lacks the reference; none where it shows one level), a
product `A by CAT` A times each of those indicators, `A by B` the product column.

A weighted group (weights that vary; README: equal weights give the ordinary fit) is judged as the
weighted model √w·y = √w·X·b: statsmodels `WLS(y, X, weights=w)` for the fit, its statsmodels OLS twin
on √w·y and √w·X (`GroupReference.white`) for influence and the residuals √w·e every check tests.
Where the README's definition with change points is not what statsmodels gives (the studentized residual
on n − k − c − 1 df), it is computed by hand from that definition, and the comment says so.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.outliers_influence import OLSInfluence
from statsmodels.tools.sm_exceptions import SingularMatrixWarning

from tests.combination_cases import Key, RowId, key_of, num, text, with_file_rows
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

ALPHA = 0.05                       # README: the default --alpha
LOD_FACTOR, LOQ_FACTOR = 3.3, 10.0  # ICH Q2(R1), 6.3 and 7.3: 3.3·σ/S and 10·σ/S from the calibration line
BACK_CALC_LIMIT, BACK_CALC_LIMIT_LOWEST = 15.0, 20.0   # README defaults; common practice in method validation
RTOL = 1e-9                        # every comparison: 1e-9 relative, floor 1e-9 · the value's scale


def close(actual, expected, what: str, scale=0.0) -> None:
    """|actual − expected| ≤ 1e-9·|expected| + 1e-9·scale, elementwise; NaN only where expected is NaN."""
    a = np.atleast_1d(np.asarray(actual, dtype=float))
    e = np.atleast_1d(np.asarray(expected, dtype=float))
    assert a.shape == e.shape, f"{what}: shape {a.shape} against {e.shape}"
    assert (np.isnan(a) == np.isnan(e)).all(), f"{what}: NaN at {np.isnan(a)} expected at {np.isnan(e)}"
    tol = RTOL * np.abs(e) + RTOL * np.broadcast_to(np.asarray(scale, dtype=float), e.shape)
    bad = ~np.isnan(e) & ~(np.abs(a - e) <= tol)
    if bad.any():
        i = int(np.flatnonzero(bad)[np.argmax((np.abs(a - e) / np.maximum(tol, 1e-300))[bad])])
        raise AssertionError(f"{what}: {a[i]!r} against the reference {e[i]!r} (relative difference "
                             f"{abs(a[i] - e[i]) / abs(e[i]) if e[i] else float('inf'):.2e}; {bad.sum()} of "
                             f"{bad.size} values off)")


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


TWO_HINGES = ("two-slopes", "heating-cooling")
HINGE_SHAPES = ("heating", "cooling", *TWO_HINGES)      # the shapes with change points


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


def reference_ids(gr: GroupReference) -> list[RowId]:
    """The group's used rows as (response, file name, row in that file)."""
    return list(zip([gr.response] * len(gr.rows), gr.rows["_file"], gr.rows["_file_row"].astype(int)))


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


def reported_shapes(case: Case, groups: pd.DataFrame) -> dict:
    """Each group's shape and change point(s) as sheetfit reports them on `groups` (README: `change point`
    is the single one, or heating-cooling's lower one; `upper change point` its upper one)."""
    out = {}
    for _, row in groups.iterrows() if case.change_point != "none" else ():
        name, cp = text(row["shape"]), num([row["change point"]])[0]
        upper = num([row.get("upper change point")])[0]
        below = cp if name in ("heating", "two-slopes", "heating-cooling") else np.nan
        above = {"cooling": cp, "two-slopes": cp, "heating-cooling": upper}.get(name, np.nan)
        out[key_of(case, row)] = Shape(name, below, above)
    return out


# ---------------------------------------------------------------- rows and robust fits

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
