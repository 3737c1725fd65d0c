"""The `about` rows of a run: provenance, settings, counts and versions."""

from __future__ import annotations

import platform
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..checks.collinearity import MEASURE as COLLINEARITY_MEASURE
from ..checks.independence import DW_METHOD
from ..job import FitJob
from ..model.engine import EngineFit
from ..provenance import __version__, file_sha256, installed_version
from ..read.tidy import ReadInfo
from .headers import FLAGS


WEIGHTED_NOTE = ("weighted least squares with weights {weights}, scaled to average 1 within each group "
                 "(a group whose weights are all equal is an ordinary fit). R² is the weighted form "
                 "1 − Σw·e²/Σw·(y − ȳw)², ȳw the weighted mean; the residual std error, F, AIC and BIC are of "
                 "the weighted residuals (the std error is that of a row of average weight); every check and "
                 "Cook's distance use the weighted residuals √w·e; fitted values and residuals on "
                 "observations are in the response's own units")


def about_rows(job: FitJob, info: ReadInfo, groups: pd.DataFrame, fit: EngineFit) -> list[tuple[str, Any]]:
    """The `about` sheet's rows: what was read, how it was fitted, with which versions, when."""
    used = int(fit.n[fit.fitted_ok].sum())
    rows = [
        *input_rows(info), ("region", info.region), *(() if info.several else (("header row", info.header_row),)),
        ("rows read", info.rows_read), ("rows used", used), ("rows not used", info.rows_read - used),
        ("hidden rows (used)", info.hidden_rows), ("hidden columns (used)", info.hidden_columns),
        ("date/time columns", ", ".join(info.date_columns) + " (the model uses days since the group's earliest "
         "date; observations shows the dates, the days beside them)" if info.date_columns else "(none)"),
        ("groups", len(groups)), ("groups fitted", int(fit.fitted_ok.sum())),
        ("groups not fitted", int((~fit.fitted_ok).sum())),
        ("groups flagged", int((groups[FLAGS] > 0).sum())),
        ("response", job.y), ("terms", ", ".join(job.x)),
        ("intercept", "yes" if job.intercept else "no"),
        *((("weights", WEIGHTED_NOTE.format(weights=job.weights)),) if fit.weighted else ()),
        ("collinearity check", COLLINEARITY_MEASURE), ("Durbin–Watson p-value", DW_METHOD),
    ]
    rows += [(f"warning {i + 1}", w) for i, w in enumerate(info.warnings)]
    rows += [(f"setting: {k}", v) for k, v in job.settings_rows()]
    rows += [
        ("sheetfit", __version__), ("python", platform.python_version()),
        ("numpy", np.__version__), ("pandas", pd.__version__), ("scipy", installed_version("scipy")),
        ("statsmodels", installed_version("statsmodels")), ("openpyxl", installed_version("openpyxl")),
        ("xlsxwriter", installed_version("xlsxwriter")),
        ("run at", time.strftime("%Y-%m-%d %H:%M:%S %Z")),
    ]
    return rows


def input_rows(info: ReadInfo) -> list[tuple[str, Any]]:
    """What was read: the file, its format, reader, SHA-256 and sheets; with several files, a line saying
    how they became one table, then each file's name, format, sheets, header row, rows and SHA-256."""
    if not info.several:
        return [("input file", info.file_name), ("input format", info.file_format), ("read with", info.reader),
                ("input SHA-256 before", info.file_sha256), ("sheet(s)", ", ".join(info.sheets))]
    rows: list[tuple[str, Any]] = [
        ("input files", (f"{len(info.files)} files read as one table: each row's file name is in the first "
                         f'group column, "{info.file_key}"'))]
    for i, one in enumerate(info.files, start=1):
        rows += [(f"file {i}", one.file_name), (f"file {i} format", f"{one.file_format}, read with {one.reader}"),
                 (f"file {i} sheet(s)", ", ".join(one.sheets)), (f"file {i} header row", one.header_row),
                 (f"file {i} rows read", one.rows_read), (f"file {i} SHA-256 before", one.file_sha256)]
    return rows


def sha256_after_rows(files: Sequence[Path], several: bool) -> list[tuple[str, str]]:
    """Each input file's SHA-256 after the run (read again, so a file changed meanwhile shows)."""
    if not several:
        return [("input SHA-256 after", file_sha256(Path(files[0])))]
    return [(f"file {i} SHA-256 after", file_sha256(Path(f))) for i, f in enumerate(files, start=1)]
