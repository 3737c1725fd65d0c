"""Lack of fit against replicates (checks/lack_of_fit.py): published values, exact arithmetic and statsmodels.

Oracles: the NIST StRD Pontius data (tests/data/nist, the load-cell calibration data) with the
lack-of-fit F the NIST/SEMATECH e-Handbook of Statistical Methods prints for the straight line
(section 4.6.1, load cell calibration); exact rational arithmetic (fractions) on NIST's text; and
statsmodels: OLS of the model (reduced) and of one mean per input point (full), compared by
statsmodels.stats.anova.anova_lm. Data other than Pontius are seeded.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.multitest import multipletests

from sheetfit.checks.lack_of_fit import (
    LACK_OF_FIT,
    lack_of_fit,
    pure_error_split,
    replicate_keys,
)
from sheetfit.checks.verdicts import verdicts
from sheetfit.job import Thresholds
from sheetfit.model.engine import fit_groups
from sheetfit.terms import parse_terms, source_columns

NIST = Path(__file__).resolve().parent / "data" / "nist"
NO_REPLICATES = "no repeated input values: lack of fit cannot be tested"
ZERO_PURE_ERROR = "replicated inputs give the same response (zero pure error): lack of fit cannot be tested"


@dataclass(frozen=True)
class Run:
    """One engine fit with its lack-of-fit check, as the run will call it."""

    frame: pd.DataFrame      # rows sorted by group, as the engine saw them
    fit: object              # EngineFit
    res: object              # CheckResult
    names: list[str]         # group names by code
    keys: np.ndarray
    codes: np.ndarray


def engine_fit(frame: pd.DataFrame, specs: list[str], intercept: bool = True, extra=None) -> Run:
    """The engine fit of y on the terms per group `g` (rows sorted by group) and its lack-of-fit check."""
    frame = frame.sort_values("g", kind="stable").reset_index(drop=True)
    names, codes = np.unique(frame["g"].to_numpy(), return_inverse=True)
    terms = parse_terms(specs, [c for c in frame.columns if c not in ("g", "y")])
    cols = {c: frame[c].to_numpy(dtype=float) for c in source_columns(terms)}
    fit = fit_groups(frame["y"].to_numpy(dtype=float), cols, codes, len(names), terms, intercept, extra)
    keys = replicate_keys(cols, codes)
    return Run(frame, fit, lack_of_fit(fit, keys, codes), list(names), keys, codes)


def anova_reference(sub: pd.DataFrame, design: np.ndarray, point_cols: list[str]) -> tuple[float, float]:
    """F and p of the lack-of-fit test by statsmodels: the model against one mean per input point."""
    reduced = sm.OLS(sub["y"].to_numpy(), design).fit()                               # statsmodels
    point = sub.groupby(point_cols, sort=True).ngroup().to_numpy()                    # pandas
    full = sm.OLS(sub["y"].to_numpy(), np.eye(point.max() + 1)[point]).fit()         # statsmodels
    table = anova_lm(reduced, full)                                                   # statsmodels
    return float(table["F"].iloc[1]), float(table["Pr(>F)"].iloc[1])


# --- NIST Pontius: the straight line of deflection on load -------------------------------------------

def pontius() -> pd.DataFrame:
    frame = pd.read_csv(NIST / "pontius.csv", dtype=str)
    return frame.assign(g="pontius")


def exact_lack_of_fit(text: pd.DataFrame) -> float:
    """The lack-of-fit F of the straight line in exact rational arithmetic on NIST's text."""
    x = [Fraction(v) for v in text["x"]]
    y = [Fraction(v) for v in text["y"]]
    n = len(x)
    xbar, ybar = sum(x) / n, sum(y) / n
    b1 = sum((a - xbar) * (b - ybar) for a, b in zip(x, y)) / sum((a - xbar) ** 2 for a in x)
    b0 = ybar - b1 * xbar
    rss = sum((b - b0 - b1 * a) ** 2 for a, b in zip(x, y))
    points: dict[Fraction, list[Fraction]] = {}
    for a, b in zip(x, y):
        points.setdefault(a, []).append(b)
    pure = sum(sum((v - sum(vs) / len(vs)) ** 2 for v in vs) for vs in points.values())
    m = len(points)
    return float(((rss - pure) / (m - 2)) / (pure / (n - m)))


def test_pontius_straight_line_against_the_handbook_and_exact_arithmetic():
    text = pontius()
    res = engine_fit(text.assign(x=text["x"].astype(float), y=text["y"].astype(float)), ["x"]).res
    assert res.key == LACK_OF_FIT and res.rule == "p_small"
    f = res.statistic[0]
    # exact rational arithmetic on NIST's data text: F = 214.746923653…
    assert f == pytest.approx(exact_lack_of_fit(text), rel=1e-12)
    # NIST/SEMATECH e-Handbook 4.6.1 (straight line, deflection on load): "lack-of-fit F statistic = 214.7464",
    # critical value F(0.05; 18, 20) = 2.15. The handbook's F agrees to 5 significant digits only
    # (relative 2.4e-6): its residual standard deviation 0.0021712694 also sits 1.5e-6 below the exact
    # straight-line value, and that SD with the exact pure error gives 214.7463, so its F carries the
    # handbook program's own rounding; the exact value above is the 1e-12 check.
    assert f == pytest.approx(214.7464, rel=5e-6)
    assert res.note[0] == "replicates at 20 of 20 input values; F on 18 and 20 degrees of freedom"
    assert round(stats.f.ppf(0.95, 18, 20), 2) == 2.15                               # scipy: the handbook's cut
    assert res.pvalue[0] == pytest.approx(stats.f.sf(exact_lack_of_fit(text), 18, 20), rel=1e-9)  # scipy


def test_pontius_quadratic_matches_statsmodels():
    # NIST certifies the quadratic for Pontius; its lack of fit against statsmodels' anova_lm
    frame = pontius().assign(x=lambda d: d["x"].astype(float), y=lambda d: d["y"].astype(float))
    run = engine_fit(frame, ["x", "x^2"])
    frame, res = run.frame, run.res
    x = frame["x"].to_numpy()
    f_ref, p_ref = anova_reference(frame, np.column_stack([np.ones(40), x, x**2]), ["x"])
    assert res.statistic[0] == pytest.approx(f_ref, rel=1e-9)
    assert res.pvalue[0] == pytest.approx(p_ref, rel=1e-9)
    assert res.note[0].endswith("F on 17 and 20 degrees of freedom")


# --- seeded groups with replicates, several at once ---------------------------------------------------

def replicated_groups(seed: int) -> pd.DataFrame:
    """Groups of different sizes (several engine batches) whose inputs x and z repeat; some curve in x."""
    rng = np.random.default_rng(seed)
    parts = []
    for g, (levels, curve) in enumerate([(5, 0.0), (8, 0.4), (12, 0.05), (20, 0.0), (30, 0.2)]):
        x = np.repeat(np.linspace(1.0, 9.0, levels), rng.integers(1, 5, levels))
        z = rng.choice([1.0, 2.5, 4.0], size=len(x))
        y = 2.0 + 1.5 * x + curve * x**2 + 0.8 * z + rng.normal(0, 0.5, len(x))
        parts.append(pd.DataFrame({"g": f"g{g}", "x": x, "z": z, "y": y}))
    return pd.concat(parts, ignore_index=True).sample(frac=1.0, random_state=seed)


@pytest.mark.parametrize("specs", [["x"], ["x", "x^2"], ["x", "z"], ["log(x)", "z"]])
@pytest.mark.parametrize("intercept", [True, False])
def test_seeded_groups_match_statsmodels_anova(specs, intercept):
    run = engine_fit(replicated_groups(5), specs, intercept)
    frame, res, names = run.frame, run.res, run.names
    point_cols = sorted({s.replace("log(", "").rstrip(")").split("^")[0] for s in specs})
    for code, name in enumerate(names):
        sub = frame[frame["g"] == name]
        parts = [np.ones(len(sub))] if intercept else []
        for s in specs:
            col = s.replace("log(", "").rstrip(")").split("^")[0]
            v = sub[col].to_numpy()
            parts.append(np.log(v) if s.startswith("log(") else v ** (2 if s.endswith("^2") else 1))
        f_ref, p_ref = anova_reference(sub, np.column_stack(parts), point_cols)      # statsmodels
        assert res.statistic[code] == pytest.approx(f_ref, rel=1e-9), name
        assert res.pvalue[code] == pytest.approx(p_ref, rel=1e-9), name
        m = sub.groupby(point_cols).ngroup().max() + 1                                   # pandas
        p = len(specs) + intercept
        assert res.note[code].endswith(f"F on {m - p} and {len(sub) - m} degrees of freedom")


def test_pure_error_and_lack_of_fit_sums_match_statsmodels():
    run = engine_fit(replicated_groups(8), ["x"])
    frame, fit, names = run.frame, run.fit, run.names
    m, repeated, ss_pe, ss_lof = pure_error_split(fit, run.keys, run.codes)
    for code, name in enumerate(names):
        sub = frame[frame["g"] == name]
        reduced = sm.OLS(sub["y"].to_numpy(), sm.add_constant(sub["x"].to_numpy())).fit()   # statsmodels
        means = sub.groupby("x")["y"].transform("mean").to_numpy()                         # pandas
        pure = ((sub["y"].to_numpy() - means) ** 2).sum()
        scale = fit.y_scale[code] ** 2
        assert ss_pe[code] * scale == pytest.approx(pure, rel=1e-9)
        assert (ss_pe[code] + ss_lof[code]) * scale == pytest.approx(reduced.ssr, rel=1e-12)
        assert m[code] == sub["x"].nunique()                                               # pandas
        assert repeated[code] == (sub["x"].value_counts() > 1).sum()                       # pandas


def test_verdict_and_failure_words():
    run = engine_fit(replicated_groups(5), ["x"])
    frame, fit, res, names = run.frame, run.fit, run.res, run.names
    table = verdicts([res], fit.fitted_ok, Thresholds())
    p_ref = [anova_reference(sub, sm.add_constant(sub["x"].to_numpy()), ["x"])[1]       # statsmodels
             for sub in (frame[frame["g"] == name] for name in names)]
    fails = multipletests(p_ref, alpha=0.05, method="fdr_bh")[0]     # statsmodels: Benjamini–Hochberg, the default
    assert list(table.failed[LACK_OF_FIT]) == list(fails)
    assert fails[names.index("g1")]          # 0.4·x² over x in 1…9 is no straight line
    for g in np.flatnonzero(fails):
        assert ("the model misses the replicates' means more than their scatter allows (lack of fit, F = "
                in table.reasons[g])


def test_change_points_count_as_parameters():
    run = engine_fit(replicated_groups(5), ["x"], extra=np.array([1, 0, 0, 0, 1]))
    frame, res, names = run.frame, run.res, run.names
    for code in (0, 4):
        sub = frame[frame["g"] == names[code]]
        reduced = sm.OLS(sub["y"].to_numpy(), sm.add_constant(sub["x"].to_numpy())).fit()   # statsmodels
        point = sub.groupby("x").ngroup().to_numpy()
        full = sm.OLS(sub["y"].to_numpy(), np.eye(point.max() + 1)[point]).fit()           # statsmodels
        m, n = point.max() + 1, len(sub)
        f_ref = ((reduced.ssr - full.ssr) / (m - 3)) / (full.ssr / (n - m))   # by hand: 2 coefficients + 1 point
        assert res.statistic[code] == pytest.approx(f_ref, rel=1e-9)
        assert res.pvalue[code] == pytest.approx(stats.f.sf(f_ref, m - 3, n - m), rel=1e-9)   # scipy
        assert "change points counted as parameters" in res.note[code]


# --- n/a: no replicates, too few distinct inputs, zero pure error --------------------------------------

def test_not_testable_groups_each_have_their_note():
    rng = np.random.default_rng(3)
    x_levels = np.repeat([1.0, 2.0, 3.0, 4.0, 5.0], 3)
    exact = np.repeat(rng.normal(size=5), 3) + x_levels                       # replicates identical
    frame = pd.concat([
        pd.DataFrame({"g": "a-none", "x": rng.uniform(0, 10, 12)}).assign(y=lambda d: d["x"] + rng.normal(0, 1, 12)),
        pd.DataFrame({"g": "b-reps", "x": x_levels, "y": x_levels + rng.normal(0, 1, 15)}),
        pd.DataFrame({"g": "c-two", "x": np.repeat([1.0, 7.0], 4), "y": rng.normal(size=8)}),
        pd.DataFrame({"g": "d-exact", "x": x_levels, "y": exact}),
        pd.DataFrame({"g": "e-tiny", "x": [1.0, 1.0], "y": [0.0, 1.0]}),
    ], ignore_index=True)
    run = engine_fit(frame, ["x"])
    frame, fit, res = run.frame, run.fit, run.res
    none, reps, two, exact_, tiny = range(5)
    assert not frame[frame["g"] == "a-none"]["x"].duplicated().any()          # pandas: no replicates
    assert np.isnan(res.statistic[none]) and res.note[none] == NO_REPLICATES
    sub = frame[frame["g"] == "b-reps"]                                        # beside it, a testable group
    f_ref, p_ref = anova_reference(sub, sm.add_constant(sub["x"].to_numpy()), ["x"])
    assert res.statistic[reps] == pytest.approx(f_ref, rel=1e-9)
    assert res.pvalue[reps] == pytest.approx(p_ref, rel=1e-9)
    assert np.isnan(res.statistic[two])                                       # m = 2 distinct inputs, p = 2
    assert res.note[two] == ("too few distinct input values (2) for the 2 estimated parameters: "
                             "lack of fit cannot be tested")
    sub = frame[frame["g"] == "d-exact"]
    assert (sub.groupby("x")["y"].nunique() == 1).all()                       # pandas: replicates equal
    assert np.isnan(res.statistic[exact_]) and res.note[exact_] == ZERO_PURE_ERROR
    assert not fit.fitted_ok[tiny] and np.isnan(res.statistic[tiny]) and res.note[tiny] == ""
    table = verdicts([res], fit.fitted_ok, Thresholds()).table
    assert list(table["verdict"]) == ["n/a", "pass" if p_ref >= 0.05 else "fail", "n/a", "n/a"]


def test_large_and_small_responses_give_the_same_test():
    # F is free of the unit of y: statsmodels on the plain data is the reference at 1e±250
    run = engine_fit(replicated_groups(9), ["x"])
    frame, names = run.frame, run.names
    for factor in (1e250, 1e-250):
        scaled = engine_fit(frame.assign(y=frame["y"] * factor), ["x"]).res
        for code, name in enumerate(names):
            sub = frame[frame["g"] == name]
            f_ref, _ = anova_reference(sub, sm.add_constant(sub["x"].to_numpy()), ["x"])  # statsmodels
            assert scaled.statistic[code] == pytest.approx(f_ref, rel=1e-9)


# --- replicate keys ---------------------------------------------------------------------------------

def test_replicate_keys_group_equal_values_only():
    x = np.array([1.0, 1.0, np.nextafter(1.0, 2.0), 0.0, -0.0, 1.0, 1.0, 2.0])
    z = np.array([5.0, 5.0, 5.0, 3.0, 3.0, 6.0, 5.0, 5.0])
    codes = np.array([0, 0, 0, 0, 0, 0, 1, 1])
    keys = replicate_keys({"x": x, "z": z}, codes)
    same = keys[:, None] == keys[None, :]
    # numpy's == on every column and on the group code: the key partition, nothing rounded
    expected = (x[:, None] == x[None, :]) & (z[:, None] == z[None, :]) & (codes[:, None] == codes[None, :])
    assert (same == expected).all()
    assert keys[3] == keys[4]                  # 0.0 and −0.0 are the same input
    assert keys[0] != keys[2]                  # one unit in the last place apart: different inputs
    assert keys[0] != keys[6]                  # equal values in another group: another key
    assert len(np.unique(replicate_keys({}, codes))) == 2   # no inputs: each group is one point


def test_replicate_keys_match_pandas_groups():
    frame = replicated_groups(4).sort_values("g", kind="stable")
    codes = np.unique(frame["g"].to_numpy(), return_inverse=True)[1]
    keys = replicate_keys({"x": frame["x"].to_numpy(), "z": frame["z"].to_numpy()}, codes)
    ref = frame.groupby(["g", "x", "z"]).ngroup().to_numpy()                   # pandas
    assert len(set(zip(keys, ref))) == len(set(keys)) == len(set(ref))
