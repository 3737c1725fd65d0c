"""The collinearity check judges inputs (families of terms from one source column) by their
generalised VIF, GVIF = det(R11)·det(R22)/det(R) (Fox & Monette 1992, JASA 87:178–183), not
powers of one input against each other."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from statsmodels.stats.outliers_influence import variance_inflation_factor

import sheetfit
from sheetfit.checks import collinearity
from sheetfit.model.engine import fit_groups
from sheetfit.terms import parse_terms
from tests.oracle import assert_close

SPECS = ["x", "x^2", "z", "log(w)", "w"]        # inputs x (2 terms), z (1 term), w (2 terms)


def family_frame(seed: int, n: int = 40) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.uniform(2, 12, n)
    z = 0.6 * x + rng.normal(scale=2.0, size=n)          # z moves partly with x
    w = rng.uniform(1, 30, n) + 0.5 * z
    return pd.DataFrame({"x": x, "z": z, "w": w, "y": 1 + x + z + np.log(w) + rng.normal(size=n)})


def engine_fit(frames: list[pd.DataFrame], specs: list[str], intercept: bool):
    frame = pd.concat(frames, ignore_index=True)
    codes = np.repeat(np.arange(len(frames)), [len(f) for f in frames])
    terms = parse_terms(specs, list(frame.columns))
    cols = {c: frame[c].to_numpy() for c in ("x", "z", "w") if c in frame}
    return fit_groups(frame["y"].to_numpy(), cols, codes, len(frames), terms, intercept), terms


def raw_design(frame: pd.DataFrame) -> np.ndarray:
    x, z, w = frame["x"].to_numpy(), frame["z"].to_numpy(), frame["w"].to_numpy()
    return np.column_stack([x, x**2, z, np.log(w), w])


def gvif_by_hand(X: np.ndarray, blocks: list[list[int]], centred: bool) -> list[float]:
    """Fox & Monette (1992): det(R11)·det(R22)/det(R) on the correlation matrix of the design
    columns (numpy determinants); without an intercept, uncentred cross-products scaled to unit diagonal."""
    if centred:
        R = np.corrcoef(X, rowvar=False)
    else:
        C = X.T @ X
        d = np.sqrt(np.diag(C))
        R = C / np.outer(d, d)
    out = []
    for own in blocks:
        rest = [j for j in range(X.shape[1]) if j not in own]
        out.append(np.linalg.det(R[np.ix_(own, own)]) * np.linalg.det(R[np.ix_(rest, rest)]) / np.linalg.det(R))
    return out


@pytest.mark.parametrize("intercept", [True, False])
def test_gvif_per_input_matches_the_determinant_formula(intercept):
    frames = [family_frame(seed) for seed in (1, 2, 3)]
    fit, terms = engine_fit(frames, SPECS, intercept)
    got = collinearity.gvif(fit, terms)
    assert [name for name, _ in collinearity.families(terms, intercept)] == ["x", "z", "w"]
    for g, frame in enumerate(frames):
        want = gvif_by_hand(raw_design(frame), [[0, 1], [2], [3, 4]], centred=intercept)  # Fox & Monette 1992
        assert_close(got[g], want, rtol=1e-9)


@pytest.mark.parametrize("intercept", [True, False])
def test_gvif_of_one_term_inputs_is_the_vif_of_statsmodels(intercept):
    frames = [family_frame(seed, n) for seed, n in ((4, 30), (5, 36))]
    fit, terms = engine_fit(frames, ["x", "z", "w"], intercept)
    got = collinearity.gvif(fit, terms)
    for g, frame in enumerate(frames):
        exog = frame[["x", "z", "w"]].to_numpy()
        if intercept:
            exog = np.column_stack([np.ones(len(frame)), exog])
        off = 1 if intercept else 0
        want = [variance_inflation_factor(exog, j, standardize=False)          # statsmodels, design as fitted
                for j in range(off, exog.shape[1])]
        assert_close(got[g], want, rtol=1e-9)


def test_check_statistic_is_the_largest_size_adjusted_gvif():
    frame = family_frame(7)
    res = sheetfit.fit_frame(frame, y="y", x=SPECS, adjust="none")
    row = res.checks[res.checks["check"] == "collinearity (VIF)"].iloc[0]
    g = np.array(gvif_by_hand(raw_design(frame), [[0, 1], [2], [3, 4]], centred=True))   # Fox & Monette 1992
    assert_close(row["statistic"], np.max(g ** (1.0 / np.array([2, 1, 2]))), rtol=1e-9)
    assert row["note"].startswith("GVIF^(1/df) per input:")


def test_a_quadratic_in_one_well_spread_input_does_not_fail():
    # Before the fix: "inputs move together (x^2 VIF 15.3 > 10)" for x and x^2 of one input.
    rng = np.random.default_rng(1)
    x = rng.uniform(0, 10, 40)
    z = rng.uniform(0, 10, 40)
    frame = pd.DataFrame({"x": x, "z": z, "y": 1 + x - 0.2 * x**2 + z + rng.normal(size=40)})
    alone = sheetfit.fit_frame(frame, y="y", x=["x", "x^2"])
    row = alone.checks[alone.checks["check"] == "collinearity (VIF)"].iloc[0]
    assert row["verdict"] == "n/a" and row["note"] == "one input: collinearity does not arise"
    with_z = sheetfit.fit_frame(frame, y="y", x=["x", "x^2", "z"])
    row = with_z.checks[with_z.checks["check"] == "collinearity (VIF)"].iloc[0]
    assert row["verdict"] == "pass" and row["statistic"] < 2.0
    assert (with_z.coefficients["VIF"].iloc[1:3] > 10).all()        # the per-term VIF still shows x vs x^2
    for res in (alone, with_z):
        assert "move together" not in res.groups["reasons"].iloc[0]


def test_the_reason_names_the_inputs_that_move_together():
    rng = np.random.default_rng(8)
    n = 40
    a = rng.uniform(0, 10, n)
    b = a + rng.normal(scale=0.05, size=n)
    frame = pd.DataFrame({"a": a, "b": b, "c": rng.normal(size=n), "y": 1 + a + b + rng.normal(size=n)})
    res = sheetfit.fit_frame(frame, y="y", x=["a", "b", "c"])
    assert "inputs move together, so their separate effects are uncertain (a, b: VIF" in res.groups["reasons"].iloc[0]
