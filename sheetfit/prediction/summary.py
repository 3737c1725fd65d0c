"""What one `sheetfit predict` run did, in the few words the command line prints.

`sheetfit.pipeline.predict_workbook` fills a PredictionSummary; `nothing_predicted` is the one-line
error when no new row could be predicted (the run then writes nothing, as `fit` does when no group
could be fitted).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import NoUsableDataError
from ..results.headers import PREDICTED, PREDICTION_REASON


@dataclass(frozen=True)
class PredictionSummary:
    """Where the predictions went, how many rows were predicted, on which sheets."""

    path: Path
    rows: int
    predicted: int
    sheets: tuple[str, ...]

    def lines(self) -> list[str]:
        """'N rows: P predicted, R with a reason (see the reason column)' and, when split, the sheets."""
        reasons = self.rows - self.predicted
        out = [f"{self.rows} rows: {self.predicted} predicted, {reasons} with a reason (see the reason column)"]
        if len(self.sheets) > 1:
            out.append(f"more rows than one sheet holds: written on {len(self.sheets)} sheets "
                       f"({', '.join(self.sheets)})")
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
