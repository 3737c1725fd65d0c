"""The run, stage by stage: read → model → check → flag → results (→ write). The API and CLI call this.

Progress is reported through a callback that receives each stage's name (see STAGES); the
library itself prints nothing.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from . import checks
from .checks import robust
from .checks.lack_of_fit import replicate_keys
from .checks.verdicts import Verdicts, verdicts
from .errors import JobError, NoUsableDataError, ResultsWorkbookError
from .job import FitJob
from .memory import ordinary_pages
from .model.engine import EngineFit, fit_groups
from .model.categories import levels_seen
from .model.rows import GroupedRows, design_rows, group_rows, nothing_fitted, refuse_unusable, row_reasons
from .results.categories import category_about
from .results.comparison import across_groups
from .model.inference import Inference, inference
from .read.tidy import SOURCE_ROW, Observations
from .results import tables
from .results.about import about_rows
from .results import calibration
from .results.change_points import NMBE, UPPER_CHANGE_POINT, change_point_columns, residual_lag1
from .results.headers import (CONDITION_NUMBER, FLAGS, HIGH_LEVERAGE_ROWS, INFLUENTIAL_ROWS, OUTLYING_ROWS,
    STATUS, USED, YES)
from .results.observations import observations_table
from .results.types import FitResults
from .model.sums import group_sums
from .terms import Term, change_point_input, coefficient_labels, source_columns

ProgressCallback = Callable[[str], None]
STAGES = ("reading", "fitting", "checking", "assembling tables", "writing")


def _no_progress(stage: str) -> None:
    """The default progress callback: says nothing."""


def fit_observations(obs: Observations, job: FitJob, progress: ProgressCallback | None = None,
                     earlier: Any = None) -> FitResults:
    """Fit, check and flag every group of already-read observations; with --previous, say what changed
    since that run (`earlier`: its model store when already read)."""
    progress = progress or _no_progress
    if job.previous is not None and earlier is None:
        earlier = _previous_store(job)
    with ordinary_pages():
        coding = None
        if obs.category_columns:
            coding = _categories(obs, job)
            obs = dataclasses.replace(obs, terms=coding.terms)
        reason = row_reasons(obs)
        if job.strict:
            refuse_unusable(obs.data, reason)
        rows = group_rows(obs, reason, None if coding is None else coding.codes)
        progress("fitting")
        model = _fit_model(obs, job, rows, coding)
        if not model.fit.fitted_ok.any():
            raise NoUsableDataError(nothing_fitted(model.fit, rows.n_groups))
        progress("checking")
        results = _check_and_tabulate(obs, job, rows, model, progress)
    return results if earlier is None else with_changes(results, earlier, job)


@dataclass(frozen=True)
class FittedModel:
    """The engine's fit and the terms it used; a change-point run adds its shapes (else None)."""

    fit: EngineFit
    terms: tuple[Term, ...]
    shaped: Any = None              # model.shaped_fit.ShapedFit in a change-point run
    coding: Any = None              # model.categories.CategoryCoding when inputs hold categories
    level_notes: np.ndarray | None = None   # (G,) what each group's category rows leave out ('' nothing)


def _categories(obs: Observations, job: FitJob) -> Any:
    """The category inputs' levels and codes, and the terms with each category expanded (model.categories)."""
    from .model.categories import code_categories

    if job.change_point != "none":
        raise JobError(f"--change-point cannot be combined with category inputs ({', '.join(obs.category_columns)}) "
                       f"yet; fit the groups of each level separately (--group) or leave out --change-point")
    labels = {c: obs.data[c].to_numpy(dtype=object) for c in obs.category_columns}
    return code_categories(obs.terms, labels, job.reference_levels())


def _fit_model(obs: Observations, job: FitJob, rows: GroupedRows, coding: Any = None) -> FittedModel:
    """Ordinary fit, or a change-point run's search and fit (--change-point)."""
    if job.calibration and obs.terms[0].kind != "column":
        raise JobError(f"--calibration needs the input itself as the term, not {obs.terms[0].label}: back-"
                       f"calculated values and limits are in the input's units; give --x {obs.terms[0].column}")
    if coding is not None:
        from .model.categories import level_slots
        from .model.patterns import fit_patterns

        active, notes = level_slots(obs.terms, job.intercept, {c: rows.columns[c] for c in coding.columns
                                                               if c in rows.columns},
                                    rows.codes, rows.n_groups, coding.reference, coding.levels)
        fit = fit_patterns(rows.y, rows.columns, rows.codes, rows.n_groups, obs.terms, job.intercept, active,
                           weights=rows.weights)
        return FittedModel(fit, tuple(obs.terms), coding=coding, level_notes=notes)
    if job.change_point == "none":
        fit = fit_groups(rows.y, rows.columns, rows.codes, rows.n_groups, obs.terms, job.intercept,
                         weights=rows.weights)
        return FittedModel(fit, tuple(obs.terms))
    from .model.shaped_fit import fit_shapes

    temperature = change_point_input(obs.terms, job.change_point_input)
    shaped = fit_shapes(rows.y, rows.columns, rows.codes, rows.n_groups, obs.terms, temperature,
                        job.change_point, alpha=job.thresholds.alpha, level=job.level, intercept=job.intercept)
    return FittedModel(shaped.fit, shaped.terms, shaped)


def _check_and_tabulate(obs: Observations, job: FitJob, rows: GroupedRows, model: FittedModel,
                        progress: ProgressCallback) -> FitResults:
    """Checks, verdicts, robust errors where assumptions fail, and the result tables."""
    thr, fit, terms = job.thresholds, model.fit, model.terms
    inf = inference(fit, job.level)
    labels = coefficient_labels(terms, job.intercept)
    in_order = checks.RowsInOrder(
        codes=rows.codes, source_rows=obs.data[SOURCE_ROW].to_numpy()[rows.pos],
        order_note=f"rows in order of {obs.order}" if obs.order else "rows in input row order",
        design_keys=replicate_keys({c: rows.columns[c] for c in source_columns(terms)}, rows.codes))
    results, vifs = checks.run_checks(fit, inf, in_order, terms, labels, thr, job.judge_baseline)
    judged = verdicts(results, fit.fitted_ok, thr)
    het = judged.any_failed(checks.VARIANCE_CHECKS)
    dep = judged.any_failed(checks.INDEPENDENCE_CHECKS)
    covs = robust.robust_covariances(fit, thr, het, dep)
    if thr.inference == "robust" and (het | dep).any():
        f, f_p = robust.robust_model_test(fit, covs, het, dep, inf.f, inf.f_p_value)
        results = checks.replace_check(results, checks.model_f_test(fit, f, f_p))
        judged = verdicts(results, fit.fitted_ok, thr)
    coef_extra, inf = robust.coefficient_extras(fit, inf, het, dep, thr, job.intercept, vifs, covs)
    highlights = checks.influence.row_highlights(fit, rows.codes, thr)
    condition = checks.statistic_of(results, "condition")
    progress("assembling tables")
    return _tables(obs, job, rows, model, inf, judged, coef_extra, highlights, condition)


def _group_extra(job: FitJob, model: FittedModel, inf: Inference, codes: np.ndarray) -> dict[str, np.ndarray]:
    """The groups sheet's change-point columns, NMBE and calibration limits (only in runs that ask)."""
    extra: dict[str, np.ndarray] = {}
    if model.shaped is not None:
        found = change_point_columns(model.shaped.points, model.fit.fitted_ok)
        if not np.isfinite(found[UPPER_CHANGE_POINT]).any():     # no heating-cooling group: no upper columns
            found = {k: v for k, v in found.items() if not k.startswith(UPPER_CHANGE_POINT)}
        extra.update(found)
    if job.judge_baseline:
        extra[NMBE] = checks.baseline.nmbe(model.fit, codes)
    if model.coding is not None:
        from .results.categories import level_columns

        extra.update(level_columns(model.fit, model.terms, model.coding.columns, model.level_notes))
    if job.calibration:
        steep = inf.p_value[:, 1] < job.thresholds.alpha
        extra.update(calibration.limits(model.fit.beta, inf.residual_std_error, steep))
    return extra


def _tables(obs: Observations, job: FitJob, rows: GroupedRows, model: FittedModel, inf: Inference,
            judged: Verdicts, coef_extra: dict[str, np.ndarray], highlights: dict[str, np.ndarray],
            condition: np.ndarray) -> FitResults:
    """The tidy result tables of a fitted and checked run."""
    G, keys, codes, fit, terms = rows.n_groups, rows.keys, rows.codes, model.fit, model.terms
    labels = list(coefficient_labels(terms, job.intercept))
    check_table = judged.table.copy()
    check_table = tables.with_keys(keys, check_table.pop("_code").to_numpy(), check_table.to_dict("series"))
    group_extra = {
        HIGH_LEVERAGE_ROWS: np.bincount(codes, weights=highlights["high leverage"], minlength=G),
        OUTLYING_ROWS: np.bincount(codes, weights=highlights["outlying"], minlength=G),
        INFLUENTIAL_ROWS: np.bincount(codes, weights=highlights["influential"], minlength=G),
        CONDITION_NUMBER: condition,
        **_group_extra(job, model, inf, codes),
    }
    # rows used and rows not used count the rows `observations` says are used and not used (a group that
    # could not be fitted uses none of its rows)
    used = (rows.reason == "") & fit.fitted_ok[rows.codes_all]
    n_used = np.bincount(rows.codes_all, weights=used, minlength=G).astype(np.int64)
    dropped = np.bincount(rows.codes_all, weights=~used, minlength=G).astype(np.int64)
    groups = tables.groups_table(keys, fit, inf, judged.flags, judged.reasons, (n_used, dropped), group_extra)
    observations = observations_table(obs, rows.reason, rows.pos, rows.codes_all, fit, highlights)
    if job.calibration:
        observations = calibration.with_back_calculation(
            observations, obs.data[obs.terms[0].column].to_numpy(dtype=np.float64),
            obs.data[obs.y].to_numpy(dtype=np.float64), rows.codes_all, fit.beta, inf.p_value[:, 1], job.thresholds)
    ranges = tables.observed_ranges(rows.columns, codes, G)
    X = design_rows(terms, job.intercept, rows, fit, None if model.shaped is None else model.shaped.change_points)
    return FitResults(
        job=job, group_columns=obs.group_columns, y=obs.y, terms=terms, groups=groups,
        coefficients=tables.coefficients_table(keys, fit, inf, labels, coef_extra),
        checks=check_table, observations=observations,
        curves=tables.curves_table(keys, fit, inf, terms, ranges,
                                   change_points=None if model.shaped is None else model.shaped.change_points),
        quantiles=tables.quantiles_table(keys, fit, codes),
        xtx_inverse=tables.xtx_table(keys, fit, labels),
        input_ranges=tables.ranges_table(keys, fit, ranges),
        info=obs.info, order=obs.order,
        about=tuple(about_rows(job, obs.info, groups, fit)) + (
            () if model.coding is None else category_about(model.coding.levels, model.coding.reference)),
        change_points=None if model.shaped is None else model.shaped.change_points,
        response_mean=fit.ymean.copy(), residual_lag1=residual_lag1(fit.resid, codes, G),
        weights=None if obs.weights is None else obs.weights.label,
        weight_mean=fit.weight_mean, sums=group_sums(X, rows.y, codes, G, fit.fitted_ok, fit.weights),
        comparison=None if model.shaped is not None or not fit.active.all() else across_groups(
            rows.y, X, codes, fit.fitted_ok, keys, coefficient_labels(terms, job.intercept), intercept=job.intercept,
            thresholds=job.thresholds, level=job.level, weights=fit.weights),
        reference_levels=None if model.coding is None else dict(model.coding.reference),
        levels_seen=None if model.coding is None else levels_seen(
            {c: rows.columns[c] for c in model.coding.columns if c in rows.columns}, codes, G, model.coding.levels),
    )


def fit_job(job: FitJob, progress: ProgressCallback | None = None) -> FitResults:
    """Read and fit (no writing); several files or a folder are read as one table (read.many)."""
    from .read.many import read_inputs
    from .read.responses import stack_responses

    progress = progress or _no_progress
    progress("reading")
    t0 = time.perf_counter()
    earlier = _previous_store(job)
    obs = stack_responses(read_inputs(job), job.all_responses)
    t1 = time.perf_counter()
    results = fit_observations(obs, job, progress, earlier)
    t2 = time.perf_counter()
    return with_about(results, [("time to read (s)", round(t1 - t0, 3)),
                                ("time to fit and check (s)", round(t2 - t1, 3))])


def _previous_store(job: FitJob) -> Any:
    """The model store of --previous (read first: a wrong file is said before any work), else None."""
    if job.previous is None:
        return None
    from .read import check_path
    from .results.store_read import read_store

    check_path(Path(job.previous))
    try:
        return read_store(job.previous)
    except ResultsWorkbookError as exc:
        raise ResultsWorkbookError(f"--previous: {exc}") from None


def with_changes(results: FitResults, earlier: Any, job: FitJob) -> FitResults:
    """The results with what changed since the earlier run whose model store is `earlier`."""
    from .results.changes import compare_runs
    from .results.store import store_from_results

    changes = compare_runs(earlier, store_from_results(results), job.previous, job.thresholds, job.level)
    return with_about(dataclasses.replace(results, changes=changes),
                      [("compared with", f"{Path(job.previous).name}: {changes.summary()}")])


def run_job(job: FitJob, progress: ProgressCallback | None = None) -> tuple[FitResults, Path]:
    """Read, fit and write the results workbook; returns the results and where they went.

    Every input (each file of several, a folder's files) is checked before anything is read, the output
    path before any fitting; the output is written only once every file has been read and fitted."""
    from .read.many import input_files
    from .report import write_results
    from .report.safe import check_output_path
    from .results.about import sha256_after_rows

    progress = progress or _no_progress
    files = input_files(job).files          # a missing input is the first thing to say
    out = job.output_path
    check_output_path(files, out, job.overwrite)
    with ordinary_pages():
        results = fit_job(job, progress)
        results = with_about(results, sha256_after_rows(files, job.several_files))
        progress("writing")
        path = write_results(results, out, overwrite=job.overwrite)
    return results, path


def with_about(results: FitResults, rows: list) -> FitResults:
    """The same results with more `about` rows at the end."""
    return dataclasses.replace(results, about=tuple(results.about) + tuple(rows))


def summary_lines(results: FitResults) -> list[str]:
    """The few lines the CLI prints after a run: groups fitted and flagged, rows used."""
    g = results.groups
    fitted = int((g[STATUS] == "fitted").sum())
    flagged = int((g[FLAGS] > 0).sum())
    lines = [f"{len(g)} groups: {fitted} fitted, {len(g) - fitted} not fitted, {flagged} flagged"]
    used = int((results.observations[USED] == YES).sum())
    lines.append(f"{results.info.rows_read} rows read: {used} used, {results.info.rows_read - used} not used "
                 f"(reasons on the observations sheet)")
    if results.changes is not None:
        lines.append(results.changes.summary())
    return lines


def predict_workbook(results_path: Path, new_rows_path: Path, sheet: str | None, out: Path | None,
                     overwrite: bool, *, level: float | None = None, actual: str | None = None,
                     inverse: bool = False, replicates: str | None = None,
                     progress: ProgressCallback | None = None,
                     summary: Callable[[object], None] | None = None) -> Path:
    """Apply the models stored in a results workbook to a sheet of new rows; write a predictions workbook.

    Default output: `<new rows stem>-predicted.xlsx` beside the new rows. Returns where it went;
    `summary`, when given, receives a `prediction.summary.PredictionSummary` (rows, predicted, sheets).
    `level` sets the intervals' confidence level (default: the fit's). `actual` names the column of
    measured use in a reporting period: the avoided use per row and per group is added (savings.py),
    and no row that can be totalled is an error. A group or input column
    missing from the new rows, or no row that can be predicted, is an error and nothing is written.
    Stages reported to `progress`: reading, predicting, writing.
    """
    from .errors import OutputError
    from .prediction.compute import at_level, predict_cells
    from .prediction.new_rows import for_every_response, inputs_as_numbers, read_new_rows, require_columns
    from .prediction.savings import check_actual_column, savings_for_cells
    from .prediction.summary import PredictionSummary, count_predicted, nothing_predicted, nothing_to_total
    from .read import check_path
    from .report.predictions import write_predictions
    from .report.safe import check_output_path, output_error
    from .results.store_read import read_store

    progress = progress or _no_progress
    results_path, new_rows_path = Path(results_path), Path(new_rows_path)
    progress("reading")
    check_path(new_rows_path)
    store = at_level(read_store(results_path), level)
    target = Path(out) if out is not None else new_rows_path.with_name(f"{new_rows_path.stem}-predicted.xlsx")
    try:
        target = check_output_path(new_rows_path, target, overwrite)
        same = target.resolve() == results_path.resolve()
    except OSError as exc:                      # e.g. a name too long for the file system
        raise output_error(target, exc) from None
    if same:
        raise OutputError(f'output "{target}" is the results workbook; choose another --out')
    new = read_new_rows(new_rows_path, sheet)
    about = (("results workbook", results_path.name), ("new rows", new_rows_path.name), ("sheet", new.sheet))
    if store.responses and (inverse or actual is not None):
        raise JobError(f"--inverse and --actual read one response per row; the results hold several "
                       f"({', '.join(store.responses)}): fit the response you need on its own and use that")
    new = for_every_response(new, store)
    if inverse:
        return _read_back_workbook(store, new, target, overwrite, about, replicates, progress, summary)
    require_columns(new, store)
    if actual is not None:
        check_actual_column([str(c) for c in new.frame.columns], actual, store, new.where())
    progress("predicting")
    raw = {c: new.frame[c].tolist() for c in (*store.group_columns, *store.sources, *store.extra_columns)
           if c in new.frame.columns}
    preds = predict_cells(store, raw, len(new.frame))
    done = count_predicted(preds)
    if done == 0:
        raise nothing_predicted(preds, new.source_rows, new.where())
    saved = None
    if actual is not None:
        saved = savings_for_cells(store, raw, len(new.frame), new.frame[actual].tolist(), preds, actual)
        if saved.rows_in_totals == 0:
            raise nothing_to_total(saved, new.source_rows, new.where())
    # inputs (and actual use) read as numbers are written as numbers
    frame = inputs_as_numbers(new.frame, (*store.sources, *((actual,) if actual else ())))
    progress("writing")
    sheets = write_predictions(target, overwrite, store, frame, new.source_rows, preds, about, savings=saved)
    if summary is not None:
        summary(PredictionSummary(target, len(preds), done, tuple(sheets), saved))
    return target


def _read_back_workbook(store: Any, new: Any, target: Path, overwrite: bool, about: tuple[tuple[str, str], ...],
                        replicates: str | None, progress: ProgressCallback,
                        summary: Callable[[object], None] | None) -> Path:
    """`sheetfit predict --inverse`: each row's input value read back from its measured response (in the
    column named as the fit's response) through its group's calibration line (prediction.inverse)."""
    from .prediction.inverse import READ_BACK, line_problem, read_back_cells
    from .prediction.new_rows import inputs_as_numbers, require_columns
    from .prediction.summary import PredictionSummary, nothing_predicted
    from .report.predictions import write_predictions

    problem = line_problem(store)
    if problem:
        raise JobError(f"--inverse: {problem}; fit one --x column with a constant to read values back")
    require_columns(new, store, (*store.group_columns, store.y, *((replicates,) if replicates else ())))
    progress("predicting")
    table = read_back_cells(store, {str(c): new.frame[c].tolist() for c in new.frame.columns}, len(new.frame),
                            replicates)
    done = int(table[READ_BACK].notna().sum())
    if done == 0:
        raise nothing_predicted(table, new.source_rows, new.where())
    frame = inputs_as_numbers(new.frame, (store.y, *((replicates,) if replicates else ())))
    progress("writing")
    sheets = write_predictions(target, overwrite, store, frame, new.source_rows, table, about, inverse=True)
    if summary is not None:
        summary(PredictionSummary(target, len(table), done, tuple(sheets), done_word="read back"))
    return target
