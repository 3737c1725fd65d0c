"""The combination matrix: options and inputs in combination, every group against statsmodels.

Oracle: statsmodels OLS fitted group by group (tests/combinations.py builds the design by hand from
the README's term definitions), statsmodels OLSInfluence, statsmodels diagnostics (Jarque–Bera,
Breusch–Pagan in Koenker's form, White, Durbin–Watson statistic, Breusch–Godfrey, RESET F form,
Bonferroni outlier test, VIF, robust HC3 / Newey–West covariances and their Wald F), scipy
(Shapiro–Wilk, Cook's F-median cut-off) and statsmodels `multipletests` (Benjamini–Hochberg).
Rules of thumb for the softer row flags are common practice (README). Data are invented and seeded.

Each value is compared at 1e-9 relative with an absolute floor of 1e-9 · the value's scale (the
coefficient's std error, max |y|, 1 for p-values and statistics of order one). Checks that cannot
run are n/a with a note (allowed only for White, Breusch–Godfrey and RESET in the tiny groups, and
for the VIF check when all terms come from one input).

Cases come from a deterministic all-pairs covering design over the dimensions below (every pair of
levels of any two dimensions occurs in some case); `python -m tests.combinations` lists them.
How a new option joins the matrix — add a level to its list in `tests/combinations.DIMENSIONS`:
  term          "plain" | "power" | "log" | "sqrt" | "date"  (+ its --x terms in TERMS, its column in REFERENCE_COLUMNS)
  sizes         "equal" | "unequal" | "tiny" | "one"         (+ its sizes in Case.group_sizes)
  intercept     True | False
  order         False | True                                 (order column "Seq"; rows shuffled in the file)
  observations  "all" | "flagged" | "none"                   (only the written observations sheet changes)
  inference     "classic" | "robust"
  format        "xlsx" | "csv" | "ods" | "xls"               (+ its writer in write_input)
  route         "api" | "cli"                                (fit_workbook + write_results, or `python -m sheetfit fit`)
A new dimension: a new key with its levels, a field of `Case`, and its effect in Case.settings/cli_args.
Known sheetfit faults found by the matrix are listed in KNOWN_FAULTS (strict xfail, one-line reason).
"""

from __future__ import annotations

import shutil
import warnings
from collections.abc import Callable
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.diagnostic import (
    acorr_breusch_godfrey,
    het_breuschpagan,
    het_white,
    linear_reset,
)
from statsmodels.stats.multitest import multipletests
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor
from statsmodels.stats.stattools import durbin_watson, jarque_bera
from statsmodels.tools.sm_exceptions import SingularMatrixWarning

import sheetfit
from tests.combinations import (
    DIMENSIONS,
    GROUP,
    Case,
    GroupReference,
    cases,
    convert_to_xls,
    make_table,
    pairs_missing,
    reference_fits,
    soffice,
    write_input,
)

RTOL = 1e-9
SHEETS = ("groups", "coefficients", "checks", "observations")
OBS_VALUES = ("fitted value", "residual", "leverage", "Cook's distance", "studentized residual")

# Sheetfit faults the matrix finds: (which cases, what fails). Each matching case is a strict xfail,
# so a fix shows up as XPASS(strict) and its entry must then go.
KNOWN_FAULTS: list[tuple[Callable[[Case], bool], str]] = []

CASES = cases()


def fault(case: Case) -> str | None:
    return next((why for applies, why in KNOWN_FAULTS if applies(case)), None)


def _param(case: Case):
    why = fault(case)
    return pytest.param(case, id=case.id, marks=[pytest.mark.xfail(strict=True, reason=why)] if why else [])


# ---------------------------------------------------------------- comparisons

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
        raise AssertionError(f"{what}: {a[i]!r} against statsmodels {e[i]!r} (relative difference "
                             f"{abs(a[i] - e[i]) / abs(e[i]) if e[i] else float('inf'):.2e}; {bad.sum()} of "
                             f"{bad.size} values off)")


def num(values) -> np.ndarray:
    """A column as float64, empty workbook cells (None) as NaN."""
    return pd.to_numeric(pd.Series(list(values), dtype=object), errors="coerce").to_numpy(dtype=float)


def of_group(frame: pd.DataFrame, key) -> pd.DataFrame:
    return frame if key is None else frame[frame[GROUP].astype(str) == key]


def robust_fits(ref, n: int):
    """statsmodels HC3 and Newey–West results (lag floor(4·(n/100)^(2/9)), at most n − 1; common practice)."""
    lag = int(min(np.floor(4 * (n / 100) ** (2 / 9)), n - 1))
    return ref.get_robustcov_results("HC3", use_t=True), ref.get_robustcov_results("HAC", maxlags=lag, use_t=True), lag


def expected_row_flags(gr: GroupReference, p: int) -> list[str]:
    """Row flags per README: leverage 1, |studentized| > 3, Cook's > median of F(p, n − p) (Cook 1977,
    scipy), then the common-practice leverage > 2p/n and Cook's > 4/n."""
    infl = OLSInfluence(gr.fit)                                                  # statsmodels
    n = len(gr.rows)
    h, t, d = infl.hat_matrix_diag, infl.resid_studentized_external, infl.cooks_distance[0]
    cut = stats.f.ppf(0.5, p, n - p)                                             # scipy
    out = []
    for hi, ti, di in zip(h, t, d):
        words = [w for w, on in (("leverage 1", hi >= 1 - 1e-10), ("outlying", abs(ti) > 3),
                                 ("moves the fit", di > cut), ("high leverage", hi > 2 * p / n),
                                 ("influential", di > 4 / n)) if on]
        out.append("; ".join(words))
    return out


def compare_group(case: Case, gr: GroupReference, t: dict[str, pd.DataFrame]) -> dict:
    """Every value of one group on the groups, coefficients, checks and observations tables."""
    ref, X = gr.fit, gr.X
    n, p = len(gr.rows), X.shape[1]
    y = gr.rows["kWh"].to_numpy(float)
    label = f"group {gr.key}" if gr.key else "the group"
    infl = OLSInfluence(ref)                                                     # statsmodels

    # groups sheet
    row = of_group(t["groups"], gr.key)
    assert len(row) == 1, f"{label}: {len(row)} rows on groups"
    row = row.iloc[0]
    assert row["status"] == "fitted", f"{label}: {row['status']} ({row['reasons']})"
    assert (int(row["rows used"]), int(row["rows not used"]), int(row["number of coefficients"])) == (n, gr.dropped, p), label
    for col, want, scale in [("R²", ref.rsquared, 1), ("adjusted R²", ref.rsquared_adj, 1),
                             ("residual std error", np.sqrt(ref.scale), 0), ("RMSE", np.sqrt(ref.ssr / n), 0),
                             ("CV(RMSE) %", 100 * np.sqrt(ref.scale) / y.mean(), 0),
                             ("F", ref.fvalue, 1), ("F p-value", ref.f_pvalue, 1), ("AIC", ref.aic, n),
                             ("BIC", ref.bic, n),
                             ("condition number", np.linalg.cond(X / np.linalg.norm(X, axis=0)), 1)]:  # numpy
        close(num([row[col]]), want, f"{label} groups {col}", scale)
    flags = expected_row_flags(gr, p)
    for col, word in [("high-leverage rows", "high leverage"), ("outlying rows", "outlying"),
                      ("influential rows", "influential")]:
        assert int(row[col]) == sum(word in f.split("; ") for f in flags), f"{label} groups {col}"

    # checks sheet (statistic and p-value per check)
    checks = of_group(t["checks"], gr.key)

    def value(check, column):
        hit = checks[checks["check"] == check]
        assert len(hit) == 1, f"{label}: check {check!r} appears {len(hit)} times"
        return num([hit[column].iloc[0]])[0]

    def verdict(check):
        return checks[checks["check"] == check]["verdict"].iloc[0]

    het = any(verdict(c) == "fail" for c in ("constant variance (Breusch–Pagan)", "constant variance (White)"))
    dep = any(verdict(c) == "fail" for c in ("independent residuals (Durbin–Watson)",
                                             "independent residuals (Breusch–Godfrey)"))
    hc, hac, lag = robust_fits(ref, n)
    robust = case.inference == "robust" and (het or dep)
    chosen = hac if (robust and dep) else hc if robust else ref

    e = ref.resid
    exog_c = X if case.intercept else sm.add_constant(X, has_constant="add")   # the tests need a constant
    jb = jarque_bera(e)                                                          # statsmodels
    sw = stats.shapiro(e)                                                        # scipy
    bp = het_breuschpagan(e, exog_c, robust=True)                                # statsmodels (Koenker)
    ot = np.asarray(ref.outlier_test(method="bonf"))                             # statsmodels
    vifs = [variance_inflation_factor(X, j, standardize=False)                # statsmodels, design as fitted
            for j in range(int(case.intercept), p)]
    want = {
        "model F-test": (chosen.fvalue, chosen.f_pvalue),
        "R² below threshold": (ref.rsquared, None),
        "enough data": (n / p, None),
        "normal residuals (Jarque–Bera)": (jb[0], jb[1]),
        "normal residuals (Shapiro–Wilk)": (sw.statistic, sw.pvalue),
        "constant variance (Breusch–Pagan)": (bp[0], bp[1]),
        "independent residuals (Durbin–Watson)": (durbin_watson(e), None),       # p: beta approximation, no reference
        "outlier (Bonferroni)": (np.abs(ot[:, 0]).max(), ot[:, 2].min()),
        "influence (Cook's distance)": (infl.cooks_distance[0].max(), None),
        "single-row leverage": (infl.hat_matrix_diag.max(), None),
        "collinearity (condition number)": (np.linalg.cond(X / np.linalg.norm(X, axis=0)), None),
    }
    # White, Breusch–Godfrey and RESET are n/a (with a note) when the rows are too few for their
    # auxiliary regressions (README); elsewhere they match statsmodels
    def white():
        with warnings.catch_warnings():      # x·x repeats the x^2 column: statsmodels counts the rank
            warnings.simplefilter("ignore", SingularMatrixWarning)
            return het_white(e, exog_c)[:2]                                      # statsmodels

    def breusch_godfrey():
        bg = acorr_breusch_godfrey(ref, nlags=1, result_object=True)             # statsmodels
        return bg.lm, bg.lmpval

    def reset():
        rr = linear_reset(ref, power=3, use_f=True)                              # statsmodels, F form
        return rr.fvalue, rr.pvalue

    for check, compute in [("constant variance (White)", white),
                           ("independent residuals (Breusch–Godfrey)", breusch_godfrey),
                           ("linear form (RESET)", reset)]:
        if np.isnan(value(check, "statistic")):
            assert verdict(check) == "n/a" and str(checks[checks["check"] == check]["note"].iloc[0]).strip(), \
                f"{label}: {check} blank without n/a and a note"
            assert case.sizes == "tiny", f"{label}: {check} n/a with {n} rows"
        else:
            want[check] = compute()
    # The VIF check judges inputs (source columns): n/a for one input (CDD with CDD^2); here every other
    # input has one term, whose generalised VIF (Fox & Monette 1992) is its ordinary VIF (statsmodels)
    if case.term == "power":
        assert np.isnan(value("collinearity (VIF)", "statistic")) and verdict("collinearity (VIF)") == "n/a", \
            f"{label}: VIF check on one input"
    else:
        want["collinearity (VIF)"] = (max(vifs), None)
    for check, (stat, pval) in want.items():
        close(value(check, "statistic"), np.squeeze(stat), f"{label} {check} statistic", 1)
        if pval is not None:
            close(value(check, "p-value"), np.squeeze(pval), f"{label} {check} p-value", 1)
    close(value("influence (Cook's distance)", "threshold"), stats.f.ppf(0.5, p, n - p),
          f"{label} Cook's distance threshold", 1)                              # scipy; Cook (1977)

    # coefficients sheet
    coef = of_group(t["coefficients"], gr.key)
    assert len(coef) == p, f"{label}: {len(coef)} coefficient rows for {p} coefficients"
    se = ref.bse
    close(num(coef["coefficient"]), ref.params, f"{label} estimate", se)
    close(num(coef["std error"]), se, f"{label} std error")
    close(num(coef["t"]), chosen.tvalues, f"{label} t", 1)
    close(num(coef["p-value"]), chosen.pvalues, f"{label} p-value", 1)
    ci = np.asarray(chosen.conf_int(0.05))
    close(num(coef["interval low"]), ci[:, 0], f"{label} CI low", se)
    close(num(coef["interval high"]), ci[:, 1], f"{label} CI high", se)
    vif_col = num(coef["VIF"])
    close(vif_col[int(case.intercept):], vifs, f"{label} VIF", 1)
    nan = np.full(p, np.nan)
    close(num(coef["robust std error (HC3)"]), hc.bse if het else nan, f"{label} robust std error (HC3)")
    close(num(coef["robust p-value (HC3)"]), hc.pvalues if het else nan, f"{label} robust p-value (HC3)", 1)
    close(num(coef["HAC std error"]), hac.bse if dep else nan, f"{label} HAC std error")
    close(num(coef["HAC p-value"]), hac.pvalues if dep else nan, f"{label} HAC p-value", 1)
    close(num(coef["HAC lag"]), np.full(p, lag if dep else np.nan), f"{label} HAC lag")
    if case.inference == "robust":
        used = "Newey–West (HAC)" if dep else "HC3" if het else "classic"
        assert list(coef["std error used"]) == [used] * p, f"{label}: std error used {list(coef['std error used'])}"

    # observations sheet (the rows it holds)
    obs = of_group(t["observations"], gr.key)
    obs = obs.set_index(num(obs["source row"]).astype(int))
    rows = gr.rows["_file_row"].to_numpy()
    present = np.isin(rows, obs.index)
    if case.observations == "all" or t.get("_in_memory"):
        assert present.all(), f"{label}: used rows missing from observations"
    at = obs.loc[rows[present]]
    assert (at["used in fit"] == "yes").all(), f"{label}: used rows marked unused"
    yscale = np.abs(y).max()
    for col, want_v, scale in [("fitted value", ref.fittedvalues, yscale), ("residual", ref.resid, yscale),
                               ("leverage", infl.hat_matrix_diag, 1),
                               ("Cook's distance", infl.cooks_distance[0], infl.cooks_distance[0].max()),
                               ("studentized residual", infl.resid_studentized_external, 1)]:
        close(num(at[col]), np.asarray(want_v)[present], f"{label} observations {col}", scale)
    got_flags = ["" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v) for v in at["row flags"]]
    assert got_flags == list(np.asarray(flags, dtype=object)[present]), f"{label}: row flags"
    return {"het": het, "dep": dep, "flagged rows": rows[np.asarray([bool(f) for f in flags], dtype=bool)]}


def compare_adjusted_p_values(refs: list[GroupReference], t: dict[str, pd.DataFrame]) -> None:
    """adjusted p-value = Benjamini–Hochberg across groups, per check (statsmodels multipletests)."""
    checks = t["checks"]
    for name, rows in checks.groupby("check", sort=False):
        if len(refs) > 1:
            rows = rows.set_index(rows[GROUP].astype(str)).loc[[r.key for r in refs]]
        pv = num(rows["p-value"])
        ok = np.isfinite(pv)
        if not ok.any():
            continue
        want = np.full(len(pv), np.nan)
        want[ok] = multipletests(pv[ok], method="fdr_bh")[1]                    # statsmodels
        close(num(rows["adjusted p-value"]), want, f"{name} adjusted p-value", 1)


# ---------------------------------------------------------------- reading the results workbook

def read_sheet(book, name: str) -> pd.DataFrame | None:
    """A table sheet of the results workbook (header in row 1); None for an observations sheet without rows."""
    ws = book[name]
    rows = list(ws.iter_rows(values_only=True))
    if not rows or (name == "observations" and "source row" not in rows[0]):     # observations = none: a note
        return None
    head = [h for h in rows[0]]
    width = max((i + 1 for i, h in enumerate(head) if h is not None), default=0)
    return pd.DataFrame([list(r[:width]) + [None] * (width - len(r)) for r in rows[1:]], columns=head[:width])


def observations_sheet_holds(case: Case, out: Path, all_rows: np.ndarray, flagged: set[int]) -> None:
    """The observations setting changes only the written sheet: all rows, the flagged ones, or a note."""
    book = openpyxl.load_workbook(out, read_only=True, data_only=True)
    try:
        sheet = read_sheet(book, "observations")
        if case.observations == "none":
            assert sheet is None, "observations = none still wrote observation rows"
            first = next(book["observations"].iter_rows(values_only=True))[0]
            assert "observations = none" in str(first)
            return
        written = set(num(sheet["source row"]).astype(int))
        if case.observations == "all":
            assert written == set(all_rows), "observations = all did not write every row"
        else:
            assert written == flagged, (f"observations = flagged wrote rows {sorted(written)}, expected "
                                        f"{sorted(flagged)} (unusable or highlighted)")
    finally:
        book.close()


# ---------------------------------------------------------------- the test

@pytest.fixture(scope="module")
def xls_inputs(tmp_path_factory) -> dict[str, Path]:
    """Every .xls input of the matrix, converted by LibreOffice in one batch."""
    wanted = [c for c in CASES if c.format == "xls"]
    if not wanted or soffice() is None:
        return {}
    work = tmp_path_factory.mktemp("xls")
    sources = []
    for c in wanted:
        src = work / f"{c.id}.xlsx"
        write_input(c, make_table(c), src)
        sources.append(src)
    convert_to_xls(sources, work / "out")
    return {c.id: work / "out" / f"{c.id}.xls" for c in wanted}


def test_the_design_covers_every_pair_of_levels():
    assert pairs_missing([vars(c) for c in CASES], DIMENSIONS) == []
    assert len({c.id for c in CASES}) == len(CASES)
    for fmt in DIMENSIONS["format"]:
        assert any(c.route == "cli" and c.format == fmt for c in CASES), f"no CLI case reads {fmt}"
    for mode in DIMENSIONS["observations"]:
        assert any(c.route == "cli" and c.observations == mode for c in CASES), f"no CLI case with {mode}"


@pytest.mark.parametrize("case", [_param(c) for c in CASES])
def test_combination_matches_statsmodels(case: Case, tmp_path, xls_inputs, cli):
    table = make_table(case)
    src = tmp_path / f"usage.{case.format}"
    if case.format == "xls":
        if case.id not in xls_inputs:
            pytest.skip("LibreOffice (soffice) is not installed; it is needed to make a .xls file")
        shutil.copy(xls_inputs[case.id], src)
    else:
        write_input(case, table, src)
    refs = reference_fits(case, table)
    out = tmp_path / "results.xlsx"
    if case.route == "api":
        res = sheetfit.fit_workbook(src, **case.settings())
        tables = {"groups": res.groups, "coefficients": res.coefficients, "checks": res.checks,
                  "observations": res.observations, "_in_memory": True}
        assert res.info.date_columns == (("Day",) if case.term == "date" else ()), res.info.date_columns
        sheetfit.write_results(res, out)
    else:
        done = cli("fit", src.name, *case.cli_args(), "--out", out.name, cwd=tmp_path)
        assert done.returncode == 0, done.stderr
        book = openpyxl.load_workbook(out, read_only=True, data_only=True)
        tables = {name: read_sheet(book, name) for name in SHEETS}
        book.close()
        if tables["observations"] is None:
            tables["observations"] = pd.DataFrame(columns=[GROUP, "source row", "used in fit", "row flags", *OBS_VALUES])
    assert len(tables["groups"]) == len(refs), f"{len(tables['groups'])} groups, expected {len(refs)}"
    flagged: set[int] = set()
    for gr in refs:
        found = compare_group(case, gr, tables)
        flagged |= set(found["flagged rows"].tolist())
    compare_adjusted_p_values(refs, tables)
    file_rows = np.arange(2, len(table) + 2)
    used = set().union(*(set(gr.rows["_file_row"]) for gr in refs))
    unusable = {int(r) for r in file_rows if r not in used}
    if tables.get("_in_memory") or case.observations == "all":
        obs = tables["observations"]
        rows = num(obs["source row"]).astype(int)
        assert sorted(rows) == list(file_rows), "observations table does not list every input row once"
        marked = dict(zip(rows, obs["used in fit"]))
        assert {r for r, u in marked.items() if u == "no"} == unusable, "rows marked unused"
        reasons = dict(zip(rows, obs["reason"]))
        assert all(str(reasons[r] or "").strip() for r in unusable), "an unusable row without a reason"
    observations_sheet_holds(case, out, file_rows, flagged | unusable)


def test_robust_std_errors_come_into_play_somewhere():
    # The seeded errors (heteroscedastic, AR(1)) must make the matrix exercise HC3 and Newey–West:
    # the first robust case with groups of 12 rows or more whose terms need no dates, fitted in memory.
    case = next(c for c in CASES if c.inference == "robust" and c.sizes in ("equal", "unequal")
                and c.term in ("plain", "power", "sqrt") and not fault(c))
    res = sheetfit.fit_frame(make_table(case), y="kWh", x=case.terms, group=case.group, order="Seq",
                             intercept=case.intercept, inference="robust")
    used = set(res.coefficients["std error used"])
    assert {"HC3", "Newey–West (HAC)"} <= used, f"{case.id}: std errors used {used}"
