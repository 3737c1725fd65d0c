"""The change-point search against brute force, statsmodels and scipy.

Oracles: RSS over a fine grid of change points, each from numpy's QR / lstsq on the hinge design
built by hand here; coefficients and t-tests from statsmodels OLS on the same hand-built design; the
F quantile of the profile bound from scipy. Rules of thumb (3 rows on each side of a change point,
choosing by BIC) are marked "common practice".
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

import sheetfit
from sheetfit.model.change_point import (
    CHOICES,
    MIN_SIDE_ROWS,
    SHAPES,
    ChangePoints,
    find_change_points,
    hinge_columns,
)
from sheetfit.results.change_points import (
    CHANGE_POINT,
    SHAPE,
    SHAPE_NOTE,
    UPPER_CHANGE_POINT,
)

SINGLE = ("heating", "cooling", "two-slopes")


def make_groups(seed: int, sizes, kind: str, k: int = 0, noise: float = 1.0, ties: bool = False):
    """Rows of several groups (sorted by group, not by temperature) of one kind of baseline plus noise."""
    rng = np.random.default_rng(seed)
    ts, ys, zs = [], [], []
    for n in sizes:
        t = rng.uniform(-5.0, 30.0, n)
        t = np.round(t) if ties else t
        z = rng.normal(size=(n, k)) + 0.05 * t[:, None]
        th, tc = rng.uniform(5.0, 11.0), rng.uniform(16.0, 22.0)
        shape = {"heating": 3.0 * np.maximum(0, th - t), "cooling": 2.5 * np.maximum(0, t - tc),
                 "two-slopes": 3.0 * np.maximum(0, tc - t) + 2.0 * np.maximum(0, t - tc),
                 "heating-cooling": 3.0 * np.maximum(0, th - t) + 2.5 * np.maximum(0, t - tc),
                 "line": 0.4 * t, "falling": -2.0 * t}[kind]
        ys.append(40.0 + shape + z @ rng.uniform(1.0, 3.0, k) + rng.normal(0.0, noise, n))
        ts.append(t)
        zs.append(z)
    codes = np.repeat(np.arange(len(sizes)), sizes)
    return np.concatenate(ys), np.concatenate(ts), np.concatenate(zs), codes


def design(t, z, shape, below=np.nan, above=np.nan):
    """The shape's design built by hand: constant, hinge column(s) (T for a line), then Z."""
    cols = [np.ones_like(t)]
    if shape == "line":
        cols.append(t)
    if shape in ("heating", "two-slopes", "heating-cooling"):
        cols.append(np.maximum(0.0, below - t))
    if shape in ("cooling", "two-slopes", "heating-cooling"):
        cols.append(np.maximum(0.0, t - above))
    return np.column_stack(cols + [z])


def rss_lstsq(X, y) -> float:
    """RSS by numpy.linalg.lstsq (the oracle for one design)."""
    r = y - X @ np.linalg.lstsq(X, y, rcond=None)[0]
    return float(r @ r)


def rss_many(t, z, y, shape, below, above) -> np.ndarray:
    """RSS of many hand-built designs at once by numpy's batched QR (the brute-force oracle)."""
    X = np.stack([design(t, z, shape, b, a) for b, a in zip(below, above, strict=True)])
    Q, _ = np.linalg.qr(X)
    r = y - np.einsum("kmp,kp->km", Q, np.einsum("kmp,m->kp", Q, y))
    return (r**2).sum(axis=1)


def with_data(grid, t):
    """A grid plus the observed temperatures inside it: RSS may have a kink (and its minimum) at one."""
    return np.union1d(grid, t[(t >= grid.min()) & (t <= grid.max())])


def admissible(t):
    """The admissible range: 3rd smallest to 3rd largest T (common practice: 3 rows on each side)."""
    s = np.sort(t)
    return s[MIN_SIDE_ROWS - 1], s[len(s) - MIN_SIDE_ROWS]


def one(y, t, z, codes, g):
    """Group g's rows."""
    m = codes == g
    return y[m], t[m], z[m]


@pytest.mark.parametrize("k", [0, 1])
@pytest.mark.parametrize("shape", SINGLE)
def test_single_change_point_is_the_least_squares_optimum(shape, k):
    y, t, z, codes = make_groups(10 + k, (18, 36, 55), shape, k=k)
    cp = find_change_points(y, t, z, codes, 3, shape)
    for g in range(3):
        yg, tg, zg = one(y, t, z, codes, g)
        assert cp.shape[g] == shape
        tau = cp.below[g] if shape != "cooling" else cp.above[g]
        lo, hi = admissible(tg)
        grid = with_data(np.linspace(lo, hi, 20_000), tg)
        brute = rss_many(tg, zg, yg, shape, grid, grid)                       # numpy QR per grid point
        X = design(tg, zg, shape, tau, tau)
        ours = rss_lstsq(X, yg)                                               # numpy lstsq at our τ
        assert ours <= brute.min() * (1 + 1e-9)
        assert abs(tau - grid[np.argmin(brute)]) <= 5 * (hi - lo) / 20_000
        assert cp.rss[g] == pytest.approx(ours, rel=1e-9)
        ref = sm.OLS(yg, X).fit()                                             # statsmodels OLS
        b = ref.params
        slopes = {"heating": (b[1], np.nan), "cooling": (np.nan, b[1])}.get(shape, tuple(b[1:3]))
        np.testing.assert_allclose([cp.slope_below[g], cp.slope_above[g]], slopes, rtol=1e-8)
        assert cp.count[g] == 1
        if shape == "two-slopes":
            assert cp.above[g] == cp.below[g]


@pytest.mark.parametrize("k", [0, 1])
def test_two_change_points_are_the_least_squares_optimum(k):
    y, t, z, codes = make_groups(20 + k, (30, 48), "heating-cooling", k=k)
    cp = find_change_points(y, t, z, codes, 2, "heating-cooling")
    for g in range(2):
        yg, tg, zg = one(y, t, z, codes, g)
        assert cp.shape[g] == "heating-cooling" and cp.count[g] == 2
        lo, hi = admissible(tg)
        axis = with_data(np.linspace(lo, hi, 301), tg)
        bh, bc = np.meshgrid(axis, axis, indexing="ij")
        keep = bh <= bc
        brute = rss_many(tg, zg, yg, "heating-cooling", bh[keep], bc[keep])  # numpy QR, 2-D grid
        X = design(tg, zg, "heating-cooling", cp.below[g], cp.above[g])
        ours = rss_lstsq(X, yg)
        assert ours <= brute.min() * (1 + 1e-9)
        step = (hi - lo) / 300
        best = np.argmin(brute)
        assert abs(cp.below[g] - bh[keep][best]) <= 3 * step
        assert abs(cp.above[g] - bc[keep][best]) <= 3 * step
        # a fine grid around our pair finds nothing lower: the refinement is exact, not a grid's
        near = np.linspace(-step, step, 41)
        fh, fc = np.meshgrid(with_data(cp.below[g] + near, tg), with_data(cp.above[g] + near, tg), indexing="ij")
        fine = rss_many(tg, zg, yg, "heating-cooling", fh.ravel(), fc.ravel())
        assert ours <= fine.min() * (1 + 1e-9)
        b = sm.OLS(yg, X).fit().params                                        # statsmodels OLS
        np.testing.assert_allclose([cp.slope_below[g], cp.slope_above[g]], b[1:3], rtol=1e-8)


def brute_pair(t, z, y, steps: int):
    """Brute force over τh ≤ τc: every observed T in range and `steps` even points on each axis (numpy QR per
    pair); returns the pairs and their RSS, the best pair's RSS confirmed by numpy lstsq."""
    lo, hi = admissible(t)
    axis = with_data(np.linspace(lo, hi, steps), t)
    bh, bc = np.meshgrid(axis, axis, indexing="ij")
    keep = bh <= bc
    rss = rss_many(t, z, y, "heating-cooling", bh[keep], bc[keep])
    best = np.argmin(rss)
    assert rss_lstsq(design(t, z, "heating-cooling", bh[keep][best], bc[keep][best]), y) == pytest.approx(rss[best])
    return bh[keep], bc[keep], rss


def best_at_an_end(t, z, y) -> float:
    """The least RSS of heating-cooling with τh at the low end or τc at the high end of the range: the other
    τ over a grid with the observed T, then over a fine grid around its best (numpy QR)."""
    lo, hi = admissible(t)
    return min(finest(profile_rss(t, z, y, below=lo), lo, hi, t), finest(profile_rss(t, z, y, above=hi), lo, hi, t))


def bent_data(seed: int, k: int):
    """One group of 12–60 rows: a flat band between two random change points (which may fall outside the
    data or coincide), random slopes and noise, and with k = 1 an input that curves with T."""
    rng = np.random.default_rng(seed)
    n = int(rng.integers(12, 61))
    t = rng.uniform(0.0, 30.0, n)
    z = (t**2 / 30.0 + rng.normal(size=n))[:, None] if k else np.zeros((n, 0))
    th, tc = np.sort(rng.uniform(-2.0, 32.0, 2))
    y = (40.0 + rng.uniform(0, 4) * np.maximum(0, th - t) + rng.uniform(0, 4) * np.maximum(0, t - tc)
         + z.sum(axis=1) + rng.normal(0.0, rng.uniform(0.3, 5.0), n))
    return y, t, z


@pytest.mark.parametrize("k", [0, 1])
def test_two_change_points_are_the_exact_optimum_on_any_data(k):
    # brute force: a 2-D grid of every observed T plus 120 even points per axis, numpy QR per pair; ours
    # at least as low, also where the optimum lies away from the best pair of observed temperatures
    for seed in range(32):
        y, t, z = bent_data(1000 * k + seed, k)
        codes = np.zeros(len(y), dtype=np.int64)
        cp = find_change_points(y, t, z, codes, 1, "heating-cooling")
        _, _, brute = brute_pair(t, z, y, 120)
        if cp.shape[0] == "heating-cooling":
            ours = rss_lstsq(design(t, z, "heating-cooling", cp.below[0], cp.above[0]), y)   # numpy lstsq
            assert cp.rss[0] == pytest.approx(ours, rel=1e-9)
        else:              # fell back to a line: the optimum must sit at an end of the range
            assert "at the end of the observed temperatures" in cp.note[0], cp.note[0]
            ours = best_at_an_end(t, z, y)
        assert ours <= brute.min() * (1 + 1e-9), (seed, len(y), cp.note[0])


def test_two_change_points_between_observed_temperatures():
    # a case where the best pair of observed temperatures puts both change points at the end, while
    # (10.29…, 20.6) inside the range is lower; CDD^2 is a further straight-line input
    T = np.array([1.25, 20.6, 8.83, 6.68, 24.46, 5.46, 23.49, 10.97, 23.18, 25.54, 23.31, 11.44, 26.32, 22.02])
    y = np.array([85.51, 2.34, 38.09, 52.87, 5.43, 61.45, 5.46, 27.28, 3.48, 4.97, 2.42, 26.11, 8.49, 6.79])
    groups = sheetfit.fit_frame(pd.DataFrame({"CDD": T, "kWh": y}), y="kWh", x=["CDD", "CDD^2"],
                                change_point="heating-cooling").groups
    assert groups[SHAPE].iloc[0] == "heating-cooling"
    below, above = groups[CHANGE_POINT].iloc[0], groups[UPPER_CHANGE_POINT].iloc[0]
    z = (T**2)[:, None]
    lo, hi = admissible(T)
    assert lo < below <= above < hi
    ours = rss_lstsq(design(T, z, "heating-cooling", below, above), y)                 # numpy lstsq
    bh, bc, brute = brute_pair(T, z, y, 301)
    assert ours <= brute.min() * (1 + 1e-9)
    assert ours < best_at_an_end(T, z, y)
    step, best = (hi - lo) / 300, np.argmin(brute)
    assert abs(below - bh[best]) <= 3 * step and abs(above - bc[best]) <= 3 * step
    near = np.linspace(-step, step, 41)                   # and nothing lower on a fine grid around our pair
    fh, fc = np.meshgrid(with_data(below + near, T), with_data(above + near, T), indexing="ij")
    keep = fh <= fc
    assert ours <= rss_many(T, z, y, "heating-cooling", fh[keep], fc[keep]).min() * (1 + 1e-9)


def profile_bound(rss_min: float, n: int, p: int, level: float) -> float:
    """RSS_min·(1 + F(level; 1, n − p)/(n − p)), the F quantile from scipy."""
    return rss_min * (1 + stats.f.ppf(level, 1, n - p) / (n - p))


@pytest.mark.parametrize("level", [0.9, 0.95])
@pytest.mark.parametrize("shape", SINGLE)
def test_profile_interval_ends_sit_on_the_bound(shape, level):
    y, t, z, codes = make_groups(30, (25, 40, 60), shape, k=1, noise=2.0)
    cp = find_change_points(y, t, z, codes, 3, shape, level=level)
    for g in range(3):
        yg, tg, zg = one(y, t, z, codes, g)
        tau = cp.below[g] if shape != "cooling" else cp.above[g]
        low, high = ((cp.below_low[g], cp.below_high[g]) if shape != "cooling"
                     else (cp.above_low[g], cp.above_high[g]))
        p = design(tg, zg, shape, tau, tau).shape[1] + 1
        bound = profile_bound(rss_lstsq(design(tg, zg, shape, tau, tau), yg), len(yg), p, level)
        lo, hi = admissible(tg)
        assert lo <= low <= tau <= high <= hi
        for end, edge in ((low, lo), (high, hi)):
            if end != edge:                                                   # numpy lstsq at the end
                assert rss_lstsq(design(tg, zg, shape, end, end), yg) == pytest.approx(bound, rel=1e-8)
        grid = with_data(np.linspace(lo, hi, 4001), tg)
        inside = grid[rss_many(tg, zg, yg, shape, grid, grid) <= bound]
        assert inside.min() >= low - 1e-9 and inside.max() <= high + 1e-9
        if shape == "two-slopes":
            assert (cp.above_low[g], cp.above_high[g]) == (low, high)


def test_heating_cooling_profile_minimises_over_the_other_change_point():
    y, t, z, codes = make_groups(40, (40, 60), "heating-cooling", noise=2.0)
    cp = find_change_points(y, t, z, codes, 2, "heating-cooling")
    for g in range(2):
        yg, tg, zg = one(y, t, z, codes, g)
        lo, hi = admissible(tg)
        X = design(tg, zg, "heating-cooling", cp.below[g], cp.above[g])
        bound = profile_bound(rss_lstsq(X, yg), len(yg), X.shape[1] + 2, 0.95)
        assert lo <= cp.below_low[g] <= cp.below[g] <= cp.below_high[g] <= cp.above[g]
        assert cp.below[g] <= cp.above_low[g] <= cp.above[g] <= cp.above_high[g] <= hi
        for end in (cp.below_low[g], cp.below_high[g]):
            if lo < end < hi:                                                 # numpy QR over τc ≥ τh
                best = finest(profile_rss(tg, zg, yg, below=end), end, hi, tg)
                assert bound * (1 - 1e-9) <= best <= bound * (1 + 1e-9)
        for end in (cp.above_low[g], cp.above_high[g]):
            if lo < end < hi:                                                 # numpy QR over τh ≤ τc
                best = finest(profile_rss(tg, zg, yg, above=end), lo, end, tg)
                assert bound * (1 - 1e-9) <= best <= bound * (1 + 1e-9)


def profile_rss(t, z, y, below=None, above=None):
    """RSS of heating-cooling as a function of one change point, the other held at `below` or `above`."""
    if below is not None:
        return lambda other: rss_many(t, z, y, "heating-cooling", np.full_like(other, below), other)
    return lambda other: rss_many(t, z, y, "heating-cooling", other, np.full_like(other, above))


def finest(rss, lo, hi, t) -> float:
    """Smallest RSS over a grid with the observed temperatures, then over a fine grid around its best."""
    grid = with_data(np.linspace(lo, hi, 2001), t)
    values = rss(grid)
    i = np.argmin(values)
    near = with_data(np.linspace(grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)], 2001), t)
    return float(min(values.min(), rss(near).min()))


@pytest.mark.parametrize("seed", [0, 1, 2, 3, 4])
def test_a_straight_line_asked_for_heating_falls_back_to_a_line(seed):
    # a falling line is what heating becomes with its change point beyond the data: it ends up at the end
    y, t, z, codes = make_groups(seed, (40,), "falling", noise=0.5)
    cp = find_change_points(y, t, z, codes, 1, "heating")
    assert cp.shape[0] == "line" and cp.count[0] == 0
    assert np.isnan([cp.below[0], cp.above[0], cp.below_low[0], cp.above_high[0]]).all()
    assert "end of the observed temperatures" in cp.note[0] and "straight line" in cp.note[0]
    assert cp.rss[0] == pytest.approx(rss_lstsq(design(t, z, "line"), y), rel=1e-9)  # numpy lstsq


def test_heating_cooling_that_cannot_place_one_change_point_says_which():
    # heating data whose two warmest rows jump up: the best cooling change point lies beyond the
    # 3rd-largest temperature (common practice: 3 rows on each side), so it is clipped to the range end
    y, t, z, codes = make_groups(70, (40,), "heating", noise=0.3)
    top = np.argsort(t)[-2:]
    y[top] += 40.0 * (t[top] - np.sort(t)[-3])
    cp = find_change_points(y, t, z, codes, 1, "heating-cooling")
    assert cp.shape[0] == "line"
    assert cp.note[0].startswith("heating-cooling: its cooling change point sits at the end of the observed")


@pytest.mark.parametrize("kind, seed", [("heating", 51), ("cooling", 52), ("line", 53), ("heating-cooling", 54)])
def test_auto_picks_the_shape_of_clear_data(kind, seed):
    y, t, z, codes = make_groups(seed, (36, 48, 60), kind, noise=1.0)
    cp = find_change_points(y, t, z, codes, 3, "auto")
    assert list(cp.shape) == [kind] * 3
    assert all(note.startswith(kind + ":") for note in cp.note)


def expected_choice(yg, tg, zg, found: dict[str, float], alpha: float) -> tuple[str, dict[str, float]]:
    """The `auto` rule applied by hand: statsmodels t-tests and BIC from statsmodels' RSS."""
    n = len(yg)
    bic, passed = {}, {"line": True}
    for shape, (tb, ta) in found.items():
        X = design(tg, zg, shape, tb, ta)
        ref = sm.OLS(yg, X).fit()                                             # statsmodels OLS
        cps = {"line": 0, "heating-cooling": 2}.get(shape, 1)
        bic[shape] = n * np.log(ref.ssr / n) + np.log(n) * (X.shape[1] + cps)  # common practice: BIC
        if shape == "line":
            continue
        lo, hi = admissible(tg)
        inside = all(lo < v < hi for v in (tb, ta) if not np.isnan(v))
        b, p = ref.params, ref.pvalues
        if shape == "two-slopes":                  # change of slope = bh + bc, tested with T in the design
            change = sm.OLS(yg, np.column_stack([np.ones(n), tg, np.maximum(0, tb - tg), zg])).fit()
            ok = change.pvalues[2] < alpha
        elif shape == "heating-cooling":
            ok = b[1] > 0 and b[2] > 0 and p[1] < alpha and p[2] < alpha
        else:
            ok = b[1] > 0 and p[1] < alpha
        passed[shape] = inside and ok
    ranked = [s for s in ("line",) + SHAPES if passed.get(s)]
    return min(ranked, key=lambda s: bic[s]), bic


def test_auto_applies_its_rule_as_statsmodels_would():
    parts = [make_groups(60 + i, (24, 40), kind, k=1, noise=3.0) for i, kind in
             enumerate(("heating", "cooling", "two-slopes", "heating-cooling", "line"))]
    y, t, z = (np.concatenate([p[i] for p in parts]) for i in range(3))
    codes = np.concatenate([p[3] + 2 * i for i, p in enumerate(parts)])
    G = 2 * len(parts)
    auto = find_change_points(y, t, z, codes, G, "auto")
    fixed = {s: find_change_points(y, t, z, codes, G, s) for s in SHAPES}
    for g in range(G):
        yg, tg, zg = one(y, t, z, codes, g)
        found = {"line": (np.nan, np.nan)}
        for s in SHAPES:
            below, above = _change_points_of(fixed[s], s, g, tg)
            found[s] = (below, above)
        chosen, bic = expected_choice(yg, tg, zg, found, 0.05)
        assert auto.shape[g] == chosen
        assert f"{chosen} {bic[chosen]:.1f}" in auto.note[g]


def _change_points_of(cp: ChangePoints, shape: str, g: int, tg: np.ndarray) -> tuple[float, float]:
    """The shape's change points as searched (a shape that fell back sits at a range end: recover it)."""
    if cp.shape[g] == shape:
        return cp.below[g], cp.above[g]
    lo, hi = admissible(tg)
    return {"heating": (hi, np.nan), "cooling": (np.nan, lo), "two-slopes": (hi, hi),
            "heating-cooling": (lo, hi)}[shape]


@pytest.mark.parametrize("seed", range(6))
def test_any_data_gives_change_points_inside_the_range(seed):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(6, 61, 12)
    kinds = ("heating", "cooling", "two-slopes", "heating-cooling", "line")
    parts = [make_groups(100 * seed + g, (n,), kinds[g % 5], k=g % 2, noise=rng.uniform(0.1, 5), ties=g % 3 == 0)
             for g, n in enumerate(sizes)]
    y, t = np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts])
    z = np.concatenate([np.column_stack([p[2], np.zeros((len(p[0]), 1 - p[2].shape[1]))]) for p in parts])
    t[: sizes[0]] = 7.0                                                       # constant temperature
    codes = np.repeat(np.arange(len(sizes)), sizes)
    for shape in CHOICES:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            cp = find_change_points(y, t, z, codes, len(sizes), shape)
        assert cp.shape[0] == "line" and "no room" in cp.note[0]
        for g in range(len(sizes)):
            tg = t[codes == g]
            lo, hi = admissible(tg)
            assert cp.shape[g] in ("line",) + SHAPES
            assert cp.count[g] == {"line": 0, "heating-cooling": 2}.get(cp.shape[g], 1)
            for tau, low, high in ((cp.below[g], cp.below_low[g], cp.below_high[g]),
                                   (cp.above[g], cp.above_low[g], cp.above_high[g])):
                if not np.isnan(tau):
                    assert lo < tau < hi and lo <= low <= tau <= high <= hi
            if cp.shape[g] == "heating-cooling":
                assert cp.below[g] <= cp.above[g]


def test_batching_changes_nothing():
    rng = np.random.default_rng(7)
    sizes = rng.integers(6, 80, 200)
    kinds = ("heating", "cooling", "two-slopes", "heating-cooling", "line")
    parts = [make_groups(1000 + g, (n,), kinds[g % 5], k=1, noise=2.0) for g, n in enumerate(sizes)]
    y, t, z = (np.concatenate([p[i] for p in parts]) for i in range(3))
    codes = np.repeat(np.arange(len(sizes)), sizes)
    together = find_change_points(y, t, z, codes, len(sizes), "auto")
    for g in range(len(sizes)):
        m = codes == g
        alone = find_change_points(y[m], t[m], z[m], np.zeros(m.sum(), dtype=np.int64), 1, "auto")
        assert together.shape[g] == alone.shape[0] and together.note[g] == alone.note[0]
        for name in ("below", "above", "below_low", "below_high", "above_low", "above_high", "rss"):
            np.testing.assert_allclose(getattr(together, name)[g], getattr(alone, name)[0], rtol=1e-9, atol=1e-12)


def test_groups_that_cannot_be_searched():
    y, t, z, codes = make_groups(8, (5, 30, 30, 30), "heating")
    y[codes == 1] = np.where(np.arange(30) == 4, np.nan, y[codes == 1])
    searchable = np.array([True, True, True, False])
    cp = find_change_points(y, t, z, codes, 4, "auto", searchable=searchable)
    assert list(cp.shape) == ["line", "line", "heating", ""]
    assert "too few rows" in cp.note[0] and "missing values" in cp.note[1] and cp.note[3] == ""
    assert cp.count.tolist() == [0, 0, 1, 0]
    with pytest.raises(ValueError):
        find_change_points(y, t, z, codes, 4, "curved")


def test_every_group_with_rows_gets_a_shape():
    # README: a group too small for a change point (fewer than 2·3 rows, common practice) is fitted as a line
    # and says why; with no `searchable` given every group with rows is looked at
    y, t, z, codes = make_groups(11, (30, 5, 2), "heating")
    cp = find_change_points(y, t, z, codes, 4, "heating")
    assert list(cp.shape) == ["heating", "line", "line", ""]
    assert cp.note[1].startswith("too few rows for a change point (5 rows") and "straight line" in cp.note[1]
    assert cp.note[2].startswith("too few rows for a change point (2 rows") and cp.note[3] == ""
    rng = np.random.default_rng(0)
    T = np.r_[rng.uniform(1, 30, 30), [3, 9, 14, 20, 27.0]]
    y = 40 + 5 * np.maximum(0, 16 - T) + rng.normal(size=35)
    groups = sheetfit.fit_frame(pd.DataFrame({"site": ["big"] * 30 + ["small"] * 5, "T": T, "y": y}), y="y",
                                x="T", group="site", change_point="heating").groups.set_index("site")
    assert groups.loc["big", SHAPE] == "heating" and groups.loc["small", SHAPE] == "line"
    assert groups.loc["small", SHAPE_NOTE].startswith("too few rows for a change point (5 rows")


def test_a_shape_leaving_no_residual_degree_of_freedom_is_not_used():
    # 6 rows, one further input: heating-cooling has 4 coefficients and 2 change points, so nothing is left
    # to estimate the error with; it falls back to a line (two-slopes, 5 parameters, still fits)
    y, t, z, codes = make_groups(12, (6,), "two-slopes", k=1, noise=0.1)
    hc = find_change_points(y, t, z, codes, 1, "heating-cooling")
    assert hc.shape[0] == "line" and "too few rows for it" in hc.note[0] and "at least 7 rows" in hc.note[0]
    auto = find_change_points(y, t, z, codes, 1, "auto")
    assert "heating-cooling left out: too few rows for it" in auto.note[0]


def test_hinge_columns_are_built_per_group():
    y, t, z, codes = make_groups(9, (20, 20, 20), "heating-cooling")
    cp = find_change_points(y, t, z, codes, 3, "auto")
    below, above = hinge_columns(t, codes, cp)
    for g in range(3):                                                        # numpy, by hand
        m = codes == g
        b = np.maximum(0, cp.below[g] - t[m]) if not np.isnan(cp.below[g]) else np.zeros(m.sum())
        a = np.maximum(0, t[m] - cp.above[g]) if not np.isnan(cp.above[g]) else np.zeros(m.sum())
        np.testing.assert_array_equal(below[m], b)
        np.testing.assert_array_equal(above[m], a)


@pytest.mark.parametrize("t_scale, y_scale", [(1e150, 1.0), (1.0, 1e-200), (1e-150, 1e200)])
def test_units_far_from_one_change_nothing_but_the_units(t_scale, y_scale):
    # the least-squares change point moves with T and not with the units of y (a fact of least squares);
    # the unscaled run is the oracle, and no overflow or underflow warning may be raised on the way
    y, t, z, codes = make_groups(3, (30, 40), "heating-cooling")
    ref = find_change_points(y, t, z, codes, 2, "auto")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        cp = find_change_points(y * y_scale, t * t_scale, z, codes, 2, "auto")
    assert list(cp.shape) == list(ref.shape)
    for name in ("below", "above", "below_low", "below_high", "above_low", "above_high"):
        np.testing.assert_allclose(getattr(cp, name), getattr(ref, name) * t_scale, rtol=1e-12)


def test_a_requested_shape_with_the_wrong_sign_says_so():
    # seeded data whose use falls as it gets colder; statsmodels on the hinge column at the found τ gives
    # the same negative slope that the note quotes
    import pandas as pd
    import statsmodels.api as sm

    import sheetfit

    rng = np.random.default_rng(3)
    T = rng.uniform(0, 30, 36)
    y = 500 - 4 * np.maximum(0, 20 - T) + rng.normal(0, 3, 36)
    res = sheetfit.fit_frame(pd.DataFrame({"T": T, "y": y}), y="y", x="T", change_point="heating")
    row = res.groups.iloc[0]
    tau = row["change point"]
    slope = sm.OLS(y, sm.add_constant(np.maximum(0, tau - T))).fit().params[1]              # statsmodels
    assert row["shape"] == "heating" and slope < 0
    assert f"the fitted heating slope is {slope:.4g}, not positive" in row["why this shape"]
