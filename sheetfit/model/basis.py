"""The working basis of the engine: W with X = W·T·diag(c), and the way back to raw coefficients.

Each group's design is expressed in a well-conditioned basis W (inputs centred and scaled; a
polynomial family 1, x, …, x^K is built from x scaled to [−1, 1]); T converts exactly back,
in extended precision, so the digits lost between the two bases are recovered.

Every raw column j is first divided by a power of two c_j near its largest |value| (exact), so no
raw value is squared or multiplied before it is of order one: values near 1e±300 (or subnormal)
neither overflow nor vanish, and T is of order one. The raw design is X = W·T·diag(c).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from math import comb

import numpy as np

from ..terms import INDICATOR, PRODUCT, Term, polynomial_family, term_values


def pow2_scale(a: np.ndarray) -> np.ndarray:
    """A power of two s with |a|/s in [1, 2) (1 where a is 0 or not finite); dividing by s is exact."""
    a = np.abs(np.asarray(a, dtype=np.float64))
    ok = np.isfinite(a) & (a > 0)
    _, e = np.frexp(np.where(ok, a, 1.0))
    return np.where(ok, np.ldexp(1.0, e - 1), 1.0)


def pow2_exponent(s: np.ndarray) -> np.ndarray:
    """k with s = 2**k for powers of two s (as pow2_scale gives); np.ldexp(v, k) is then v·s, exactly."""
    return np.frexp(s)[1] - 1


def masked_absmax(v: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Largest |value| over each group's real rows (G,)."""
    return np.where(mask, np.abs(v), 0.0).max(axis=1)


def working_design(cols: Mapping[str, np.ndarray], mask: np.ndarray, n: np.ndarray,
                   terms: Sequence[Term], intercept: bool, sqrt_w: np.ndarray | None = None
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Working basis W (G, m, p), T (G, p, p) and column scales c (G, p) with X = W·T·diag(c) for a batch.

    Source columns must hold a valid value (inside every term's domain) on padding rows too;
    W is zero there. c_j is a power of two (1 for the intercept); a column whose values or scale
    fall outside double precision shows as a non-finite or zero c_j. With `sqrt_w` (G, m) the
    basis is of the weighted design, √w·X = W·T·diag(c): columns are centred and scaled by the
    weighted mean and spread, then multiplied by √w.
    """
    G, m = mask.shape
    off = 1 if intercept else 0
    p = len(terms) + off
    W = np.zeros((G, m, p))
    T = np.zeros((G, p, p))
    scale = np.ones((G, p))
    maskf = mask.astype(np.float64)
    wt = maskf if sqrt_w is None else sqrt_w**2          # each row's weight in the centring (0 on padding)
    if intercept:
        W[:, :, 0] = maskf
        T[:, 0, 0] = 1.0
    nn = n.astype(np.float64)[:, None] if sqrt_w is None else wt.sum(axis=1)[:, None]
    family = _family_bases(cols, mask, terms, intercept)
    for j, term in enumerate(terms):
        k = off + j
        if term.column in family and term.kind in ("column", "power"):
            _family_column(W, T, scale, family[term.column], terms, term, k, off)
            continue
        r = np.where(mask, term_values(term, cols), 0.0)
        c = pow2_scale(masked_absmax(r, mask))
        r = r / c[:, None]
        if intercept:
            mu = (r * wt).sum(axis=1, keepdims=True) / nn
            sd = np.sqrt(((((r - mu) * maskf) ** 2) * wt).sum(axis=1, keepdims=True) / nn)
        else:
            mu = np.zeros((G, 1))
            sd = np.sqrt((r**2 * wt).sum(axis=1, keepdims=True) / nn)
        sd = np.where(sd > 0, sd, 1.0)
        W[:, :, k] = (r - mu) / sd * maskf
        T[:, k, k] = sd[:, 0]
        if intercept:
            T[:, 0, k] = mu[:, 0]
        scale[:, k] = c
    if sqrt_w is not None:
        W *= sqrt_w[:, :, None]
    return W, T, scale


def _family_bases(cols: Mapping[str, np.ndarray], mask: np.ndarray, terms: Sequence[Term], intercept: bool
                  ) -> dict[str, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]:
    """Per polynomial family: z = (x − centre)/half-range on [−1, 1], and centre, half-range and a
    power of two a near max(|centre|, half-range), each of the last three as (G,)."""
    out = {}
    if not intercept:
        return out
    maskf = mask.astype(np.float64)
    for term in terms:
        col = term.column
        if col in out or not polynomial_family(terms, col):
            continue
        x = cols[col]
        hi = np.where(mask, x, -np.inf).max(axis=1)
        lo = np.where(mask, x, np.inf).min(axis=1)
        c, s = hi / 2.0 + lo / 2.0, hi / 2.0 - lo / 2.0      # halves first: no overflow near 1e308
        z = (x - c[:, None]) / s[:, None] * maskf
        out[col] = (z, c, s, pow2_scale(np.maximum(np.abs(c), s)))
    return out


def _family_column(W: np.ndarray, T: np.ndarray, scale: np.ndarray,
                   basis: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray],
                   terms: Sequence[Term], term: Term, k: int, off: int) -> None:
    """Column k of a polynomial family: W = z^K; x^K = Σ C(K,i)·c^(K−i)·s^i·z^i, in units of a^K."""
    z, c, s, a = basis
    K = term.power
    W[:, :, k] = z**K
    index_of_power = {t.power: off + i for i, t in enumerate(terms)
                      if t.column == term.column and t.kind in ("column", "power")}
    index_of_power[0] = 0
    ca, sa = c / a, s / a
    for i in range(K + 1):
        T[:, index_of_power[i], k] = comb(K, i) * ca ** (K - i) * sa**i
    with np.errstate(over="ignore", under="ignore"):
        scale[:, k] = a**K       # inf or 0 when x^K is outside double precision


def raw_residual(colp: Mapping[str, np.ndarray], yp: np.ndarray, mask: np.ndarray, terms: Sequence[Term],
                 intercept: bool, b: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """y − Σ_j (X_j / c_j)·b_j in long double from the raw source values (zeros on padding).

    `yp` and `b` are in the units the caller chose (y divided by its scale); column j of the raw
    design is divided by its scale c_j, so b holds β_j·c_j in those units.
    """
    acc = yp.astype(np.longdouble)
    if intercept:
        acc -= b[:, :1].astype(np.longdouble)
    off = 1 if intercept else 0
    for j, term in enumerate(terms):
        if term.kind == PRODUCT:     # the product itself in long double: no rounding before the residual
            other = term_values(dataclasses.replace(term, column=term.by, kind=INDICATOR), colp) if term.code >= 0 \
                else colp[term.by]
            x = colp[term.column].astype(np.longdouble) * np.asarray(other).astype(np.longdouble)
        elif term.kind in ("log", "sqrt", INDICATOR):
            x = term.values(colp[term.column]).astype(np.longdouble)
        else:
            x = colp[term.column].astype(np.longdouble) ** term.power
        x = x / scale[:, off + j : off + j + 1].astype(np.longdouble)
        acc -= x * b[:, off + j : off + j + 1].astype(np.longdouble)
    return np.where(mask, acc, 0.0).astype(np.float64)


def triangular_order(terms: Sequence[Term], intercept: bool) -> np.ndarray:
    """Column order that makes every T upper triangular (intercept, then by power)."""
    keys = ([-1] if intercept else []) + [t.power if t.kind in ("column", "power") else 0
                                         for t in terms]
    return np.argsort(np.array(keys), kind="stable")


def from_working(T: np.ndarray, B: np.ndarray, order: np.ndarray) -> np.ndarray:
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
