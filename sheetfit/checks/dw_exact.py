"""The exact null distribution of the Durbin–Watson statistic, by Imhof's (1961) inversion formula.

Under independent normal errors, with M = I − H the residual maker and A = DᵀD (D the first
differences), P(DW ≤ d) = P(Σ (λ_i − d)·z_i² ≤ 0), z_i independent N(0, 1) and λ_i the n − p
eigenvalues of M·A·M on the residual space (Durbin & Watson 1971). Imhof (1961, Biometrika
48:419–426) gives, with μ_i = λ_i − d,

    P(Σ μ_i z_i² ≤ 0) = ½ − (1/π) ∫₀^∞ sin θ(u) / (u·ρ(u)) du,
    θ(u) = ½ Σ arctan(μ_i u),   ρ(u) = Π (1 + μ_i² u²)^(1/4).

The eigenvalues: M·A·M = (DM)ᵀ(DM) has the non-zero eigenvalues of D·M·Dᵀ = DDᵀ − (DQ)(DQ)ᵀ,
an (n−1)×(n−1) matrix built from the engine's Q without forming M (padding rows are zero in
it); its n − p largest eigenvalues are the λ_i (the rest are the zeros of the fitted space).

The integral: with u = e^v the integrand sin θ/ρ is smooth, analytic in the strip |Im v| < π/2
and decays fast at both ends, so the trapezoidal rule on v converges exponentially; it runs for
all groups of a chunk at once. The part below the first node is added from the first-order
expansion ½·u·Σμ_i. Halving the nodes gives an error estimate; a group whose estimate exceeds
TRAPEZOID_TOL is integrated again with scipy.integrate.quad, and a group where that fails too
gets no exact value (the caller falls back to the beta approximation).

p is the width of the group's own design (its batch's columns). A change point is taken as
known (the usual practice): it fixes the segment columns of that design and adds no weight.
"""

from __future__ import annotations

import numpy as np
from scipy import integrate

from ..model.engine import Batch

STEP = 0.4              # largest trapezoid step in v = log u …
STEP_SQRT_K = 1.3       # … and at most 1.3/√k for k weights (the error falls like exp(−c/(h²k)))
LOW_START = 1e-4        # first node at u·max|μ| = LOW_START; below it a Taylor expansion in u
HIGH_LOG_RHO = 32.0     # last node where ρ(u) ≥ e^32 (the integrand is below 1e-14 beyond)
TRAPEZOID_TOL = 1e-3    # |full − half-node estimate| above this: integrate with quad instead (halving
                        # h takes an error e to about e⁴, so 1e-3 at 2h leaves far below 1e-9 at h)
QUAD_TOL = 1e-9         # quad's error estimate above this: no exact value
CHUNK_ELEMENTS = 2_000_000   # array elements per chunk of groups (bounds memory)


def exact_lower_tail(b: Batch, at: np.ndarray, dw: np.ndarray) -> np.ndarray:
    """P(DW ≤ dw) under independent normal errors for the batch's groups at positions `at`
    (dw given for those groups); NaN where the integration failed."""
    out = np.full(len(at), np.nan)
    if not len(at):
        return out
    m = int(b.n[at].max())
    step = max(1, CHUNK_ELEMENTS // (m * max(m, 200)))
    for s in range(0, len(at), step):
        sl = slice(s, s + step)
        lam, keep = dw_eigenvalues(b, at[sl])
        out[sl] = lower_tail(lam, keep, dw[sl])
    return out


def dw_eigenvalues(b: Batch, at: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues λ (len(at), m−1) of D·M·Dᵀ for the batch's groups at positions `at`, largest
    first (m the largest of their sizes), and a mask of the n − p that are the DW weights (the
    others are structural zeros and are set to 0)."""
    p = b.Q.shape[2]
    m = int(b.n[at].max())
    Q, mask = b.Q[at, :m], b.mask[at, :m]
    dmask = mask[:, 1:] & mask[:, :-1]                          # difference rows inside the group
    DQ = (Q[:, 1:] - Q[:, :-1]) * dmask[:, :, None]
    k = m - 1
    DDt = 2.0 * np.eye(k)[None] - np.eye(k, k=1)[None] - np.eye(k, k=-1)[None]
    DDt = DDt * (dmask[:, :, None] & dmask[:, None, :])
    lam = np.linalg.eigvalsh(DDt - DQ @ np.swapaxes(DQ, 1, 2))[:, ::-1]
    keep = np.arange(k)[None, :] < (b.n[at] - p)[:, None]
    return np.where(keep, lam, 0.0), keep


def lower_tail(lam: np.ndarray, keep: np.ndarray, d: np.ndarray) -> np.ndarray:
    """P(Σ (λ_i − d)·z_i² ≤ 0) per group (G,) for weights λ (G, k) where `keep`; NaN where it cannot be had."""
    out = np.full(len(d), np.nan)
    if not len(d):
        return out
    per_group = max(1, int(lam.shape[1] * 200))   # about 200 nodes at most
    step = max(1, CHUNK_ELEMENTS // per_group)
    for s in range(0, len(d), step):
        sl = slice(s, s + step)
        out[sl] = _lower_tail_chunk(lam[sl], keep[sl], d[sl])
    return out


def _range(mu: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """First and last node in v = log u per group (see the module docstring)."""
    a = np.sort(np.abs(mu), axis=1)[:, ::-1]
    big = a[:, 0]
    used = (a > 0).sum(axis=1)
    half = np.maximum(1, (used + 1) // 2)
    m_star = np.maximum(np.take_along_axis(a, (half - 1)[:, None], axis=1)[:, 0], 1e-3 * big)
    v_lo = np.log(LOW_START / big)
    v_hi = -np.log(m_star) + 2.0 * HIGH_LOG_RHO / half       # ρ ≥ e^(half·t/2) once u ≥ e^t / m_star
    return v_lo, np.maximum(v_hi, v_lo + 1.0)


def _below(mu: np.ndarray, v_lo: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Below the first node the integrand is a1·e^(v − v_lo) + a3·e^(3(v − v_lo)) (Taylor in u):
    sin θ/ρ = ½·S1·u − (S3/6 + S1³/48 + S1·S2/8)·u³ + O(u⁵), S_k = Σ μ^k. The nodes below v_lo
    then sum to h·(a1/(e^h − 1) + a3/(e^3h − 1)) and the integral to a1 + a3/3, so the rule
    runs on an unbounded grid and keeps its accuracy."""
    s1, s2, s3 = mu.sum(axis=1), (mu**2).sum(axis=1), (mu**3).sum(axis=1)
    u = np.exp(v_lo)
    return 0.5 * s1 * u, -(s3 / 6.0 + s1**3 / 48.0 + s1 * s2 / 8.0) * u**3


def _integrand(mu: np.ndarray, v: np.ndarray) -> np.ndarray:
    """sin θ(u)/ρ(u) at u = e^v, for mu (G, k) and nodes v (G, J) → (G, J)."""
    mu_u = mu[:, None, :] * np.exp(v)[:, :, None]
    theta = 0.5 * np.arctan(mu_u).sum(axis=2)
    log_rho = 0.25 * np.log1p(mu_u * mu_u).sum(axis=2)
    return np.sin(theta) * np.exp(-log_rho)


def _lower_tail_chunk(lam: np.ndarray, keep: np.ndarray, d: np.ndarray) -> np.ndarray:
    mu = np.where(keep, lam - d[:, None], 0.0)
    ok = (np.abs(mu).max(axis=1) > 0) & np.isfinite(d)
    out = np.full(len(d), np.nan)
    if not ok.any():
        return out
    mu = mu[ok]
    v_lo, v_hi = _range(mu)
    longest = np.minimum(STEP, STEP_SQRT_K / np.sqrt((mu != 0).sum(axis=1)))
    J = int(np.ceil(np.max((v_hi - v_lo) / longest) / 2.0)) * 2
    h = (v_hi - v_lo) / J
    v = v_lo[:, None] + h[:, None] * np.arange(J + 1)[None, :]
    f = _integrand(mu, v)
    f[:, -1] *= 0.5
    a1, a3 = _below(mu, v_lo)
    full = h * f.sum(axis=1) + h * (a1 / np.expm1(h) + a3 / np.expm1(3.0 * h))
    half = 2.0 * h * (f[:, ::2].sum(axis=1) + a1 / np.expm1(2.0 * h) + a3 / np.expm1(6.0 * h))  # J is even
    total = full
    for i in np.flatnonzero(~(np.abs(full - half) <= TRAPEZOID_TOL)):
        total[i] = _quad(mu[i], v_lo[i], v_hi[i]) + a1[i] + a3[i] / 3.0
    out[ok] = 0.5 - total / np.pi
    return out


def _quad(mu: np.ndarray, v_lo: float, v_hi: float) -> float:
    """The integral over [v_lo, v_hi] by scipy.integrate.quad; NaN when quad reports a problem."""
    mu = mu[mu != 0]

    def g(v: float) -> float:
        x = mu * np.exp(v)
        return float(np.sin(0.5 * np.arctan(x).sum()) * np.exp(-0.25 * np.log1p(x * x).sum()))

    value, err, _info, *message = integrate.quad(g, v_lo, v_hi, limit=400, epsabs=1e-11, epsrel=1e-10,
                                                full_output=1)
    return value if not message and err <= QUAD_TOL else float("nan")
