"""Ordinary least squares for every group in one batched engine call.

Groups are padded into 3-D arrays (zero rows change no least-squares solution) and solved
together by QR. Each group's design is first expressed in a well-conditioned working basis
W (inputs centred and scaled; a polynomial family 1, x, …, x^K is built from x scaled to
[−1, 1]) with X = W·T, so coefficients and covariance convert back exactly:
β = T⁻¹γ and (X'X)⁻¹ = (RT)⁻¹(RT)⁻ᵀ. X'X is never formed or inverted.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from math import comb

import numpy as np

from ..terms import Term, coefficient_labels, polynomial_family

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


def _working_design(cols: Mapping[str, np.ndarray], mask: np.ndarray, n: np.ndarray,
                    terms: Sequence[Term], intercept: bool) -> tuple[np.ndarray, np.ndarray]:
    """Working basis W (G, m, p) and T (G, p, p) with X = W·T for a batch."""
    G, m = mask.shape
    off = 1 if intercept else 0
    p = len(terms) + off
    W = np.zeros((G, m, p))
    T = np.zeros((G, p, p))
    maskf = mask.astype(np.float64)
    if intercept:
        W[:, :, 0] = maskf
        T[:, 0, 0] = 1.0
    nn = n.astype(np.float64)[:, None]
    family_z: dict[str, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
    for term in terms:
        col = term.column
        if intercept and col not in family_z and polynomial_family(terms, col):
            x = cols[col]
            hi = np.where(mask, x, -np.inf).max(axis=1)
            lo = np.where(mask, x, np.inf).min(axis=1)
            c, s = (hi + lo) / 2.0, (hi - lo) / 2.0
            z = (x - c[:, None]) / s[:, None] * maskf
            family_z[col] = (z, c, s)
    for j, term in enumerate(terms):
        k = off + j
        if term.column in family_z and term.kind in ("column", "power"):
            z, c, s = family_z[term.column]
            W[:, :, k] = z**term.power
            index_of_power = {t.power: off + i for i, t in enumerate(terms)
                              if t.column == term.column and t.kind in ("column", "power")}
            index_of_power[0] = 0
            for i in range(term.power + 1):
                T[:, index_of_power[i], k] = comb(term.power, i) * c ** (term.power - i) * s**i
            continue
        r = term.values(cols[term.column]) * maskf
        if intercept:
            mu = r.sum(axis=1, keepdims=True) / nn
            sd = np.sqrt((((r - mu) * maskf) ** 2).sum(axis=1, keepdims=True) / nn)
        else:
            mu = np.zeros((G, 1))
            sd = np.sqrt((r**2).sum(axis=1, keepdims=True) / nn)
        sd = np.where(sd > 0, sd, 1.0)
        W[:, :, k] = (r - mu) / sd * maskf
        T[:, k, k] = sd[:, 0]
        if intercept:
            T[:, 0, k] = mu[:, 0]
    return W, T


def fit_groups(y: np.ndarray, cols: Mapping[str, np.ndarray], codes: np.ndarray, n_groups: int,
               terms: Sequence[Term], intercept: bool) -> EngineFit:
    """Fit y on the terms for every group at once.

    Rows must be sorted by group code (and by sequence within a group); `cols` holds the
    source columns (float64, finite) the terms need, aligned with y.
    """
    y = np.asarray(y, dtype=np.float64)
    N = len(y)
    p = len(terms) + (1 if intercept else 0)
    starts, counts = group_bounds(codes, n_groups)
    reason = np.full(n_groups, "", dtype=object)
    too_few = counts <= p
    for g in np.flatnonzero(too_few):
        reason[g] = (f"only {counts[g]} usable row{'s' if counts[g] != 1 else ''} for {p} "
                     f"coefficient{'s' if p != 1 else ''}; at least {p + 1} are needed")
    _constant_inputs(cols, terms, starts, counts, intercept, reason, ~too_few)
    eligible = reason == ""

    beta = np.full((n_groups, p), np.nan)
    se = np.full((n_groups, p), np.nan)
    xtx_inv = np.full((n_groups, p, p), np.nan)
    rss = np.full(n_groups, np.nan)
    tss = np.full(n_groups, np.nan)
    ymean = np.full(n_groups, np.nan)
    fitted = np.full(N, np.nan)
    resid = np.full(N, np.nan)
    leverage = np.full(N, np.nan)
    batches: list[Batch] = []

    for ids in _batches(counts, eligible):
        m = int(counts[ids].max())
        offs = np.arange(m)[None, :]
        mask = offs < counts[ids][:, None]
        rows = np.where(mask, starts[ids][:, None] + offs, -1)
        yp = _pad(y, rows, mask)
        colp = {c: _pad(np.asarray(v, dtype=np.float64), rows, mask) for c, v in cols.items()}
        n = counts[ids]
        W, T = _working_design(colp, mask, n, terms, intercept)
        order = _triangular_order(terms, intercept)
        Q, R = np.linalg.qr(W)
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
            keep = ~bad
            if not keep.any():
                continue
            ids, mask, rows, yp, n, W, T, Q, R = (a[keep] for a in (ids, mask, rows, yp, n, W, T, Q, R))
        qty = np.einsum("gmk,gm->gk", Q, yp)
        gamma = np.linalg.solve(R, qty[..., None])[..., 0]
        fit = np.einsum("gmk,gk->gm", Q, qty)
        e = (yp - fit) * mask
        eye = np.broadcast_to(np.eye(p), R.shape)
        rinv = np.linalg.solve(R, eye)
        b = _from_working(T, gamma[..., None], order)[..., 0]
        # One step of iterative refinement with the residual taken in the raw basis in
        # extended precision recovers digits lost between the working and the raw basis.
        # The refined fit's residual is r minus the projection of r, so it needs no second pass.
        r = _raw_residual(colp, yp, mask, terms, intercept, b)
        qtr = np.einsum("gmk,gm->gk", Q, r)
        b = b + _from_working(T, np.linalg.solve(R, qtr[..., None]), order)[..., 0]
        e = r - np.einsum("gmk,gk->gm", Q, qtr)
        fit = (yp - e) * mask
        A = _from_working(T, rinv, order)
        h = (Q**2).sum(axis=2)
        r_ss = (e**2).sum(axis=1)
        xi = A @ np.swapaxes(A, 1, 2)
        df = n - p
        s2 = r_ss / df
        beta[ids] = b
        se[ids] = np.sqrt(s2[:, None] * np.diagonal(xi, axis1=1, axis2=2))
        xtx_inv[ids] = xi
        rss[ids] = r_ss
        ym = (yp.sum(axis=1)) / n
        ymean[ids] = ym
        tss[ids] = (((yp - ym[:, None]) * mask) ** 2).sum(axis=1) if intercept else (yp**2).sum(axis=1)
        flat = rows[mask]
        fitted[flat] = fit[mask]
        resid[flat] = e[mask]
        leverage[flat] = h[mask]
        batches.append(Batch(groups=ids, rows=rows, mask=mask, n=n, W=W, T=T, Q=Q, R=R, A=A,
                             y=yp, resid=e, leverage=h, rss=r_ss))

    ok = reason == ""
    df_resid = (counts - p).astype(np.float64)
    internal, external, cooks = _influence(resid, leverage, codes, rss, df_resid, p)
    return EngineFit(n_groups=n_groups, p=p, intercept=intercept, fitted_ok=ok,
                     not_fitted_reason=reason, n=counts, beta=beta, se=se, xtx_inv=xtx_inv,
                     rss=rss, tss=tss, df_resid=df_resid, ymean=ymean, fitted=fitted, resid=resid,
                     leverage=leverage, studentized=external, internal=internal, cooks=cooks,
                     batches=tuple(batches))


def _solve_back(R: np.ndarray, T: np.ndarray, qty: np.ndarray) -> np.ndarray:
    """β = T⁻¹ R⁻¹ Qᵀy for a batch."""
    gamma = np.linalg.solve(R, qty[..., None])
    return np.linalg.solve(T, gamma)[..., 0]


def _raw_design(colp: Mapping[str, np.ndarray], mask: np.ndarray, terms: Sequence[Term],
                intercept: bool) -> np.ndarray:
    """The design X in the raw basis for a padded batch (zeros on padding)."""
    maskf = mask.astype(np.float64)
    parts = [maskf] if intercept else []
    parts += [np.where(mask, term.values(colp[term.column]), 0.0) for term in terms]
    return np.stack(parts, axis=2)


def _raw_residual(colp: Mapping[str, np.ndarray], yp: np.ndarray, mask: np.ndarray,
                  terms: Sequence[Term], intercept: bool, b: np.ndarray) -> np.ndarray:
    """y − Xβ in long double from the raw source values (zeros on padding)."""
    acc = yp.astype(np.longdouble)
    if intercept:
        acc -= b[:, :1].astype(np.longdouble)
    off = 1 if intercept else 0
    for j, term in enumerate(terms):
        x = term.values(colp[term.column]) if term.kind in ("log", "sqrt") else None
        if x is None:
            x = colp[term.column].astype(np.longdouble) ** term.power
        acc -= x * b[:, off + j : off + j + 1].astype(np.longdouble)
    return np.where(mask, acc, 0.0).astype(np.float64)


def _triangular_order(terms: Sequence[Term], intercept: bool) -> np.ndarray:
    """Column order that makes every T upper triangular (intercept, then by power)."""
    keys = ([-1] if intercept else []) + [t.power if t.kind in ("column", "power") else 0
                                         for t in terms]
    return np.argsort(np.array(keys), kind="stable")


def _from_working(T: np.ndarray, B: np.ndarray, order: np.ndarray) -> np.ndarray:
    """Solve T·X = B for a batch by back substitution in extended precision.

    T is upper triangular after permuting rows and columns by `order`; its entries (binomial
    shifts of a polynomial family) can be large, so the conversion from the working basis to
    the raw coefficients runs in long double to keep the last digits.
    """
    Tp = T[:, order][:, :, order].astype(np.longdouble)
    Bp = B[:, order].astype(np.longdouble)
    p = Tp.shape[1]
    X = np.zeros_like(Bp)
    for i in range(p - 1, -1, -1):
        acc = Bp[:, i] - np.einsum("gk,gk...->g...", Tp[:, i, i + 1:], X[:, i + 1:])
        X[:, i] = acc / Tp[:, i, i][:, None]
    out = np.empty(B.shape, dtype=np.float64)
    out[:, order] = X.astype(np.float64)
    return out


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
