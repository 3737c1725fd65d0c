"""Energy-baseline criteria: is the fit good enough to stand in for a site's use in a savings estimate?

Three checks, applied when the run asks for them (with --change-point, or --baseline-checks):
CV(RMSE) at most a limit, |NMBE| at most a limit and R² at least a limit. Both CV(RMSE) and NMBE
use n − p in the denominator, p counting change points too, as the measurement-and-verification
guidelines define them: CV(RMSE) = 100·√(RSS/(n − p))/ȳ and NMBE = 100·Σ(y − ŷ)/((n − p)·ȳ).
Defaults (20 %, 0.5 %, 0.75) are common practice for monthly energy baselines; a project's
measurement-and-verification plan may set others. With a constant in the model the residuals
sum to zero, so NMBE is zero up to rounding: it matters for fits through the origin.
"""

from __future__ import annotations

import numpy as np

from ..model.engine import EngineFit
from .result import CheckResult

CV_RMSE_LIMIT = "baseline_cv_rmse"
NMBE_LIMIT = "baseline_nmbe"
BASELINE_R2 = "baseline_r2"
BASELINE_CHECKS = (CV_RMSE_LIMIT, NMBE_LIMIT, BASELINE_R2)


def nmbe(fit: EngineFit, codes: np.ndarray) -> np.ndarray:
    """Normalised mean bias error in % per group: 100·Σ(y − ŷ)/((n − p)·ȳ); NaN where undefined."""
    G = fit.n_groups
    resid_sum = np.bincount(codes, weights=np.where(np.isfinite(fit.resid), fit.resid, 0.0), minlength=G)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = 100.0 * resid_sum / (fit.df_resid * fit.ymean)
    return np.where(fit.fitted_ok & (fit.df_resid > 0) & (fit.ymean != 0), out, np.nan)


def _note(fit: EngineFit, text: str) -> np.ndarray:
    note = np.full(fit.n_groups, "", dtype=object)
    note[fit.fitted_ok] = text
    return note


def baseline_checks(fit: EngineFit, cv_rmse: np.ndarray, r2: np.ndarray, codes: np.ndarray,
                    max_cv_rmse: float, max_nmbe: float, min_r2: float) -> list[CheckResult]:
    """The three baseline criteria as checks (statistic against a settable limit)."""
    G = fit.n_groups
    bias = nmbe(fit, codes)
    no_mean = fit.fitted_ok & ~(np.abs(fit.ymean) > 0)
    cv_note = _note(fit, "CV(RMSE) = 100·residual std error / mean response; limit is a setting "
                         "(--max-cv-rmse, common practice for monthly energy baselines)")
    cv_note[no_mean] = "undefined: the mean response is zero"
    return [
        CheckResult(CV_RMSE_LIMIT, "baseline: CV(RMSE) within limit", "above", cv_rmse, None,
                    np.full(G, max_cv_rmse), cv_note,
                    "too much scatter for a baseline: CV(RMSE) = {stat} % is above {thr} %"),
        CheckResult(NMBE_LIMIT, "baseline: NMBE within limit", "above", np.abs(bias), None,
                    np.full(G, max_nmbe),
                    _note(fit, "|NMBE| = |100·Σ(y − ŷ)/((n − p)·mean response)|; limit is a setting "
                               "(--max-nmbe, common practice)"),
                    "the baseline is biased: |NMBE| = {stat} % is above {thr} %"),
        CheckResult(BASELINE_R2, "baseline: R² at least limit", "below", r2, None, np.full(G, min_r2),
                    _note(fit, "limit is a setting (--baseline-min-r2, common practice for energy baselines)"),
                    "the baseline explains too little of the use: R² = {stat} is below {thr}"),
    ]
