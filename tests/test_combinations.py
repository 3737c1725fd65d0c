"""The combination matrix: options and inputs in combination, every group against statsmodels.

Oracle: tests/combination_oracle.py (fits and row measures) — statsmodels OLS fitted group by group, or WLS
with the case's weights divided by their group's mean (the design built by hand from the README's term
definitions: indicator and product columns of the levels each group shows, hinge columns at sheetfit's
change points), statsmodels OLSInfluence of the whitened model √w·y on √w·X, robust HC3 / Newey–West
covariances and their Wald F, a brute-force numpy search for the change points, and the ICH Q2 formulas for
calibration limits and back-calculated standards; tests/combination_checks.py (the checks, and the checks
sheet compared with them) — statsmodels diagnostics of the residuals √w·e (Jarque–Bera, Breusch–Pagan in
Koenker's form, White, Durbin–Watson statistic, Breusch–Godfrey, RESET F form, VIF, the lack-of-fit F
against the cell-means model, `f_test` of a category's indicators), scipy (Shapiro–Wilk, t, F and chi²
laws; the exact Durbin–Watson p-value by Imhof's formula with scipy.integrate.quad over numpy eigenvalues),
statsmodels `multipletests` (Benjamini–Hochberg); tests/combination_previous.py (with --previous: the Chow
test from statsmodels fits of each run and of both pooled, scipy's F and t laws). Rules of thumb for the softer row flags and the
standards' deviation limits are common practice (README). Data are invented and seeded. This module runs
the cases and compares the groups, coefficients and observations sheets.

A group is a (response, file, --group value) (README: with --y repeated every row appears once per
response, `response` the first group column; with several files the file name is the next one), fitted
on the rows where its response is a number; adjusted p-values are taken across all of them.

Change points count as parameters (README: residual df n − k − c, k coefficients, c change points).
The reference fit carries that df (statsmodels uses it for scale, std errors, t, p, intervals, F,
adjusted R², AIC/BIC); where sheetfit's documented definition with c, or with weights, is not what
statsmodels gives even then, the expected value is computed by hand from that definition, whose source
is named.

Each value is compared (combination_oracle.close) at 1e-9 relative with an absolute floor of 1e-9 · the
value's scale (the coefficient's std error, max |y|, 1 for p-values and statistics of order one). Checks
that cannot run are n/a with a note (combination_checks.compare_checks; allowed only for White where the
rows are no more than the rank of its products, for Breusch–Godfrey and RESET in the tiny groups, for the
VIF check when all terms come from one input, and for lack of fit without replicates). A row of leverage 1 has no studentized residual
or Cook's distance, and with one residual degree of freedom the Durbin–Watson statistic is a constant
with no p-value (its null law is a point mass).

Cases come from a deterministic all-pairs covering design (tests/combinations.py; seeded data, input files
and the run of a case in tests/combination_cases.py). How a new option or dimension joins the matrix, and
the tests of the design itself and of the oracle's premises: tests/test_combinations_design.py.
Known sheetfit faults found by the matrix are listed in KNOWN_FAULTS (strict xfail, one-line reason):
the comparisons a fault breaks run last and raise KnownFault, so any other failure of such a case
still fails the test.
"""

from __future__ import annotations

import shutil
from collections.abc import Callable
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from sheetfit.results.calibration import (
    BACK_CALCULATED,
    DEVIATION,
    LIMIT_OF_DETECTION,
    LIMIT_OF_QUANTIFICATION,
    STANDARD_OFF,
)
from sheetfit.results.categories import LEVELS_NOTE, levels_f_header, levels_p_header
from sheetfit.results.headers import WEIGHT_USED
from tests.combination_cases import (
    CALIBRATION_ROWS,
    SOURCE_FILE,
    RowId,
    convert_to_xls,
    every_row,
    file_tables,
    make_table,
    num,
    of_group,
    read_sheet,
    row_ids,
    run_case,
    soffice,
    text,
    with_file_rows,
    write_input,
)
from tests.combination_checks import (
    coefficient_vifs,
    compare_adjusted_p_values,
    compare_checks,
    condition_number,
    levels_differ,
    nmbe,
)
from tests.combination_oracle import (
    HINGE_SHAPES,
    RTOL,
    GroupReference,
    back_calculation,
    calibration_limits,
    close,
    expected_row_flags,
    grid_search,
    reference_fits,
    reference_ids,
    reported_shapes,
    row_measures,
)
from tests.combination_previous import (
    EARLIER,
    compare_changes,
    earlier_table,
    run_earlier,
)
from tests.combinations import (
    FILE_KEY,
    RESPONSE_KEY,
    RESPONSE_VALUE,
    TEMPERATURE,
    Case,
    cases,
    reference_weights,
)


class KnownFault(AssertionError):
    """The mismatches of exactly the KNOWN_FAULTS entries that list the case."""


# Sheetfit faults the matrix finds: (the comparisons it breaks, which cases, what fails). Each listed
# case is a strict xfail that must fail with KnownFault: its comparisons of that kind run last, and
# fail as listed, while everything else matches. A fix shows up as XPASS(strict): the entry must go.
KNOWN_FAULTS: list[tuple[str, Callable[[Case], bool], str]] = [
    # S02 of this case: 7 rows, CDD 4.86, 10.19, 10.44, 11.06, 20.83, 22.99, 24.56. The brute-force grid finds the
    # heating-cooling optimum with both change points inside one gap between data points (τh 13.26, τc 19.42,
    # RSS 30.748); sheetfit's search misses it and falls back to a straight line (best at the range's end 30.857).
    # Within one gap the model is two separate lines with a free constant (a line of optima, not a point).
    ("search", lambda c: (c.term, c.sizes, c.change_point, c.previous) == ("one", "tiny", "heating-cooling", False),
     "heating-cooling search misses an optimum with both change points in the same gap between data points"),
]

CASES = cases()


def fault(case: Case, kind: str | None = None) -> str | None:
    return next((why for k, applies, why in KNOWN_FAULTS if applies(case) and kind in (None, k)), None)


def _param(case: Case):
    why = "; ".join(why for _, applies, why in KNOWN_FAULTS if applies(case))
    marks = [pytest.mark.xfail(strict=True, reason=why, raises=KnownFault)] if why else []
    return pytest.param(case, id=case.id, marks=marks)


def run_last(case: Case, later: list[tuple[str, Callable[[], None]]]) -> None:
    """The comparisons a known fault breaks; KnownFault when they fail as KNOWN_FAULTS lists, and only so."""
    seen: dict[str, str] = {}
    for kind, compare in later:
        try:
            compare()
        except AssertionError as e:
            if not fault(case, kind):
                raise
            seen.setdefault(kind, f"{fault(case, kind)} — {e}")
    listed = {kind for kind, applies, _ in KNOWN_FAULTS if applies(case)}
    if seen:
        assert set(seen) == listed, f"known faults listed for this case but not seen: {listed - set(seen)}"
        raise KnownFault("; ".join(seen.values()))


# ---------------------------------------------------------------- comparisons (the checks sheet's: tests/combination_checks.py)

def compare_shape_name(case: Case, gr: GroupReference, row: pd.Series) -> None:
    """README: the shape asked for, or under auto any shape; a group fitted as a straight line says why."""
    name = gr.shape.name
    assert name in ("line", case.change_point) or (case.change_point == "auto" and name in HINGE_SHAPES), \
        f"{gr.label}: shape {name!r}"
    assert name != "line" or text(row["why this shape"]).strip(), f"{gr.label}: a straight line without a reason"


def compare_shape(case: Case, gr: GroupReference) -> None:
    """README: τ is the exact least-squares optimum among change points with at least 3 rows on each
    side; an optimum at the end of that range means a straight line. Oracle: the brute-force search of
    tests.combination_oracle.grid_search (numpy SVD at every observed CDD and a fine grid between)."""
    name, label = gr.shape.name, gr.label
    if name not in HINGE_SHAPES:
        if case.change_point == "auto" or len(gr.rows) < 6:       # auto: chosen by BIC; < 6 rows: not searched
            return
        grid, rss, lo, hi = grid_search(gr, case.change_point, 60 if case.change_point == "heating-cooling" else 400)
        at_end = np.isin(grid.below, [lo, hi]) | np.isin(grid.above, [lo, hi])
        assert rss[at_end].min() <= rss.min() * (1 + RTOL), \
            f"{label}: fitted as a line, but the best {case.change_point} change point lies inside the range"
        return
    grid, rss, lo, hi = grid_search(gr, name, 60 if name == "heating-cooling" else 400)
    taus = [v for v in (gr.shape.below, gr.shape.above) if np.isfinite(v)]
    assert all(lo < v < hi for v in taus), f"{label}: change point {taus} outside ({lo}, {hi})"
    assert gr.fit.ssr <= rss.min() * (1 + RTOL), \
        f"{label}: RSS {gr.fit.ssr!r} at τ = {taus} above the brute-force minimum {rss.min()!r}"


def compare_groups_row(case: Case, gr: GroupReference, t: dict, flags: list[str]) -> pd.Series:
    """The group's row on `groups` (returned). Weighted: statsmodels WLS's R², F, AIC/BIC (README: ½Σ ln w in
    the log-likelihood) and RSS = Σw·e²; CV(RMSE) over the plain mean of y."""
    ref, y, n, label = gr.fit, gr.y, len(gr.rows), gr.label
    row = of_group(t["groups"], gr.key)
    assert len(row) == 1, f"{label}: {len(row)} rows on groups"
    row = row.iloc[0]
    assert row["status"] == "fitted", f"{label}: {row['status']} ({row['reasons']})"
    assert (int(row["rows used"]), int(row["rows not used"]), int(row["number of coefficients"])) == \
        (n, gr.dropped, gr.k + gr.c), label                              # README: k + c parameters
    want = [("R²", ref.rsquared, 1), ("adjusted R²", ref.rsquared_adj, 1),
            ("residual std error", np.sqrt(ref.scale), 0), ("RMSE", np.sqrt(ref.ssr / n), 0),
            ("CV(RMSE) %", 100 * np.sqrt(ref.scale) / y.mean(), 0),
            ("F", ref.fvalue, 1), ("F p-value", ref.f_pvalue, 1), ("AIC", ref.aic, n), ("BIC", ref.bic, n),
            ("condition number", condition_number(gr), 1)]                                      # numpy
    if case.change_point != "none":
        want.append(("NMBE %", *nmbe(gr)))
    for column in case.categories:              # README: per category, the joint F of its indicators
        F, p = levels_differ(gr, column)
        want += [(levels_f_header(column), F, 1), (levels_p_header(column), p, 1)]
    for col, value, scale in want:
        close(num([row[col]]), value, f"{label} groups {col}", scale)
    for col, word in [("high-leverage rows", "high leverage"), ("outlying rows", "outlying"),
                      ("influential rows", "influential")]:
        assert int(row[col]) == sum(word in f.split("; ") for f in flags), f"{label} groups {col}"
    for col in (LIMIT_OF_DETECTION, LIMIT_OF_QUANTIFICATION):     # README: on groups with --calibration only
        assert (col in t["groups"].columns) == case.calibration, f"{label}: groups column {col!r}"
    assert (LEVELS_NOTE in t["groups"].columns) == bool(case.categories), f"{label}: groups column {LEVELS_NOTE!r}"
    if case.categories:
        compare_levels_note(gr, text(row[LEVELS_NOTE]))
    return row


def compare_levels_note(gr: GroupReference, note: str) -> None:
    """README: the `categories note` says what a group's rows leave out: empty where they show every level;
    else it names the category and each level the group lacks (the reference included), or the only level
    a group of one level shows."""
    for column, (all_levels, _ref) in gr.levels.items():
        seen = gr.seen[column]
        lacking = [v for v in all_levels if v not in seen]
        if not lacking:
            assert f"{column}:" not in note, f"{gr.label}: {LEVELS_NOTE} {note!r} with every level of {column}"
            continue
        named = seen if len(seen) == 1 else lacking
        assert f"{column}:" in note and all(v in note for v in named), \
            f"{gr.label}: {LEVELS_NOTE} {note!r} for rows showing {seen} of {list(all_levels)}"


def compare_coefficients(case: Case, gr: GroupReference, t: dict, inf: dict) -> None:
    """The group's rows on `coefficients`, in sheetfit's order: constant, then the terms as given with T's
    slots and each category's levels (README: no row for a level the group does not estimate)."""
    ref, p, label = gr.fit, gr.k, gr.label
    coef = of_group(t["coefficients"], gr.key)
    assert len(coef) == p, f"{label}: {len(coef)} coefficient rows for {p} coefficients"
    assert list(coef["input"]) == gr.labels, f"{label}: inputs {list(coef['input'])}, expected {gr.labels}"
    se, chosen, hc, hac, het, dep = ref.bse, inf["chosen"], inf["hc"], inf["hac"], inf["het"], inf["dep"]
    close(num(coef["coefficient"]), ref.params, f"{label} estimate", se)
    close(num(coef["std error"]), se, f"{label} std error")
    close(num(coef["t"]), chosen.tvalues, f"{label} t", 1)
    close(num(coef["p-value"]), chosen.pvalues, f"{label} p-value", 1)
    ci = np.asarray(chosen.conf_int(0.05))
    close(num(coef["interval low"]), ci[:, 0], f"{label} CI low", se)
    close(num(coef["interval high"]), ci[:, 1], f"{label} CI high", se)
    vifs = coefficient_vifs(case, gr)      # no VIF column when no group has two non-constant columns
    if "VIF" in coef.columns or not np.isnan(vifs).all():
        close(num(coef["VIF"]), vifs, f"{label} VIF", 1)
    nan = np.full(p, np.nan)
    close(num(coef["robust std error (HC3)"]), hc.bse if het else nan, f"{label} robust std error (HC3)")
    close(num(coef["robust p-value (HC3)"]), hc.pvalues if het else nan, f"{label} robust p-value (HC3)", 1)
    close(num(coef["HAC std error"]), hac.bse if dep else nan, f"{label} HAC std error")
    close(num(coef["HAC p-value"]), hac.pvalues if dep else nan, f"{label} HAC p-value", 1)
    close(num(coef["HAC lag"]), np.full(p, inf["lag"] if dep else np.nan), f"{label} HAC lag")
    if case.inference == "robust":
        used = "Newey–West (HAC)" if dep else "HC3" if het else "classic"
        assert list(coef["std error used"]) == [used] * p, f"{label}: std error used {list(coef['std error used'])}"


def _used_rows(case: Case, gr: GroupReference, t: dict) -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    """The group's used rows on `observations` that the table holds (all of them unless only some were
    written), in the fit's order; which of the group's rows they are; the group's source rows."""
    obs = of_group(t["observations"], gr.key)
    obs = obs.set_index(num(obs["source row"]).astype(int))
    rows = gr.rows["_file_row"].to_numpy()
    present = np.isin(rows, obs.index)
    if case.observations == "all" or t.get("_in_memory"):
        assert present.all(), f"{gr.label}: used rows missing from observations"
    return obs.loc[rows[present]], present, rows


def compare_observations(case: Case, gr: GroupReference, t: dict, rm: dict, flags: list[str]) -> None:
    """The group's used rows on `observations` (those it holds): the response's values (README: in `response
    value` when several are fitted), fitted values and residuals in the response's units (README: y − ŷ also
    when weighted), the row measures of the whitened model, and the weights as fitted where the case is
    weighted."""
    at, present, _ = _used_rows(case, gr, t)
    label = gr.label
    assert (at["used in fit"] == "yes").all(), f"{label}: used rows marked unused"
    yscale = np.abs(gr.y).max()
    want = [(RESPONSE_VALUE if case.responses > 1 else gr.response, gr.y, 0),
            ("fitted value", gr.fit.fittedvalues, yscale), ("residual", gr.fit.resid, yscale),
            ("leverage", rm["leverage"], 1), ("Cook's distance", rm["cooks"], np.nanmax(rm["cooks"])),
            ("studentized residual", rm["studentized"], 1)]
    assert (WEIGHT_USED in t["observations"].columns) == (case.weights != "none"), f"{label}: {WEIGHT_USED!r} column"
    if case.weights != "none":
        want.append((WEIGHT_USED, gr.w, 1))        # README: w/mean(w) in the group, 1 where all are equal
    for col, want_v, scale in want:
        close(num(at[col]), np.asarray(want_v)[present], f"{label} observations {col}", scale)
    got_flags = [text(v) for v in at["row flags"]]
    assert got_flags == list(np.asarray(flags, dtype=object)[present]), f"{label}: row flags"
    if case.files > 1:                              # README: `source file` on observations
        assert (at[SOURCE_FILE].astype(str) == gr.rows["_file"].to_numpy()[present]).all(), f"{label}: {SOURCE_FILE}"


def compare_calibration(case: Case, gr: GroupReference, t: dict, row: pd.Series, chosen) -> np.ndarray:
    """--calibration: limits on `groups` and each standard read back on `observations` (oracle: ICH Q2 and
    README, tests.combination_oracle); the slope's p-value is the one `coefficients` shows. Returns which of
    the group's used rows `standard off` says something of (written under observations = flagged)."""
    label = gr.label
    assert all((c in t["observations"].columns) == case.calibration for c in CALIBRATION_ROWS), \
        f"{label}: calibration columns on observations"
    if not case.calibration:
        return np.zeros(len(gr.rows), dtype=bool)
    slope_p = np.asarray(chosen.pvalues)[1]
    close(num([row[LIMIT_OF_DETECTION], row[LIMIT_OF_QUANTIFICATION]]), calibration_limits(gr, slope_p),
          f"{label} calibration limits", 0)
    want = back_calculation(gr, slope_p)
    at, present, rows = _used_rows(case, gr, t)
    x = gr.rows[TEMPERATURE].to_numpy(float)
    close(num(at[BACK_CALCULATED]), want["back"][present], f"{label} {BACK_CALCULATED}", np.abs(x).max())
    close(num(at[DEVIATION]), want["deviation"][present], f"{label} {DEVIATION}", 1)
    said = np.array([bool(text(v).strip()) for v in at[STANDARD_OFF]], dtype=bool)
    off = rows[present][said != want["says"][present]]
    assert (said == want["says"][present]).all(), f"{label}: {STANDARD_OFF} at rows {off}"
    return want["says"]


def compare_group(case: Case, gr: GroupReference, t: dict[str, pd.DataFrame]) -> tuple[set[RowId], list]:
    """Every value of one group on the groups, coefficients, checks and observations tables; returns the
    group's flagged rows (row flags or a standard off) and, by kind, the comparisons a known fault
    may break (to run last)."""
    rm = row_measures(gr)
    flags = expected_row_flags(gr, rm)
    row = compare_groups_row(case, gr, t, flags)
    inf, later = compare_checks(case, gr, t, rm)
    compare_coefficients(case, gr, t, inf)
    compare_observations(case, gr, t, rm, flags)
    said = compare_calibration(case, gr, t, row, inf["chosen"])
    if case.change_point != "none":
        assert int(num([row["change points"]])[0]) == gr.c, f"{gr.label}: change points {row['change points']}"
        later += [("shape", lambda: compare_shape_name(case, gr, row)),
                  ("search", lambda: compare_shape(case, gr))]
    marked = np.asarray([bool(f) for f in flags], dtype=bool) | said
    return {i for i, m in zip(reference_ids(gr), marked) if m}, later


def observations_sheet_holds(case: Case, out: Path, all_rows: set[RowId], flagged: set[RowId]) -> None:
    """The observations setting changes only the written sheet: all rows, the flagged ones, or a note."""
    book = openpyxl.load_workbook(out, read_only=True, data_only=True)
    try:
        sheet = read_sheet(book, "observations")
        if case.observations == "none":
            assert sheet is None, "observations = none still wrote observation rows"
            first = next(book["observations"].iter_rows(values_only=True))[0]
            assert "observations = none" in str(first)
            return
        written = set(row_ids(case, sheet))
        if case.observations == "all":
            assert written == all_rows, "observations = all did not write every row"
        else:
            assert written == flagged, (f"observations = flagged wrote rows {sorted(written)}, expected "
                                        f"{sorted(flagged)} (unusable, highlighted or a standard off)")
    finally:
        book.close()


# ---------------------------------------------------------------- the tests

@pytest.fixture(scope="module")
def xls_inputs(tmp_path_factory) -> dict[str, list[Path]]:
    """Every .xls input of the matrix (each file of a case), converted by LibreOffice in one batch."""
    wanted = [c for c in CASES if c.format == "xls"]
    if not wanted or soffice() is None:
        return {}
    work = tmp_path_factory.mktemp("xls")
    made: dict[str, list[Path]] = {}
    for c, name, table in [(c, c.id + suffix, make(c)) for c in wanted
                           for suffix, make in (("", make_table), (EARLIER, earlier_table)) if c.previous or not suffix]:
        for k, (_, rows) in enumerate(file_tables(c, table)):
            src = work / f"{name}-{k}.xlsx"
            write_input(c, rows, src)
            made.setdefault(name, []).append(src)
    convert_to_xls([s for sources in made.values() for s in sources], work / "out")
    return {cid: [work / "out" / s.with_suffix(".xls").name for s in sources] for cid, sources in made.items()}


def input_files(case: Case, table: pd.DataFrame, folder: Path, xls_inputs: dict, suffix: str = "") -> list[Path]:
    """The case's input file(s) in `folder`, named as the case names them (`suffix`: of the earlier run's)."""
    folder.mkdir(exist_ok=True)
    paths = []
    for k, (name, rows) in enumerate(file_tables(case, table)):
        paths.append(folder / name)
        if case.format == "xls":
            if case.id + suffix not in xls_inputs:
                pytest.skip("LibreOffice (soffice) is not installed; it is needed to make a .xls file")
            shutil.copy(xls_inputs[case.id + suffix][k], paths[-1])
        else:
            write_input(case, rows, paths[-1])
    return paths



def compare_rows(case: Case, table: pd.DataFrame, refs: list[GroupReference], obs: pd.DataFrame) -> set[RowId]:
    """`observations` lists every row once per response, says which are used (an unusable row with a
    reason, a used row without), and names a weight that is not positive; returns the unusable rows."""
    ids = row_ids(case, obs)
    everything = every_row(case, table)
    columns = list(obs.columns)                      # README: `source file` before `source sheet`, with two files
    before = columns[columns.index("source sheet") - 1]
    assert (before == SOURCE_FILE) if case.files > 1 else (SOURCE_FILE not in columns), f"columns {columns[:6]}"
    assert sorted(ids) == sorted(everything), "observations table does not list every input row once per response"
    used = {i for gr in refs for i in reference_ids(gr)}
    unusable = everything - used
    marked, reasons = dict(zip(ids, obs["used in fit"])), dict(zip(ids, obs["reason"].map(text)))
    assert {i for i, u in marked.items() if u == "no"} == unusable, "rows marked unused"
    assert all(reasons[i].strip() for i in unusable), "an unusable row without a reason"
    assert not any(reasons[i] for i in used), "a used row with a reason"
    t = with_file_rows(case, table)
    given = reference_weights(case, t)     # README: a weight that is not positive is the row's reason
    with np.errstate(invalid="ignore"):
        bad = ~np.isnan(given) & ~(np.isfinite(given) & (given > 0))
    assert all("weight" in reasons[(r, f, int(i))] for r in case.ys
               for f, i in zip(t["_file"][bad], t["_file_row"][bad])), "a row with a bad weight, not said so"
    return unusable


@pytest.mark.parametrize("case", [_param(c) for c in CASES])
def test_combination_matches_statsmodels(case: Case, tmp_path, xls_inputs, cli):
    table = make_table(case)
    sources = input_files(case, table, tmp_path, xls_inputs)
    out, earlier = tmp_path / "results.xlsx", None
    if case.previous:                          # the earlier run (tests/combination_previous.py), via the API
        old_table = earlier_table(case)
        earlier = tmp_path / "earlier" / "results-before.xlsx"
        old_groups = run_earlier(case, input_files(case, old_table, earlier.parent, xls_inputs, EARLIER), earlier)
    tables = run_case(case, sources, out, cli, earlier)
    ours = [c for c in tables["groups"].columns if c in (RESPONSE_KEY, FILE_KEY)]     # README: only when asked for
    assert list(tables["groups"].columns[: len(case.keys)]) == case.keys and ours == case.keys[: len(ours)], \
        f"group columns {list(tables['groups'].columns[:4])}"
    refs = reference_fits(case, table, reported_shapes(case, tables["groups"]))
    assert len(tables["groups"]) == len(refs), f"{len(tables['groups'])} groups, expected {len(refs)}"
    flagged: set[RowId] = set()
    later: list[tuple[str, Callable[[], None]]] = []
    for gr in refs:
        rows, broken = compare_group(case, gr, tables)
        flagged |= rows
        later += broken
    compare_adjusted_p_values(case, refs, tables)
    if case.previous:
        old_refs = reference_fits(case, old_table, reported_shapes(case, old_groups))
        compare_changes(case, old_refs, refs, tables, old_groups)
    else:
        assert tables["since previous run"] is None, "what changed without --previous"
    if tables.get("_in_memory") or case.observations == "all":
        unusable = compare_rows(case, table, refs, tables["observations"])
    else:
        unusable = every_row(case, table) - {i for gr in refs for i in reference_ids(gr)}
    observations_sheet_holds(case, out, every_row(case, table), flagged | unusable)
    run_last(case, later)

