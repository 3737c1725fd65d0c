"""Ordinary least squares for every group in one batched engine call.

Groups are padded into 3-D arrays (zero rows change no least-squares solution) and solved
together by QR. Each group's design is first expressed in a well-conditioned working basis
W with X = W·T·diag(c) (see basis.py), so coefficients and covariance convert back exactly:
β = diag(c)⁻¹T⁻¹γ and (X'X)⁻¹ = diag(c)⁻¹(RT)⁻¹(RT)⁻ᵀdiag(c)⁻¹. X'X is never formed or inverted.

Padding rows repeat a real row's source values (so a term such as log(x) is defined there) and
are zero in W and y.

A weighted fit (weights w > 0 per row) is ordinary least squares of √w·y on √w·X: every batch
quantity (W, Q, y, resid, leverage, rss) is then of the weighted ("whitened") model, which is
what the checks test. Weights are scaled within each group to average 1, so the residual std
error is in the response's units for a row of average weight; a group whose weights are all
equal is fitted unweighted (the same estimates), so only groups with varying weights are whitened. y is divided by a power of two per group (`y_scale`) before anything is
squared; the scales c_j and y_scale are exact, so results keep their bits, and values near
1e±300 neither overflow nor vanish.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, fields

import numpy as np

from ..terms import Term
from .basis import (
    from_working,
    masked_absmax,
    pow2_exponent,
    pow2_scale,
    raw_residual,
    triangular_order,
    working_design,
)
from .row_measures import influence, scaled_weights, total_sum_of_squares
from .unfit import (
    coefficients_out_of_range,
    exactly_collinear,
    reasons_before_solving,
    values_out_of_range,
)

PAD_RATIO = 1.3             # groups in one batch differ in size by at most this factor
BATCH_ROWS = 400_000        # padded rows per batch, bounds memory


@dataclass(frozen=True)
class Batch:
    """Groups of similar size fitted together; arrays are padded to m rows.

    rows[g, i] indexes the engine's row arrays (−1 on padding). Units: y, resid and rss are
    those of y / y_scale; raw column j is col_scale[j] times column j of W·T, so
    X = W·T·diag(col_scale) and (X'X)⁻¹ = diag(col_scale)⁻¹·A·Aᵀ·diag(col_scale)⁻¹. Everything
    stored here is of order one, whatever the magnitude of the data. Only groups that could be
    fitted are in a batch. A batch has its own width p_b: `slots` says where its coefficients sit
    among the EngineFit's p slots (all of them for an ordinary fit).
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
    y: np.ndarray           # (G, m) y / y_scale
    resid: np.ndarray       # (G, m) residual / y_scale
    leverage: np.ndarray    # (G, m)
    rss: np.ndarray         # (G,) residual sum of squares / y_scale²
    y_scale: np.ndarray     # (G,) a power of two near the group's largest |y|
    col_scale: np.ndarray   # (G, p) a power of two per raw column (1 for the intercept)
    slots: np.ndarray       # (p,) positions of these coefficients among the EngineFit's slots
    extra_params: np.ndarray  # (G,) parameters estimated outside least squares (change points)
    sqrt_w: np.ndarray | None = None  # (G, m) √weight of a weighted batch (0 on padding); None: unweighted

    @property
    def raw_fitted(self) -> np.ndarray:
        """Fitted values / y_scale in the response's own units (not multiplied by √w); 0 on padding."""
        f = (self.y - self.resid) * self.mask
        if self.sqrt_w is None:
            return f
        return np.where(self.mask, f / np.where(self.mask, self.sqrt_w, 1.0), 0.0)

    @property
    def df_resid(self) -> np.ndarray:
        """Residual degrees of freedom per group (G,): n − own coefficients − extra parameters."""
        return self.n - self.Q.shape[2] - self.extra_params


@dataclass(frozen=True)
class EngineFit:
    """Per-group, per-coefficient and per-row results of the engine (arrays, no tables yet).

    p is the number of coefficient slots (the width of the arrays); a group may use only some of
    them (`active`), and may have parameters estimated outside least squares (`extra_params`,
    change points) that take residual degrees of freedom. Count parameters with `n_params`.
    """

    n_groups: int
    p: int
    intercept: bool
    fitted_ok: np.ndarray       # (G,) bool
    not_fitted_reason: np.ndarray  # (G,) object: '' when fitted
    n: np.ndarray               # (G,) usable rows
    beta: np.ndarray            # (G, p)
    se: np.ndarray              # (G, p)
    xtx_inv: np.ndarray         # (G, p, p); inf or 0 where a value is outside double precision
    y_scale: np.ndarray         # (G,) power of two: the sums of squares below are in its square
    rss_scaled: np.ndarray      # (G,) residual sum of squares / y_scale²
    tss_scaled: np.ndarray      # (G,) total sum of squares (centred with an intercept) / y_scale²
    df_resid: np.ndarray
    ymean: np.ndarray
    fitted: np.ndarray          # (N,) per engine row
    resid: np.ndarray
    leverage: np.ndarray
    studentized: np.ndarray     # externally studentized residual
    internal: np.ndarray        # internally studentized (standardized) residual
    cooks: np.ndarray
    batches: tuple[Batch, ...]
    active: np.ndarray          # (G, p) bool: the coefficient slots each group uses
    n_coef: np.ndarray          # (G,) int: active coefficients per group
    extra_params: np.ndarray    # (G,) int: parameters estimated outside least squares (change points)
    weights: np.ndarray | None = None       # (N,) weights as fitted (scaled to average 1 per group); None: unweighted
    weight_mean: np.ndarray | None = None   # (G,) the mean of the given weights each group's were divided by
    half_log_weights: np.ndarray | None = None  # (G,) ½·Σ log w of the scaled weights (log-likelihood term)

    @property
    def weighted(self) -> bool:
        """Whether this is a weighted least-squares fit."""
        return self.weights is not None

    @property
    def whitened_resid(self) -> np.ndarray:
        """(N,) residuals of the weighted model, √w·(y − ŷ) (the plain residuals when unweighted)."""
        return self.resid if self.weights is None else self.resid * np.sqrt(self.weights)

    @property
    def n_params(self) -> np.ndarray:
        """Estimated parameters per group (G,): active coefficients plus extra ones (what AIC/BIC count)."""
        return self.n_coef + self.extra_params

    @property
    def has_constant(self) -> np.ndarray:
        """(G,) bool: the group's model holds the constant (the intercept slot is active)."""
        if not self.intercept:
            return np.zeros(self.n_groups, dtype=bool)
        return self.active[:, 0].copy()

    @property
    def rss(self) -> np.ndarray:
        """Residual sum of squares (inf or 0 where it is outside double precision)."""
        with np.errstate(over="ignore", under="ignore", invalid="ignore"):
            return self.rss_scaled * self.y_scale**2

    @property
    def tss(self) -> np.ndarray:
        """Total sum of squares (inf or 0 where it is outside double precision)."""
        with np.errstate(over="ignore", under="ignore", invalid="ignore"):
            return self.tss_scaled * self.y_scale**2

    @property
    def sigma2(self) -> np.ndarray:
        """Residual variance (inf or 0 where it is outside double precision)."""
        with np.errstate(invalid="ignore", divide="ignore", over="ignore", under="ignore"):
            return self.rss_scaled / self.df_resid * self.y_scale**2


def group_bounds(codes: np.ndarray, n_groups: int) -> tuple[np.ndarray, np.ndarray]:
    """Start offset and row count of each group in rows sorted by group code."""
    counts = np.bincount(codes, minlength=n_groups)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    return starts, counts


def _batches(counts: np.ndarray, eligible: np.ndarray, weighted: np.ndarray | None = None) -> list[np.ndarray]:
    """Split eligible groups into batches of similar size (weighted and unweighted groups apart)."""
    kind = np.zeros(len(counts), dtype=bool) if weighted is None else weighted
    ids = np.flatnonzero(eligible)
    ids = ids[np.lexsort((counts[ids], kind[ids]))]
    out: list[np.ndarray] = []
    start = 0
    while start < len(ids):
        lo = counts[ids[start]]
        stop = start + 1
        while stop < len(ids):
            m = counts[ids[stop]]
            if (m > max(lo * PAD_RATIO, lo + 4) or m * (stop + 1 - start) > BATCH_ROWS
                    or kind[ids[stop]] != kind[ids[start]]):
                break
            stop += 1
        out.append(ids[start:stop])
        start = stop
    return out


def _pad(values: np.ndarray, rows: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Values on each group's rows; padding repeats the group's first row (a valid value for every term)."""
    return values[np.where(mask, rows, rows[:, :1])]


def fit_groups(y: np.ndarray, cols: Mapping[str, np.ndarray], codes: np.ndarray, n_groups: int,
               terms: Sequence[Term], intercept: bool, extra_params: np.ndarray | None = None,
               weights: np.ndarray | None = None) -> EngineFit:
    """Fit y on the terms for every group at once (weighted least squares when `weights` are given).

    Rows must be sorted by group code (and by sequence within a group); `cols` holds the
    source columns (float64, finite) the terms need, aligned with y. `extra_params` (G,) counts
    parameters estimated outside least squares per group (change points, default none): they
    reduce the residual degrees of freedom. `weights` (N,) must be positive and finite.
    """
    y = np.asarray(y, dtype=np.float64)
    p = len(terms) + (1 if intercept else 0)
    extra = (np.zeros(n_groups, dtype=np.int64) if extra_params is None
             else np.asarray(extra_params, dtype=np.int64))
    starts, counts = group_bounds(codes, n_groups)
    scaled = None if weights is None else scaled_weights(np.asarray(weights, dtype=np.float64), codes, n_groups)
    sw = None if scaled is None else np.sqrt(scaled[0])
    reason = reasons_before_solving(cols, terms, starts, counts, n_groups, p, intercept, extra)
    out = _Collected.empty(n_groups, p, len(y))
    for ids in _batches(counts, reason == "", None if scaled is None else scaled[2]):
        bsw = None if sw is None or not scaled[2][ids[0]] else sw
        solved = _fit_batch(y, cols, starts, counts, ids, terms, intercept, reason, extra, bsw)
        if solved is not None:
            out.add(*solved, p=p, intercept=intercept)
    fit = _engine_fit(out, reason, codes, counts, p, intercept, extra)
    if scaled is None:
        return fit
    half_log = 0.5 * np.bincount(codes, weights=np.log(scaled[0]), minlength=n_groups)
    return dataclasses.replace(fit, weights=scaled[0], weight_mean=scaled[1], half_log_weights=half_log)


@dataclass(frozen=True)
class _Part:
    """A batch's groups on their way to a solution: padded rows, working basis and (once factored) QR."""

    ids: np.ndarray
    rows: np.ndarray
    mask: np.ndarray
    n: np.ndarray
    yp: np.ndarray
    colp: dict[str, np.ndarray]
    W: np.ndarray
    T: np.ndarray
    scale: np.ndarray
    extra: np.ndarray
    sw: np.ndarray | None = None      # (G, m) √w of a weighted batch
    Q: np.ndarray | None = None
    R: np.ndarray | None = None

    def only(self, keep: np.ndarray) -> _Part:
        """The same with only the groups where `keep` is true."""
        if keep.all():
            return self
        sub = {f.name: getattr(self, f.name) for f in fields(self)}
        return _Part(**{k: None if v is None else {c: a[keep] for c, a in v.items()} if isinstance(v, dict)
                        else v[keep] for k, v in sub.items()})


def _pad_batch(y: np.ndarray, cols: Mapping[str, np.ndarray], starts: np.ndarray, counts: np.ndarray,
               ids: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, dict[str, np.ndarray]]:
    """A batch's rows padded to its largest group: mask, row indices, y (0 on padding) and source
    columns (the group's first row repeated on padding, so every term is defined there)."""
    m = int(counts[ids].max())
    offs = np.arange(m)[None, :]
    mask = offs < counts[ids][:, None]
    rows = np.where(mask, starts[ids][:, None] + offs, -1)
    yp = np.where(mask, _pad(y, rows, mask), 0.0)
    colp = {c: _pad(np.asarray(v, dtype=np.float64), rows, mask) for c, v in cols.items()}
    return mask, rows, yp, colp


def _fit_batch(y: np.ndarray, cols: Mapping[str, np.ndarray], starts: np.ndarray, counts: np.ndarray,
               ids: np.ndarray, terms: Sequence[Term], intercept: bool, reason: np.ndarray,
               extra: np.ndarray, sqrt_w: np.ndarray | None = None) -> tuple[Batch, np.ndarray, np.ndarray] | None:
    """Pad, factor and solve one batch; groups out of range or exactly collinear are dropped (reasons set).

    With `sqrt_w` (N,) the batch is weighted: its design and response are multiplied by √w."""
    mask, rows, yp, colp = _pad_batch(y, cols, starts, counts, ids)
    n = counts[ids]
    swp = None if sqrt_w is None else np.where(mask, _pad(sqrt_w, rows, mask), 0.0)
    W, T, scale = working_design(colp, mask, n, terms, intercept, swp)
    part = _Part(ids, rows, mask, n, yp, colp, W, T, scale, extra[ids], swp)
    part = part.only(~values_out_of_range(W, T, scale, ids, terms, intercept, reason))
    if not len(part.ids):
        return None
    Q, R = np.linalg.qr(part.W)
    part = dataclasses.replace(part, Q=Q, R=R)
    part = part.only(~exactly_collinear(part.W, R, part.ids, terms, intercept, reason))
    if not len(part.ids):
        return None
    solved = _solve_batch(part, terms, intercept)
    fitted = solved[0]
    bad = coefficients_out_of_range(solved[1], fitted.A, fitted.rss, fitted.df_resid, fitted.y_scale,
                                    fitted.col_scale, fitted.groups, terms, intercept, reason)
    if bad.any():                     # rare: solve again without them (groups are independent)
        part = part.only(~bad)
        if not len(part.ids):
            return None
        solved = _solve_batch(part, terms, intercept)
    return solved


def _solve_batch(part: _Part, terms: Sequence[Term], intercept: bool) -> tuple[Batch, np.ndarray, np.ndarray]:
    """Least squares of a factored batch, refined once: the batch, β·c/y_scale (G, p) and fitted values / y_scale."""
    ids, rows, mask, n, W, T, scale, yp, colp = (part.ids, part.rows, part.mask, part.n, part.W, part.T,
                                                 part.scale, part.yp, part.colp)
    Q, R, sw = part.Q, part.R, part.sw
    assert Q is not None and R is not None
    p = R.shape[-1]
    order = triangular_order(terms, intercept)
    y_raw = yp
    if sw is not None:
        yp = yp * sw
    y_scale = pow2_scale(masked_absmax(yp, mask))
    yp = yp / y_scale[:, None]
    qty = np.einsum("gmk,gm->gk", Q, yp)
    gamma = np.linalg.solve(R, qty[..., None])[..., 0]
    eye = np.broadcast_to(np.eye(p), R.shape)
    rinv = np.linalg.solve(R, eye)
    b = from_working(T, gamma[..., None], order)[..., 0]
    # One step of iterative refinement with the residual taken in the raw basis in
    # extended precision recovers digits lost between the working and the raw basis.
    # The refined fit's residual is r minus the projection of r, so it needs no second pass.
    if sw is None:
        r = raw_residual(colp, yp, mask, terms, intercept, b, scale)
    else:
        r = raw_residual(colp, y_raw / y_scale[:, None], mask, terms, intercept, b, scale) * sw
    qtr = np.einsum("gmk,gm->gk", Q, r)
    b = b + from_working(T, np.linalg.solve(R, qtr[..., None]), order)[..., 0]
    e = r - np.einsum("gmk,gk->gm", Q, qtr)
    A = from_working(T, rinv, order)
    h = (Q**2).sum(axis=2)
    r_ss = (e**2).sum(axis=1)
    batch = Batch(groups=ids, rows=rows, mask=mask, n=n, W=W, T=T, Q=Q, R=R, A=A, y=yp, resid=e, leverage=h,
                  rss=r_ss, y_scale=y_scale, col_scale=scale, slots=np.arange(p), extra_params=part.extra,
                  sqrt_w=sw)
    return batch, b, batch.raw_fitted


@dataclass
class _Collected:
    """The engine's output arrays, NaN until a solved batch fills its groups and rows."""

    beta: np.ndarray
    se: np.ndarray
    xtx_inv: np.ndarray
    y_scale: np.ndarray
    rss: np.ndarray          # / y_scale²
    tss: np.ndarray          # / y_scale²
    ymean: np.ndarray
    fitted: np.ndarray
    resid: np.ndarray
    resid_scaled: np.ndarray  # resid / y_scale of the row's group
    leverage: np.ndarray
    batches: list[Batch] = field(default_factory=list)

    @classmethod
    def empty(cls, n_groups: int, p: int, N: int) -> _Collected:
        """All-NaN arrays for G groups, p coefficients and N engine rows."""
        return cls(beta=np.full((n_groups, p), np.nan), se=np.full((n_groups, p), np.nan),
                   xtx_inv=np.full((n_groups, p, p), np.nan), y_scale=np.ones(n_groups),
                   rss=np.full(n_groups, np.nan), tss=np.full(n_groups, np.nan),
                   ymean=np.full(n_groups, np.nan), fitted=np.full(N, np.nan), resid=np.full(N, np.nan),
                   resid_scaled=np.full(N, np.nan), leverage=np.full(N, np.nan))

    def add(self, batch: Batch, b: np.ndarray, fit: np.ndarray, *, p: int, intercept: bool) -> None:
        """Store a solved batch's per-group and per-row results, back in the units of the data.

        Scaled values are multiplied by powers of two only: exact, unless the true value is
        outside double precision (then inf or 0, silently).
        """
        ids, mask, rows, n, r_ss = batch.groups, batch.mask, batch.rows, batch.n, batch.rss
        ys = batch.y_scale
        sw = batch.sqrt_w
        raw_resid = batch.resid if sw is None else np.where(mask, batch.resid / np.where(mask, sw, 1.0), 0.0)
        raw_y = batch.y if sw is None else np.where(mask, batch.y / np.where(mask, sw, 1.0), 0.0)
        ey, ec = pow2_exponent(ys)[:, None], pow2_exponent(batch.col_scale)
        s2 = r_ss / (n - p - batch.extra_params)
        aat = batch.A @ np.swapaxes(batch.A, 1, 2)
        with np.errstate(over="ignore", under="ignore"):
            self.beta[ids] = np.ldexp(b, ey - ec)
            self.se[ids] = np.ldexp(np.sqrt(s2[:, None] * np.diagonal(aat, axis1=1, axis2=2)), ey - ec)
            self.xtx_inv[ids] = np.ldexp(aat, -ec[:, :, None] - ec[:, None, :])
            self.ymean[ids] = raw_y.sum(axis=1) / n * ys
            self.fitted[rows[mask]] = (fit * ys[:, None])[mask]
            self.resid[rows[mask]] = (raw_resid * ys[:, None])[mask]
        self.y_scale[ids] = ys
        self.rss[ids] = r_ss
        self.tss[ids] = total_sum_of_squares(batch.y, mask, sw, intercept)
        self.resid_scaled[rows[mask]] = batch.resid[mask]
        self.leverage[rows[mask]] = batch.leverage[mask]
        self.batches.append(batch)


def _engine_fit(out: _Collected, reason: np.ndarray, codes: np.ndarray, counts: np.ndarray,
                p: int, intercept: bool, extra: np.ndarray) -> EngineFit:
    """The EngineFit from the collected arrays, with the row influence measures they imply."""
    ok = reason == ""
    n_groups = len(counts)
    df_resid = (counts - p - extra).astype(np.float64)
    internal, external, cooks = influence(out.resid_scaled, out.leverage, codes, out.rss, df_resid, p)
    return EngineFit(n_groups=n_groups, p=p, intercept=intercept, fitted_ok=ok,
                     not_fitted_reason=reason, n=counts, beta=out.beta, se=out.se, xtx_inv=out.xtx_inv,
                     y_scale=out.y_scale, rss_scaled=out.rss, tss_scaled=out.tss, df_resid=df_resid,
                     ymean=out.ymean, fitted=out.fitted,
                     resid=out.resid, leverage=out.leverage, studentized=external, internal=internal,
                     cooks=cooks, batches=tuple(out.batches), active=np.ones((n_groups, p), dtype=bool),
                     n_coef=np.full(n_groups, p), extra_params=extra)
