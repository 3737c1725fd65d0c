"""Check and flag: assumption tests, influence, collinearity and robust errors; verdicts adjusted across groups.

One module per family of checks (fit_quality, normality, variance, independence, linear_form,
influence, collinearity), each returning `CheckResult`s (result.py); robust.py has the std errors
shown where variance or independence fails; verdicts.py turns results into pass/fail.
`run_checks` is the one list of checks every run applies, in the order the checks sheet shows them.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..job import Thresholds
from ..model.engine import EngineFit
from ..model.inference import Inference
from ..terms import Term
from . import (
    baseline,
    collinearity,
    fit_quality,
    independence,
    influence,
    lack_of_fit,
    linear_form,
    normality,
    robust,
    variance,
    verdicts,
)
from .fit_quality import model_f_test
from .result import CheckResult

__all__ = [
    "INDEPENDENCE_CHECKS",
    "VARIANCE_CHECKS",
    "CheckResult",
    "RowsInOrder",
    "collinearity",
    "influence",
    "model_f_test",
    "replace_check",
    "robust",
    "run_checks",
    "statistic_of",
    "verdicts",
]

VARIANCE_CHECKS = (variance.BREUSCH_PAGAN, variance.WHITE)                      # constant-variance tests
INDEPENDENCE_CHECKS = (independence.DURBIN_WATSON, independence.BREUSCH_GODFREY)  # independent-residuals tests


@dataclass(frozen=True)
class RowsInOrder:
    """Where each engine row came from and in what order the rows of a group were fitted."""

    codes: np.ndarray          # (N,) group code per engine row
    source_rows: np.ndarray    # (N,) spreadsheet row per engine row
    order_note: str            # 'rows in order of Month' or 'rows in input row order'
    design_keys: np.ndarray | None = None   # (N,) rows with the same input values share a key (lack of fit)


def run_checks(fit: EngineFit, inf: Inference, rows: RowsInOrder, terms: Sequence[Term],
               labels: Sequence[str], thr: Thresholds, judge_baseline: bool = False,
               ) -> tuple[list[CheckResult], np.ndarray]:
    """Every check of a run, and the VIF of each coefficient (G, p) for the coefficients sheet
    (the collinearity check itself judges inputs by their generalised VIF). `judge_baseline` adds
    the energy-baseline criteria (baseline.py) after the fit-quality checks."""
    vifs = collinearity.vif(fit)
    results = [
        fit_quality.model_f_test(fit, inf.f, inf.f_p_value),
        fit_quality.r_squared(fit, inf.r2, thr.min_r2),
        fit_quality.enough_rows(fit, thr.rows_per_coefficient),
        *(baseline.baseline_checks(fit, inf.cv_rmse, inf.r2, rows.codes, thr.max_cv_rmse, thr.max_nmbe,
                                   thr.baseline_min_r2) if judge_baseline else ()),
        normality.jarque_bera(fit),
        normality.shapiro_wilk(fit),
        variance.breusch_pagan(fit),
        variance.white(fit, terms),
        independence.durbin_watson(fit, rows.order_note),
        independence.breusch_godfrey(fit, thr.bg_lags, rows.order_note),
        linear_form.reset(fit),
        *((lack_of_fit.lack_of_fit(fit, rows.design_keys, rows.codes),) if rows.design_keys is not None else ()),
        influence.outlier_test(fit, rows.codes, rows.source_rows),
        influence.cooks_check(fit, rows.codes, rows.source_rows),
        influence.leverage_one(fit, rows.codes, rows.source_rows),
        *collinearity.collinearity_checks(fit, terms, thr.vif_max, thr.condition_max),
    ]
    return results, vifs


def replace_check(results: Sequence[CheckResult], new: CheckResult) -> list[CheckResult]:
    """The same checks with the one of `new`'s key replaced by `new`."""
    return [new if r.key == new.key else r for r in results]


def statistic_of(results: Sequence[CheckResult], key: str) -> np.ndarray:
    """The per-group statistic of the check with this key."""
    return next(r.statistic for r in results if r.key == key)
