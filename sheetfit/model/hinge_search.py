"""The numerical change-point search: exact least-squares hinge positions, all groups of a block at once.

A block holds groups of similar size padded to one length, sorted by temperature T, centred and
scaled (change_point.py builds it). Every shape has a constant and the further inputs Z. Inside an
interval between adjacent observed temperatures the rows on each side of τ are fixed, so a hinge
column is τ·a − T·a (a the side indicator) and, with the other columns partialled out,
RSS(τ) = yMy − (τD − E)² / (τ²A − 2τB + C), where A, B, C, D, E are the partialled cross products of
a, T·a and y. As τ runs over the reals the hinge's direction sweeps the plane of a and T·a once, so
RSS(τ) has a single minimum: τ* = −c/d of the unrestricted fit c·a + d·T·a, i.e. (CD − BE)/(BD − AE).
RSS is taken at every observed temperature in range and at τ* where it falls inside its interval,
which makes the search exact. The cross products come from prefix sums over rows sorted by T, so all
groups and all candidates are done at once. Heating-cooling takes the best pair on the data-point
grid, then refines it the same way; profile intervals solve RSS(τ) = bound exactly in each interval.
"""

from __future__ import annotations

from dataclasses import dataclass, fields, replace

import numpy as np
from scipy import stats

SINGULAR = 1e-10        # a partialled hinge with less than this share of its own sum of squares is collinear
ROUNDS = 12             # at most this many refinement rounds for the two change points of heating-cooling
STILL = 1e-10           # a profile end moving less than this (T in group standard deviations) has arrived
PAIR_CELLS = 2_000_000  # (group, τh, τc) cells per step of the heating-cooling grid, bounds memory


@dataclass(frozen=True)
class Block:
    """Groups of similar size padded to m rows, sorted by T, centred and scaled per group (padding weighs 0)."""

    ids: np.ndarray       # (g,) group codes
    n: np.ndarray         # (g,) rows
    w: np.ndarray         # (g, m) 1 on rows, 0 on padding
    t: np.ndarray         # (g, m) scaled T, ascending; padding repeats the largest
    z: np.ndarray         # (g, k, m) scaled Z, 0 on padding
    y: np.ndarray         # (g, m) scaled y, 0 on padding
    lo: np.ndarray        # (g,) admissible τ (scaled): from the 3rd smallest to the 3rd largest T
    hi: np.ndarray
    lo_raw: np.ndarray    # (g,) the same range in the units of T
    hi_raw: np.ndarray
    t_centre: np.ndarray  # (g,) T = t·t_scale + t_centre
    t_scale: np.ndarray
    y_scale: np.ndarray   # (g,) y = y_scaled·y_scale + mean


@dataclass(frozen=True)
class _Moments:
    """Per interval j (between sorted rows j and j+1): partialled cross products of a, T·a, y (A…E), raw
    sums of a, T·a, T²·a (n_a, st, stt), base cross products p = B'a, q = B'(T·a), W = (B'B)⁺, yMy."""

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    E: np.ndarray
    n_a: np.ndarray
    st: np.ndarray
    stt: np.ndarray
    p: np.ndarray
    q: np.ndarray
    W: np.ndarray
    ymy: np.ndarray


@dataclass(frozen=True)
class HingeSearch:
    """A one-hinge search: the best τ and its RSS per group, and the intervals [e1, e2] it looked at."""

    tau: np.ndarray
    rss: np.ndarray
    mo: _Moments
    e1: np.ndarray
    e2: np.ndarray
    valid: np.ndarray


def shape_size(shape: str, k: int) -> tuple[int, int]:
    """(coefficients, change points) of a shape with k further inputs."""
    coef = 3 + k if shape in ("two-slopes", "heating-cooling") else 2 + k
    return coef, {"line": 0, "heating-cooling": 2}.get(shape, 1)


def subset(blk: Block, keep: np.ndarray) -> Block:
    """The same block with only the groups `keep` selects."""
    return replace(blk, **{f.name: getattr(blk, f.name)[keep] for f in fields(blk)})


def _moments(blk: Block, base: list[np.ndarray], side: str) -> _Moments:
    """Cross products for every interval, side 'below' (a = rows 0…j) or 'above' (a = rows j+1…)."""
    w, t, b = blk.w, blk.t, len(base)
    u = base + [blk.y]
    rows = np.stack([w, w * t, w * t * t] + u + [t * v for v in u])
    s = np.cumsum(rows, axis=2)[..., :-1] if side == "below" else np.cumsum(rows[..., ::-1], axis=2)[..., -2::-1]
    gram = np.stack([np.stack([(ui * uj).sum(axis=1) for uj in u], axis=1) for ui in u], axis=1)
    W = np.linalg.pinv(gram[:, :b, :b], rcond=1e-12, hermitian=True)
    by = gram[:, :b, b]
    wy = np.einsum("gij,gj->gi", W, by).T[:, :, None]
    p, q = s[3:3 + b], s[4 + b:4 + 2 * b]
    wp, wq = _times(W, p), _times(W, q)
    return _Moments(A=s[0] - (p * wp).sum(0), B=s[1] - (q * wp).sum(0), C=s[2] - (q * wq).sum(0),
                    D=s[3 + b] - (p * wy).sum(0), E=s[4 + 2 * b] - (q * wy).sum(0), n_a=s[0], st=s[1],
                    stt=s[2], p=p, q=q, W=W, ymy=gram[:, b, b] - (by * wy[:, :, 0].T).sum(-1))


def _times(W: np.ndarray, v: np.ndarray) -> np.ndarray:
    """W·v per group for v of shape (b, g, j): W (g, b, b) is tiny, so plain multiply-adds beat einsum."""
    return np.stack([sum(W[:, i, k, None] * v[k] for k in range(len(v))) for i in range(len(v))]) if len(v) else v


def _spread(mo: _Moments, tau: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """h'Mh and h'h of the hinge at τ (partialled and raw sums of squares); RSS needs the first > 0."""
    return (tau * mo.A - 2 * mo.B) * tau + mo.C, (tau * mo.n_a - 2 * mo.st) * tau + mo.stt


def _rss(mo: _Moments, tau: np.ndarray) -> np.ndarray:
    """RSS with the hinge at τ (per interval); inf where the partialled hinge vanishes."""
    den, raw = _spread(mo, tau)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > SINGULAR * raw, mo.ymy[:, None] - (tau * mo.D - mo.E) ** 2 / den, np.inf)


def search_hinge(blk: Block, base: list[np.ndarray], side: str, lo: np.ndarray, hi: np.ndarray) -> HingeSearch:
    """Exact least-squares τ in [lo, hi] of one hinge (below: max(0, τ − T), above: max(0, T − τ)) with the
    base columns fixed. Ties go to the lowest τ; RSS is inf where no candidate is usable."""
    mo = _moments(blk, base, side)
    G, m = blk.t.shape
    e1, e2 = np.maximum(blk.t[:, :-1], lo[:, None]), np.minimum(blk.t[:, 1:], hi[:, None])
    valid = (e1 <= e2) & (np.arange(m - 1)[None, :] < blk.n[:, None] - 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        star = (mo.C * mo.D - mo.B * mo.E) / (mo.B * mo.D - mo.A * mo.E)
        inside = valid & (mo.A * mo.C - mo.B**2 > SINGULAR * mo.A * mo.C) & (star > e1) & (star < e2)
    star = np.where(inside, star, e1)
    taus = np.stack([e1, e2, star], axis=2).reshape(G, 3 * (m - 1))
    rss = np.stack([_rss(mo, e1), _rss(mo, e2), np.where(inside, _rss(mo, star), np.inf)], axis=2)
    rss = np.where(valid[..., None], rss, np.inf).reshape(G, 3 * (m - 1))
    best = np.argmin(rss, axis=1)[:, None]
    return HingeSearch(np.take_along_axis(taus, best, 1)[:, 0], np.take_along_axis(rss, best, 1)[:, 0],
                       mo, e1, e2, valid)


def _crossing(found: HingeSearch, bound: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest τ with RSS(τ) ≤ bound over the searched intervals: an interval end inside the
    set, or else a root of (τD − E)² − K·(τ²A − 2τB + C), K = yMy − bound (the exact crossing)."""
    mo, e1, e2 = found.mo, found.e1, found.e2
    K = (mo.ymy - bound)[:, None]
    a2, a1, a0 = mo.D**2 - K * mo.A, -2 * (mo.D * mo.E - K * mo.B), mo.E**2 - K * mo.C
    with np.errstate(divide="ignore", invalid="ignore"):
        disc = a1 * a1 - 4 * a2 * a0
        half = -0.5 * (a1 + np.copysign(np.sqrt(np.where(disc >= 0, disc, np.nan)), a1))
        r1, r2 = half / a2, a0 / half
    r_lo, r_hi = np.fmin(r1, r2), np.fmax(r1, r2)
    first = np.where(_rss(mo, e1) <= bound[:, None], e1, np.where(
        (r_lo > e1) & (r_lo <= e2), r_lo, np.where((r_hi > e1) & (r_hi <= e2), r_hi, np.nan)))
    last = np.where(_rss(mo, e2) <= bound[:, None], e2, np.where(
        (r_hi >= e1) & (r_hi < e2), r_hi, np.where((r_lo >= e1) & (r_lo < e2), r_lo, np.nan)))
    return (np.fmin.reduce(np.where(found.valid, first, np.nan), axis=1),
            np.fmax.reduce(np.where(found.valid, last, np.nan), axis=1))


def _hinge(blk: Block, tau: np.ndarray, side: str) -> np.ndarray:
    """The hinge column (g, m) at each group's τ, 0 on padding."""
    d = tau[:, None] - blk.t if side == "below" else blk.t - tau[:, None]
    return blk.w * np.maximum(0.0, d)


def base_columns(blk: Block, *extra: np.ndarray) -> list[np.ndarray]:
    """The constant, Z and any extra columns, each (g, m)."""
    return [blk.w, *(blk.z[:, i] for i in range(blk.z.shape[1])), *extra]


def _pair_grid(blk: Block) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Best (τh, τc) over observed temperatures in range with τh ≤ τc. With the base partialled out the
    two hinges give a 2×2 system; its off-diagonal is −(B'hh)'W(B'hc), as the raw hinges never overlap."""
    mb, ma = _moments(blk, base_columns(blk), "below"), _moments(blk, base_columns(blk), "above")
    t = blk.t[:, :-1]                                   # data point j: interval j at its left end
    G, J = t.shape
    inside = (t >= blk.lo[:, None]) & (t <= blk.hi[:, None])
    (ah, raw_h), (ac, raw_c) = _spread(mb, t), _spread(ma, t)
    ok_h, ok_c = inside & (ah > SINGULAR * raw_h), inside & (ac > SINGULAR * raw_c)
    dh, dc = t * mb.D - mb.E, ma.E - t * ma.D           # h'My (the above hinge is T·a − τ·a)
    vh, wvc = t * mb.p - mb.q, _times(mb.W, ma.q - t * ma.p)
    best, at_j, at_k = np.full(G, np.inf), np.zeros(G, dtype=np.int64), np.zeros(G, dtype=np.int64)
    step = max(1, PAIR_CELLS // max(1, G * J))
    for j0 in range(0, J, step):
        j = np.arange(j0, min(j0 + step, J))
        x = -sum(vh[i][:, j, None] * wvc[i][:, None, :] for i in range(len(vh)))
        a_h, d_h, a_c, d_c = ah[:, j, None], dh[:, j, None], ac[:, None], dc[:, None]
        det = a_h * a_c - x * x
        use = ok_h[:, j, None] & ok_c[:, None, :] & (j[:, None] <= np.arange(J)) & (det > SINGULAR * a_h * a_c)
        with np.errstate(divide="ignore", invalid="ignore"):
            fit = (a_c * d_h**2 - 2 * x * d_h * d_c + a_h * d_c**2) / det
        rss = np.where(use, mb.ymy[:, None, None] - fit, np.inf).reshape(G, -1)
        pos = np.argmin(rss, axis=1)
        low = rss[np.arange(G), pos] < best
        best = np.where(low, rss[np.arange(G), pos], best)
        at_j, at_k = np.where(low, j0 + pos // J, at_j), np.where(low, pos % J, at_k)
    return t[np.arange(G), at_j], t[np.arange(G), at_k], best


def _given(blk: Block, other: np.ndarray, side: str, free: bool = False) -> HingeSearch:
    """Heating-cooling: the exact search for τh (side 'below') given τc, or for τc ('above') given τh,
    keeping τh ≤ τc. With `free` the other hinge keeps its rows but its τ is free (columns s and T·s):
    that is the minimum over the other τ wherever its optimum stays between the same data points."""
    below = side == "below"
    lo, hi = (blk.lo, np.minimum(blk.hi, other)) if below else (np.maximum(blk.lo, other), blk.hi)
    if not free:
        return search_hinge(blk, base_columns(blk, _hinge(blk, other, "above" if below else "below")), side, lo, hi)
    rows = _side_rows(blk, other, "above" if below else "below")
    return search_hinge(blk, base_columns(blk, rows, rows * blk.t), side, lo, hi)


def _side_rows(blk: Block, tau: np.ndarray, side: str) -> np.ndarray:
    """1 on the rows where the hinge at τ is positive (T < τ below, T > τ above), else 0."""
    return blk.w * (blk.t < tau[:, None] if side == "below" else blk.t > tau[:, None])


def _polish(blk: Block, th: np.ndarray, tc: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The joint optimum over the intervals holding τh and τc: with the rows on each side fixed, the fit on
    a, T·a, c, T·c is the hinge fit with τh = −α_a/α_Ta, τc = −α_c/α_Tc. Returns those τ and the RSS of
    the hinge fit there (inf where they leave the range)."""
    a, c = _side_rows(blk, th, "below"), _side_rows(blk, tc, "above")
    alpha = ols(np.stack(base_columns(blk, a, a * blk.t, c, c * blk.t), axis=2), blk.y, blk.n)[0]
    with np.errstate(divide="ignore", invalid="ignore"):
        nh, nc = -alpha[:, -4] / alpha[:, -3], -alpha[:, -2] / alpha[:, -1]
    ok = (blk.lo <= nh) & (nh <= nc) & (nc <= blk.hi)
    nh, nc = np.where(ok, nh, th), np.where(ok, nc, tc)
    return nh, nc, np.where(ok, ols(design(blk, "heating-cooling", nh, nc), blk.y, blk.n)[2], np.inf)


def best_pair(blk: Block) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Heating-cooling: the best pair on the data-point grid, then each τ refined exactly with the other
    fixed and the pair polished jointly, in turn, for each group until its RSS stops falling."""
    th, tc, rss = _pair_grid(blk)
    live = np.flatnonzero(np.isfinite(rss))
    for _ in range(ROUNDS):
        if not len(live):
            break
        sub = subset(blk, live)
        h = _given(sub, tc[live], "below")
        c = _given(sub, h.tau, "above")
        ph, pc, prss = _polish(sub, h.tau, c.tau)
        polished = prss < c.rss
        nh, nc, nrss = np.where(polished, ph, h.tau), np.where(polished, pc, c.tau), np.fmin(prss, c.rss)
        better = nrss < rss[live] * (1 - 1e-13)
        live = live[better]
        th[live], tc[live], rss[live] = nh[better], nc[better], nrss[better]
    return th, tc, rss


def design(blk: Block, shape: str, below: np.ndarray, above: np.ndarray) -> np.ndarray:
    """The shape's design (g, m, p), hinges last (below before above); two-slopes as constant, T, Z, below."""
    cols = [blk.w] + ([blk.w * blk.t] if shape in ("line", "two-slopes") else []) + base_columns(blk)[1:]
    if shape in ("heating", "two-slopes", "heating-cooling"):
        cols.append(_hinge(blk, np.where(np.isfinite(below), below, blk.lo), "below"))
    if shape in ("cooling", "heating-cooling"):
        cols.append(_hinge(blk, np.where(np.isfinite(above), above, blk.hi), "above"))
    return np.stack(cols, axis=2)


def ols(X: np.ndarray, y: np.ndarray, df: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Least squares of stacked small designs by SVD (minimum norm where rank-deficient): β, std errors
    with `df` residual degrees of freedom, and RSS."""
    U, sv, Vt = np.linalg.svd(X, full_matrices=False)
    inv = np.where(sv > sv[:, :1] * 1e-12, 1.0 / np.where(sv > 0, sv, 1.0), 0.0)
    beta = np.einsum("gji,gj->gi", Vt, inv * np.einsum("gmj,gm->gj", U, y))
    rss = ((y - np.einsum("gmi,gi->gm", X, beta)) ** 2).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt(rss / df)[:, None] * np.sqrt(np.einsum("gji,gj->gi", Vt**2, inv**2))
    return beta, se, rss


def _pair_end(blk: Block, found: tuple[np.ndarray, np.ndarray], side: str, end: int, bound: np.ndarray,
              tied: np.ndarray) -> np.ndarray:
    """One end (0 low, 1 high) of the profile interval of τh (side 'below') or τc ('above') of heating-cooling,
    the other τ minimised over. Candidates: the crossing with the other τ's rows fixed but its τ free, exact
    where the other's optimum there confirms it; else the crossing with the other τ fixed (inside the set);
    and `tied`, the crossing with both τ equal (two-slopes), if confirmed. Each round keeps the farthest and
    moves the other τ to its optimum there, per group until the end stops moving."""
    flip, pick, cut = ("above" if side == "below" else "below"), (np.fmin if end == 0 else np.fmax), 1 + 1e-12
    ok = _given(blk, np.where(np.isnan(tied), blk.lo, tied), flip).rss <= bound * cut
    tied, x, other = np.where(ok, tied, np.nan), np.full(len(blk.n), np.nan), found[side == "below"].copy()
    live = np.arange(len(blk.n))
    for _ in range(ROUNDS):
        if not len(live):
            break
        sub, b, o = subset(blk, live), bound[live], other[live]
        x2 = _crossing(_given(sub, o, side, free=True), b)[end]
        at2 = _given(sub, np.where(np.isnan(x2), o, x2), flip)
        good = at2.rss <= b * cut
        x1, bad = np.full(len(live), np.nan), np.flatnonzero(~good)
        if len(bad):
            x1[bad] = _crossing(_given(subset(sub, bad), o[bad], side), b[bad])[end]
        new = pick(pick(x1, np.where(good, x2, np.nan)), tied[live])
        new = np.where(np.isnan(new), x[live], new)
        exact = good & (new == x2)
        o_new, need = np.where(exact, at2.tau, o), np.flatnonzero(~exact & ~np.isnan(new))
        if len(need):
            o_new[need] = _given(subset(sub, need), new[need], flip).tau
        same = (_side_rows(sub, at2.tau, flip) == _side_rows(sub, o, flip)).all(axis=1)
        done = (exact & same) | (np.abs(new - x[live]) <= STILL) | np.isnan(new)
        x[live], other[live] = new, o_new
        live = live[~done]
    return x


def profile_intervals(blk: Block, shape: str, below: np.ndarray, above: np.ndarray,
                      level: float) -> list[np.ndarray]:
    """Profile interval ends (scaled): {τ : RSS(τ) ≤ RSS_min·(1 + F(level; 1, n − p)/(n − p))}, p counting
    coefficients and change points; for heating-cooling each τ with the other minimised over."""
    df = (blk.n - sum(shape_size(shape, blk.z.shape[1]))).astype(np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = 1.0 + stats.f.ppf(level, 1, df) / df
    nan = np.full(len(blk.n), np.nan)
    if shape == "heating-cooling":
        bound = ols(design(blk, shape, below, above), blk.y, blk.n)[2] * factor
        tied = _crossing(search_hinge(blk, base_columns(blk, blk.w * blk.t), "below", blk.lo, blk.hi), bound)
        return [_pair_end(blk, (below, above), side, end, bound, tied[end])
                for side in ("below", "above") for end in (0, 1)]
    extra = [blk.w * blk.t] if shape == "two-slopes" else []
    found = search_hinge(blk, base_columns(blk, *extra), "above" if shape == "cooling" else "below", blk.lo, blk.hi)
    low, high = _crossing(found, found.rss * factor)
    return {"heating": [low, high, nan, nan], "cooling": [nan, nan, low, high]}.get(shape, [low, high, low, high])

