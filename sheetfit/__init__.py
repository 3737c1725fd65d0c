"""sheetfit: one ordinary-least-squares fit per group of spreadsheet rows, checked, returned as a new workbook.

Public API (imported lazily so the command line starts fast):
fit_workbook(path, y=…, x=[…], group=[…], sheet=…) → FitResults
write_results(results, path) → Path
predict(results_or_path, new_rows_df) → DataFrame
"""

from __future__ import annotations

from .provenance import __version__
__all__ = ["fit_workbook", "fit_frame", "write_results", "predict", "FitJob", "FitResults", "__version__"]


def __getattr__(name: str):
    if name == "fit_workbook":
        from .pipeline import fit_workbook
        return fit_workbook
    if name == "fit_frame":
        from .pipeline import fit_frame
        return fit_frame
    if name == "write_results":
        from .report import write_results
        return write_results
    if name == "predict":
        from .prediction.compute import predict
        return predict
    if name == "FitJob":
        from .job import FitJob
        return FitJob
    if name == "FitResults":
        from .results.types import FitResults
        return FitResults
    raise AttributeError(f"module 'sheetfit' has no attribute {name!r}")
