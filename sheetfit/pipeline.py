"""The run, stage by stage: read → model → check → flag → (write). The CLI and API call this."""

from __future__ import annotations

import hashlib
import os
import platform
import sys
import threading
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .checks import assumptions as checks
from .checks import collinearity, influence, robust
from .checks import verdicts as flags
from .errors import NoUsableDataError, UnusableRowsError
from .job import FitJob, load_job_file, make_job
from .memory import ordinary_pages
from .model.engine import fit_groups, inference
from .read.frame import observations_from_frame
from .read.tidy import REASON, SOURCE_ROW, SOURCE_SHEET, Observations, ReadInfo
from .results import tables as assemble
from .results.types import FitResults
from .terms import coefficient_labels, source_columns


class Progress:
    """A one-line progress display on stderr: stage, elapsed time and a moving bar.

    Only when asked and stderr is a terminal, and only once the run has taken more than
    `delay` seconds, so quick runs print nothing.
    """

    STAGES = ("reading", "fitting", "checking", "assembling tables", "writing")

    def __init__(self, enabled: bool, delay: float = 2.0):
        self.enabled = enabled and sys.stderr.isatty()
        self.t0 = time.perf_counter()
        self.delay = delay
        self.current = ""
        self.shown = False
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        if self.enabled:
            self._thread = threading.Thread(target=self._tick, daemon=True)
            self._thread.start()

    def _line(self) -> str:
        step = (len(self.STAGES) if self.current == "done" else
                self.STAGES.index(self.current) + 1 if self.current in self.STAGES else 0)
        width = 20
        done = round(width * step / len(self.STAGES))
        bar = "#" * done + "-" * (width - done)
        return f"\r[{bar}] {self.current:<18} {time.perf_counter() - self.t0:6.1f} s"

    def _tick(self) -> None:
        while not self._stop.wait(0.5):
            if time.perf_counter() - self.t0 >= self.delay and self.current:
                sys.stderr.write(self._line())
                sys.stderr.flush()
                self.shown = True

    def stage(self, text: str) -> None:
        self.current = text

    def done(self) -> None:
        if self._thread is not None:
            self._stop.set()
            self._thread.join()
            if self.shown:
                self.current = "done"
                sys.stderr.write(self._line() + "\n")
                sys.stderr.flush()


def sha256_of(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _row_reasons(obs: Observations) -> np.ndarray:
    """Reader reasons plus term-domain problems (log of ≤ 0, sqrt of < 0)."""
    reason = obs.data[REASON].to_numpy(dtype=object).copy()
    for term in obs.terms:
        bad = term.domain_problem(obs.data[term.column].to_numpy(dtype=np.float64))
        for i in np.flatnonzero(bad):
            reason[i] = f"{reason[i]}; {term.domain_reason()}" if reason[i] else term.domain_reason()
    return reason


def fit_observations(obs: Observations, job: FitJob, progress: Progress | None = None) -> FitResults:
    """Fit, check and flag every group of already-read observations."""
    with ordinary_pages():
        return _fit_observations(obs, job, progress or Progress(False))


def _fit_observations(obs: Observations, job: FitJob, progress: Progress) -> FitResults:
    thr = job.thresholds
    data = obs.data
    terms = obs.terms
    keys_cols = list(obs.group_columns)
    reason = _row_reasons(obs)
    if job.strict:
        _refuse_unusable(data, reason)

    if keys_cols:
        codes_all = data.groupby(keys_cols, sort=False, dropna=False).ngroup().to_numpy()
    else:
        codes_all = np.zeros(len(data), dtype=np.int64)
    G = int(codes_all.max()) + 1 if len(codes_all) else 0
    first = np.unique(codes_all, return_index=True)[1]
    keys = data.iloc[first][keys_cols].reset_index(drop=True) if keys_cols else pd.DataFrame(index=range(G))

    usable = reason == ""
    pos = np.flatnonzero(usable)
    seq = data[obs.order].to_numpy(dtype=np.float64)[pos] if obs.order else pos.astype(np.float64)
    pos = pos[np.lexsort((pos, seq, codes_all[pos]))]
    codes = codes_all[pos]
    cols = {c: data[c].to_numpy(dtype=np.float64)[pos] for c in source_columns(terms)}
    y = data[obs.y].to_numpy(dtype=np.float64)[pos]

    progress.stage("fitting")
    fit = fit_groups(y, cols, codes, G, terms, job.intercept)
    if not fit.fitted_ok.any():
        raise NoUsableDataError(_nothing_fitted(fit, G))
    inf = inference(fit, job.level)
    labels = list(coefficient_labels(terms, job.intercept))

    progress.stage("checking")
    order_note = (f"rows in order of {obs.order}" if obs.order else "rows in input row order")
    src_rows = data[SOURCE_ROW].to_numpy()[pos]
    vifs = collinearity.vif(fit)
    results = [
        checks.model_f_test(fit, inf["f"], inf["f_p"]),
        checks.r_squared(fit, inf["r2"], thr.min_r2),
        checks.enough_rows(fit, thr.rows_per_coefficient),
        checks.jarque_bera(fit),
        checks.shapiro_wilk(fit),
        checks.breusch_pagan(fit),
        checks.white(fit, terms),
        checks.durbin_watson(fit, order_note),
        checks.breusch_godfrey(fit, thr.bg_lags, order_note),
        checks.reset(fit),
        influence.outlier_test(fit, codes, src_rows),
        influence.cooks_check(fit, codes, src_rows),
        influence.leverage_one(fit, codes, src_rows),
        *collinearity.collinearity_checks(fit, vifs, thr.vif_max, thr.condition_max, labels),
    ]
    check_table, n_flags, reasons = flags.verdicts(results, fit.fitted_ok, thr)
    failed = check_table[check_table["verdict"] == "fail"]
    het = np.zeros(G, bool)
    dep = np.zeros(G, bool)
    het[failed.loc[failed["check"].str.startswith("constant variance"), "_code"].to_numpy()] = True
    dep[failed.loc[failed["check"].str.startswith("independent residuals"), "_code"].to_numpy()] = True
    covs = _robust_covariances(fit, thr, het, dep)
    if thr.inference == "robust" and (het | dep).any():
        # The model F-test becomes a Wald test with the robust covariance where it applies.
        cov = np.where(dep[:, None, None], covs["hac"], covs["hc"])
        f_rob, p_rob = robust.wald_f(fit, cov)
        use = het | dep
        results[0] = checks.model_f_test(fit, np.where(use, f_rob, inf["f"]), np.where(use, p_rob, inf["f_p"]))
        check_table, n_flags, reasons = flags.verdicts(results, fit.fitted_ok, thr)
    check_table = assemble.with_keys(keys, check_table.pop("_code").to_numpy(), check_table.to_dict("series"))

    coef_extra, inf = _robust_columns(fit, inf, het, dep, job, vifs, covs)
    hl = influence.row_highlights(fit, codes, thr)
    group_extra = {
        "high-leverage rows": np.bincount(codes, weights=hl["high leverage"], minlength=G),
        "outlying rows": np.bincount(codes, weights=hl["outlying"], minlength=G),
        "influential rows": np.bincount(codes, weights=hl["influential"], minlength=G),
        "condition number": next(r.statistic for r in results if r.key == "condition"),
    }
    dropped = np.bincount(codes_all, weights=~usable, minlength=G).astype(int)
    groups = assemble.groups_table(keys, fit, inf, n_flags, reasons, dropped, group_extra)
    coefficients = assemble.coefficients_table(keys, fit, inf, labels, coef_extra)

    progress.stage("assembling tables")
    observations = _observations_table(obs, reason, pos, codes_all, fit, hl)
    ranges = _ranges(cols, codes, G)
    info = obs.info
    return FitResults(
        job=job, group_columns=obs.group_columns, y=obs.y, terms=terms, groups=groups,
        coefficients=coefficients, checks=check_table, observations=observations,
        curves=assemble.curves_table(keys, fit, inf, terms, ranges),
        quantiles=assemble.quantiles_table(keys, fit, codes),
        xtx_inverse=assemble.xtx_table(keys, fit, labels),
        input_ranges=assemble.ranges_table(keys, fit, ranges),
        info=info, about=tuple(_about(job, info, groups, observations, fit)),
    )


def _robust_covariances(fit, thr, het: np.ndarray, dep: np.ndarray) -> dict[str, np.ndarray]:
    """Robust (HC) covariances where variance is not constant, Newey–West where residuals are
    not independent; NaN for the other groups, which never show or use them."""
    with np.errstate(invalid="ignore", divide="ignore"):
        hac, lag = robust.hac_cov(fit, thr.hac_lags, only=dep)
        return {"hc": robust.hc_cov(fit, thr.robust, only=het), "hac": hac, "lag": lag}


def _robust_columns(fit, inf: dict, het: np.ndarray, dep: np.ndarray, job: FitJob, vifs: np.ndarray,
                    covs: dict[str, np.ndarray]):
    """Extra coefficient columns: VIF, robust (HC) std errors where variance is not constant,
    Newey–West std errors where residuals are not independent; --inference robust swaps them in."""
    from scipy import stats

    thr = job.thresholds
    extra: dict[str, np.ndarray] = {}
    if fit.p - (1 if job.intercept else 0) >= 2:
        extra["VIF"] = vifs
    df = fit.df_resid[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        hc_se = np.sqrt(np.diagonal(covs["hc"], axis1=1, axis2=2))
        hac_se = np.sqrt(np.diagonal(covs["hac"], axis1=1, axis2=2))
        lag = covs["lag"]
        kind = thr.robust.upper()
        extra[f"robust std error ({kind})"] = np.where(het[:, None], hc_se, np.nan)
        extra[f"robust p-value ({kind})"] = np.where(het[:, None], 2 * stats.t.sf(np.abs(fit.beta / hc_se), df), np.nan)
        extra["HAC std error"] = np.where(dep[:, None], hac_se, np.nan)
        extra["HAC p-value"] = np.where(dep[:, None], 2 * stats.t.sf(np.abs(fit.beta / hac_se), df), np.nan)
        extra["HAC lag"] = np.where(dep[:, None], np.repeat(lag[:, None], fit.p, axis=1), np.nan)
        if thr.inference == "robust":
            use_hac = dep
            use_hc = het & ~dep
            se = np.where(use_hac[:, None], hac_se, np.where(use_hc[:, None], hc_se, fit.se))
            t = fit.beta / se
            q = inf["t_quantile"][:, None]
            inf = dict(inf, t=t, p=2 * stats.t.sf(np.abs(t), df), ci_low=fit.beta - q * se,
                       ci_high=fit.beta + q * se)
            used = np.where(use_hac, "Newey–West (HAC)", np.where(use_hc, kind, "classic"))
            extra["std error used"] = np.repeat(used[:, None], fit.p, axis=1)
    return extra, inf


def _observations_table(obs: Observations, reason: np.ndarray, pos: np.ndarray, codes_all: np.ndarray,
                        fit, hl: dict[str, np.ndarray]) -> pd.DataFrame:
    data = obs.data
    N = len(data)
    fitted = np.full(N, np.nan)
    resid = np.full(N, np.nan)
    stud = np.full(N, np.nan)
    lev = np.full(N, np.nan)
    cooks = np.full(N, np.nan)
    fitted[pos], resid[pos], stud[pos], lev[pos], cooks[pos] = (
        fit.fitted, fit.resid, fit.studentized, fit.leverage, fit.cooks)
    ok_group = fit.fitted_ok[codes_all]
    used = (reason == "") & ok_group
    group_reason = np.array(["group not fitted: " + str(r) for r in fit.not_fitted_reason], dtype=object)
    why = np.where((reason == "") & ~ok_group, group_reason[codes_all], reason)
    words = ("leverage 1", "high leverage", "outlying", "influential")
    bits = np.zeros(N, dtype=np.int64)
    for i, key in enumerate(("leverage one", "high leverage", "outlying", "influential")):
        bits[pos] |= hl[key].astype(np.int64) << i
    table = np.array(["; ".join(w for i, w in enumerate(words) if code >> i & 1) for code in range(16)],
                     dtype=object)
    row_flags = table[bits]
    cols = [SOURCE_SHEET, SOURCE_ROW, *obs.group_columns]
    value_cols = [c for c in obs.numeric_columns if c not in cols]
    out = data[list(obs.group_columns) + [SOURCE_SHEET, SOURCE_ROW] + value_cols].copy()
    out["used"] = np.array(["no", "yes"], dtype=object)[used.astype(np.intp)]   # object: 6× faster into pandas
    out["reason"] = why
    out["fitted"] = fitted
    out["residual"] = resid
    out["studentized residual"] = stud
    out["leverage"] = lev
    out["Cook's distance"] = cooks
    out["row flags"] = row_flags
    return out


def _ranges(cols: dict[str, np.ndarray], codes: np.ndarray, G: int) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Observed min and max of each source column per group (rows sorted by group)."""
    out = {}
    starts = np.flatnonzero(np.r_[True, codes[1:] != codes[:-1]]) if len(codes) else np.array([], int)
    present = codes[starts]
    for c, v in cols.items():
        lo = np.full(G, np.nan)
        hi = np.full(G, np.nan)
        if len(starts):
            lo[present] = np.minimum.reduceat(v, starts)
            hi[present] = np.maximum.reduceat(v, starts)
        out[c] = (lo, hi)
    return out


def _refuse_unusable(data: pd.DataFrame, reason: np.ndarray) -> None:
    bad = np.flatnonzero(reason != "")
    if len(bad):
        rows = data[SOURCE_ROW].to_numpy()
        shown = "; ".join(f"row {rows[i]}: {reason[i]}" for i in bad[:3])
        more = f" (and {len(bad) - 3} more)" if len(bad) > 3 else ""
        raise UnusableRowsError(f"--strict: {len(bad)} row(s) cannot be used: {shown}{more}; "
                                f"fix them or run without --strict to report them instead")


def _nothing_fitted(fit, G: int) -> str:
    biggest = int(fit.n.max()) if G else 0
    first = next((r for r in fit.not_fitted_reason if r), "no usable rows")
    return (f"no group could be fitted ({G} group(s); the largest has {biggest} usable rows, "
            f"{fit.p} coefficients need at least {fit.p + 1}); first reason: {first}")


def _about(job: FitJob, info: ReadInfo, groups: pd.DataFrame, observations: pd.DataFrame, fit) -> list:
    from importlib.metadata import PackageNotFoundError, version

    from . import __version__

    def installed(package: str) -> str:
        try:
            return version(package)
        except PackageNotFoundError:
            return "(not installed)"

    used = int(fit.n[fit.fitted_ok].sum())
    rows = [
        ("input file", info.file_name), ("input format", info.file_format), ("read with", info.reader),
        ("input SHA-256 before", info.file_sha256), ("sheet(s)", ", ".join(info.sheets)),
        ("region", info.region), ("header row", info.header_row),
        ("rows read", info.rows_read), ("rows used", used), ("rows not used", info.rows_read - used),
        ("hidden rows (used)", info.hidden_rows), ("hidden columns (used)", info.hidden_columns),
        ("date/time columns", ", ".join(info.date_columns) + " (as days since the group's earliest date)"
         if info.date_columns else "(none)"),
        ("groups", len(groups)), ("groups fitted", int(fit.fitted_ok.sum())),
        ("groups not fitted", int((~fit.fitted_ok).sum())),
        ("groups flagged", int((groups["flags"] > 0).sum())),
        ("response", job.y), ("terms", ", ".join(job.x)),
        ("intercept", "yes" if job.intercept else "no"),
    ]
    rows += [(f"warning {i + 1}", w) for i, w in enumerate(info.warnings)]
    rows += [(f"setting: {k}", v) for k, v in job.settings_rows()]
    rows += [
        ("sheetfit", __version__), ("python", platform.python_version()),
        ("numpy", np.__version__), ("pandas", pd.__version__), ("scipy", installed("scipy")),
        ("statsmodels", installed("statsmodels")), ("openpyxl", installed("openpyxl")),
        ("xlsxwriter", installed("xlsxwriter")),
        ("run at", time.strftime("%Y-%m-%d %H:%M:%S %Z")),
    ]
    return rows


def job_from(workbook: str | Path | None = None, job_file: str | Path | None = None, **settings: Any) -> FitJob:
    """A validated FitJob from a job file and keyword settings (keywords win)."""
    merged: dict[str, Any] = load_job_file(Path(job_file)) if job_file else {}
    if workbook is not None:
        merged["workbook"] = workbook
    if "sheet" in settings:
        s = settings.pop("sheet")
        if s is not None:
            settings["sheets"] = (s,) if isinstance(s, str) else tuple(s)
    merged.update({k: v for k, v in settings.items() if v is not None})
    return make_job(merged)


def fit_job(job: FitJob, progress: Progress | None = None) -> FitResults:
    """Read and fit (no writing)."""
    from .read.observations import read_observations

    progress = progress or Progress(False)
    progress.stage("reading")
    t0 = time.perf_counter()
    obs = read_observations(job)
    t1 = time.perf_counter()
    results = fit_observations(obs, job, progress)
    t2 = time.perf_counter()
    return _with_about(results, [("time to read (s)", round(t1 - t0, 3)),
                                 ("time to fit and check (s)", round(t2 - t1, 3))])


def fit_workbook(workbook: str | Path, *, y: str, x: Sequence[str] | str, group: Sequence[str] | str = (),
                 sheet: str | Sequence[str] | None = None, job_file: str | Path | None = None,
                 **settings: Any) -> FitResults:
    """Fit one OLS model per group of rows in a workbook sheet; returns tables as DataFrames."""
    job = job_from(workbook, job_file, y=y, x=x, group=group, sheet=sheet, **settings)
    return fit_job(job)


def run_job(job: FitJob, progress: bool = False) -> tuple[FitResults, Path]:
    """Read, fit and write the results workbook; returns the results and where they went."""
    from .read.sources import check_path
    from .report import write_results
    from .report.safe import check_output_path

    check_path(Path(job.workbook))          # a missing input is the first thing to say
    out = job.output_path
    check_output_path(Path(job.workbook), out, job.overwrite)
    bar = Progress(progress)
    try:
        with ordinary_pages():
            results = fit_job(job, bar)
            after = sha256_of(Path(job.workbook))
            results = _with_about(results, [("input SHA-256 after", after)])
            bar.stage("writing")
            t0 = time.perf_counter()
            path = write_results(results, out, overwrite=job.overwrite)
    finally:
        bar.done()
    if os.environ.get("SHEETFIT_TIMINGS"):
        times = dict(results.about)
        sys.stderr.write(f"timings: read {times['time to read (s)']:.2f} s, fit+checks "
                         f"{times['time to fit and check (s)']:.2f} s, write {time.perf_counter() - t0:.2f} s\n")
    return results, path


def _with_about(results: FitResults, rows: list) -> FitResults:
    import dataclasses

    return dataclasses.replace(results, about=tuple(results.about) + tuple(rows))


def summary_lines(results: FitResults) -> list[str]:
    g = results.groups
    fitted = int((g["status"] == "fitted").sum())
    flagged = int((g["flags"] > 0).sum())
    lines = [f"{len(g)} groups: {fitted} fitted, {len(g) - fitted} not fitted, {flagged} flagged"]
    used = int((results.observations["used"] == "yes").sum())
    lines.append(f"{results.info.rows_read} rows read: {used} used, {results.info.rows_read - used} not used "
                 f"(reasons on the observations sheet)")
    return lines


def fit_frame(frame: pd.DataFrame, *, y: str, x: Sequence[str] | str, group: Sequence[str] | str = (),
              order: str | None = None, **settings: Any) -> FitResults:
    """Fit one OLS model per group of an in-memory DataFrame of numbers (same tables as fit_workbook)."""
    x = (x,) if isinstance(x, str) else tuple(x)
    group = (group,) if isinstance(group, str) else tuple(group)
    job = make_job({"workbook": "(data frame)", "y": y, "x": x, "group": group, "order": order, **settings})
    obs = observations_from_frame(frame, y=y, x=x, group=group, order=order)
    return fit_observations(obs, job)
