"""Plain data passed between stages: frozen dataclasses holding tidy pandas DataFrames.

Column names of the result tables are the headers of the results workbook (see README);
the writer formats these tables and computes no statistics.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..job import FitJob
from ..read.tidy import ReadInfo
from ..terms import Term, coefficient_labels, source_columns
from .observations import observation_headers


@dataclass(frozen=True)
class FitResults:
    """Everything the results workbook shows; each table uses the workbook's column headers.

    Every keyed table starts with the group key columns (in `group_columns` order): find them by
    position (`key_headers`). A user's column named like one of ours in the same table is shown as
    `NAME (input)` (see results.headers); `observation_header` gives the header on observations.

    groups        one row per group: keys, then results.headers.GROUP_HEADERS (status, flags, reasons,
                  R², adjusted R², F, F p-value, residual std error, RMSE, CV(RMSE) %, rows used,
                  rows not used, number of coefficients, AIC, BIC), then GROUP_EXTRA_HEADERS
    coefficients  group × term: keys, input, coefficient, interval low, interval high, std error, t,
                  p-value, VIF, robust std error columns when computed
    checks        group × check: keys, check, statistic, p-value, adjusted p-value, threshold,
                  verdict (pass / fail / n/a), note
    observations  input row: keys, source sheet, source row, y and source x columns, used in fit,
                  reason, row flags, fitted value, residual, studentized residual, leverage,
                  Cook's distance; a date column is followed by `NAME (days from group start)`
    curves        one-source-column models: keys, x, fitted value, range for the average, low/high (grid)
    quantiles     keys, normal quantile, standardized residual (sorted; for quantile plots)
    xtx_inverse   keys, row term, column term, value: (X'X)^-1 of each fitted group
    input_ranges  keys, column, min, max: observed range of each source column per group
    about         ordered (item, value) pairs: provenance, settings, counts, timings
    change_points (G, 2) per group: τ of the 'below' and of the 'above' term (NaN where the group's
                  shape has none); None when the run has no change points
    response_mean (G,) mean of the response over the rows used (NaN when not fitted)
    residual_lag1 (G,) lag-1 autocorrelation of the residuals in row order (NaN when undefined)
    weights       the weights of a weighted fit as written (COL, 1/COL, 1/COL^2); None when unweighted
    weight_mean   (G,) mean of the given weights each group's were divided by (None when unweighted)
    sums          each group's sufficient statistics X'X, X'y, y'y (model.sums.GroupSums), or None
    comparison    the across-groups comparison (results.comparison.ComparisonTables), or None
    changes       what changed since an earlier run (results.changes.RunChanges), or None
    """

    job: FitJob
    group_columns: tuple[str, ...]
    y: str
    terms: tuple[Term, ...]
    groups: pd.DataFrame
    coefficients: pd.DataFrame
    checks: pd.DataFrame
    observations: pd.DataFrame
    curves: pd.DataFrame
    quantiles: pd.DataFrame
    xtx_inverse: pd.DataFrame
    input_ranges: pd.DataFrame
    info: ReadInfo
    about: tuple[tuple[str, Any], ...] = field(default_factory=tuple)
    order: str | None = None              # the column giving the row order within a group, if any
    change_points: np.ndarray | None = None
    response_mean: np.ndarray | None = None
    residual_lag1: np.ndarray | None = None
    weights: str | None = None
    weight_mean: np.ndarray | None = None
    sums: Any = None
    comparison: Any = None
    changes: Any = None
    reference_levels: dict[str, str] | None = None   # category input → its reference level
    levels_seen: np.ndarray | None = None            # (G,) the category levels each group's rows show (text)

    @property
    def number_columns(self) -> tuple[str, ...]:
        """The user's number columns on `observations`: response, inputs, order column (no repeats)."""
        cols = dict.fromkeys([self.y, *source_columns(self.terms), *([self.order] if self.order else [])])
        return tuple(c for c in cols if c not in self.group_columns)

    def key_headers(self, table: pd.DataFrame) -> list[str]:
        """The headers of a result table's group key columns: its first len(group_columns) columns."""
        return [str(c) for c in table.columns[:len(self.group_columns)]]

    def observation_header(self, column: str) -> str:
        """The header of a user's column (group key, response, input or order column) on `observations`."""
        user = [*self.group_columns, *self.number_columns]
        return observation_headers(user)[user.index(column)] if column in user else column

    @property
    def term_labels(self) -> tuple[str, ...]:
        """Coefficient labels in design order, intercept first when present."""
        return coefficient_labels(self.terms, self.job.intercept)
