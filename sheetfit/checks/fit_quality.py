"""Does the model say anything, and on enough data: the model F-test, an R² threshold and rows per coefficient.

The F statistic and R² come from the inference stage; these checks only frame them as verdicts.
"""

from __future__ import annotations

import numpy as np

from ..model.engine import EngineFit
from .result import CheckResult

F_TEST = "f_test"
R_SQUARED = "r2"
ENOUGH_ROWS = "rows"


def model_f_test(fit: EngineFit, f: np.ndarray, f_p: np.ndarray) -> CheckResult:
    """The model F-test (classic, or robust Wald when --inference robust replaces it): fails when p >= alpha."""
    G = fit.n_groups
    note = np.full(G, "", dtype=object)
    note[fit.fitted_ok] = "fails when the inputs explain no more than chance would"
    return CheckResult(F_TEST, "model F-test", "p_large", f, f_p, np.full(G, np.nan), note,
                       "the inputs explain no more than chance would (F-test, {p})")


def r_squared(fit: EngineFit, r2: np.ndarray, min_r2: float) -> CheckResult:
    """R² against the --min-r2 setting."""
    G = fit.n_groups
    note = np.full(G, "", dtype=object)
    note[fit.fitted_ok] = "threshold is a setting (--min-r2); what counts as weak depends on the field"
    return CheckResult(R_SQUARED, "R² below threshold", "below", r2, None, np.full(G, min_r2), note,
                       "weak fit: R² = {stat} is below {thr}")


def enough_rows(fit: EngineFit, per_coefficient: float) -> CheckResult:
    """Usable rows per estimated coefficient against a minimum."""
    G = fit.n_groups
    ratio = np.where(fit.fitted_ok, fit.n / fit.p, np.nan)
    note = np.full(G, "", dtype=object)
    note[fit.fitted_ok] = f"usable rows per estimated coefficient ({fit.p} coefficients)"
    return CheckResult(ENOUGH_ROWS, "enough data", "below", ratio, None, np.full(G, per_coefficient), note,
                       "few rows for the number of coefficients ({stat} rows per coefficient < {thr})")
