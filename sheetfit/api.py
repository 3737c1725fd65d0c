"""The Python API: the same functions the command line calls, with keyword settings.

fit_workbook(path | [paths] | folder, y=…, x=[…], group=[…], sheet=…) → FitResults
fit_frame(data_frame, y=…, x=[…], group=[…]) → FitResults
write_results(results, path) → Path
predict(results_or_path, new_rows_df) → DataFrame
savings(results_or_path, reporting_rows_df, actual=COL) → (per-row DataFrame, per-group DataFrame)
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from .job import FitJob, job_file_settings, make_job
from .pipeline import fit_job, fit_observations
from .prediction.compute import predict
from .prediction.savings import frame_savings
from .read.frame import observations_from_frame
from .report import write_results
from .results.types import FitResults

__all__ = ["fit_workbook", "fit_frame", "write_results", "predict", "savings", "read_back", "job_from"]


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


def fit_workbook(workbook: str | Path | Sequence[str | Path], *, y: str, x: Sequence[str] | str,
                 group: Sequence[str] | str = (), sheet: str | Sequence[str] | None = None,
                 job_file: str | Path | None = None, **settings: Any) -> FitResults:
    """Fit one OLS model per group of rows in a workbook sheet; returns tables as DataFrames.

    `workbook` may also be a list of files or a folder (its .xlsx, .xlsm, .xls, .ods and .csv files): they
    are read as one table, the file name the first group column (`sheetfit.read.many`)."""
    job = job_from(workbook, job_file, y=y, x=x, group=group, sheet=sheet, **settings)
    return fit_job(job)


def fit_frame(frame: pd.DataFrame, *, y: str, x: Sequence[str] | str, group: Sequence[str] | str = (),
              order: str | None = None, **settings: Any) -> FitResults:
    """Fit one OLS model per group of an in-memory DataFrame of numbers (same tables as fit_workbook)."""
    job = make_job({"workbook": "(data frame)", "y": y, "x": x, "group": group, "order": order, **settings})
    obs = observations_from_frame(frame, y=job.y, x=job.x, group=job.group, order=job.order, weights=job.weights,
                                  responses=job.responses)
    return fit_observations(obs, job)


def savings(results_or_path: FitResults | str | Path, new_rows: pd.DataFrame, actual: str,
            level: float | None = None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Avoided use over a reporting period: each group's baseline applied to `new_rows` against the
    measured use in column `actual`; returns the per-row and the per-group tables (as `sheetfit
    predict --actual` writes them)."""
    return frame_savings(results_or_path, new_rows, actual, level)


def read_back(results_or_path: FitResults | str | Path, new_rows: pd.DataFrame, replicates: str | None = None,
              level: float | None = None) -> pd.DataFrame:
    """Input values read back from measured responses through each group's calibration line (inverse
    prediction): `new_rows` holds the group keys and the responses in the column named as the fit's
    response; `replicates` names a column of how many measurements each response averages. Returns
    the columns given, then prediction.inverse.INVERSE_COLUMNS (as `sheetfit predict --inverse` writes)."""
    from .prediction.compute import at_level, store_of
    from .errors import ColumnNotFoundError, JobError, not_found_message
    from .prediction.inverse import INVERSE_COLUMNS, line_problem, read_back_cells
    from .results.headers import shown_names

    store = at_level(store_of(results_or_path), level)
    problem = line_problem(store)
    if problem:
        raise JobError(f"read_back: {problem}; fit one x column with a constant to read values back")
    given = [str(c) for c in new_rows.columns]
    for name in (*store.group_columns, store.y, *((replicates,) if replicates else ())):
        if name not in given:
            raise ColumnNotFoundError(not_found_message("column", name, given))
    column = {c: new_rows.iloc[:, given.index(c)] for c in (*store.group_columns, store.y, replicates) if c in given}
    cells = {c: new_rows.iloc[:, given.index(c)].tolist() for c in (*column, *store.extra_columns) if c in given}
    found = read_back_cells(store, cells, len(new_rows), replicates)
    front = pd.DataFrame({c: v.to_numpy() for c, v in column.items()}, index=new_rows.index)
    front.columns = shown_names(list(column), INVERSE_COLUMNS)
    return pd.concat([front, found.set_axis(new_rows.index)], axis=1)
