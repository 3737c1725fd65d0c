"""Ordinary least squares for every group in one batched engine call.

Groups are padded into 3-D arrays (zero rows change no least-squares solution) and solved
together by QR. Each group's design is first expressed in a well-conditioned working basis
W with X = W·T (see basis.py), so coefficients and covariance convert back exactly:
β = T⁻¹γ and (X'X)⁻¹ = (RT)⁻¹(RT)⁻ᵀ. X'X is never formed or inverted.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..terms import Term, coefficient_labels
from .basis import from_working, raw_residual, triangular_order, working_design

COLLINEAR_TOL = 1e-10       # |R_jj| / ‖W_j‖ below this: column j is a combination of the others
LEVERAGE_ONE_TOL = 1e-10    # leverage within this of 1: the row alone fixes a coefficient
PAD_RATIO = 1.3             # groups in one batch differ in size by at most this factor
BATCH_ROWS = 400_000        # padded rows per batch, bounds memory


@dataclass(frozen=True)
class Batch:
    """Groups of similar size fitted together; arrays are padded to m rows.

    rows[g, i] indexes the engine's row arrays (−1 on padding); X = W·T; (X'X)⁻¹ = A·Aᵀ.
    Only groups that could be fitted are in a batch.
    """

    groups: np.ndarray      # (G,) group ids
    rows: np.ndarray        # (G, m) row index or −1
    mask: np.ndarray        # (G, m) True on real rows
    n: np.ndarray           # (G,)
    W: np.ndarray           # (G, m, p) working design
    T: np.ndarray           # (G, p, p)
    Q: np.ndarray           # (G, m, p)
    R: np.ndarray           # (G, p, p)
    A: np.ndarray           # (G, p, p) = (R T)⁻¹
    y: np.ndarray           # (G, m)
    resid: np.ndarray       # (G, m)
    leverage: np.ndarray    # (G, m)
    rss: np.ndarray         # (G,)


@dataclass(frozen=True)
class EngineFit:
    """Per-group, per-coefficient and per-row results of the engine (arrays, no tables yet)."""

    n_groups: int
    p: int
    intercept: bool
    fitted_ok: np.ndarray       # (G,) bool
    not_fitted_reason: np.ndarray  # (G,) object: '' when fitted
    n: np.ndarray               # (G,) usable rows
    beta: np.ndarray            # (G, p)
    se: np.ndarray              # (G, p)
    xtx_inv: np.ndarray         # (G, p, p)
    rss: np.ndarray
    tss: np.ndarray
    df_resid: np.ndarray
    ymean: np.ndarray
    fitted: np.ndarray          # (N,) per engine row
    resid: np.ndarray
    leverage: np.ndarray
    studentized: np.ndarray     # externally studentized residual
    internal: np.ndarray        # internally studentized (standardized) residual
    cooks: np.ndarray
    batches: tuple[Batch, ...]

    @property
    def sigma2(self) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            return self.rss / self.df_resid


def group_bounds(codes: np.ndarray, n_groups: int) -> tuple[np.ndarray, np.ndarray]:
    """Start offset and row count of each group in rows sorted by group code."""
    counts = np.bincount(codes, minlength=n_groups)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    return starts, counts


def _batches(counts: np.ndarray, eligible: np.ndarray) -> list[np.ndarray]:
    """Split eligible groups into batches of similar size."""
    ids = np.flatnonzero(eligible)
    ids = ids[np.argsort(counts[ids], kind="stable")]
    out: list[np.ndarray] = []
    start = 0
    while start < len(ids):
        lo = counts[ids[start]]
        stop = start + 1
        while stop < len(ids):
            m = counts[ids[stop]]
            if m > max(lo * PAD_RATIO, lo + 4) or m * (stop + 1 - start) > BATCH_ROWS:
                break
            stop += 1
        out.append(ids[start:stop])
        start = stop
    return out


def _pad(values: np.ndarray, rows: np.ndarray, mask: np.ndarray) -> np.ndarray:
    out = values[np.where(mask, rows, 0)]
    out[~mask] = 0.0
    return out


def fit_groups(y: np.ndarray, cols: Mapping[str, np.ndarray], codes: np.ndarray, n_groups: int,
               terms: Sequence[Term], intercept: bool) -> EngineFit:
    """Fit y on the terms for every group at once.

    Rows must be sorted by group code (and by sequence within a group); `cols` holds the
    source columns (float64, finite) the terms need, aligned with y.
    """
    y = np.asarray(y, dtype=np.float64)
    p = len(terms) + (1 if intercept else 0)
    starts, counts = group_bounds(codes, n_groups)
    reason = _reasons_before_solving(cols, terms, starts, counts, n_groups, p, intercept)
    out = _Collected.empty(n_groups, p, len(y))
    for ids in _batches(counts, reason == ""):
        solved = _fit_batch(y, cols, starts, counts, ids, terms, intercept, reason)
        if solved is not None:
            out.add(*solved, p=p, intercept=intercept)
    return _engine_fit(out, reason, codes, counts, n_groups, p, intercept)


def _reasons_before_solving(cols: Mapping[str, np.ndarray], terms: Sequence[Term], starts: np.ndarray,
                            counts: np.ndarray, n_groups: int, p: int, intercept: bool) -> np.ndarray:
    """Why each group cannot be fitted, as far as is known before solving ('' where it may be)."""
    reason = np.full(n_groups, "", dtype=object)
    too_few = counts <= p
    for g in np.flatnonzero(too_few):
        reason[g] = (f"only {counts[g]} usable row{'s' if counts[g] != 1 else ''} for {p} "
                     f"coefficient{'s' if p != 1 else ''}; at least {p + 1} are needed")
    _constant_inputs(cols, terms, starts, counts, intercept, reason, ~too_few)
    return reason


def _pad_batch(y: np.ndarray, cols: Mapping[str, np.ndarray], starts: np.ndarray, counts: np.ndarray,
               ids: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    """A batch's rows padded to its largest group: mask, row indices, y and source columns."""
    m = int(counts[ids].max())
    offs = np.arange(m)[None, :]
    mask = offs < counts[ids][:, None]
    rows = np.where(mask, starts[ids][:, None] + offs, -1)
    yp = _pad(y, rows, mask)
    colp = {c: _pad(np.asarray(v, dtype=np.float64), rows, mask) for c, v in cols.items()}
    return mask, rows, yp, colp


def _fit_batch(y: np.ndarray, cols: Mapping[str, np.ndarray], starts: np.ndarray, counts: np.ndarray,
               ids: np.ndarray, terms: Sequence[Term], intercept: bool, reason: np.ndarray
               ) -> tuple[Batch, np.ndarray, np.ndarray, np.ndarray] | None:
    """Pad and factor one batch, drop its exactly collinear groups (reasons set), solve the rest."""
    mask, rows, yp, colp = _pad_batch(y, cols, starts, counts, ids)
    n = counts[ids]
    W, T = working_design(colp, mask, n, terms, intercept)
    Q, R = np.linalg.qr(W)
    bad = _exactly_collinear(W, R, ids, terms, intercept, reason)
    if bad.any():
        keep = ~bad
        if not keep.any():
            return None
        ids, mask, rows, yp, n, W, T, Q, R = (a[keep] for a in (ids, mask, rows, yp, n, W, T, Q, R))
        colp = {c: v[keep] for c, v in colp.items()}
    return _solve_batch(ids, rows, mask, n, W, T, Q, R, yp, colp, terms, intercept)


def _exactly_collinear(W: np.ndarray, R: np.ndarray, ids: np.ndarray, terms: Sequence[Term],
                       intercept: bool, reason: np.ndarray) -> np.ndarray:
    """(G,) bool: the batch's groups with a column that combines the others exactly; their reasons are set."""
    colnorm = np.sqrt((W**2).sum(axis=1))
    diag = np.abs(np.diagonal(R, axis1=1, axis2=2))
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = diag / np.where(colnorm > 0, colnorm, 1.0)
    bad = (ratio < COLLINEAR_TOL).any(axis=1)
    if bad.any():
        labels = coefficient_labels(terms, intercept)
        for gi in np.flatnonzero(bad):
            j = int(np.argmax(ratio[gi] < COLLINEAR_TOL))
            reason[ids[gi]] = (f"{labels[j]} is an exact linear combination of the other "
                               f"terms in this group (exact collinearity)")
    return bad


def _solve_batch(ids: np.ndarray, rows: np.ndarray, mask: np.ndarray, n: np.ndarray, W: np.ndarray,
                 T: np.ndarray, Q: np.ndarray, R: np.ndarray, yp: np.ndarray, colp: Mapping[str, np.ndarray],
                 terms: Sequence[Term], intercept: bool) -> tuple[Batch, np.ndarray, np.ndarray, np.ndarray]:
    """Least squares of a factored batch, refined once: the batch, β (G, p), (X'X)⁻¹ and fitted values."""
    p = R.shape[-1]
    order = triangular_order(terms, intercept)
    qty = np.einsum("gmk,gm->gk", Q, yp)
    gamma = np.linalg.solve(R, qty[..., None])[..., 0]
    eye = np.broadcast_to(np.eye(p), R.shape)
    rinv = np.linalg.solve(R, eye)
    b = from_working(T, gamma[..., None], order)[..., 0]
    # One step of iterative refinement with the residual taken in the raw basis in
    # extended precision recovers digits lost between the working and the raw basis.
    # The refined fit's residual is r minus the projection of r, so it needs no second pass.
    r = raw_residual(colp, yp, mask, terms, intercept, b)
    qtr = np.einsum("gmk,gm->gk", Q, r)
    b = b + from_working(T, np.linalg.solve(R, qtr[..., None]), order)[..., 0]
    e = r - np.einsum("gmk,gk->gm", Q, qtr)
    fit = (yp - e) * mask
    A = from_working(T, rinv, order)
    h = (Q**2).sum(axis=2)
    r_ss = (e**2).sum(axis=1)
    xi = A @ np.swapaxes(A, 1, 2)
    batch = Batch(groups=ids, rows=rows, mask=mask, n=n, W=W, T=T, Q=Q, R=R, A=A,
                  y=yp, resid=e, leverage=h, rss=r_ss)
    return batch, b, xi, fit


@dataclass
class _Collected:
    """The engine's output arrays, NaN until a solved batch fills its groups and rows."""

    beta: np.ndarray
    se: np.ndarray
    xtx_inv: np.ndarray
    rss: np.ndarray
    tss: np.ndarray
    ymean: np.ndarray
    fitted: np.ndarray
    resid: np.ndarray
    leverage: np.ndarray
    batches: list[Batch] = field(default_factory=list)

    @classmethod
    def empty(cls, n_groups: int, p: int, N: int) -> _Collected:
        """All-NaN arrays for G groups, p coefficients and N engine rows."""
        return cls(beta=np.full((n_groups, p), np.nan), se=np.full((n_groups, p), np.nan),
                   xtx_inv=np.full((n_groups, p, p), np.nan), rss=np.full(n_groups, np.nan),
                   tss=np.full(n_groups, np.nan), ymean=np.full(n_groups, np.nan),
                   fitted=np.full(N, np.nan), resid=np.full(N, np.nan), leverage=np.full(N, np.nan))

    def add(self, batch: Batch, b: np.ndarray, xi: np.ndarray, fit: np.ndarray, *, p: int,
            intercept: bool) -> None:
        """Store a solved batch's per-group and per-row results."""
        ids, mask, rows, yp, n, r_ss = batch.groups, batch.mask, batch.rows, batch.y, batch.n, batch.rss
        df = n - p
        s2 = r_ss / df
        self.beta[ids] = b
        self.se[ids] = np.sqrt(s2[:, None] * np.diagonal(xi, axis1=1, axis2=2))
        self.xtx_inv[ids] = xi
        self.rss[ids] = r_ss
        ym = (yp.sum(axis=1)) / n
        self.ymean[ids] = ym
        self.tss[ids] = (((yp - ym[:, None]) * mask) ** 2).sum(axis=1) if intercept else (yp**2).sum(axis=1)
        flat = rows[mask]
        self.fitted[flat] = fit[mask]
        self.resid[flat] = batch.resid[mask]
        self.leverage[flat] = batch.leverage[mask]
        self.batches.append(batch)


def _engine_fit(out: _Collected, reason: np.ndarray, codes: np.ndarray, counts: np.ndarray,
                n_groups: int, p: int, intercept: bool) -> EngineFit:
    """The EngineFit from the collected arrays, with the row influence measures they imply."""
    ok = reason == ""
    df_resid = (counts - p).astype(np.float64)
    internal, external, cooks = _influence(out.resid, out.leverage, codes, out.rss, df_resid, p)
    return EngineFit(n_groups=n_groups, p=p, intercept=intercept, fitted_ok=ok,
                     not_fitted_reason=reason, n=counts, beta=out.beta, se=out.se, xtx_inv=out.xtx_inv,
                     rss=out.rss, tss=out.tss, df_resid=df_resid, ymean=out.ymean, fitted=out.fitted,
                     resid=out.resid, leverage=out.leverage, studentized=external, internal=internal,
                     cooks=cooks, batches=tuple(out.batches))


def _constant_inputs(cols: Mapping[str, np.ndarray], terms: Sequence[Term], starts: np.ndarray,
                     counts: np.ndarray, intercept: bool, reason: np.ndarray, check: np.ndarray) -> None:
    """Mark groups where a source column takes one value (collinear with the intercept)."""
    nonempty = counts > 0
    for col in dict.fromkeys(t.column for t in terms):
        x = np.asarray(cols[col], dtype=np.float64)
        if len(x) == 0:
            continue
        idx = starts[nonempty]
        hi = np.full(len(counts), np.nan)
        lo = np.full(len(counts), np.nan)
        hi[nonempty] = np.maximum.reduceat(x, idx)
        lo[nonempty] = np.minimum.reduceat(x, idx)
        const = check & nonempty & (hi == lo) & (reason == "")
        if not intercept:
            const &= hi == 0
        for g in np.flatnonzero(const):
            reason[g] = (f"input {col} takes the same value ({_num(hi[g])}) in every usable row, "
                         f"so its effect cannot be estimated")


def _num(v: float) -> str:
    return f"{v:.6g}"


def _influence(resid: np.ndarray, h: np.ndarray, codes: np.ndarray, rss: np.ndarray,
               df_resid: np.ndarray, p: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Internally and externally studentized residuals and Cook's distance per row."""
    rss_r = rss[codes]
    df_r = df_resid[codes]
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = rss_r / df_r
        one_minus_h = 1.0 - h
        lev_one = one_minus_h < LEVERAGE_ONE_TOL
        one_minus_h = np.where(lev_one, np.nan, one_minus_h)
        internal = resid / np.sqrt(s2 * one_minus_h)
        s2_without = (rss_r - resid**2 / one_minus_h) / (df_r - 1)
        s2_without = np.where((df_r > 1) & (s2_without > 0), s2_without, np.nan)
        external = resid / np.sqrt(s2_without * one_minus_h)
        cooks = internal**2 * h / one_minus_h / p
    return internal, external, cooks


def design_row(terms: Sequence[Term], intercept: bool, source: Mapping[str, np.ndarray]) -> np.ndarray:
    """Raw design rows (k, p) for new values of the source columns (used for curves and predictions)."""
    first = next(iter(source.values()))
    k = len(np.atleast_1d(first))
    parts = [np.ones(k)] if intercept else []
    parts += [term.values(np.atleast_1d(source[term.column])) for term in terms]
    return np.column_stack(parts)
