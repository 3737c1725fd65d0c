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
groups and all candidates are done at once. Heating-cooling is exact too: for τh and τc each inside an
interval (a cell) the fit is linear in a, T·a, c, T·c, so its minimum is the cell's stationary point
in closed form or lies on the cell's edge, where one τ is an observed temperature and the other a
one-hinge search as above; every cell is looked at. Profile intervals solve RSS(τ) = bound exactly in
each interval.
"""

from __future__ import annotations

from dataclasses import dataclass, fields, replace

import numpy as np
from scipy import stats

SINGULAR = 1e-10        # a partialled hinge with less than this share of its own sum of squares is collinear
ROUNDS = 12             # at most this many rounds moving a heating-cooling profile interval end
STILL = 1e-10           # a profile end moving less than this (T in group standard deviations) has arrived


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


def _at(mo: tuple, raw: tuple, tau: np.ndarray) -> np.ndarray:
    """RSS(τ) = Y − (τD − E)²/(τ²A − 2τB + C) of one hinge, `mo` = (A, B, C, D, E, Y) partialled cross products
    and `raw` = its rows' (count, ΣT, ΣT²); inf where the partialled hinge vanishes."""
    A, B, C, D, E, Y = mo
    den = (tau * A - 2 * B) * tau + C
    return np.where(den > SINGULAR * ((tau * raw[0] - 2 * raw[1]) * tau + raw[2]), Y - (tau * D - E) ** 2 / den, np.inf)


def _inner(mo: tuple, raw: tuple, e1: np.ndarray, e2: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The one stationary point τ* = (CD − BE)/(BD − AE) of RSS(τ) and its RSS, inf unless strictly in (e1, e2)."""
    A, B, C, D, E, _ = mo
    star = (C * D - B * E) / (B * D - A * E)
    inside = (A * C - B * B > SINGULAR * A * C) & (star > e1) & (star < e2)
    return star, np.where(inside, _at(mo, raw, np.where(inside, star, e1)), np.inf)


def _fixed(fix: list, fix_raw: list, tau: np.ndarray, sign: float, free: list, cross: list) -> tuple:
    """Partial one hinge at a fixed τ (sign·(τ·a − T·a): +1 below, −1 above) out of the other side's cross
    products `free` = (A, B, C, D, E, Y); `cross` = (a, T·a) against the other side's (c, T·c) after the base,
    as (a·c, a·Tc, Ta·c, Ta·Tc). Returns the other side's (A, B, C, D, E, Y); NaN where the fixed hinge vanishes."""
    A, B, C, D, E = fix
    hh, raw = (tau * A - 2 * B) * tau + C, (tau * fix_raw[0] - 2 * fix_raw[1]) * tau + fix_raw[2]
    hy, xc, xt = sign * (tau * D - E), sign * (tau * cross[0] - cross[2]), sign * (tau * cross[1] - cross[3])
    inv = np.where(hh > SINGULAR * raw, 1.0 / hh, np.nan)
    fA, fB, fC, fD, fE, fY = free
    return (fA - xc * xc * inv, fB - xc * xt * inv, fC - xt * xt * inv, fD - xc * hy * inv, fE - xt * hy * inv,
            fY - hy * hy * inv)


def _stationary(h: list, c: list, x: list, Y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A cell's interior stationary point: the unrestricted fit on a, T·a, c, T·c (base partialled) by 2×2
    blocks, read as hinges: τh = −α_a/α_Ta, τc = −α_c/α_Tc. Returns τh, τc and RSS (NaN where singular)."""
    (Ah, Bh, Ch, Dh, Eh), (Ac, Bc, Cc, Dc, Ec) = h, c
    x11, x12, x21, x22 = x                 # rows a, T·a; columns c, T·c
    dh = Ah * Ch - Bh * Bh
    dh = np.where(dh > SINGULAR * Ah * Ch, dh, np.nan)
    p11, p12 = (Ch * x11 - Bh * x21) / dh, (Ch * x12 - Bh * x22) / dh      # Sa⁻¹·X
    p21, p22 = (Ah * x21 - Bh * x11) / dh, (Ah * x22 - Bh * x12) / dh
    s11, s12 = Ac - (x11 * p11 + x21 * p21), Bc - (x11 * p12 + x21 * p22)  # Schur complement of Sa
    s22 = Cc - (x12 * p12 + x22 * p22)
    g1, g2 = Dc - (p11 * Dh + p21 * Eh), Ec - (p12 * Dh + p22 * Eh)
    ds = s11 * s22 - s12 * s12
    ds = np.where(ds > SINGULAR * s11 * s22, ds, np.nan)
    c1, c2 = (s22 * g1 - s12 * g2) / ds, (s11 * g2 - s12 * g1) / ds
    h1 = (Ch * Dh - Bh * Eh) / dh - (p11 * c1 + p12 * c2)
    h2 = (Ah * Eh - Bh * Dh) / dh - (p21 * c1 + p22 * c2)
    return -h1 / h2, -c1 / c2, Y - (Dh * h1 + Eh * h2 + Dc * c1 + Ec * c2)


def _pair_row(h: dict, c: dict, ymy: np.ndarray, i: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per group, the best (τh, τc, RSS) with τh in interval i and τc in an interval k ≥ i: the corner (τh, τc)
    = (low end of i, high end of k), τh at that low end with τc inside k, τc at that high end with τh inside
    i, and (k > i) the cell's interior stationary point. `h`, `c`: each side's sums, (interval, group)."""
    hs, cs = {k: v[i] for k, v in h.items()}, {k: v[i:] for k, v in c.items()}
    mo_h, mo_c = [hs[f] for f in "ABCDE"], [cs[f] for f in "ABCDE"]
    raw_h, raw_c = [hs[f] for f in ("n", "s", "ss")], [cs[f] for f in ("n", "s", "ss")]
    # a'Mc and the like: the raw products vanish (the rows below τh and above τc differ), the base's remain
    x = [-(hs[a] * cs[b]).sum(1) for a, b in (("p", "wp"), ("p", "wq"), ("q", "wp"), ("q", "wq"))]
    free = _fixed(mo_h, raw_h, hs["e1"], 1.0, mo_c + [ymy], x)
    corner = _at(free, raw_c, cs["e2"])
    tc1, r1 = _inner(free, raw_c, cs["e1"], cs["e2"])
    th2, r2 = _inner(_fixed(mo_c, raw_c, cs["e2"], -1.0, mo_h + [ymy], [x[0], x[2], x[1], x[3]]), raw_h,
                     hs["e1"], hs["e2"])
    th3, tc3, r3 = _stationary(mo_h, mo_c, x, ymy)
    inside = (th3 > hs["e1"]) & (th3 < hs["e2"]) & (tc3 > cs["e1"]) & (tc3 < cs["e2"])
    inside[0] = False                                      # k = i: the edges and τh = τc hold the minimum
    e1h = np.broadcast_to(hs["e1"], cs["e2"].shape)
    taus = np.stack([np.stack([e1h, e1h, th2, th3]), np.stack([cs["e2"], tc1, cs["e2"], tc3])])
    rss = np.stack([corner, r1, r2, np.where(inside, r3, np.inf)])
    rss = np.where(hs["keep"] & cs["keep"] & ~np.isnan(rss), rss, np.inf)
    K, G = cs["e2"].shape
    at = np.argmin(rss.reshape(4 * K, G), axis=0)
    j, k, g = at // K, at % K, np.arange(G)
    return taus[0, j, k, g], taus[1, j, k, g], rss[j, k, g]


def _sides(blk: Block) -> tuple[dict, dict, np.ndarray]:
    """Each side's partialled sums per interval as (interval, group) arrays (contiguous for the pair search):
    below and above; for the above side also W·p and W·q (the base's cross products, W the base's inverse)."""
    base = base_columns(blk)
    mb, ma = _moments(blk, base, "below"), _moments(blk, base, "above")
    m = blk.t.shape[1]
    e1, e2 = np.maximum(blk.t[:, :-1], blk.lo[:, None]), np.minimum(blk.t[:, 1:], blk.hi[:, None])
    keep = (e1 < e2) & (np.arange(m - 1)[None, :] < blk.n[:, None] - 1)   # a point lies in a longer interval
    common = {"e1": e1, "e2": e2, "keep": keep}

    def side(mo: _Moments, extra: dict) -> dict:
        out = {"A": mo.A, "B": mo.B, "C": mo.C, "D": mo.D, "E": mo.E, "n": mo.n_a, "s": mo.st, "ss": mo.stt,
               **common}
        out = {k: np.ascontiguousarray(v.T) for k, v in out.items()}
        return out | {k: np.ascontiguousarray(np.moveaxis(v, 2, 0)) for k, v in extra.items()}

    return (side(mb, {"p": mb.p, "q": mb.q}), side(ma, {"wp": _times(mb.W, ma.p), "wq": _times(mb.W, ma.q)}),
            mb.ymy)


def best_pair(blk: Block) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Heating-cooling, exact: the least-squares (τh, τc) with lo ≤ τh ≤ τc ≤ hi. Within a cell (τh and τc each
    between two adjacent observed temperatures) the rows on each side are fixed, so the minimum is the cell's
    interior stationary point or lies on its edge, where one τ is an observed temperature and the other an
    exact one-hinge search; with both in one interval the edges and the line τh = τc (two slopes) hold it.
    Every cell of every group is looked at: one step per interval of τh, all groups and τc intervals at once."""
    h, c, ymy = _sides(blk)
    rows = np.flatnonzero(h["keep"].any(axis=1))
    tied = search_hinge(blk, base_columns(blk, blk.w * blk.t), "below", blk.lo, blk.hi)
    th, tc, rss = tied.tau, tied.tau.copy(), tied.rss
    for i in range(rows[0], rows[-1] + 1) if len(rows) else ():
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            bh, bc, r = _pair_row(h, c, ymy, i)
        low = r < rss
        th, tc, rss = np.where(low, bh, th), np.where(low, bc, tc), np.where(low, r, rss)
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

