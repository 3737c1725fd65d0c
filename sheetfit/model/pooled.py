"""Across groups: do the groups share their slopes, and which groups stand apart from the others?

Each group's rows are centred on its own (weighted) means, so every group keeps its own intercept, and
reduced to the R factor of [Xc | yc] by a QR (X'X is never formed; centring in long double). Stacking
factors is stacking rows, so every pooled fit is a QR of a few small stacked factors:
- equal slopes: separate slopes against common slopes with own intercepts, F on ((C−1)k, df_sep);
- one common line: separate lines against y on [1, X] over all compared groups, F on ((C−1)(k+1), df_sep);
- per group g and input j: d = b_g − b_ref, b_ref pooled from the OTHER groups in the reference set R,
  judged one of two ways (S_h = X_c'X_c and b_h of group h, sums over h in R, h ≠ g):
  common residual variance σ² = RSS_sep/df_sep: b_ref = (Σ S_h)⁻¹ Σ S_h b_h (the common slope with own
  intercepts), Var d = σ²[S_g⁻¹ + (Σ S_h)⁻¹]_jj on df_sep;
  own residual variances σ_h² (Welch type): b_ref = A⁻¹ Σ (S_h/σ_h²) b_h with A = Σ S_h/σ_h², weighted by
  each group's precision so a noisy group barely moves it; Var d = σ_g²[S_g⁻¹]_jj + [A⁻¹]_jj = a + Σ c_h,
  c_h = u'(S_h/σ_h²)u with u = A⁻¹e_j. Holding the weights at their estimates (as Welch's test does),
  c_h = σ̂_h²·u'S_h u/σ_h⁴ is linear in σ̂_h², of variance 2c_h²/ν_h, so Welch–Satterthwaite gives
  df = (a + Σ c_h)² / (a²/ν_g + Σ c_h²/ν_h). An exact fit counts with variance eps·(largest σ_h²).
Rule: own variances are used when Bartlett's test of equal residual variances (each on n_g − p degrees
of freedom) rejects at `alpha`; otherwise the common one. The set R is judged the way the rule picked,
p adjusted across groups per input: it starts as all groups; while members stand apart (adjusted p
below `alpha`) the strongest are set aside, never leaving half or fewer of the groups; after each change,
groups set aside that no longer stand apart against the current members return. This repeats until
nothing changes (MAX_ROUNDS at most; a set seen before stops it); groups that still do not stand apart
then return until none is left (R only grows there), so every group outside R stands apart at the end.
With none apart this is leave-one-out; with two steep groups of ten, the eight ordinary ones are judged
against each other, not against a slope the steep two pulled up.
A weighted run compares the whitened rows √w·y, √w·X (weighted means and sums of squares).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import stats

from .unfit import COLLINEAR_TOL, too_few_rows

BATCH_ROWS = 400_000       # padded rows per batched QR of the groups' blocks
PAD_RATIO = 1.3            # groups in one batch differ in size by at most this factor
MAX_ROUNDS = 20            # rounds of setting groups aside from (and back into) the reference set
NO_CONSTANT = ("the model has no constant, so the groups cannot keep their own intercepts; "
               "slopes are compared across groups only for models with a constant")
NO_INPUT = "the model has no input besides the constant: there is no slope to compare"
TOO_FEW_GROUPS = "fewer than two groups can be compared"
NOT_FITTED = "not fitted"
FLAT_INPUT = ("an input does not vary within the group, or is an exact combination of the other "
              "inputs there")


@dataclass(frozen=True)
class OverallTest:
    """One test over all compared groups: statistic, its degrees of freedom (df2 NaN for χ²), p-value."""

    statistic: float
    df1: float
    df2: float
    pvalue: float


@dataclass(frozen=True)
class Differences:
    """One way to judge d = group slope − reference slope: (C, k) arrays per group and input."""

    reference: np.ndarray    # the slope of the other groups in the reference set, pooled this way
    se: np.ndarray
    df: np.ndarray
    t: np.ndarray
    pvalue: np.ndarray
    low: np.ndarray
    high: np.ndarray


@dataclass(frozen=True)
class GroupComparison:
    """The across-groups comparison. `reason` is '' when computed, else why it was not (arrays empty).

    C groups are compared (`codes`, ascending); k slopes each (the design's non-constant columns).
    """

    reason: str
    left_out: np.ndarray          # (G,) object: why a group was left out ('' when compared)
    codes: np.ndarray             # (C,) codes of the compared groups
    n: np.ndarray                 # (C,) rows per compared group
    slope: np.ndarray             # (C, k) each group's own slopes
    common_slope: np.ndarray      # (k,) common slopes of all compared groups (own intercepts)
    in_reference: np.ndarray      # (C,) bool: the group is in the reference set
    sigma2: np.ndarray            # (C,) each group's residual variance (weighted: of the whitened rows)
    equal_slopes: OverallTest
    common_line: OverallTest
    equal_variances: OverallTest  # Bartlett's test on the groups' residual variances
    common_variance: Differences
    own_variances: Differences
    own_used: bool                # the own-variance (Welch-type) std errors are the ones used
    weighted: bool
    level: float
    alpha: float

    @property
    def compared(self) -> bool:
        return not self.reason

    @property
    def reference(self) -> np.ndarray:
        """(C, k) the slope of the other groups in the reference set, pooled the way the rule picked."""
        return self.used.reference

    @property
    def difference(self) -> np.ndarray:
        """(C, k) group slope minus the slope of the other groups."""
        return self.slope - self.reference

    @property
    def used(self) -> Differences:
        """The std errors, p-values and intervals the rule picked (see the module docstring)."""
        return self.own_variances if self.own_used else self.common_variance


def compare_groups(y: np.ndarray, X: np.ndarray, codes: np.ndarray, fitted_ok: np.ndarray, *, intercept: bool,
                   adjust: Callable[[np.ndarray], np.ndarray], weights: np.ndarray | None = None,
                   level: float = 0.95, alpha: float = 0.05) -> GroupComparison:
    """Compare the groups' slopes. `X` holds the raw design rows (constant first when `intercept`),
    `codes` each row's group (0..G−1), `fitted_ok` (G,) the groups the engine fitted; `adjust` maps
    one input's p-values across groups to adjusted ones (the run's adjustment across groups)."""
    y = np.asarray(y, dtype=np.float64)
    X = np.asarray(X, dtype=np.float64).reshape(len(y), -1)
    codes = np.asarray(codes, dtype=np.int64)
    fitted_ok = np.asarray(fitted_ok, dtype=bool)
    G, p = len(fitted_ok), X.shape[1]
    w = None if weights is None else np.asarray(weights, dtype=np.float64)
    if w is not None and not (np.isfinite(w).all() and (w > 0).all()):
        raise ValueError("weights must be finite and positive")
    counts = np.bincount(codes, minlength=G)
    left_out = np.where(fitted_ok, "", NOT_FITTED).astype(object)
    for g in np.flatnonzero(fitted_ok & (counts <= p)):
        left_out[g] = too_few_rows(int(counts[g]), p)
    args = (p - 1, w is not None, level, alpha)
    if not intercept:
        return not_compared(NO_CONSTANT, left_out, *args)
    if p < 2:
        return not_compared(NO_INPUT, left_out, *args)
    keep = np.flatnonzero(left_out == "")
    if len(keep) < 2:
        return not_compared(TOO_FEW_GROUPS, left_out, *args)
    blocks = centred_blocks(y, X[:, 1:], codes, w, keep)
    F = group_factors(blocks.rows, blocks.starts, blocks.counts)
    flat = _flat_groups(F, blocks)
    if flat.any():
        left_out[keep[flat]] = FLAT_INPUT
        keep = keep[~flat]
        if len(keep) < 2:
            return not_compared(TOO_FEW_GROUPS, left_out, *args)
        F, blocks = F[~flat], blocks.only(~flat)
    return _compare(F, blocks, keep, left_out, w is not None, level, alpha, adjust)


@dataclass(frozen=True)
class CentredBlocks:
    """The compared groups' rows, each centred on its group's (weighted) means, whitened and scaled.

    rows (M, k+1): [√w·(x − x̄_g) | √w·(y − ȳ_g)] / scale, groups one after another; between (C, k+1):
    √W_g·(mean_g − overall mean) / scale, the rows that turn within-group fits into one pooled line.
    """

    rows: np.ndarray
    starts: np.ndarray
    counts: np.ndarray
    between: np.ndarray
    scale: np.ndarray          # (k+1,) power of two per column (inputs, then y)

    def only(self, keep: np.ndarray) -> CentredBlocks:
        """The same without the groups where `keep` is False (rows stay where they are)."""
        return CentredBlocks(self.rows, self.starts[keep], self.counts[keep], self.between[keep], self.scale)


def centred_blocks(y: np.ndarray, Z: np.ndarray, codes: np.ndarray, w: np.ndarray | None,
                   keep: np.ndarray) -> CentredBlocks:
    """Rows of the groups `keep` (ascending codes), centred per group in long double and scaled by a
    power of two per column so every value is at most 1 in size (exact, and safe near 1e±300)."""
    chosen = np.isin(codes, keep)
    order = np.flatnonzero(chosen)[np.argsort(codes[chosen], kind="stable")]
    A = np.column_stack([Z[order], y[order]]).astype(np.longdouble)
    wt = np.ones(len(order), dtype=np.longdouble) if w is None else w[order].astype(np.longdouble)
    counts = np.bincount(codes[order], minlength=int(keep.max()) + 1)[keep]
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    wsum = np.add.reduceat(wt, starts)
    means = np.add.reduceat(wt[:, None] * A, starts, axis=0) / wsum[:, None]
    centred = (A - np.repeat(means, counts, axis=0)) * np.sqrt(wt)[:, None]
    overall = (wsum[:, None] * means).sum(axis=0) / wsum.sum()
    between = np.sqrt(wsum)[:, None] * (means - overall)
    big = np.maximum(np.abs(centred).max(axis=0), np.abs(between).max(axis=0)).astype(np.float64)
    scale = np.where(big > 0, np.exp2(np.frexp(np.where(big > 0, big, 1.0))[1].astype(np.float64)), 1.0)
    return CentredBlocks((centred / scale).astype(np.float64), starts, counts,
                         (between / scale).astype(np.float64), scale)


def r_factor(blocks: np.ndarray) -> np.ndarray:
    """The (…, c, c) R factors of a stack of (…, m, c) blocks (zero rows added when m < c)."""
    m, c = blocks.shape[-2:]
    if m < c:
        blocks = np.concatenate([blocks, np.zeros((*blocks.shape[:-2], c - m, c))], axis=-2)
    return np.linalg.qr(blocks, mode="r")


def group_factors(rows: np.ndarray, starts: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """(C, c, c): the R factor of each group's block of `rows`; groups of similar size are padded with
    zero rows (which leave an R factor unchanged) and factored together."""
    C, c = len(counts), rows.shape[1]
    out = np.zeros((C, c, c))
    order = np.argsort(counts, kind="stable")
    i = 0
    while i < C:
        j = i + 1
        smallest = counts[order[i]]
        while (j < C and counts[order[j]] <= PAD_RATIO * smallest + 1
               and (j - i + 1) * counts[order[j]] <= BATCH_ROWS):
            j += 1
        ids = order[i:j]
        m = int(counts[ids].max())
        at = np.arange(m)
        real = at < counts[ids][:, None]
        where = np.where(real, starts[ids][:, None] + at, 0)
        out[ids] = r_factor(np.where(real[..., None], rows[where], 0.0))
        i = j
    return out


def leave_one_out(F: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(the R factor of every factor but the g-th, for each g (C, c, c); the R factor of all (c, c)).

    A binary tree of merged factors: group g's complement is the merge of the siblings on its path
    to the root, so no sum is ever taken back out (no cancellation) and the cost is C·log C small QRs.
    """
    C, c, _ = F.shape
    size = 1 << max(C - 1, 0).bit_length()
    level = np.zeros((size, c, c))
    level[:C] = F
    levels = [level]
    while level.shape[0] > 1:
        level = r_factor(level.reshape(level.shape[0] // 2, 2 * c, c))
        levels.append(level)
    at = np.arange(C)
    siblings = [lv[(at >> depth) ^ 1] for depth, lv in enumerate(levels[:-1])]
    if not siblings:
        return np.zeros((C, c, c)), levels[-1][0]
    return r_factor(np.concatenate(siblings, axis=1)), levels[-1][0]


def _flat_groups(F: np.ndarray, blocks: CentredBlocks) -> np.ndarray:
    """(C,) bool: groups where an input's centred column is (nearly) a combination of the others."""
    k = F.shape[1] - 1
    norms = np.sqrt(np.add.reduceat(blocks.rows[:, :k] ** 2, blocks.starts, axis=0))
    diag = np.abs(np.diagonal(F, axis1=1, axis2=2)[:, :k])
    return ((norms == 0) | (diag <= COLLINEAR_TOL * norms)).any(axis=1)


@dataclass(frozen=True)
class _Groups:
    """Per compared group, in scaled units: what every comparison against a reference set needs."""

    within: np.ndarray       # (C, k+1, k+1) factors of [Xc | yc] with the group's own RSS taken out
    S: np.ndarray            # (C, k, k) X_c'X_c
    sinv_diag: np.ndarray    # (C, k) diagonal of S_g⁻¹
    slope: np.ndarray        # (C, k)
    sigma2: np.ndarray       # (C,) own residual variance
    nu: np.ndarray           # (C,) own residual degrees of freedom
    pooled: float            # RSS_sep / df_sep
    df_sep: float
    level: float
    top: float               # the largest σ_h²: precisions are taken relative to 1/top
    relative: np.ndarray     # (C,) top/σ_h² (at most 1/eps; all 1 when every σ_h² is 0)


def _compare(F: np.ndarray, blocks: CentredBlocks, codes: np.ndarray, left_out: np.ndarray, weighted: bool,
             level: float, alpha: float, adjust: Callable[[np.ndarray], np.ndarray]) -> GroupComparison:
    """The tests, the reference set and the differences from the groups' factors (scaled until the end)."""
    C, k = len(codes), F.shape[1] - 1
    nu = (blocks.counts - k - 1).astype(np.float64)
    rss = F[:, k, k] ** 2
    Rinv = np.linalg.inv(F[:, :k, :k])
    within = F.copy()
    within[:, k, k] = 0.0                    # each group's own RSS left out: what pooling adds to it
    rss_sep, df_sep = float(rss.sum()), float(nu.sum())
    sigma2 = rss / nu
    top = float(sigma2.max())
    relative = top / np.maximum(sigma2, np.finfo(np.float64).eps * top) if top > 0 else np.ones(C)
    groups = _Groups(within, np.swapaxes(F[:, :k, :k], 1, 2) @ F[:, :k, :k], np.einsum("gij,gij->gi", Rinv, Rinv),
                     (Rinv @ F[:, :k, k:])[..., 0], sigma2, nu, rss_sep / df_sep if df_sep > 0 else np.nan,
                     df_sep, level, top, relative)
    everyone = r_factor(within.reshape(1, C * (k + 1), k + 1))[0]
    line = r_factor(np.vstack([everyone, blocks.between]))
    equal_slopes = _f_test(everyone[k, k] ** 2, (C - 1) * k, rss_sep, df_sep)
    common_line = _f_test(line[k, k] ** 2, (C - 1) * (k + 1), rss_sep, df_sep)
    variances = equal_variance_test(sigma2, nu)
    own_used = bool(np.isfinite(variances.pvalue) and variances.pvalue < alpha)
    member, used = _reference_set(groups, own_used, alpha, adjust)
    other = _against(groups, member, not own_used)           # the way the rule did not pick, same set
    common, own = (other, used) if own_used else (used, other)
    u = blocks.scale[k] / blocks.scale[:k]
    common_slope = np.linalg.solve(everyone[:k, :k], everyone[:k, k]) * u
    return GroupComparison("", left_out, codes, blocks.counts, groups.slope * u, common_slope, member,
                           sigma2 * blocks.scale[k] ** 2, equal_slopes, common_line, variances,
                           _unscaled(common, u), _unscaled(own, u), own_used, weighted, level, alpha)


def _reference_set(groups: _Groups, own_used: bool, alpha: float, adjust: Callable[[np.ndarray], np.ndarray]
                   ) -> tuple[np.ndarray, Differences]:
    """The reference set and every group's comparison against the other members (module docstring).
    Each round, set-aside groups no longer apart return; if none does, the members apart with the largest
    |t| at least half the largest leave (strongest first) while more than half of all groups stay. Once
    MAX_ROUNDS sets were tried or a set repeats, groups only return, so the loop ends."""
    C = len(groups.nu)
    member, seen, settled = np.ones(C, dtype=bool), set(), False
    while True:
        judged = _against(groups, member, own_used)
        apart = np.column_stack([adjust(judged.pvalue[:, j]) < alpha for j in range(judged.t.shape[1])])
        settled = settled or len(seen) >= MAX_ROUNDS or member.tobytes() in seen
        seen.add(member.tobytes())
        back = ~member & ~apart.any(axis=1)
        if back.any():
            member = member | back
            continue
        strength = np.where(apart & member[:, None], np.abs(judged.t), 0.0).max(axis=1)
        room = int(member.sum()) - (C // 2 + 1)
        if settled or not (strength > 0).any() or room <= 0:
            return member, judged
        strong = np.flatnonzero(strength >= strength.max() / 2.0)
        member[strong[np.argsort(-strength[strong], kind="stable")[:room]]] = False


def _against(groups: _Groups, member: np.ndarray, own: bool) -> Differences:
    """Each group against the slope of the OTHER members (own intercepts): pooled with equal weights and
    judged with the common variance, or (`own`) weighted by each group's precision and judged with each
    group's own variance (see the module docstring)."""
    C, k = groups.slope.shape
    idx = np.flatnonzero(member)
    rows = np.sqrt(groups.relative) if own else np.ones(C)
    others = _complements(rows[:, None, None] * groups.within, idx)
    Linv = np.linalg.inv(others[:, :k, :k])
    reference = (Linv @ others[:, :k, k:])[..., 0]
    U = Linv @ np.swapaxes(Linv, 1, 2)       # (Σ_{h≠g} r_h S_h)⁻¹ over the members, r_h 1 or top/σ_h²
    ref_var = np.einsum("gjj->gj", U)
    with np.errstate(divide="ignore", invalid="ignore"):
        if not own:
            var, df = groups.pooled * (groups.sinv_diag + ref_var), np.full((C, k), groups.df_sep)
        else:
            group = groups.sigma2[:, None] * groups.sinv_diag
            var = group + groups.top * ref_var
            df = var**2 / (group**2 / groups.nu[:, None] + groups.top**2 * _spread(groups, U, member))
    return _differences(groups.slope - reference, reference, np.sqrt(var), df, groups.level)


def _complements(F: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """(C, c, c): for a group in `idx` the merged factor of the others in `idx`, for the rest all of `idx`."""
    loo, root = leave_one_out(F[idx])
    out = np.broadcast_to(root, F.shape).copy()
    out[idx] = loo
    return out


def _spread(groups: _Groups, U: np.ndarray, member: np.ndarray) -> np.ndarray:
    """(C, k) Σ_h c̃_h²/ν_h over members h ≠ g, c̃_h = u'T_h u, u = U e_j, T_h = r_h S_h (so c_h = top·c̃_h):
    (u⊗u)'M(u⊗u) with M = Σ_h vec T_h vec T_hᵀ/ν_h over all members, less g's own term (C products, not C²)."""
    C, k = groups.slope.shape
    T = groups.relative[:, None, None] * groups.S
    share = np.where(member, 1.0 / groups.nu, 0.0)
    vec = T.reshape(C, k * k)
    M = np.einsum("g,gi,gj->ij", share, vec, vec)
    uu = np.einsum("gji,gjl->gjil", U, U).reshape(C, k, k * k)       # row j of U is u (U symmetric)
    total = np.einsum("gja,ab,gjb->gj", uu, M, uu)
    own = share[:, None] * np.einsum("gji,gil,gjl->gj", U, T, U) ** 2
    return np.maximum(total - own, 0.0)


def _unscaled(diff: Differences, u: np.ndarray) -> Differences:
    """`diff` in the data's units: slopes, std errors and interval ends times y's scale over the input's."""
    return Differences(diff.reference * u, diff.se * u, diff.df, diff.t, diff.pvalue, diff.low * u, diff.high * u)


def _differences(d: np.ndarray, reference: np.ndarray, se: np.ndarray, df: np.ndarray, level: float) -> Differences:
    """t, two-sided p-value and the interval at `level` of differences d with std errors se on df."""
    with np.errstate(divide="ignore", invalid="ignore"):
        t = d / se
        pvalue = 2.0 * stats.t.sf(np.abs(t), df)
        half = stats.t.ppf(0.5 + level / 2.0, df) * se
    return Differences(reference, se, df, t, pvalue, d - half, d + half)


def _f_test(extra: float, df1: float, rss: float, df2: float) -> OverallTest:
    """F = (extra RSS / df1) / (RSS / df2) with its upper-tail p-value (NaN when RSS or df2 is 0)."""
    if df2 <= 0 or rss <= 0 or df1 <= 0:
        return OverallTest(np.nan, float(df1), float(df2), np.nan)
    f = (extra / df1) / (rss / df2)
    return OverallTest(float(f), float(df1), float(df2), float(stats.f.sf(f, df1, df2)))


def equal_variance_test(sigma2: np.ndarray, nu: np.ndarray) -> OverallTest:
    """Bartlett's test that the residual variances σ_g² (each on ν_g degrees of freedom) are equal:
    χ² on C − 1 degrees of freedom (df2 NaN). One zero variance among non-zero ones gives p = 0."""
    C, total = len(nu), float(nu.sum())
    if C < 2 or not np.isfinite(sigma2).all() or not (sigma2 > 0).any():
        return OverallTest(np.nan, float(C - 1), np.nan, np.nan)
    if not (sigma2 > 0).all():
        return OverallTest(np.inf, float(C - 1), np.nan, 0.0)
    pooled = float((nu * sigma2).sum()) / total
    correction = 1.0 + (float((1.0 / nu).sum()) - 1.0 / total) / (3.0 * (C - 1))
    stat = (total * np.log(pooled) - float((nu * np.log(sigma2)).sum())) / correction
    return OverallTest(float(stat), float(C - 1), np.nan, float(stats.chi2.sf(stat, C - 1)))


def not_compared(reason: str, left_out: np.ndarray, k: int, weighted: bool, level: float,
                 alpha: float) -> GroupComparison:
    """A comparison that was not made, with the reason and what each group would have been."""
    k = max(k, 0)
    empty = np.zeros((0, k))
    none = Differences(empty, empty, empty, empty, empty, empty, empty)
    blank = OverallTest(np.nan, np.nan, np.nan, np.nan)
    no_groups = np.zeros(0, dtype=np.int64)
    return GroupComparison(reason, left_out, no_groups, no_groups, empty, np.full(k, np.nan),
                           np.zeros(0, dtype=bool), np.zeros(0), blank, blank, blank, none, none, False,
                           weighted, level, alpha)
