"""--calibration: limits of detection and quantification on groups, back-calculated standards on
observations.

Oracles: the ICH Q2 formulas computed here by hand from statsmodels OLS (LOD = 3.3·σ/slope,
LOQ = 10·σ/slope, σ the residual std error), numpy for the back-calculated values; the ±15 % / ±20 %
limits are common practice in method validation. Data are invented and seeded.
"""

from __future__ import annotations

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm

import sheetfit
from sheetfit.errors import JobError


def _runs(seed: int = 4) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    levels = np.array([0.0, 0.5, 1.0, 2.0, 5.0, 10.0])
    parts = []
    for inst, slope in (("Kiln", 2.0), ("Moss", 0.8)):
        x = np.repeat(levels, 3)
        y = 0.1 + slope * x + rng.normal(0, 0.05, len(x))
        parts.append(pd.DataFrame({"inst": inst, "conc": x, "signal": y}))
    df = pd.concat(parts, ignore_index=True)
    df.loc[(df["inst"] == "Kiln") & (df["conc"] == 0.5), "signal"] += 0.45     # lowest standard drifts
    df.loc[(df["inst"] == "Moss") & (df["conc"] == 5.0), "signal"] *= 1.25      # a mid standard reads high
    return df


def test_limits_and_back_calculation_against_hand_computation(tmp_path):
    df = _runs()
    res = sheetfit.fit_frame(df, y="signal", x="conc", group="inst", calibration=True)
    for inst in ("Kiln", "Moss"):
        g = df[df["inst"] == inst]
        ref = sm.OLS(g["signal"].to_numpy(), sm.add_constant(g["conc"].to_numpy())).fit()     # statsmodels
        s, b0, b1 = np.sqrt(ref.scale), ref.params[0], ref.params[1]
        row = res.groups[res.groups["inst"] == inst].iloc[0]
        assert row["limit of detection"] == pytest.approx(3.3 * s / abs(b1), rel=1e-9)         # ICH Q2
        assert row["limit of quantification"] == pytest.approx(10 * s / abs(b1), rel=1e-9)     # ICH Q2
        obs = res.observations[res.observations["inst"] == inst]
        back = (obs["signal"].to_numpy() - b0) / b1                                             # numpy
        np.testing.assert_allclose(obs["back-calculated input"], back, rtol=1e-9, atol=1e-12)
        x = obs["conc"].to_numpy()
        dev = np.where(x != 0, 100 * (back - x) / np.where(x != 0, x, 1), np.nan)
        np.testing.assert_allclose(obs["deviation %"], dev, rtol=1e-7, atol=1e-9)
        cut = np.where(x == 0.5, 20.0, 15.0)                     # common practice: ±20 % at the lowest standard
        expect_off = np.isfinite(dev) & (np.abs(dev) > cut)
        assert list(obs["standard off"].str.len() > 0) == list(expect_off)
    kiln_off = res.observations[(res.observations["inst"] == "Kiln") & (res.observations["standard off"] != "")]
    assert len(kiln_off) and all("the lowest standard" in w for w in kiln_off["standard off"])
    path = sheetfit.write_results(res, tmp_path / "cal.xlsx")
    wb = openpyxl.load_workbook(path)
    head = [c.value for c in wb["observations"][1]]
    assert head[-3:] == ["back-calculated input", "deviation %", "standard off"]
    rules = [r.formula[0] for rng in wb["observations"].conditional_formatting for r in rng.rules]
    assert any("LEN(" in f for f in rules)
    assert {"limit of detection", "limit of quantification"} <= {c.value for c in wb["groups"][1]}


def test_settings_move_the_flag():
    df = _runs()
    strict = sheetfit.fit_frame(df, y="signal", x="conc", group="inst", calibration=True, back_calc_limit=1.0,
                                back_calc_limit_lowest=1.0)
    loose = sheetfit.fit_frame(df, y="signal", x="conc", group="inst", calibration=True, back_calc_limit=90.0,
                               back_calc_limit_lowest=90.0)
    assert (strict.observations["standard off"] != "").sum() > (loose.observations["standard off"] != "").sum() == 0


@pytest.mark.parametrize("kw", [{"x": ["conc", "signal2"]}, {"x": "conc", "intercept": False},
                                {"x": "conc", "change_point": "heating"}])
def test_calibration_needs_a_straight_line_with_a_constant(kw):
    df = _runs().assign(signal2=1.0)
    with pytest.raises(JobError, match="--calibration needs a straight line in one input"):
        sheetfit.fit_frame(df, y="signal", group="inst", calibration=True, **kw)


def test_calibration_needs_the_input_itself_and_a_slope_that_says_something():
    df = _runs()
    with pytest.raises(JobError, match="needs the input itself"):
        sheetfit.fit_frame(df.assign(conc=df["conc"] + 1), y="signal", x="log(conc)", group="inst",
                           calibration=True)
    flat = pd.DataFrame({"conc": np.tile([0.0, 1, 2, 3, 4], 2), "signal": [1.0, 2, 0, 2, 1] * 2})
    res = sheetfit.fit_frame(flat, y="signal", x="conc", calibration=True)
    ref = sm.OLS(flat["signal"].to_numpy(), sm.add_constant(flat["conc"].to_numpy())).fit()   # statsmodels
    assert ref.pvalues[1] >= 0.05
    assert np.isnan(res.groups["limit of detection"].iloc[0])
    assert res.observations["back-calculated input"].isna().all()
    assert res.observations["standard off"].str.startswith("not read back: the slope").all()


def test_calibration_settings_without_calibration_are_refused():
    with pytest.raises(JobError, match="add --calibration"):
        sheetfit.fit_frame(_runs(), y="signal", x="conc", group="inst", back_calc_limit=10.0)
    with pytest.raises(JobError, match="add --change-point"):
        sheetfit.fit_frame(_runs(), y="signal", x="conc", group="inst", change_point_input="conc")
