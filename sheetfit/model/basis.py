"""The working basis of the engine: W with X = W·T, and the way back to raw coefficients.

Each group's design is expressed in a well-conditioned basis W (inputs centred and scaled; a
polynomial family 1, x, …, x^K is built from x scaled to [−1, 1]); T converts exactly back,
in extended precision, so the digits lost between the two bases are recovered.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from math import comb

import numpy as np

from ..terms import Term, polynomial_family


def working_design(cols: Mapping[str, np.ndarray], mask: np.ndarray, n: np.ndarray,
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


def raw_residual(colp: Mapping[str, np.ndarray], yp: np.ndarray, mask: np.ndarray,
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
