"""The `about` rows of a run: provenance, settings, counts and versions."""

from __future__ import annotations

import platform
import time
from typing import Any

import numpy as np
import pandas as pd

from ..checks.collinearity import MEASURE as COLLINEARITY_MEASURE
from ..checks.independence import DW_METHOD
from ..job import FitJob
from ..model.engine import EngineFit
from ..provenance import __version__, installed_version
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
        ("input file", info.file_name), ("input format", info.file_format), ("read with", info.reader),
        ("input SHA-256 before", info.file_sha256), ("sheet(s)", ", ".join(info.sheets)),
        ("region", info.region), ("header row", info.header_row),
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
