"""sheetfit: one ordinary-least-squares fit per group of spreadsheet rows, checked, returned as a new workbook.

Public API (sheetfit.api, imported lazily so the command line starts fast):
fit_workbook(path, y=…, x=[…], group=[…], sheet=…) → FitResults
fit_frame(data_frame, y=…, x=[…], group=[…]) → FitResults
write_results(results, path) → Path
predict(results_or_path, new_rows_df) → DataFrame
savings(results_or_path, reporting_rows_df, actual=COL) → (per-row DataFrame, per-group DataFrame)
"""

from __future__ import annotations

from .provenance import __version__

__all__ = ["fit_workbook", "fit_frame", "write_results", "predict", "savings", "read_back", "FitJob", "FitResults", "__version__"]


def __getattr__(name: str):
    if name in ("fit_workbook", "fit_frame", "write_results", "predict", "savings", "read_back"):
        from . import api

        return getattr(api, name)
    if name == "FitJob":
        from .job import FitJob

        return FitJob
    if name == "FitResults":
        from .results.types import FitResults

        return FitResults
    raise AttributeError(f"module 'sheetfit' has no attribute {name!r}")
