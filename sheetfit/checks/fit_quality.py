"""Does the model say anything, and on enough data: the model F-test, an R² threshold and rows per coefficient.

The F statistic and R² come from the inference stage; these checks only frame them as verdicts.
Parameters are counted per group: its active coefficients plus its change points (each an
estimated parameter, so it counts against the rows like a coefficient).
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
    """Usable rows per estimated parameter (the group's coefficients and change points) against a minimum."""
    G = fit.n_groups
    k = fit.n_params
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(fit.fitted_ok, fit.n / k, np.nan)
    note = np.full(G, "", dtype=object)
    for count, extra in {(int(a), int(c)) for a, c in zip(k[fit.fitted_ok], fit.extra_params[fit.fitted_ok])}:
        points = f", {extra} of them change point{'s' if extra != 1 else ''}" if extra else ""
        note[fit.fitted_ok & (k == count) & (fit.extra_params == extra)] = (
            f"usable rows per estimated coefficient ({count} coefficients{points})")
    return CheckResult(ENOUGH_ROWS, "enough data", "below", ratio, None, np.full(G, per_coefficient), note,
                       "few rows for the number of coefficients ({stat} rows per coefficient < {thr})")
