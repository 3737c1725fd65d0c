"""Reading unknowns back through a calibration line: sheetfit.prediction.inverse.

Oracles: the published example of Massart et al., Handbook of Chemometrics and Qualimetrics
(1997); statsmodels OLS (params, scale, slope p-value) with numpy means and sums and
scipy.stats.t quantiles for the classical inverse-prediction formula computed by hand.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

import sheetfit
from sheetfit.errors import JobError
from sheetfit.prediction.inverse import (
    BELOW_LOQ,
    INVERSE_COLUMNS,
    MEASUREMENTS,
    NEEDS_LINE,
    OUTSIDE_RANGE,
    READ_BACK,
    READ_BACK_HIGH,
    READ_BACK_LOW,
    READ_BACK_STD_ERROR,
    inverse_predict,
    line_problem,
    quantification_limits,
)
from sheetfit.results.headers import PREDICTION_REASON
from sheetfit.results.store import store_from_results
from sheetfit.results.store_read import read_store

HANDBOOK = pd.DataFrame({"x": [0.0, 10.0, 20.0, 30.0, 40.0, 50.0], "y": [4.0, 21.2, 44.6, 61.8, 78.0, 105.2]})
# (key, standards, intercept, slope, noise): a rising, a falling, a steep and a small calibration
GROUPS = (("A", 8, 2.0, 1.5, 0.3), ("B", 12, 40.0, -2.0, 0.8), ("C", 6, 0.5, 12.0, 1.0), ("D", 20, 5.0, 0.7, 0.2))


def calibrations(seed: int = 11) -> pd.DataFrame:
    """Standards at spread levels (some repeated, as replicates) per instrument."""
    rng = np.random.default_rng(seed)
    parts = []
    for g, n, b0, b1, noise in GROUPS:
        x = np.round(rng.uniform(1.0, 10.0, n), 1)
        x[1] = x[0]                                         # a replicate standard
        parts.append(pd.DataFrame({"lab": g, "x": x, "y": b0 + b1 * x + rng.normal(0, noise, n)}))
    return pd.concat(parts, ignore_index=True)


def by_hand(d: pd.DataFrame, y0: float, m: float, level: float) -> tuple[float, float, float, float]:
    """x̂0, s_x0 and the interval from the classical formula, each part computed independently."""
    x, y = d["x"].to_numpy(), d["y"].to_numpy()
    fit = sm.OLS(y, sm.add_constant(x)).fit()
    b0, b1 = fit.params
    n = len(x)
    sxx = float(np.sum((x - x.mean()) ** 2))
    x0 = (y0 - b0) / b1
    se = math.sqrt(fit.scale) / abs(b1) * math.sqrt(1 / m + 1 / n + (y0 - y.mean()) ** 2 / (b1**2 * sxx))
    t = stats.t.ppf(0.5 + level / 2, n - 2)
    return x0, se, x0 - t * se, x0 + t * se


def positions(store, keys) -> np.ndarray:
    lookup = {k[0]: i for i, k in enumerate(store.keys)}
    return np.array([lookup.get(k, -1) for k in keys], dtype=np.int64)


@pytest.fixture(scope="module")
def fitted():
    data = calibrations()
    res = sheetfit.fit_frame(data, y="y", x="x", group="lab")
    return data, res, store_from_results(res)


def test_handbook_example():
    store = store_from_results(sheetfit.fit_frame(HANDBOOK, y="y", x="x"))
    got = inverse_predict(store, np.zeros(2, dtype=np.int64), np.array([15.0, 90.0]), None, 0.95)
    half = (got[READ_BACK_HIGH] - got[READ_BACK_LOW]) / 2
    # Massart et al. (1997): a response of 15 reads back as 6.1 ± 4.9 at 95 % with m = 1
    assert (round(got[READ_BACK][0], 1), round(half[0], 1)) == (6.1, 4.9)
    # Massart et al. (1997): a response of 90 reads back as 43.9 ± 4.9 at 95 % with m = 1
    assert (round(got[READ_BACK][1], 1), round(half[1], 1)) == (43.9, 4.9)
    assert got[PREDICTION_REASON].eq("").all() and got[OUTSIDE_RANGE].eq("no").all()


@pytest.mark.parametrize("level", [0.95, 0.99])
@pytest.mark.parametrize("m", [1, 3])
def test_against_hand_computation(fitted, level, m):
    data, _, store = fitted
    rng = np.random.default_rng(5)
    keys, responses = [], []
    for g, _, b0, b1, _ in GROUPS:                          # responses of inputs 2…9, rows of groups mixed
        for x in rng.uniform(2.0, 9.0, 4):
            keys.append(g)
            responses.append(b0 + b1 * x)
    order = rng.permutation(len(keys))
    keys, responses = [keys[i] for i in order], np.array(responses)[order]
    got = inverse_predict(store, positions(store, keys), responses, np.full(len(keys), m), level)
    for i, (g, y0) in enumerate(zip(keys, responses)):
        expected = by_hand(data[data["lab"] == g], y0, m, level)
        ours = got.loc[i, [READ_BACK, READ_BACK_STD_ERROR, READ_BACK_LOW, READ_BACK_HIGH]].to_numpy(np.float64)
        # statsmodels OLS params and scale, numpy x̄, ȳ and Sxx, scipy.stats.t: the classical formula by hand
        np.testing.assert_allclose(ours, expected, rtol=1e-12, err_msg=f"group {g}, row {i}")
    # the number of measurements used is the one given (the input, passed through)
    assert got[MEASUREMENTS].eq(m).all() and got[PREDICTION_REASON].eq("").all()


def test_level_defaults_to_the_fit_and_is_checked(fitted):
    _, _, store = fitted
    at = positions(store, ["A", "B"])
    assert inverse_predict(store, at, np.array([8.0, 20.0]), None, None).equals(
        inverse_predict(store, at, np.array([8.0, 20.0]), None, store.level))
    with pytest.raises(JobError):
        inverse_predict(store, at, np.array([8.0, 20.0]), None, 1.5)
    with pytest.raises(ValueError):
        inverse_predict(store, at, np.array([8.0]), None, 0.95)


def test_cells_of_any_reader_type(fitted):
    data, _, store = fitted
    cells = np.array(["8", 8.0, np.float32(8.0), 8], dtype=object)
    counts = np.array([np.int64(3), "3", 3.0, 3], dtype=object)
    got = inverse_predict(store, positions(store, ["A"] * 4), cells, counts, 0.95)
    # statsmodels OLS + numpy + scipy.stats.t by hand: text, numpy and Python numbers read alike
    expected = by_hand(data[data["lab"] == "A"], 8.0, 3, 0.95)
    np.testing.assert_allclose(got[READ_BACK_STD_ERROR].to_numpy(np.float64), expected[1], rtol=1e-12)
    assert got[PREDICTION_REASON].eq("").all()


def test_rows_that_cannot_be_read_back(fitted):
    _, _, store = fitted
    responses = np.array([8.0, None, math.nan, "abc", dt.date(2024, 5, 1), 8.0, 8.0, 8.0, 8.0, 8.0, ""],
                         dtype=object)
    counts = np.array([1, 1, 1, 1, 1, 0, -2, 2.5, "two", None, 1], dtype=object)
    keys = ["nowhere"] + ["A"] * 10
    got = inverse_predict(store, positions(store, keys), responses, counts, 0.95)
    why = got[PREDICTION_REASON].tolist()
    assert "no fitted calibration line" in why[0]
    # the caller's own words for an unknown group replace the plain sentence
    said = inverse_predict(store, positions(store, ["nowhere", "A"]), np.array([8.0, 8.0]), None, 0.95,
                           group_reasons=[['no fitted model for group "nowhere"'], []])
    assert said[PREDICTION_REASON].tolist() == ['no fitted model for group "nowhere"', ""]
    assert [w.startswith("response:") for w in why[1:5]] == [True] * 4
    assert "empty" in why[1] and "empty" in why[2] and "not a number" in why[3] and "date" in why[4]
    assert [w.startswith("number of measurements averaged:") for w in why[5:10]] == [True] * 5
    assert "whole number of at least 1" in why[5] and "whole number" in why[6] and "whole number" in why[7]
    assert "response:" in why[10]
    assert got[list(INVERSE_COLUMNS[:4])].isna().all().all()
    assert got[OUTSIDE_RANGE].eq("").all() and got[BELOW_LOQ].eq("").all()


def test_slope_not_distinguishable_from_zero():
    rng = np.random.default_rng(2)
    x = np.arange(1.0, 7.0)
    y = 10.0 + 0.05 * x + rng.normal(0, 1.0, len(x))
    fit = sm.OLS(y, sm.add_constant(x)).fit()
    store = store_from_results(sheetfit.fit_frame(pd.DataFrame({"x": x, "y": y}), y="y", x="x"))
    for level in (0.5, 0.8, 0.9, 0.95, 0.99):
        got = inverse_predict(store, np.zeros(1, dtype=np.int64), np.array([10.3]), None, level)
        unsure = "not distinguishable from zero" in got[PREDICTION_REASON][0]
        # statsmodels: the slope's two-sided p-value is at least 1 − level exactly when |t| ≤ t quantile
        assert unsure == (fit.pvalues[1] >= 1 - level), level
        assert math.isnan(got[READ_BACK_LOW][0]) == unsure
        if unsure:          # no value at all: the inputs consistent with the response are unbounded
            assert math.isnan(got[READ_BACK][0]) and math.isnan(got[READ_BACK_STD_ERROR][0])
        else:               # statsmodels OLS params
            assert got[READ_BACK][0] == pytest.approx((10.3 - fit.params[0]) / fit.params[1], rel=1e-12)
    assert 0.05 < fit.pvalues[1] < 0.5   # statsmodels: both answers occur among the levels above


def test_flat_line_and_no_residual_df(fitted):
    data, _, store = fitted
    at = positions(store, ["A"])
    beta = store.beta.copy()
    beta[:, 1] = 0.0
    flat = inverse_predict(dataclasses.replace(store, beta=beta), at, np.array([8.0]), None, 0.95)
    # by definition: (y0 − b0)/0 has no value
    assert "flat" in flat[PREDICTION_REASON][0] and math.isnan(flat[READ_BACK][0])
    bare = dataclasses.replace(store, df=np.zeros(len(store)), sigma2=np.full(len(store), np.nan))
    got = inverse_predict(bare, at, np.array([8.0]), None, 0.95)
    assert "no residual degrees of freedom" in got[PREDICTION_REASON][0]
    assert math.isnan(got[READ_BACK_STD_ERROR][0]) and math.isnan(got[READ_BACK_HIGH][0])
    # statsmodels OLS params: the value itself needs only the line
    assert got[READ_BACK][0] == pytest.approx(by_hand(data[data["lab"] == "A"], 8.0, 1, 0.95)[0], rel=1e-12)


def test_outside_calibrated_range(fitted):
    data, _, store = fitted
    for g in ("A", "B"):                                   # a rising and a falling line
        d = data[data["lab"] == g]
        fit = sm.OLS(d["y"].to_numpy(), sm.add_constant(d["x"].to_numpy())).fit()
        # statsmodels: the fitted responses at the lowest and the highest standard bound the range
        ends = sorted(fit.predict(np.array([[1.0, d["x"].min()], [1.0, d["x"].max()]])))
        span = ends[1] - ends[0]
        ys = np.array([ends[0] - 0.01 * span, ends[0] + 0.01 * span, ends[1] - 0.01 * span, ends[1] + 0.01 * span])
        got = inverse_predict(store, positions(store, [g] * 4), ys, None, 0.95)
        flags = got[OUTSIDE_RANGE].tolist()
        assert flags[0].startswith("yes: response below") and flags[3].startswith("yes: response above")
        assert flags[1:3] == ["no", "no"]
        assert got[READ_BACK].notna().all()                # flagged, still read back


def test_below_limit_of_quantification(fitted):
    data, _, store = fitted
    loq = np.full(len(store), np.nan)
    d = data[data["lab"] == "A"]
    fit = sm.OLS(d["y"].to_numpy(), sm.add_constant(d["x"].to_numpy())).fit()
    limit = 10 * math.sqrt(fit.scale) / abs(fit.params[1])  # ICH Q2: LOQ = 10·σ/slope from the line
    loq[positions(store, ["A"])[0]] = limit
    ys = fit.params[0] + fit.params[1] * np.array([0.5 * limit, 2.0 * limit])
    got = inverse_predict(store, positions(store, ["A", "A", "B"]), np.append(ys, 20.0), None, 0.95, loq)
    assert got[BELOW_LOQ].tolist() == [f"yes (limit {limit:.6g})", "no", ""]   # B: no limit known


def test_quantification_limits(fitted):
    data, _, store = fitted
    limits = quantification_limits(store)
    for i, (g,) in enumerate(store.keys):
        d = data[data["lab"] == g]
        fit = sm.OLS(d["y"].to_numpy(), sm.add_constant(d["x"].to_numpy())).fit()
        # ICH Q2: LOQ = 10·σ/slope, σ the residual std error of the line (statsmodels scale, params)
        assert limits[i] == pytest.approx(10 * math.sqrt(fit.scale) / abs(fit.params[1]), rel=1e-12)


@pytest.mark.parametrize("x, settings, words", [
    (["x", "z"], {}, "2 input terms (x, z)"),
    (["x", "x^2"], {}, "2 input terms (x, x^2)"),
    (["log(x)"], {}, "the term log(x)"),
    (["x"], {"intercept": False}, "no constant"),
])
def test_other_models_give_reasons(fitted, x, settings, words):
    data, _, _ = fitted
    data = data.assign(z=np.random.default_rng(1).uniform(1, 5, len(data)))
    store = store_from_results(sheetfit.fit_frame(data, y="y", x=x, group="lab", **settings))
    assert words in line_problem(store)
    assert np.isnan(quantification_limits(store)).all()
    got = inverse_predict(store, positions(store, ["A", "B", "nowhere"]), np.array([8.0, 20.0, 1.0]), None, 0.95)
    assert got[PREDICTION_REASON].map(lambda w: w.startswith(NEEDS_LINE) and words in w).all()
    assert got[list(INVERSE_COLUMNS[:5])].isna().all().all()


def test_results_workbook_round_trip(fitted, tmp_path):
    _, res, store = fitted
    path = sheetfit.write_results(res, tmp_path / "calibration-fit.xlsx")
    back = read_store(path)
    keys = ["A", "B", "C", "D", "nowhere"]
    ys = np.array([8.0, 20.0, 60.0, 7.0, 1.0])
    loq = np.linspace(1.0, 4.0, len(store))
    ours = inverse_predict(store, positions(store, keys), ys, np.array([1, 2, 3, 4, 1]), 0.95, loq)
    again = inverse_predict(back, positions(back, keys), ys, np.array([1, 2, 3, 4, 1]), 0.95, loq)
    # the same stored numbers: the workbook keeps every float exactly
    pd.testing.assert_frame_equal(ours, again, check_exact=True)
    assert ours[READ_BACK].notna().sum() == 4
