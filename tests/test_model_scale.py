"""Data near the ends of double precision: inputs and response times 1e300, 1e-300 or subnormal.

The fit of y·s on x·s has the same slopes, R², t, p-values and checks as the fit of y on x; the
intercept, its std error and the residual scale are s times theirs. Oracle: statsmodels OLS on
the unscaled data. No warning may be emitted (warnings are errors inside `no_warnings`).
"""

from __future__ import annotations

import warnings
from contextlib import contextmanager

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import sheetfit
from sheetfit import checks
from sheetfit.job import Thresholds
from sheetfit.model.engine import fit_groups
from sheetfit.model.inference import inference, mean_std_error
from sheetfit.terms import coefficient_labels, parse_terms
from tests.oracle import assert_close


@contextmanager
def no_warnings():
    """Every warning (numpy overflow, invalid value, division by zero included) raises."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        with np.errstate(over="warn", invalid="warn", divide="warn"):
            yield


def base_frame(seed: int = 3, n: int = 30) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x1 = rng.uniform(1, 10, n)
    x2 = rng.uniform(1, 10, n)
    return pd.DataFrame({"x1": x1, "x2": x2, "y": 4 + 2 * x1 - x2 + rng.normal(size=n)})


def scaled(frame: pd.DataFrame, s: float) -> pd.DataFrame:
    return frame.assign(x1=frame["x1"] * s, x2=frame["x2"] * s, y=frame["y"] * s)


@pytest.mark.parametrize("s", [1e300, 1e-300])
def test_huge_and_tiny_data_fit_as_the_unscaled_data(s):
    # Before the fix: 1e300 → "overflow encountered in square"; 1e-300 → "exact linear combination".
    frame = base_frame()
    ref = sm.OLS(frame["y"], sm.add_constant(frame[["x1", "x2"]])).fit()           # statsmodels, unscaled
    plain = sheetfit.fit_frame(frame, y="y", x=["x1", "x2"])
    with no_warnings():
        res = sheetfit.fit_frame(scaled(frame, s), y="y", x=["x1", "x2"])
    row = res.groups.iloc[0]
    assert row["status"] == "fitted", row["reasons"]
    unit = np.array([s, 1.0, 1.0])        # intercept in units of y; slopes are ratios y/x
    coef = res.coefficients
    assert_close(coef["coefficient"], ref.params.to_numpy() * unit, what="estimates")
    assert_close(coef["std error"], ref.bse.to_numpy() * unit, what="std errors")
    assert_close(coef["t"], ref.tvalues, what="t")
    assert_close(coef["p-value"], ref.pvalues, what="p")
    assert_close(coef["VIF"], plain.coefficients["VIF"], what="VIF")
    assert_close(row["R²"], ref.rsquared, what="R²")
    assert_close(row["adjusted R²"], ref.rsquared_adj, what="adjusted R²")
    assert_close(row["F"], ref.fvalue, what="F")
    assert_close(row["residual std error"], np.sqrt(ref.scale) * s, what="residual std error")
    assert_close(row["condition number"], plain.groups["condition number"].iloc[0], what="condition number")
    obs = res.observations
    assert_close(obs["fitted value"], ref.fittedvalues * s, what="fitted value")
    assert_close(obs["leverage"], plain.observations["leverage"], what="leverage")
    assert_close(obs["studentized residual"], plain.observations["studentized residual"], what="studentized")
    # Every check is scale-free: the same statistics and p-values as on the unscaled data.
    assert_close(res.checks["statistic"], plain.checks["statistic"], what="check statistics")
    assert_close(res.checks["p-value"], plain.checks["p-value"], what="check p-values")
    assert list(res.checks["verdict"]) == list(plain.checks["verdict"])


@pytest.mark.parametrize("s", [1e300, 1e-300])
def test_one_input_engine_inference_and_checks_without_warnings(s):
    frame = base_frame(seed=8)
    ref = sm.OLS(frame["y"], sm.add_constant(frame["x1"])).fit()                    # statsmodels, unscaled
    terms = parse_terms(["x1"], ["x1", "y"])
    data = scaled(frame, s)
    thr = Thresholds()
    rows = checks.RowsInOrder(codes=np.zeros(len(data), int), source_rows=np.arange(len(data)) + 2,
                              order_note="rows in input row order")
    with no_warnings():
        fit = fit_groups(data["y"].to_numpy(), {"x1": data["x1"].to_numpy()}, np.zeros(len(data), int), 1,
                         terms, True)
        inf = inference(fit, 0.95)
        results, _ = checks.run_checks(fit, inf, rows, terms, list(coefficient_labels(terms, True)), thr)
        checks.verdicts.verdicts(results, fit.fitted_ok, thr)
        d = np.array([[[1.0, 2.0 * s], [1.0, 7.5 * s]]])
        se_mean = mean_std_error(fit, np.array([0]), d)
    assert_close(fit.beta[0], ref.params.to_numpy() * [s, 1.0])
    assert_close(fit.se[0], ref.bse.to_numpy() * [s, 1.0])
    assert_close(inf.r2[0], ref.rsquared)
    pred = ref.get_prediction(np.array([[1.0, 2.0], [1.0, 7.5]]))                     # statsmodels
    assert_close(se_mean[0], pred.se_mean * s)
    assert all(np.isfinite(r.statistic[0]) for r in results if r.key not in ("vif", "condition"))


def test_mean_std_error_matches_statsmodels_prediction():
    frame = base_frame(seed=5)
    terms = parse_terms(["x1", "x2"], list(frame.columns))
    fit = fit_groups(frame["y"].to_numpy(), {c: frame[c].to_numpy() for c in ("x1", "x2")},
                     np.zeros(len(frame), int), 1, terms, True)
    d = np.array([[[1.0, 1.5, 9.0], [1.0, 5.0, 5.0], [1.0, 12.0, 0.5]]])
    ref = sm.OLS(frame["y"], sm.add_constant(frame[["x1", "x2"]])).fit()
    assert_close(mean_std_error(fit, np.array([0]), d)[0], ref.get_prediction(d[0]).se_mean)   # statsmodels


def test_subnormal_data_are_fitted_not_called_collinear():
    # 1e-310 is subnormal: about 14 significant digits are left, so compare loosely.
    frame = base_frame()
    ref = sm.OLS(frame["y"], sm.add_constant(frame[["x1", "x2"]])).fit()           # statsmodels, unscaled
    with no_warnings():
        res = sheetfit.fit_frame(scaled(frame, 1e-310), y="y", x=["x1", "x2"])
    assert res.groups["status"].iloc[0] == "fitted", res.groups["reasons"].iloc[0]
    assert_close(res.coefficients["coefficient"], ref.params.to_numpy() * [1e-310, 1.0, 1.0], rtol=1e-6)
    assert_close(res.groups["R²"].iloc[0], ref.rsquared, rtol=1e-8)


def test_quadratic_of_a_large_input_keeps_its_digits():
    # x ≈ 1e150 so x² ≈ 1e300 is still a double; y ≈ 1e300.
    frame = base_frame(seed=9)
    ref = sm.OLS(frame["y"], sm.add_constant(np.column_stack([frame["x1"], frame["x1"] ** 2]))).fit()
    data = frame.assign(x1=frame["x1"] * 1e150, y=frame["y"] * 1e300)
    with no_warnings():
        res = sheetfit.fit_frame(data, y="y", x=["x1", "x1^2"])
    # y·1e300 = b0·1e300 + b1·1e150·(x·1e150) + b2·(x·1e150)²  (statsmodels, unscaled)
    assert_close(res.coefficients["coefficient"], ref.params * np.array([1e300, 1e150, 1.0]))
    assert_close(res.groups["R²"].iloc[0], ref.rsquared)


def test_powers_beyond_double_precision_are_a_reason_not_a_warning():
    frame = base_frame()
    data = pd.concat([frame.assign(g="ok"), frame.assign(g="huge", x1=frame["x1"] * 1e300)], ignore_index=True)
    with no_warnings():
        res = sheetfit.fit_frame(data, y="y", x=["x1", "x1^2"], group="g")
    status = dict(zip(res.groups["g"], res.groups["status"]))
    reasons = dict(zip(res.groups["g"], res.groups["reasons"]))
    assert status == {"ok": "fitted", "huge": "not fitted"}
    assert "x1^2 are outside the range of double precision" in reasons["huge"]


@pytest.mark.parametrize("s", [1e300, 1e-300])
def test_robust_errors_and_wald_test_at_extreme_scales(s):
    # Spread growing with x1, so the variance checks fail and robust (HC3) errors are shown;
    # --inference robust swaps them in and makes the model F-test a robust Wald test.
    rng = np.random.default_rng(31)
    n = 60
    x1, x2 = rng.uniform(0, 10, n), rng.uniform(0, 10, n)
    frame = pd.DataFrame({"x1": x1, "x2": x2, "y": 1 + 0.3 * x1 - x2 + rng.normal(size=n) * 0.05 * x1**2})
    plain = sheetfit.fit_frame(frame, y="y", x=["x1", "x2"], inference="robust", adjust="none")
    ref = sm.OLS(frame["y"], sm.add_constant(frame[["x1", "x2"]])).fit(cov_type="HC3", use_t=True)  # statsmodels
    with no_warnings():
        res = sheetfit.fit_frame(scaled(frame, s), y="y", x=["x1", "x2"], inference="robust", adjust="none")
    assert (res.coefficients["std error used"] == "HC3").all()
    assert_close(res.coefficients["robust std error (HC3)"], ref.bse.to_numpy() * [s, 1.0, 1.0])
    assert_close(res.coefficients["interval low"], np.asarray(ref.conf_int(0.05))[:, 0] * [s, 1.0, 1.0])
    f_row = res.checks[res.checks["check"] == "model F-test"].iloc[0]
    assert_close(f_row["statistic"], np.squeeze(ref.fvalue), 1e-8)
    assert_close(f_row["statistic"], plain.checks.loc[plain.checks["check"] == "model F-test", "statistic"].iloc[0])
