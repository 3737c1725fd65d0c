"""Change-point search: per group, the shape of a piecewise-linear baseline in temperature T and where it bends.

The shapes: one hinge below τ (heating), above τ (cooling), a change of slope at τ (two-slopes), or
two hinges τh ≤ τc (heating-cooling), each with a constant and the further inputs Z. Groups of
similar size are padded into blocks, sorted by T and scaled, and the exact search (hinge_search.py)
runs on all groups of a block at once. This module fits each shape at the change points found, says
why a shape cannot be used, picks the shape for `auto` with its notes, and returns everything in the
units of the data. The accurate final fit at the change points found is the engine's job.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from .hinge_search import (
    Block,
    base_columns,
    best_pair,
    design,
    ols,
    profile_intervals,
    search_hinge,
    shape_size,
    subset,
)

SHAPES = ("heating", "cooling", "two-slopes", "heating-cooling")
CHOICES = SHAPES + ("auto",)
MIN_SIDE_ROWS = 3       # common practice: at least this many rows on each side of a change point
PAD_RATIO = 1.3         # groups padded together differ in size by at most this factor (or 4 rows)
BLOCK_ROWS = 400_000    # padded rows per block, bounds memory
AT_END = "at the end of the observed temperatures (fewer than 3 rows beyond it)"


@dataclass(frozen=True)
class ChangePoints:
    """Per group: the shape chosen, its change point(s) with profile intervals, and why (data units)."""

    shape: np.ndarray        # (G,) object: 'line' or a member of SHAPES; '' for groups not searched
    below: np.ndarray        # (G,) τ of the max(0, τ − T) column; NaN when none
    above: np.ndarray        # (G,) τ of the max(0, T − τ) column (= below for two-slopes); NaN when none
    below_low: np.ndarray    # (G,) profile interval of `below`; NaN when none
    below_high: np.ndarray
    above_low: np.ndarray    # (G,) profile interval of `above`; NaN when none
    above_high: np.ndarray
    count: np.ndarray        # (G,) int: change points estimated (0 line, 2 heating-cooling, else 1)
    note: np.ndarray         # (G,) object: why this shape or why it fell back; '' when nothing to say
    rss: np.ndarray | None = None          # (G,) RSS of the chosen shape at its change points
    slope_below: np.ndarray | None = None  # (G,) coefficient of max(0, below − T); NaN when none
    slope_above: np.ndarray | None = None  # (G,) coefficient of max(0, T − above); NaN when none


@dataclass(frozen=True)
class _Found:
    """One shape fitted at its best change point(s) (scaled units); `fail` says why it cannot be used."""

    below: np.ndarray
    above: np.ndarray
    rss: np.ndarray
    slopes: np.ndarray    # (g, 2) coefficients of the below and above hinges
    tested: np.ndarray    # (g, 2) coefficients tested in `auto` (NaN where none)
    p_value: np.ndarray   # (g, 2) their two-sided t-test p-values
    fail: np.ndarray      # (g,) object: '' when usable


def _find(blk: Block, shape: str) -> _Found:
    """Search one shape for every group of the block and fit it at its change point(s)."""
    nan = np.full(len(blk.n), np.nan)
    below, above, rss = nan, nan, np.zeros(len(blk.n))
    if shape in ("heating", "two-slopes"):
        extra = [blk.w * blk.t] if shape == "two-slopes" else []
        found = search_hinge(blk, base_columns(blk, *extra), "below", blk.lo, blk.hi)
        below, rss = found.tau, found.rss
        above = below if shape == "two-slopes" else nan
    elif shape == "cooling":
        found = search_hinge(blk, base_columns(blk), "above", blk.lo, blk.hi)
        above, rss = found.tau, found.rss
    elif shape == "heating-cooling":
        below, above, rss = best_pair(blk)
    df = blk.n - sum(shape_size(shape, blk.z.shape[1]))
    beta, se, fit_rss = ols(design(blk, shape, below, above), blk.y, df)
    with np.errstate(divide="ignore", invalid="ignore"):
        p_value = 2 * stats.t.sf(np.abs(beta / se), df[:, None])
    slopes, tested, pv = (np.column_stack([nan, nan]) for _ in range(3))
    if shape in ("heating", "cooling"):
        k = 0 if shape == "heating" else 1
        slopes[:, k], tested[:, 0], pv[:, 0] = beta[:, -1], beta[:, -1], p_value[:, -1]
    elif shape == "two-slopes":          # coefficient of T is bc; of max(0, τ − T) is bh + bc
        slopes[:] = np.column_stack([beta[:, -1] - beta[:, 1], beta[:, 1]])
        tested[:, 0], pv[:, 0] = beta[:, -1], p_value[:, -1]
    elif shape == "heating-cooling":
        slopes[:], tested[:], pv[:] = beta[:, -2:], beta[:, -2:], p_value[:, -2:]
    fail = _failure(blk, shape, below, above, rss)
    return _Found(below, above, np.where(fail == "", fit_rss, np.inf), slopes, tested, pv, fail)


def _failure(blk: Block, shape: str, below: np.ndarray, above: np.ndarray, rss: np.ndarray) -> np.ndarray:
    """Why a shape's best change point(s) cannot be used ('' when they can)."""
    out = np.full(len(blk.n), "", dtype=object)
    if shape == "line":
        return out
    eh, ec = (below <= blk.lo) | (below >= blk.hi), (above <= blk.lo) | (above >= blk.hi)
    if shape == "heating-cooling":
        which = np.where(eh & ec, "both its change points sit ", np.where(
            eh, "its heating change point sits ", "its cooling change point sits ")).astype(object)
        out[eh | ec] = which[eh | ec] + AT_END
    else:
        out[eh | ec] = "its best change point sits " + AT_END
    out[~np.isfinite(rss)] = "no change point could be placed (the hinge column vanishes or repeats another input)"
    coef, points = shape_size(shape, blk.z.shape[1])
    out[blk.n <= coef + points] = (f"too few rows for it ({coef} coefficients and {points} change point"
                                   f"{'s' if points > 1 else ''} need at least {coef + points + 1} rows)")
    out[blk.lo >= blk.hi] = "the temperatures leave no room for a change point with 3 rows on each side"
    return out


def _fmt(spec: str, x: np.ndarray) -> np.ndarray:
    """Numbers as text, element by element (object array)."""
    return np.char.mod(spec, x).astype(object)


def _join(parts: list[np.ndarray], sep: str) -> np.ndarray:
    """Element-wise join of text arrays, skipping empty pieces."""
    out = np.full(len(parts[0]), "", dtype=object)
    for part in parts:
        out = np.where(part == "", out, np.where(out == "", part, out + sep + part))
    return out


def _why_not(found: _Found, shape: str, alpha: float) -> np.ndarray:
    """Why `auto` leaves a shape out ('' when it passes): its change points, slope signs and t-tests."""
    why = found.fail.copy()
    labels = {"heating": ["its slope"], "cooling": ["its slope"], "two-slopes": ["its change of slope"],
              "heating-cooling": ["its heating slope", "its cooling slope"]}.get(shape, [])
    for k, label in reversed(list(enumerate(labels))):
        coef, p = found.tested[:, k], found.p_value[:, k]
        weak = np.where(p < alpha, "", label + " does not differ from zero (p = " + _fmt("%.2g", p) + ")")
        weak = np.where(np.isnan(p), label + " cannot be tested with so few rows", weak)
        if shape != "two-slopes":
            weak = np.where(coef > 0, weak, label + " is negative or zero")
        why = np.where(why == "", weak, why)
    return why


def _choose(blk: Block, found: dict[str, _Found], alpha: float) -> tuple[np.ndarray, np.ndarray]:
    """`auto` (common practice): among the line and the shapes that pass, the lowest BIC
    n·ln(RSS/n) + ln(n)·(coefficients + change points); ties go to the simpler shape."""
    n, names = blk.n.astype(np.float64), ("line",) + SHAPES
    bic, why = {}, {}
    for s in names:
        with np.errstate(divide="ignore", invalid="ignore"):
            bic[s] = (n * (np.log(found[s].rss / n) + 2 * np.log(blk.y_scale))
                      + np.log(n) * sum(shape_size(s, blk.z.shape[1])))
        why[s] = _why_not(found[s], s, alpha)
    table = np.array([np.where(why[s] == "", bic[s], np.inf) for s in names])
    low = table.min(axis=0)
    tol = np.where(np.isfinite(low), 1e-9 * np.maximum(1.0, np.abs(low)), 0.0)
    chosen = np.array(names, dtype=object)[np.argmax(table <= low + tol, axis=0)]
    passed = [np.where(why[s] == "", s + " " + _fmt("%.1f", bic[s]), "").astype(object) for s in names]
    count = sum((why[s] == "").astype(int) for s in names)
    head = np.where(count == 1, chosen + ": the only shape that passed (",
                    chosen + ": lowest BIC, n·ln(RSS/n) + p·ln n (the BIC column less n·(1 + ln 2π)), of "
                    + _fmt("%d", count) + " shapes that passed (")
    left = [np.where(why[s] == "", "", s + " left out: " + why[s]).astype(object) for s in SHAPES]
    return chosen, _join([head + _join(passed, ", ") + ")", *left], "; ")


def _pad(y: np.ndarray, t: np.ndarray, others: np.ndarray, order: np.ndarray, starts: np.ndarray,
         counts: np.ndarray, ids: np.ndarray) -> Block:
    """A block of groups padded to its largest, sorted by T, each variable centred and scaled per group."""
    n = counts[ids]
    offs = np.arange(n.max())[None, :]
    w = (offs < n[:, None]).astype(np.float64)
    rows = order[starts[ids][:, None] + np.minimum(offs, n[:, None] - 1)]

    def scaled(v: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        ww, nn = w.reshape(w.shape + (1,) * (v.ndim - 2)), n.reshape((-1,) + (1,) * (v.ndim - 2))
        size = np.abs(v * ww).max(axis=1)                 # divided out first: no square overflows
        size = np.where(size > 0, size, 1.0)
        u = v / size[:, None]
        mean = (u * ww).sum(axis=1) / nn
        sd = np.sqrt((((u - mean[:, None]) * ww) ** 2).sum(axis=1) / nn)
        sd = np.where(sd > 0, sd, 1.0)
        return (u - mean[:, None]) / sd[:, None], mean * size, sd * size

    traw, g = t[rows], np.arange(len(ids))
    ts, t_centre, t_scale = scaled(traw)
    ys, _, y_scale = scaled(y[rows])
    zs = np.ascontiguousarray(np.moveaxis(scaled(others[rows])[0] * w[..., None], 2, 1))
    return Block(ids=ids, n=n, w=w, t=ts, z=zs, y=ys * w, lo=ts[g, MIN_SIDE_ROWS - 1],
                 hi=ts[g, n - MIN_SIDE_ROWS], lo_raw=traw[g, MIN_SIDE_ROWS - 1], hi_raw=traw[g, n - MIN_SIDE_ROWS],
                 t_centre=t_centre, t_scale=t_scale, y_scale=y_scale)


def _blocks(y: np.ndarray, t: np.ndarray, others: np.ndarray, codes: np.ndarray, counts: np.ndarray,
            run: np.ndarray):
    """The groups to search in blocks of similar size (one loop step per block, not per group)."""
    order = np.lexsort((t, codes))
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    ids = np.flatnonzero(run)
    ids = ids[np.argsort(counts[ids], kind="stable")]
    sizes, start = counts[ids], 0
    while start < len(ids):
        stop = int(np.searchsorted(sizes, max(sizes[start] * PAD_RATIO, sizes[start] + 4), side="right"))
        stop = min(stop, start + max(1, BLOCK_ROWS // int(sizes[stop - 1])))
        yield _pad(y, t, others, order, starts, counts, ids[start:stop])
        start = stop


def _block_result(blk: Block, choice: str, alpha: float, level: float) -> dict[str, np.ndarray]:
    """Every ChangePoints field for one block's groups, in the units of the data."""
    shapes = SHAPES if choice == "auto" else (choice,)
    found = {s: _find(blk, s) for s in ("line",) + shapes}
    if choice == "auto":
        chosen, note = _choose(blk, found, alpha)
    else:
        fail = found[choice].fail
        chosen = np.where(fail == "", choice, "line").astype(object)
        note = np.where(fail == "", "", choice + ": " + fail + "; fitted as a straight line").astype(object)
    ends = ("below_low", "below_high", "above_low", "above_high")
    res = {k: np.full(len(blk.n), np.nan) for k in ("below", "above", "rss", "slope_below", "slope_above") + ends}
    for s in ("line",) + shapes:
        sel, f = chosen == s, found[s]
        for key, v in (("below", f.below), ("above", f.above), ("rss", f.rss),
                       ("slope_below", f.slopes[:, 0]), ("slope_above", f.slopes[:, 1])):
            res[key][sel] = v[sel]
        if s != "line" and sel.any():
            ends_found = profile_intervals(subset(blk, sel), s, f.below[sel], f.above[sel], level)
            for key, v in zip(ends, ends_found, strict=True):
                res[key][sel] = v
    for a, b, skip, which in (("below_low", "below_high", "", "heating"), ("above_low", "above_high", "two-slopes",
                                                                         "cooling")):
        reach = ((res[a] <= blk.lo) | (res[b] >= blk.hi)) & (chosen != skip)
        what = np.where(chosen == "heating-cooling", f"the {which} change point", "the change point").astype(object)
        text = f"the {100 * level:g}% interval of " + what + " reaches the end of the observed temperatures"
        note = _join([note, np.where(reach, text, "").astype(object)], "; ")
    return _in_data_units(blk, res, chosen, note)


def _in_data_units(blk: Block, res: dict[str, np.ndarray], chosen: np.ndarray, note: np.ndarray) -> dict:
    """Scaled results back in the units of T and y; change points clipped to the observed range."""
    out = {k: np.clip(v * blk.t_scale + blk.t_centre, blk.lo_raw, blk.hi_raw)
           for k, v in res.items() if k.startswith(("below", "above"))}
    with np.errstate(over="ignore", under="ignore"):
        out["rss"] = res["rss"] * blk.y_scale**2
        out["slope_below"] = res["slope_below"] * (blk.y_scale / blk.t_scale)
        out["slope_above"] = res["slope_above"] * (blk.y_scale / blk.t_scale)
    out["count"] = np.select([chosen == "line", chosen == "heating-cooling"], [0, 2], 1)
    return {**out, "shape": chosen, "note": note}


def find_change_points(y: np.ndarray, t: np.ndarray, others: np.ndarray, codes: np.ndarray, n_groups: int,
                       shape: str, *, alpha: float = 0.05, level: float = 0.95,
                       searchable: np.ndarray | None = None) -> ChangePoints:
    """Each group's change point(s) of `shape` (a member of CHOICES), all groups at once.

    Rows are sorted by group code; `others` (N, k) are the further inputs. Every group with rows gets a
    shape unless `searchable` leaves it out (''): 'line' with a note when it has fewer than
    2·MIN_SIDE_ROWS rows, missing values, or a shape that cannot be placed. 'auto' (common practice)
    takes the lowest BIC among the line and the shapes whose change points are inside the range and
    whose slopes have the expected sign and differ from zero at `alpha`; `level` sets the profile
    intervals.
    """
    if shape not in CHOICES:
        raise ValueError(f"unknown change-point shape {shape!r}: choose one of {', '.join(CHOICES)}")
    y, t = np.asarray(y, dtype=np.float64), np.asarray(t, dtype=np.float64)
    others = np.asarray(others, dtype=np.float64)
    others = others[:, None] if others.ndim == 1 else others
    codes = np.asarray(codes, dtype=np.int64)
    counts = np.bincount(codes, minlength=n_groups)
    todo = counts > 0 if searchable is None else np.asarray(searchable, dtype=bool)
    bad = np.bincount(codes, weights=~np.isfinite(np.column_stack([y, t, others])).all(axis=1),
                      minlength=n_groups) > 0
    few = counts < 2 * MIN_SIDE_ROWS
    out = {k: np.full(n_groups, np.nan) for k in ("below", "above", "below_low", "below_high", "above_low",
                                                 "above_high", "rss", "slope_below", "slope_above")}
    out["count"] = np.zeros(n_groups, dtype=np.int64)
    out["shape"] = np.where(todo, "line", "").astype(object)
    out["note"] = np.where(todo & few, "too few rows for a change point (" + _fmt("%d", counts)
                           + f" rows, at least {2 * MIN_SIDE_ROWS} needed); fitted as a straight line",
                           np.where(todo & bad, "missing values in the group; no change point searched", ""))
    out["note"] = out["note"].astype(object)
    for blk in _blocks(y, t, others, codes, counts, todo & ~few & ~bad):
        for key, values in _block_result(blk, shape, alpha, level).items():
            out[key][blk.ids] = values
    if shape != "auto":
        _note_unexpected_signs(out)
    return ChangePoints(**out)


def _note_unexpected_signs(out: dict) -> None:
    """A requested heating or cooling slope that came out zero or negative is kept but noted (auto
    would leave such a shape out)."""
    for side, word, shapes in (("slope_below", "heating", ("heating", "heating-cooling")),
                               ("slope_above", "cooling", ("cooling", "heating-cooling"))):
        odd = np.isin(out["shape"], shapes) & ~(out[side] > 0) & np.isfinite(out[side])
        for g in np.flatnonzero(odd):
            extra = (f"the fitted {word} slope is {out[side][g]:.4g}, not positive: use does not rise "
                     f"beyond the change point as the {word} shape expects (--change-point auto would not "
                     "choose it)")
            out["note"][g] = f"{out['note'][g]}; {extra}" if out["note"][g] else extra


def hinge_columns(t: np.ndarray, codes: np.ndarray, cp: ChangePoints) -> tuple[np.ndarray, np.ndarray]:
    """Per row: max(0, below − T) and max(0, T − above) at its group's change points (0 where none)."""
    t = np.asarray(t, dtype=np.float64)
    below, above = cp.below[codes], cp.above[codes]
    with np.errstate(invalid="ignore"):
        return (np.where(np.isnan(below), 0.0, np.maximum(0.0, below - t)),
                np.where(np.isnan(above), 0.0, np.maximum(0.0, t - above)))
