"""The combination matrix's design and the oracle's premises, tested apart from the case loop
(tests/test_combinations.py): every pair of levels is covered and every impossible pair refused,
statsmodels keeps the degrees of freedom the oracle sets and its WLS is the whitened OLS, and the seeded
data exercise the paths the dimensions add (robust std errors, weights, calibration, categories,
responses, files, change points). Oracles are named beside each check. Data are invented and seeded.

Cases come from a deterministic all-pairs covering design over the dimensions below (every possible
pair of levels of any two dimensions occurs in some case; tests.combinations.IMPOSSIBLE lists the
pairs no run can have); `python -m tests.combinations` lists them.
How a new option joins the matrix — add a level to its list in `tests/combinations.DIMENSIONS`; the
names in brackets live in tests/combinations.py unless another module is named:
  term          "plain" | "power" | "log" | "sqrt" | "date" | "one" | "category" | "levels" | "product" |
                "slope by level"                             (+ its --x terms in TERMS, its columns in
                                                             REFERENCE_COLUMNS or CATEGORY_TERMS / SLOPES_BY_LEVEL,
                                                             its input in SOURCE, its data in combination_cases)
  sizes         "equal" | "unequal" | "tiny" | "one"         (+ its sizes in Case.group_sizes)
  intercept     True | False
  order         False | True                                 (order column "Seq"; rows shuffled in the file)
  observations  "all" | "flagged" | "none"                   (only the written observations sheet changes)
  inference     "classic" | "robust"
  format        "xlsx" | "csv" | "ods" | "xls"               (+ its writer in combination_cases.write_input)
  route         "api" | "cli"                                (fit_workbook + write_results, or `python -m sheetfit fit`)
  change_point  "none" | "heating" | "two-slopes" | "auto" | "heating-cooling"   (+ its data in TEMPERATURE_PART;
                                                             a new shape also in CHANGE_POINTS and in
                                                             combination_oracle.temperature_columns)
  weights       "none" | "1/Pallets^2" | "Weight" | "1/Gas"  (+ its column and inverse power in WEIGHTS)
  calibration   False | True                                 (needs term "one": a line in one input)
  responses     1 | 2                                        (y = kWh, or kWh and Gas: Case.ys)
  files         1 | 2                                        (the table in one file, or split by group: FILE_NAMES)
  previous      False | True                                 (fitted twice, the earlier table and run in
                                                             combination_previous; compared there)
A new dimension: a new key with its levels, a field of `Case`, and its effect in Case.settings/cli_args;
pairs of levels that cannot go together go into IMPOSSIBLE (the design neither needs nor makes them, and
test_the_impossible_pairs_are_refused below expects a JobError for each, naming what REFUSED gives).
A new value on a results sheet: its expected value in tests/combination_oracle.py (fits, row measures,
calibration) or tests/combination_checks.py (checks and tests), its comparison in tests/test_combinations.py
(for the checks sheet: combination_checks.compare_checks).
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats

import sheetfit
from sheetfit.errors import JobError
from tests.combination_cases import PART, make_table, write_input
from tests.combination_checks import lack_of_fit
from tests.combination_oracle import (
    HINGE_SHAPES,
    back_calculation,
    close,
    reference_fits,
    reference_ids,
)
from tests.combination_previous import GONE, NEW, earlier_table, expected_changes
from tests.combinations import (
    CATEGORY_KINDS,
    DIMENSIONS,
    IMPOSSIBLE,
    LEVEL_PATTERN,
    Case,
    pairs_impossible,
    pairs_missing,
    reference_weights,
)
from tests.test_combinations import CASES, fault


def test_the_design_covers_every_pair_of_levels():
    design = [vars(c) for c in CASES]
    assert pairs_missing(design, DIMENSIONS, IMPOSSIBLE) == []
    assert pairs_impossible(design, IMPOSSIBLE) == []
    assert len({c.id for c in CASES}) == len(CASES)
    for fmt in DIMENSIONS["format"]:
        assert any(c.route == "cli" and c.format == fmt for c in CASES), f"no CLI case reads {fmt}"
    for mode in DIMENSIONS["observations"]:
        assert any(c.route == "cli" and c.observations == mode for c in CASES), f"no CLI case with {mode}"


# what the one-line refusal of each pair of dimensions names (README: the options that cannot go together)
REFUSED = {("intercept", "change_point"): "--change-point.*--no-intercept",
           ("weights", "change_point"): "--weights.*--change-point",
           ("change_point", "term"): "--change-point.*categor",
           ("calibration", "intercept"): "--calibration", ("calibration", "term"): "--calibration",
           ("calibration", "change_point"): "--calibration", ("responses", "weights"): "--weights.*response"}


@pytest.mark.parametrize("pair", IMPOSSIBLE, ids=lambda pair: f"{pair[0]}={pair[1]}-{pair[2]}={pair[3]}")
def test_the_impossible_pairs_are_refused(pair):
    # README: --change-point with --no-intercept, with --weights or with a category input, --calibration with
    # anything but one plain --x column, the constant and no change point, and --weights naming a response's
    # column with --y repeated are refused with a JobError; so the design leaves these pairs out. A case of
    # the design holding one level of the pair, given the other.
    p, a, q, b = pair
    tried = [Case(**{**vars(c), q: b}) for c in CASES if getattr(c, p) == a]
    tried += [Case(**{**vars(c), p: a}) for c in CASES if getattr(c, q) == b]
    case = next(c for c in tried if pairs_impossible([vars(c)], IMPOSSIBLE) == [pair])   # no other pair to refuse
    with pytest.raises(JobError, match=REFUSED[p, q]):
        sheetfit.fit_frame(make_table(case), **case.settings())


def test_statsmodels_counts_degrees_of_freedom_set_before_fit():
    # The oracle's premise (tests.combination_oracle.reference_fits): df set on the model before fit() carry
    # into scale, std errors, t, p, intervals, F, adjusted R² and AIC/BIC; checked against numpy/scipy by hand
    case = next(c for c in CASES if c.intercept)
    gr = reference_fits(case, make_table(case))[0]
    rng = np.random.default_rng(5)
    X, y, k, c = gr.X, rng.normal(size=len(gr.X)), gr.X.shape[1], 2
    model = sm.OLS(y, X)
    model.df_resid, model.df_model = len(y) - k - c, k - 1 + c
    fit, plain = model.fit(), sm.OLS(y, X).fit()
    df = len(y) - k - c
    s2 = plain.ssr / df
    bse = np.sqrt(np.diag(np.linalg.inv(X.T @ X)) * s2)                                       # numpy
    F = (plain.ess / (k - 1 + c)) / s2
    close(fit.scale, s2, "scale")
    close(fit.bse, bse, "bse")
    close(fit.pvalues, 2 * stats.t.sf(np.abs(plain.params / bse), df), "p-values", 1)          # scipy
    close(fit.conf_int(0.05)[:, 0], plain.params - stats.t.ppf(0.975, df) * bse, "interval low", bse)
    close([fit.fvalue, fit.f_pvalue], [F, stats.f.sf(F, k - 1 + c, df)], "F", 1)
    close(fit.rsquared_adj, 1 - (len(y) - 1) / df * (1 - plain.rsquared), "adjusted R²", 1)
    close([fit.aic, fit.bic], [-2 * plain.llf + 2 * (k + c), -2 * plain.llf + np.log(len(y)) * (k + c)], "AIC, BIC", 1)


def test_statsmodels_wls_is_the_whitened_fit():
    # The oracle's premise for weighted cases (tests.combination_oracle): statsmodels WLS with weights w is
    # OLS of √w·y on √w·X (estimates, std errors, HC3), its R² is README's 1 − Σw·e²/Σw·(y − ȳw)² and its
    # log-likelihood that of the whitened fit plus ½Σ ln w; scaling w leaves estimates and std errors alone.
    # Checked against numpy by hand and statsmodels OLS.
    case = next(c for c in CASES if c.intercept and c.weights == "1/Pallets^2")
    gr = next(g for g in reference_fits(case, make_table(case)) if g.weighted)
    X, y, w = gr.X, gr.y, gr.w
    root = np.sqrt(w)
    fit, whitened = sm.WLS(y, X, weights=w).fit(), sm.OLS(root * y, root[:, None] * X).fit()
    close(fit.params, whitened.params, "estimates", fit.bse)
    close(fit.bse, whitened.bse, "std errors")
    close(fit.get_robustcov_results("HC3").bse, whitened.get_robustcov_results("HC3").bse, "HC3 std errors")
    e, ybar = y - X @ fit.params, np.average(y, weights=w)                                   # numpy
    close(fit.rsquared, 1 - (w * e**2).sum() / (w * (y - ybar) ** 2).sum(), "weighted R²", 1)
    close(fit.llf, whitened.llf + 0.5 * np.log(w).sum(), "log-likelihood", abs(fit.llf))
    close(np.asarray(fit.resid), e, "residuals in the response's units", np.abs(y).max())
    rescaled = sm.WLS(y, X, weights=7.0 * w).fit()
    close([*rescaled.params, *rescaled.bse], [*fit.params, *fit.bse], "weights times 7", np.r_[fit.bse, fit.bse])


def test_robust_std_errors_come_into_play_somewhere():
    # The seeded errors (heteroscedastic, AR(1)) must make the matrix exercise HC3 and Newey–West: the
    # robust cases with groups of 12 rows or more whose terms need no dates, fitted in memory with their own
    # settings (weights included), until both have been used.
    used: set[str] = set()
    for case in (c for c in CASES if c.inference == "robust" and c.sizes in ("equal", "unequal")
                 and c.term != "date" and c.change_point == "none" and not fault(c)):
        used |= set(sheetfit.fit_frame(make_table(case), **case.settings()).coefficients["std error used"])
        if {"HC3", "Newey–West (HAC)"} <= used:
            return
    raise AssertionError(f"std errors used: {used}")


def test_weights_and_calibration_come_into_play():
    # The seeded data must make the matrix exercise what the weights and calibration dimensions add:
    # groups whose weights vary and groups whose weights are all equal (README: the ordinary fit), rows
    # with a zero and with a negative weight, replicates enough for lack of fit to run, and standards both
    # within and beyond their limits (oracle: tests.combination_checks for lack of fit,
    # tests.combination_oracle for the standards, at a clearly steep slope).
    varied = equal = replicated = 0
    bad, said = [], []
    for case in CASES:
        table = make_table(case)
        given = reference_weights(case, table)
        bad += list(given[given <= 0])
        for gr in reference_fits(case, table):
            varied += gr.weighted
            equal += case.weights != "none" and not gr.weighted
            replicated += not isinstance(lack_of_fit(case, gr), str)
            said += list(back_calculation(gr, 0.0)["says"]) if case.calibration else []
    assert varied >= 10 and equal >= 2, f"{varied} weighted groups, {equal} with equal weights"
    assert {0.0, -1.5} <= set(bad), f"weights that are not positive: {sorted(set(bad))}"
    assert replicated >= 5, f"lack of fit runs in {replicated} groups"
    assert 0 < sum(said) < len(said), f"{sum(said)} of {len(said)} standards beyond their limits"


def test_categories_responses_and_files_come_into_play():
    # The seeded data must make the matrix exercise what the new dimensions add (oracle: tests.combination_oracle):
    # groups lacking a level, lacking the reference (README: measured against their own first level) and
    # showing one level only (no level effects), with their indicators left out; blank category cells; a
    # blank Gas cell leaving its row to kWh; two files each holding groups; every category case with a group
    # whose levels all count.
    lacking = {"no other": 0, "no reference": 0, "one level": 0}
    blank_gas = files = 0
    for case in CASES:
        table = make_table(case)
        refs = reference_fits(case, table)
        files += case.files > 1 and set(table[PART]) == {0, 1}
        for gr in refs:
            for column, seen in gr.seen.items():
                all_levels, ref = gr.levels[column]
                kind = ("one level" if len(seen) == 1 else "no reference" if ref not in seen
                        else "no other" if len(seen) < len(all_levels) else None)
                lacking[kind] = lacking.get(kind, 0) + 1
                assert len(gr.indicators.get(column, [0, 0])) == max(len(seen) - 1, 0), gr.label
        kwh, gas = (set().union(*(reference_ids(g) for g in refs if g.response == r)) for r in ("kWh", "Gas"))
        blank_gas += case.responses > 1 and len({i[1:] for i in kwh} - {i[1:] for i in gas}) > 0
    assert min(lacking[k] for k in LEVEL_PATTERN.values()) >= 3, f"groups by the levels they lack: {lacking}"
    assert blank_gas >= 5 and files >= 10, f"{blank_gas} cases with a blank Gas cell, {files} with two files"
    assert sum(c.term in CATEGORY_KINDS for c in CASES) >= 12


def test_change_point_cases_find_interior_change_points(tmp_path):
    # The seeded bends must make most searched groups (6 rows or more) of the change-point cases find
    # change points inside the range: a group fitted as a line is compared too, but exercises less.
    shaped = searched = 0
    for case in (c for c in CASES if c.change_point != "none"):
        src = tmp_path / f"{case.id}.csv"
        write_input(case, make_table(case), src)
        groups = sheetfit.fit_workbook(src, **case.settings()).groups
        shaped += int(groups["shape"].isin(HINGE_SHAPES).sum())
        searched += int((groups["rows used"] >= 6).sum())
    assert shaped >= 0.85 * searched, f"{shaped} of {searched} searched groups with a change point"


def test_previous_runs_come_into_play():
    # The earlier tables (tests.combination_previous.earlier_table) must make the matrix exercise what
    # --previous adds: groups whose relation changed (the shifted slope) and groups without a change found,
    # new and gone groups, and groups left untested because their coefficients differ between the runs (a
    # missing level). Oracle: the Chow test of tests.combination_previous on the statsmodels references of
    # both tables, for the cases without change points (their shapes are sheetfit's).
    seen = {"changed": 0, "unchanged": 0, NEW: 0, GONE: 0, "not tested": 0}
    for case in (c for c in CASES if c.previous and c.change_point == "none"):
        want = expected_changes(reference_fits(case, earlier_table(case)), reference_fits(case, make_table(case)), None)
        for e in want.values():
            kind = (NEW if e["old"] is None else GONE if e["new"] is None else "not tested" if e["test"] is None
                    else "changed" if e["adjusted"] < 0.05 else "unchanged")
            seen[kind] += 1
    assert min(seen.values()) >= 2, f"groups by what changed: {seen}"
