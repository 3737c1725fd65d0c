"""Seeded data and per-group statsmodels fits used as the reference in tests."""

from __future__ import annotations

import numpy as np
import pandas as pd
import statsmodels.api as sm


def seeded_groups(seed: int = 7, sizes=(12, 30, 47, 9, 60), k: int = 2, noise: float = 1.0) -> pd.DataFrame:
    """Several groups of unequal size with k inputs on different scales."""
    rng = np.random.default_rng(seed)
    parts = []
    for g, n in enumerate(sizes):
        X = rng.normal(size=(n, k)) * (10.0 ** np.arange(k)) + 5.0 * g
        beta = rng.normal(size=k)
        y = 3.0 + X @ beta + rng.normal(scale=noise * (1 + g), size=n)
        frame = pd.DataFrame(X, columns=[f"x{i + 1}" for i in range(k)])
        frame.insert(0, "grp", f"g{g}")
        frame["y"] = y
        parts.append(frame)
    return pd.concat(parts, ignore_index=True)


def curved_groups(spec, seed: int) -> pd.DataFrame:
    """Groups (key, rows, slope) whose y curves in x and grows with log(z): for models x + x^2 + log(z)."""
    rng = np.random.default_rng(seed)
    parts = []
    for g, n, c in spec:
        x = rng.uniform(1, 10, n)
        z = rng.uniform(0.5, 20, n)
        y = 5 + c * x - 0.3 * x**2 + 2.5 * np.log(z) + rng.normal(0, 1.5, n)
        parts.append(pd.DataFrame({"g": g, "x": x, "z": z, "y": y}))
    return pd.concat(parts, ignore_index=True)


def statsmodels_fit(frame: pd.DataFrame, y: str, xs: list[str], intercept: bool):
    """statsmodels OLS of one group (raw columns; the reference implementation)."""
    X = frame[xs].to_numpy(dtype=float)
    if intercept:
        X = sm.add_constant(X, has_constant="add")
    return sm.OLS(frame[y].to_numpy(dtype=float), X).fit()


def assert_close(actual, expected, rtol: float = 1e-9, atol: float = 0.0, what: str = "") -> None:
    np.testing.assert_allclose(np.asarray(actual, dtype=float), np.asarray(expected, dtype=float),
                               rtol=rtol, atol=atol, err_msg=what)
