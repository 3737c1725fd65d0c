"""A FitResults built by hand (statsmodels fits on seeded data), shaped like the engine's output.

The writer tests use it so they do not depend on the engine; values come from statsmodels OLS
so the rendered charts look like real fits.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np
import pandas as pd
import statsmodels.api as sm
from scipy import stats

from sheetfit.job import FitJob
from sheetfit.read.tidy import ReadInfo
from sheetfit.results.types import FitResults
from sheetfit.terms import INTERCEPT, parse_terms

HOSTILE = ["=1+2", "+A1", "-A1", "@SUM(A1)", '=HYPERLINK("http://x")', "http://example.com"]
Y = "Load kWh"


def build_results(folder: Path, labels: Sequence[str] = ("North", "South", "East", "West"),
                  x: Sequence[str] = ("CDD",), n: int = 24, flagged: Sequence[str] = ("South",),
                  not_fitted: Sequence[str] = (), perfect: Sequence[str] = (), seed: int = 7,
                  **job_changes) -> FitResults:
    """Results for groups `labels`; `flagged` get flags and reasons; `not_fitted` get 2 rows only."""
    rng = np.random.default_rng(seed)
    folder.mkdir(parents=True, exist_ok=True)
    source = folder / "input.xlsx"
    source.write_bytes(b"not really a workbook, only a path the writer must not touch")
    columns = ["site", Y, "CDD", "pallets"]
    terms = parse_terms(list(x), columns)
    srcs = sorted({t.column for t in terms}, key=columns.index)
    job = FitJob(workbook=source, y=Y, x=tuple(x), group=("site",), **job_changes)
    g_rows, c_rows, k_rows, o_rows, cur_rows, q_rows = [], [], [], [], [], []
    row_no = 2
    for gi, label in enumerate(labels):
        m = 2 if label in not_fitted else n
        data = {"CDD": rng.uniform(50, 400, m), "pallets": rng.uniform(1000, 6000, m)}
        noise = 0.0 if label in perfect else rng.normal(0, 120 + 40 * gi, m)
        yv = 800 + 3.1 * data["CDD"] + 0.05 * data["pallets"] + noise
        X = np.column_stack([np.ones(m)] + [t.values(data[t.column]) for t in terms])
        base = {"site": label}
        if label in not_fitted:
            g_rows.append({**base, "status": "not fitted", "flags": 0,
                           "reasons": "too few rows: 2 usable rows for 2 coefficients", "rows used": m,
                           "rows not used": 1, "number of coefficients": X.shape[1]})
            for i in range(m):
                o_rows.append({**base, "source sheet": "Data", "source row": row_no, Y: yv[i],
                               **{s: data[s][i] for s in srcs}, "used in fit": "no",
                               "reason": "group not fitted: too few rows", "row flags": ""})
                row_no += 1
            continue
        if label in perfect:
            yv = X @ np.arange(1.0, X.shape[1] + 1)
        fit = sm.OLS(yv, X).fit()
        infl = fit.get_influence()
        is_flagged = label in flagged
        g_rows.append({**base, "status": "fitted", "flags": 2 if is_flagged else 0,
                       "reasons": ("spread of residuals grows with the fitted value (Breusch–Pagan, adjusted "
                                   "p = 0.003); one row dominates the fit (Cook's distance 1.9)")
                       if is_flagged else "",
                       "rows used": m, "rows not used": 0, "number of coefficients": X.shape[1], "R²": fit.rsquared,
                       "adjusted R²": fit.rsquared_adj, "residual std error": np.sqrt(fit.scale),
                       "RMSE": np.sqrt(fit.ssr / m), "CV(RMSE) %": 100 * np.sqrt(fit.scale) / yv.mean(),
                       "F": np.inf if label in perfect else fit.fvalue,
                       "F p-value": 0.0 if label in perfect else fit.f_pvalue,
                       "AIC": fit.aic, "BIC": fit.bic, "influential rows": 1 if is_flagged else 0})
        ci = fit.conf_int()
        for j, term in enumerate([INTERCEPT] + [t.label for t in terms]):
            c_rows.append({**base, "input": term, "coefficient": fit.params[j], "std error": fit.bse[j],
                           "t": fit.tvalues[j], "p-value": fit.pvalues[j], "interval low": ci[j, 0],
                           "interval high": ci[j, 1]})
        for check, p in (("model F-test", fit.f_pvalue), ("Breusch–Pagan", 0.003 if is_flagged else 0.4)):
            k_rows.append({**base, "check": check, "statistic": 12.5, "p-value": p, "adjusted p-value": p,
                           "threshold": 0.05, "verdict": "fail" if (is_flagged and check != "model F-test")
                           else "pass", "note": "input row order"})
        stud = infl.resid_studentized_external
        for i in range(m):
            flags = "influential" if (is_flagged and i == 0) else ""
            o_rows.append({**base, "source sheet": "Data", "source row": row_no, Y: yv[i],
                           **{s: data[s][i] for s in srcs}, "used in fit": "yes", "reason": "",
                           "fitted value": fit.fittedvalues[i], "residual": fit.resid[i],
                           "studentized residual": stud[i], "leverage": infl.hat_matrix_diag[i],
                           "Cook's distance": infl.cooks_distance[0][i], "row flags": flags})
            row_no += 1
        if len(srcs) == 1:
            grid = np.linspace(data[srcs[0]].min(), data[srcs[0]].max(), 25)
            Xg = np.column_stack([np.ones(25)] + [t.values(grid) for t in terms])
            pred = fit.get_prediction(Xg).summary_frame(alpha=0.05)
            for i in range(25):
                cur_rows.append({**base, "x": grid[i], "fitted value": pred["mean"].iloc[i],
                                 "range for the average, low": pred["mean_ci_lower"].iloc[i],
                                 "range for the average, high": pred["mean_ci_upper"].iloc[i]})
        sr = np.sort(infl.resid_studentized_internal)
        q = stats.norm.ppf((np.arange(1, m + 1) - 0.375) / (m + 0.25))
        q_rows += [{**base, "normal quantile": q[i], "standardized residual": sr[i]} for i in range(m)]

    def frame(rows: list[dict], cols: Sequence[str]) -> pd.DataFrame:
        return pd.DataFrame(rows, columns=list(cols))

    info = ReadInfo(file_name=source.name, file_sha256="0" * 64, file_format="xlsx", reader="test",
                    sheets=("Data",), region="whole sheet", header_row=1, rows_read=len(o_rows))
    about = (("input file", source.name), ("input SHA-256 before", "0" * 64), ("rows read", len(o_rows)),
             ("groups", np.int64(len(labels))), ("a figure that is not finite", float("nan")))
    return FitResults(
        job=job, group_columns=("site",), y=Y, terms=terms,
        groups=pd.DataFrame(g_rows),
        coefficients=frame(c_rows, ["site", "input", "coefficient", "std error", "t", "p-value", "interval low", "interval high"]),
        checks=frame(k_rows, ["site", "check", "statistic", "p-value", "adjusted p-value", "threshold",
                              "verdict", "note"]),
        observations=pd.DataFrame(o_rows),
        curves=frame(cur_rows, ["site", "x", "fitted value", "range for the average, low", "range for the average, high"]),
        quantiles=frame(q_rows, ["site", "normal quantile", "standardized residual"]),
        xtx_inverse=pd.DataFrame(columns=["site", "row term", "column term", "value"]),
        input_ranges=pd.DataFrame(columns=["site", "column", "min", "max"]),
        info=info, about=about)
