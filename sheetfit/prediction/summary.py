"""What one `sheetfit predict` run did, in the few words the command line prints.

`sheetfit.pipeline.predict_workbook` fills a PredictionSummary; `nothing_predicted` is the one-line
error when no new row could be predicted (the run then writes nothing, as `fit` does when no group
could be fitted), `nothing_to_total` the same for savings when no row has an actual use to compare.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import NoUsableDataError
from ..results.headers import PREDICTED, PREDICTION_REASON
from .savings import LEFT_OUT_BECAUSE, MORE_USE, NO_ROWS, NO_VARIANCE, ROWS_OUTSIDE, SAVING, WITHIN_NOISE, Savings


@dataclass(frozen=True)
class PredictionSummary:
    """Where the predictions went, how many rows were predicted, on which sheets; the savings, if asked for."""

    path: Path
    rows: int
    predicted: int
    sheets: tuple[str, ...]
    savings: Savings | None = None
    done_word: str = "predicted"          # "read back" for --inverse

    def lines(self) -> list[str]:
        """'N rows: P predicted, R with a reason (see the reason column)' and, when split, the sheets."""
        reasons = self.rows - self.predicted
        out = [f"{self.rows} rows: {self.predicted} {self.done_word}, {reasons} with a reason (see the reason "
               "column)"]
        if len(self.sheets) > 1:
            out.append(f"more rows than one sheet holds: written on {len(self.sheets)} sheets "
                       f"({', '.join(self.sheets)})")
        if self.savings is not None:
            out += savings_lines(self.savings)
        return out


def savings_lines(savings: Savings) -> list[str]:
    """One line of totals over the groups and, when some rows extrapolate, one warning line."""
    counts = savings.verdict_counts()
    left = len(savings.rows) - savings.rows_in_totals
    line = (f"savings in {len(savings.groups)} groups: {counts[SAVING]} saving, {counts[WITHIN_NOISE]} within the "
            f"noise of the baseline, {counts[MORE_USE]} using more")
    unsure = counts[NO_ROWS] + counts[NO_VARIANCE]
    line += f", {unsure} cannot say" if unsure else ""
    line += f"; {left} rows left out of the totals (see {LEFT_OUT_BECAUSE!r})" if left else ""
    out = [line]
    if savings.rows_outside:
        groups = int((savings.groups[ROWS_OUTSIDE] > 0).sum())
        out.append(f"warning: {savings.rows_outside} rows in the totals of {groups} groups lie outside their "
                   f"baseline's input range (extrapolation)")
    return out


def count_predicted(preds: pd.DataFrame) -> int:
    """Rows with a predicted value."""
    return int(preds[PREDICTED].notna().sum())


def nothing_predicted(preds: pd.DataFrame, source_rows: np.ndarray, where: str) -> NoUsableDataError:
    """The error when no row has a prediction: how many rows, and the first row's reason."""
    reasons = preds[PREDICTION_REASON].tolist()
    first = next((i for i, r in enumerate(reasons) if r), 0)
    why = reasons[first] if reasons else "no rows"
    return NoUsableDataError(f"none of the {len(preds)} new rows in {where} can be predicted; row "
                             f"{int(source_rows[first])}: {why}")


def nothing_to_total(savings: Savings, source_rows: np.ndarray, where: str) -> NoUsableDataError:
    """The error when no row has both an adjusted baseline and an actual use: the first row's reason."""
    reasons = savings.rows[LEFT_OUT_BECAUSE].tolist()
    first = next((i for i, r in enumerate(reasons) if r), 0)
    why = reasons[first] if reasons else "no rows"
    return NoUsableDataError(f"none of the {len(reasons)} new rows in {where} has both an adjusted baseline and "
                             f"an actual use in \"{savings.actual_column}\"; row {int(source_rows[first])}: {why}")
