"""Categories and products of inputs: levels(COL), text inputs, A by B.

Oracles: statsmodels OLS with indicator and product columns built by hand with numpy/pandas (coefficients,
std errors, R², F, AIC, the joint F of a category's indicators via `f_test`), statsmodels
het_breuschpagan and OLSInfluence, scipy's Jarque–Bera. Data are seeded and invented.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from statsmodels.stats.diagnostic import het_breuschpagan
from statsmodels.stats.outliers_influence import OLSInfluence

import sheetfit
from sheetfit.errors import JobError, TermSyntaxError
from sheetfit.results.categories import LEVELS_NOTE, levels_f_header, levels_p_header
from sheetfit.results.headers import COEFFICIENT, INPUT, STD_ERROR
from sheetfit.terms import CATEGORY, PRODUCT, parse_term

EFFECT = {"day": 0.0, "night": 3.0, "weekend": -2.0}


def shifts(seed: int = 0, n: int = 40) -> pd.DataFrame:
    """Invented output of three lines by shift; line C never works weekends."""
    rng = np.random.default_rng(seed)
    rows = []
    for line in ("A", "B", "C"):
        choices = ["day", "night", "weekend"] if line != "C" else ["day", "night"]
        for _ in range(n):
            s = str(rng.choice(choices))
            x = rng.uniform(0, 10)
            y = 5 + 2 * x + EFFECT[s] + 0.5 * x * (s == "night") + rng.normal(0, 1)
            rows.append({"Line": line, "Shift": s, "Price": x, "Crew": rng.integers(2, 6), "Units": y})
    return pd.DataFrame(rows)


def hand_design(g: pd.DataFrame, reference: str = "day") -> pd.DataFrame:
    """The design built by hand: constant, Price, one indicator per present level but the reference, Price × each."""
    X = pd.DataFrame({"constant": 1.0, "Price": g["Price"]})
    for lev in sorted(set(g["Shift"]) - {reference}):
        X[f"Shift: {lev} vs {reference}"] = (g["Shift"] == lev).astype(float)
    for lev in sorted(set(g["Shift"]) - {reference}):
        X[f"Price by Shift: {lev} vs {reference}"] = g["Price"] * (g["Shift"] == lev)
    return X


def test_text_category_and_products_match_statsmodels_with_hand_built_columns():
    data = shifts()
    res = sheetfit.fit_frame(data, y="Units", x=["Price", "Shift", "Price by Shift"], group="Line")
    for line, g in data.groupby("Line"):
        X = hand_design(g)
        ref = sm.OLS(g["Units"].to_numpy(), X.to_numpy()).fit()          # statsmodels OLS, columns by hand
        coef = res.coefficients[res.coefficients["Line"] == line].set_index(INPUT)
        np.testing.assert_allclose(coef.loc[list(X.columns), COEFFICIENT].to_numpy(float), ref.params, rtol=1e-9)
        np.testing.assert_allclose(coef.loc[list(X.columns), STD_ERROR].to_numpy(float), ref.bse, rtol=1e-9)
        row = res.groups[res.groups["Line"] == line].iloc[0]
        assert row["R²"] == pytest.approx(ref.rsquared, rel=1e-9)
        assert row["F"] == pytest.approx(ref.fvalue, rel=1e-9)
        assert row["AIC"] == pytest.approx(ref.aic, rel=1e-9)
        # the joint F of the category's indicators (statsmodels f_test)
        names = [c for c in X.columns if c.startswith("Shift:")]
        R = np.zeros((len(names), X.shape[1]))
        for i, c in enumerate(names):
            R[i, list(X.columns).index(c)] = 1.0
        joint = ref.f_test(R)
        assert row[levels_f_header("Shift")] == pytest.approx(float(joint.fvalue), rel=1e-9)
        assert row[levels_p_header("Shift")] == pytest.approx(float(joint.pvalue), rel=1e-9)
        checks = res.checks[res.checks["Line"] == line].set_index("check")
        lm = het_breuschpagan(ref.resid, X.to_numpy(), robust=True)[0]   # statsmodels, Koenker form
        assert checks.loc["constant variance (Breusch–Pagan)", "statistic"] == pytest.approx(lm, rel=1e-8)
        assert checks.loc["normal residuals (Jarque–Bera)", "statistic"] == pytest.approx(
            stats.jarque_bera(ref.resid).statistic, rel=1e-8)                  # scipy
        obs = res.observations[res.observations["Line"] == line]
        infl = OLSInfluence(ref)
        np.testing.assert_allclose(obs["Cook's distance"].to_numpy(float), infl.cooks_distance[0], rtol=1e-8)
    notes = res.groups.set_index("Line")[LEVELS_NOTE]
    assert "no rows at weekend" in notes["C"] and notes["A"] == ""


def test_chosen_reference_and_numbers_as_levels():
    data = shifts(seed=1)
    res = sheetfit.fit_frame(data, y="Units", x=["Price", "Shift"], group="Line", reference=["Shift=night"])
    labels = set(res.coefficients[INPUT])
    assert {"Shift: day vs night", "Shift: weekend vs night"} <= labels
    crew = sheetfit.fit_frame(data, y="Units", x=["Price", "levels(Crew)"], group="Line")
    g = data[data["Line"] == "A"]
    X = pd.DataFrame({"constant": 1.0, "Price": g["Price"]})
    for lev in sorted(set(g["Crew"]))[1:]:
        X[f"Crew: {lev} vs {sorted(set(g['Crew']))[0]}"] = (g["Crew"] == lev).astype(float)
    ref = sm.OLS(g["Units"].to_numpy(), X.to_numpy()).fit()                # statsmodels OLS
    coef = crew.coefficients[crew.coefficients["Line"] == "A"].set_index(INPUT)
    np.testing.assert_allclose(coef.loc[list(X.columns), COEFFICIENT].to_numpy(float), ref.params, rtol=1e-9)
    with pytest.raises(JobError, match="not a level of Shift"):
        sheetfit.fit_frame(data, y="Units", x=["Price", "Shift"], group="Line", reference=["Shift=dawn"])


def test_product_of_two_numbers_matches_statsmodels():
    data = shifts(seed=2)
    res = sheetfit.fit_frame(data, y="Units", x=["Price", "Crew", "Price by Crew"], group="Line")
    for line, g in data.groupby("Line"):
        X = sm.add_constant(np.column_stack([g["Price"], g["Crew"], g["Price"] * g["Crew"]]))
        ref = sm.OLS(g["Units"].to_numpy(), X).fit()                        # statsmodels OLS
        coef = res.coefficients[res.coefficients["Line"] == line]
        np.testing.assert_allclose(coef[COEFFICIENT].to_numpy(float), ref.params, rtol=1e-9)


def test_term_syntax_is_our_own():
    cols = ["Price", "Shift", "Crew"]
    assert parse_term("levels(Shift)", cols).kind == CATEGORY
    t = parse_term("Price by Shift", cols)
    assert (t.kind, t.column, t.by) == (PRODUCT, "Price", "Shift")
    for bad in ("Price*Shift", "Price:Shift", "C(Shift)", "Price ~ Shift"):
        with pytest.raises(TermSyntaxError):
            parse_term(bad, cols)


def test_predictions_know_the_levels(tmp_path):
    data = shifts(seed=3)
    res = sheetfit.fit_frame(data, y="Units", x=["Price", "Shift", "Price by Shift"], group="Line")
    path = sheetfit.write_results(res, tmp_path / "fit.xlsx")
    new = pd.DataFrame({"Line": ["A", "C", "B"], "Price": [3.0, 4.0, 5.0], "Shift": ["night", "weekend", "dawn"]})
    pred = sheetfit.predict(path, new)
    g = data[data["Line"] == "A"]
    X = hand_design(g)
    ref = sm.OLS(g["Units"].to_numpy(), X.to_numpy()).fit()
    row = pd.DataFrame([[1.0, 3.0, 1.0, 0.0, 3.0, 0.0]], columns=X.columns)
    sf = ref.get_prediction(row.to_numpy()).summary_frame(alpha=0.05)     # statsmodels get_prediction
    assert pred["predicted value"][0] == pytest.approx(sf["mean"].iloc[0], rel=1e-10)
    assert pred["range for one new row, high"][0] == pytest.approx(sf["obs_ci_upper"].iloc[0], rel=1e-9)
    assert "had no rows at weekend" in pred["reason"][1] and np.isnan(pred["predicted value"][1])
    assert 'not a level of the fit' in pred["reason"][2]


def test_a_category_with_one_level_in_the_whole_run_is_left_out():
    # found by the property test below: no indicator at all, so no level effects and no all-levels F
    frame = pd.DataFrame({"G": "P", "L": "x", "X": [0.0, 0.0, 1.0, 2.0]})
    frame["Y"] = 2 * frame["X"] + np.array([0.0, 0.1, 0.05, 0.02])
    res = sheetfit.fit_frame(frame, y="Y", x=["X", "L", "X by L"], group="G")
    assert list(res.coefficients[INPUT]) == ["constant", "X"]
    assert np.isnan(res.groups[levels_f_header("L")].iloc[0])


@settings(max_examples=40, deadline=None)
@given(st.lists(st.tuples(st.sampled_from("PQR"), st.sampled_from(["x", "y", "z", "w"]),
                          st.floats(0, 10, allow_nan=False)), min_size=1, max_size=40))
def test_groups_with_missing_levels_never_crash(rows):
    # hypothesis: any mix of groups and levels, a level seen in one group only, a group with one level
    frame = pd.DataFrame(rows, columns=["G", "L", "X"])
    frame["Y"] = frame["X"] * 2 + frame["L"].map({"x": 0, "y": 1, "z": 2, "w": 3}) + np.linspace(0, 0.1, len(frame))
    try:
        res = sheetfit.fit_frame(frame, y="Y", x=["X", "L", "X by L"], group="G")
    except sheetfit.errors.NoUsableDataError:
        return                                        # nothing could be fitted: a one-line error, not a crash
    assert len(res.groups) == frame["G"].nunique()
