"""The Durbin–Watson p-value is exact: P(DW ≤ d) = P(Σ (λ_i − d)·z_i² ≤ 0), λ_i the non-zero
eigenvalues of M·A·M (Durbin & Watson 1971), by Imhof's (1961) formula.

Oracles, both written here independently of sheetfit: (1) Imhof's inversion formula integrated
with scipy.integrate.quad on the eigenvalues numpy finds for M·A·M built from the full design;
(2) for a tiny design, a simulation of the null distribution with 2e6 draws (numpy).
The check stays two-sided, as before: p = 2·min(P(DW ≤ d), P(DW ≥ d)).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

import sheetfit
from sheetfit.checks.independence import EXACT_MAX_ROWS

CHECK = "independent residuals (Durbin–Watson)"


def dw_weights(X: np.ndarray) -> np.ndarray:
    """The n − p non-zero eigenvalues of M·A·M (numpy, full n × n matrices)."""
    n, p = X.shape
    M = np.eye(n) - X @ np.linalg.solve(X.T @ X, X.T)
    D = np.diff(np.eye(n), axis=0)
    return np.sort(np.linalg.eigvalsh(M @ D.T @ D @ M))[::-1][: n - p]


def imhof_lower(lam: np.ndarray, d: float) -> float:
    """Imhof (1961): P(Σ μ_i z_i² ≤ 0) = ½ − (1/π)∫₀^∞ sin θ(u)/(u ρ(u)) du, μ = λ − d (scipy quad)."""
    mu = lam - d

    def f(u: float) -> float:
        return np.sin(0.5 * np.arctan(mu * u).sum()) / (u * np.prod((1.0 + (mu * u) ** 2) ** 0.25))

    value, _ = integrate.quad(f, 0.0, np.inf, limit=1000, epsabs=1e-13, epsrel=1e-12)
    return 0.5 - value / np.pi


def two_sided(low: float) -> float:
    return 2.0 * min(low, 1.0 - low)


def design(x: np.ndarray, intercept: bool) -> np.ndarray:
    return np.column_stack([np.ones(len(x)), x]) if intercept else x


def series(rng, n: int, rho: float = 0.3) -> np.ndarray:
    e = np.zeros(n)
    for i in range(n):
        e[i] = rho * (e[i - 1] if i else 0.0) + rng.normal()
    return e


def test_sixteen_rows_exact_against_imhof_integration():
    # Before the fix the beta approximation was off in the second digit on this design.
    rng = np.random.default_rng(16)
    n = 16
    x = np.sort(rng.uniform(0, 10, n))
    y = 2.0 + 0.5 * x + series(rng, n, 0.5)
    res = sheetfit.fit_frame(pd.DataFrame({"x": x, "y": y}), y="y", x=["x"], adjust="none")
    row = res.checks[res.checks["check"] == CHECK].iloc[0]
    want = two_sided(imhof_lower(dw_weights(design(x, True)), row["statistic"]))     # Imhof (1961), scipy quad
    assert row["p-value"] == pytest.approx(want, rel=1e-6, abs=1e-9)
    assert "exact (Imhof)" in row["note"]


@pytest.mark.parametrize("intercept", [True, False])
def test_groups_of_different_sizes_in_one_batch(intercept):
    # Padded groups (16, 19 and 20 rows share a batch), two inputs: every group exact.
    rng = np.random.default_rng(3)
    parts = []
    for g, n in (("a", 16), ("b", 19), ("c", 20)):
        x1, x2 = rng.uniform(0, 10, n), rng.normal(size=n)
        parts.append(pd.DataFrame({"grp": g, "x1": x1, "x2": x2, "y": 1 + x1 - x2 + series(rng, n)}))
    frame = pd.concat(parts, ignore_index=True)
    res = sheetfit.fit_frame(frame, y="y", x=["x1", "x2"], group="grp", intercept=intercept, adjust="none")
    for g, sub in frame.groupby("grp"):
        row = res.checks[(res.checks["grp"] == g) & (res.checks["check"] == CHECK)].iloc[0]
        X = design(sub[["x1", "x2"]].to_numpy(), intercept)
        want = two_sided(imhof_lower(dw_weights(X), row["statistic"]))              # Imhof (1961), scipy quad
        assert row["p-value"] == pytest.approx(want, rel=1e-6, abs=1e-9), g
        assert "exact (Imhof)" in row["note"]


def test_tiny_design_against_simulation():
    # 7 rows, intercept and trend: the null law of DW simulated with 2e6 normal draws (numpy);
    # the standard error of a simulated probability is below 3.6e-4, so 3 digits.
    rng = np.random.default_rng(7)
    n = 7
    x = np.arange(n, dtype=float)
    y = 1.0 + 0.2 * x + rng.normal(size=n)
    res = sheetfit.fit_frame(pd.DataFrame({"x": x, "y": y}), y="y", x=["x"], adjust="none")
    row = res.checks[res.checks["check"] == CHECK].iloc[0]
    X = design(x, True)
    M = np.eye(n) - X @ np.linalg.solve(X.T @ X, X.T)
    below = 0
    draws = 2_000_000
    for _ in range(4):
        e = M @ rng.normal(size=(n, draws // 4))
        below += int(((np.diff(e, axis=0) ** 2).sum(axis=0) / (e**2).sum(axis=0) <= row["statistic"]).sum())
    assert row["p-value"] == pytest.approx(two_sided(below / draws), abs=2e-3)


def test_large_groups_keep_the_beta_approximation_and_say_so():
    rng = np.random.default_rng(9)
    n = EXACT_MAX_ROWS + 15
    x = rng.uniform(0, 10, n)
    res = sheetfit.fit_frame(pd.DataFrame({"x": x, "y": 1 + x + rng.normal(size=n)}), y="y", x=["x"],
                             adjust="none")
    row = res.checks[res.checks["check"] == CHECK].iloc[0]
    assert "beta approximation" in row["note"]
    lam = dw_weights(design(x, True))
    k = len(lam)
    mean, var = lam.mean(), 2.0 * ((lam - lam.mean()) ** 2).sum() / (k * (k + 2))   # Durbin & Watson (1971) moments
    mu, v = mean / 4.0, var / 16.0
    common = mu * (1.0 - mu) / v - 1.0
    low = stats.beta.cdf(row["statistic"] / 4.0, mu * common, (1.0 - mu) * common)  # scipy beta law
    assert row["p-value"] == pytest.approx(two_sided(low), rel=1e-8)
    assert row["p-value"] == pytest.approx(two_sided(imhof_lower(lam, row["statistic"])), abs=2e-3)


def test_quad_fallback_and_beta_fallback(monkeypatch):
    # Where the trapezoid rule's own error estimate is too large the integral is taken again with
    # scipy quad; where that fails too, the group keeps the beta approximation and says so.
    from sheetfit.checks import dw_exact

    rng = np.random.default_rng(12)
    n = 20
    x = rng.uniform(0, 10, n)
    frame = pd.DataFrame({"x": x, "y": 1 + x + series(rng, n)})
    lam = dw_weights(design(x, True))
    monkeypatch.setattr(dw_exact, "TRAPEZOID_TOL", -1.0)                # always integrate with quad
    row = sheetfit.fit_frame(frame, y="y", x=["x"], adjust="none").checks.query("check == @CHECK").iloc[0]
    assert row["p-value"] == pytest.approx(two_sided(imhof_lower(lam, row["statistic"])), rel=1e-6)
    assert "exact (Imhof)" in row["note"]
    monkeypatch.setattr(dw_exact, "QUAD_TOL", -1.0)                     # and quad never good enough
    row = sheetfit.fit_frame(frame, y="y", x=["x"], adjust="none").checks.query("check == @CHECK").iloc[0]
    assert "beta approximation" in row["note"] and "integration failed" in row["note"]
    assert np.isfinite(row["p-value"])
