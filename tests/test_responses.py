"""Several responses in one run (--y repeated): sheetfit.read.responses and its way through the results.

Oracle: statsmodels OLS per response and group (coefficients, std errors, R², Breusch–Pagan via
het_breuschpagan), and get_prediction for the predictions of every response. Data are seeded and invented.
"""

from __future__ import annotations

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.stats.diagnostic import het_breuschpagan

import sheetfit
import sheetfit.api
from sheetfit.errors import JobError
from sheetfit.read.responses import RESPONSE_KEY, RESPONSE_VALUE
from sheetfit.results.headers import COEFFICIENT, STD_ERROR, USED, YES


def meters(seed: int = 5) -> pd.DataFrame:
    """Invented electricity and gas use of two sites against outdoor temperature; one gas reading missing."""
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"Site": np.repeat(["a", "b"], 30), "T": rng.uniform(0, 20, 60)})
    df["kWh"] = 100 + 5 * df["T"] + rng.normal(0, 3, 60)
    df["Gas"] = 50 - 2 * df["T"] + rng.normal(0, 2, 60)
    df.loc[3, "Gas"] = np.nan
    return df


def test_every_response_is_fitted_as_its_own_group():
    data = meters()
    res = sheetfit.fit_frame(data, y=["kWh", "Gas"], x=["T"], group="Site")
    assert list(res.groups.columns[:2]) == [RESPONSE_KEY, "Site"]
    assert res.y == RESPONSE_VALUE
    for (resp, site), part in res.coefficients.groupby([RESPONSE_KEY, "Site"]):
        g = data[(data["Site"] == site) & data[resp].notna()]
        X = sm.add_constant(g["T"].to_numpy())
        ref = sm.OLS(g[resp].to_numpy(), X).fit()                       # statsmodels OLS, one response alone
        np.testing.assert_allclose(part[COEFFICIENT].to_numpy(float), ref.params, rtol=1e-9)
        np.testing.assert_allclose(part[STD_ERROR].to_numpy(float), ref.bse, rtol=1e-9)
        row = res.groups[(res.groups[RESPONSE_KEY] == resp) & (res.groups["Site"] == site)].iloc[0]
        assert row["R²"] == pytest.approx(ref.rsquared, rel=1e-9)
        checks = res.checks[(res.checks[RESPONSE_KEY] == resp) & (res.checks["Site"] == site)].set_index("check")
        lm = het_breuschpagan(ref.resid, X, robust=True)[0]                  # statsmodels, Koenker form
        assert checks.loc["constant variance (Breusch–Pagan)", "statistic"] == pytest.approx(lm, rel=1e-8)
    obs = res.observations
    gas_row = obs[(obs[RESPONSE_KEY] == "Gas") & (obs["source row"] == 5)].iloc[0]
    kwh_row = obs[(obs[RESPONSE_KEY] == "kWh") & (obs["source row"] == 5)].iloc[0]
    assert gas_row[USED] != YES and "Gas" in gas_row["reason"]
    assert kwh_row[USED] == YES and kwh_row["reason"] == ""        # a blank gas cell leaves the row for kWh


def test_predictions_for_every_response_and_the_sheets(tmp_path):
    data = meters(seed=6)
    res = sheetfit.fit_frame(data, y=["kWh", "Gas"], x=["T"], group="Site")
    path = sheetfit.write_results(res, tmp_path / "fit.xlsx")
    pred = sheetfit.predict(path, pd.DataFrame({"Site": ["a"], "T": [7.5]}))
    assert list(pred[RESPONSE_KEY]) == ["kWh", "Gas"]
    for i, resp in enumerate(["kWh", "Gas"]):
        g = data[(data["Site"] == "a") & data[resp].notna()]
        ref = sm.OLS(g[resp].to_numpy(), sm.add_constant(g["T"].to_numpy())).fit()
        sf = ref.get_prediction(np.array([[1.0, 7.5]])).summary_frame(alpha=0.05)   # statsmodels
        assert pred["predicted value"][i] == pytest.approx(sf["mean"].iloc[0], rel=1e-10)
    wb = openpyxl.load_workbook(path, read_only=True)
    for sheet in ("groups", "coefficients", "checks", "observations"):
        first = next(wb[sheet].iter_rows(max_row=1, values_only=True))
        assert first[0] == RESPONSE_KEY, sheet


def test_a_job_takes_a_list_of_responses():
    job = sheetfit.api.job_from("x.xlsx", y=["kWh", "Gas"], x=["T"])
    assert job.y == "kWh" and job.all_responses == ("kWh", "Gas")
    with pytest.raises(JobError, match="several responses"):
        sheetfit.api.job_from("x.xlsx", y=["kWh", "Gas"], x=["T"], weights="1/Gas")
