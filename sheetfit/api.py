"""The Python API: the same functions the command line calls, with keyword settings.

fit_workbook(path, y=…, x=[…], group=[…], sheet=…) → FitResults
fit_frame(data_frame, y=…, x=[…], group=[…]) → FitResults
write_results(results, path) → Path
predict(results_or_path, new_rows_df) → DataFrame
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from .job import FitJob, job_file_settings, make_job
from .pipeline import fit_job, fit_observations
from .prediction.compute import predict
from .read.frame import observations_from_frame
from .report import write_results
from .results.types import FitResults

__all__ = ["fit_workbook", "fit_frame", "write_results", "predict", "job_from"]


def job_from(workbook: str | Path | None = None, job_file: str | Path | None = None, **settings: Any) -> FitJob:
    """A validated FitJob from a job file and keyword settings (keywords win).

    Every setting is checked as a job file's would be (`sheetfit.job.SCHEMA`): a wrong type, a value
    out of range or an unknown keyword raises JobError naming it. `sheet` is another name for
    `sheets`; relative paths in the job file are taken from the job file's folder.
    """
    merged: dict[str, Any] = job_file_settings(Path(job_file)) if job_file else {}
    if workbook is not None:
        merged["workbook"] = workbook
    if "sheet" in settings:
        settings["sheets"] = settings.pop("sheet")
    merged.update({k: v for k, v in settings.items() if v is not None})
    return make_job(merged)


def fit_workbook(workbook: str | Path, *, y: str, x: Sequence[str] | str, group: Sequence[str] | str = (),
                 sheet: str | Sequence[str] | None = None, job_file: str | Path | None = None,
                 **settings: Any) -> FitResults:
    """Fit one OLS model per group of rows in a workbook sheet; returns tables as DataFrames."""
    job = job_from(workbook, job_file, y=y, x=x, group=group, sheet=sheet, **settings)
    return fit_job(job)


def fit_frame(frame: pd.DataFrame, *, y: str, x: Sequence[str] | str, group: Sequence[str] | str = (),
              order: str | None = None, **settings: Any) -> FitResults:
    """Fit one OLS model per group of an in-memory DataFrame of numbers (same tables as fit_workbook)."""
    job = make_job({"workbook": "(data frame)", "y": y, "x": x, "group": group, "order": order, **settings})
    obs = observations_from_frame(frame, y=job.y, x=job.x, group=job.group, order=job.order)
    return fit_observations(obs, job)
