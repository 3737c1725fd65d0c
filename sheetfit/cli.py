"""Command line: parse options, call one API function, print. No statistics here.

Start-up stays light: pandas/numpy/scipy/statsmodels are imported only inside commands.
"""

from __future__ import annotations

import enum
import os
import stat
from dataclasses import MISSING, fields
from pathlib import Path
from typing import Any

import typer

from .errors import InputFileError, JobError
from .job import (
    ADJUST_METHODS,
    INFERENCE_KINDS,
    CHANGE_POINT_SHAPES,
    OBSERVATION_MODES,
    ROBUST_KINDS,
    FitJob,
    Thresholds,
    check_setting,
    job_file_settings,
    make_job,
)
from .demo import SCENARIOS as DEMO_SCENARIOS
from .terminal import PROG, error_boundary, print_timings, stage_bar

MB = 1024 * 1024

# Defaults come from the job dataclasses so help text and library never disagree.
DEFAULTS: dict[str, Any] = {
    f.name: f.default for cls in (FitJob, Thresholds) for f in fields(cls) if f.default is not MISSING
}


def _choices(name: str, values: tuple[str, ...]) -> type[enum.Enum]:
    """A str Enum of the allowed values, so typer shows and checks them (exit 2 on others)."""
    return enum.Enum(name, {v: v for v in values}, type=str)


Adjust = _choices("Adjust", ADJUST_METHODS)
Robust = _choices("Robust", ROBUST_KINDS)
Inference = _choices("Inference", INFERENCE_KINDS)
ObservationRows = _choices("ObservationRows", OBSERVATION_MODES)
ChangePoint = _choices("ChangePoint", CHANGE_POINT_SHAPES)
DemoScenario = _choices("DemoScenario", DEMO_SCENARIOS)


app = typer.Typer(
    name=PROG,
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
    context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100},
)


def refuse_special_file(path: Path | None) -> None:
    """A named pipe, device or socket would block or never end: refuse it before anything opens it.

    Missing and unreadable paths pass: the reader's check_path says those in one line.
    """
    if path is None:
        return
    try:
        mode = os.stat(path).st_mode
    except (OSError, ValueError):
        return
    if stat.S_ISREG(mode) or stat.S_ISDIR(mode):
        return
    kind = ("a named pipe (FIFO)" if stat.S_ISFIFO(mode) else "a socket" if stat.S_ISSOCK(mode)
            else "a device" if stat.S_ISCHR(mode) or stat.S_ISBLK(mode) else "a special file")
    raise InputFileError(f'"{path}" is not a regular file (it is {kind}); save the data to a file '
                         f'(.xlsx, .xlsm, .xls, .ods or .csv) and give its path')


def _version(value: bool) -> None:
    if value:
        from importlib.metadata import PackageNotFoundError, version

        try:
            typer.echo(f"{PROG} {version(PROG)}")
        except PackageNotFoundError:
            typer.echo(f"{PROG} (version unknown: not installed)")
        raise typer.Exit()


@app.callback()
def _root(
    version: bool = typer.Option(False, "--version", callback=_version, is_eager=True,
                                 help="Print the version and exit."),
) -> None:
    """One least-squares fit per group of spreadsheet rows, checked, written to a new workbook.

    Run `sheetfit demo` to see it on a bundled example, `sheetfit fit --help` for a worked example.
    """


# ── fit ──

FIT_HELP = """Fit one least-squares model per group of rows and write a NEW results workbook.

The input workbook is only read. Results go to <input name>-fit.xlsx beside it unless --out
says otherwise; an existing results file is kept unless --overwrite is given.

Several workbooks (say, one per site) are read as one table: give several WORKBOOK paths or a
folder (its .xlsx, .xlsm, .xls, .ods and .csv files; hidden files, ~$ lock files and files named
*-fit.xlsx or *-predicted.xlsx are left out). Every file needs the columns asked for; the file
name becomes the first group column, "file" ("file name" if a file has a column "file").
Results go to <first name>-and-N-more-fit.xlsx beside the first file, or <folder
name>-fit.xlsx beside the folder.

\b
Example: a sheet "Monthly" with one row per site and month,
columns Site, Month, kWh, Cooling degree-days and Pallets:
  sheetfit fit usage.xlsx --sheet Monthly --group Site --y kWh \\
      --x "Cooling degree-days" --x Pallets --order Month --out usage-results.xlsx

\b
Terms given to --x:
  COLUMN          the column itself (a name that matches a column exactly always means it)
  COLUMN^k        a power, k = 2 to 12 (add COLUMN too for a full polynomial)
  log(COLUMN)     natural logarithm; rows with a value <= 0 are left out, with a reason
  sqrt(COLUMN)    square root; rows with a negative value are left out, with a reason

\b
Settings can also come from a TOML job file (--job); options given here override it.
Keys are the long option names (dashes or underscores), except: sheets = [...] for
--sheet, intercept = false for --no-intercept, max_unpacked_bytes for --max-unpacked-mb.
For example:
  workbook = "usage.xlsx"          # relative paths are relative to the job file;
                                   # or a folder, or a list: ["north.xlsx", "south.csv"]
  sheets = ["Monthly"]
  group = ["Site"]
  y = "kWh"
  x = ["Cooling degree-days", "Pallets"]
  order = "Month"
  [thresholds]
  alpha = 0.05
  adjust = "bh"

\b
Exit status: 0 done; 1 bad input or nothing could be fitted (one line on stderr);
2 wrong usage; 130 interrupted (Ctrl-C); 143 stopped (SIGTERM).
"""

CHANGE_POINT_HELP = ("Shape the response takes against a temperature input: heating (flat above a change point, "
                     "rising as it gets colder), cooling, two-slopes, heating-cooling (flat band between two "
                     "change points) or auto (per group, the best of these and a straight line).")


def _opt(default: Any, *names: str, help: str, show_default: bool | str = True, **kw: Any) -> Any:
    return typer.Option(default, *names, help=help, show_default=show_default, **kw)


@app.command("fit", help=FIT_HELP, no_args_is_help=True)
def fit(
    ctx: typer.Context,
    workbook: list[Path] | None = typer.Argument(
        None, metavar="WORKBOOK", show_default=False, readable=False,
        help="The workbook to read (.xlsx, .xlsm, .xls, .ods or .csv). Several files, or a folder of them, "
             "are read as one table with the file name as the first group column."),
    sheet: list[str] | None = _opt(None, "--sheet", help="Sheet to read; repeat for several (default: the first sheet).", show_default=False, metavar="NAME"),
    all_sheets: bool = _opt(False, "--all-sheets", help="Read every sheet (they must share the same headers).", show_default=False),
    table: str | None = _opt(None, "--table", help="Read a named table or defined range instead of a whole sheet.", show_default=False, metavar="NAME"),
    header_row: int | None = _opt(None, "--header-row", help="Row number of the header (default: first non-empty row).", show_default=False, metavar="N"),
    group: list[str] | None = _opt(None, "--group", help="Column whose values split the rows into groups; "
                                   "repeat for several (one fit per combination).", show_default=False, metavar="COL"),
    y: list[str] | None = _opt(None, "--y", help="Response column (the value being explained); repeat to fit several responses against the same inputs, each response a key on every results sheet. Required.", show_default=False, metavar="COL"),
    x: list[str] | None = _opt(None, "--x", help="Input term; repeat for several. Required.", show_default=False, metavar="TERM"),
    no_intercept: bool = _opt(False, "--no-intercept", help="Fit without an intercept (a line through zero).", show_default=False),
    level: float = _opt(DEFAULTS["level"], "--level", help="Confidence level of the intervals."),
    order: str | None = _opt(None, "--order", help="Column giving the time order within a group (dates, times, "
                             "counters) for the independence checks (default: row order).", show_default=False, metavar="COL"),
    out: Path | None = _opt(None, "--out", help="Results workbook to write (default: <input name>-fit.xlsx).", show_default=False, metavar="RESULTS.xlsx", readable=False),
    overwrite: bool = _opt(False, "--overwrite", help="Replace the results workbook if it exists.", show_default=False),
    max_charts: int = _opt(DEFAULTS["max_charts"], "--max-charts", help="At most this many charts (flagged groups first)."),
    observations: ObservationRows = _opt(ObservationRows(DEFAULTS["observations"]), "--observations",
                                         help="Rows on the observations sheet: all, flagged (unusable rows and rows "
                                              "with row flags only) or none."),
    alpha: float = _opt(DEFAULTS["alpha"], "--alpha", help="Level for every p-value-based verdict."),
    adjust: Adjust = _opt(Adjust(DEFAULTS["adjust"]), "--adjust",
                          help="Adjust p-values across groups: bh (false discovery rate), holm, or none."),
    min_r2: float = _opt(DEFAULTS["min_r2"], "--min-r2", help="Flag fits whose R² is below this."),
    rows_per_coefficient: float = _opt(DEFAULTS["rows_per_coefficient"], "--rows-per-coefficient",
                                       help="Flag fits with fewer rows per estimated coefficient."),
    leverage_factor: float = _opt(DEFAULTS["leverage_factor"], "--leverage-factor",
                                  help="Highlight rows with leverage above factor·p/n."),
    studentized_cutoff: float = _opt(DEFAULTS["studentized_cutoff"], "--studentized-cutoff",
                                     help="Highlight rows whose |studentized residual| exceeds this."),
    cooks_factor: float = _opt(DEFAULTS["cooks_factor"], "--cooks-factor",
                               help="Highlight rows with Cook's distance above factor/n."),
    vif_max: float = _opt(DEFAULTS["vif_max"], "--vif-max", help="Flag inputs whose VIF exceeds this."),
    condition_max: float = _opt(DEFAULTS["condition_max"], "--condition-max",
                                help="Flag designs whose condition number exceeds this."),
    bg_lags: int = _opt(DEFAULTS["bg_lags"], "--bg-lags", help="Lags of the Breusch–Godfrey test."),
    hac_lags: int | None = _opt(None, "--hac-lags", help="Lags of the Newey–West std errors "
                                "(default: floor(4·(n/100)^(2/9))).", show_default=False, metavar="N"),
    robust: Robust = _opt(Robust(DEFAULTS["robust"]), "--robust",
                          help="Kind of heteroscedasticity-robust std errors."),
    inference: Inference = _opt(Inference(DEFAULTS["inference"]), "--inference",
                                help="Std errors behind intervals and flags: classic or robust."),
    change_point: ChangePoint = _opt(ChangePoint(DEFAULTS["change_point"]), "--change-point", help=CHANGE_POINT_HELP),
    change_point_input: str | None = _opt(None, "--change-point-input", metavar="COL", show_default=False, help="The temperature column (default: the first --x that is a plain column)."),
    baseline_checks: bool | None = _opt(None, "--baseline-checks/--no-baseline-checks", show_default=False, help="Judge fits by the energy-baseline criteria below (default: on with --change-point)."),
    max_cv_rmse: float = _opt(DEFAULTS["max_cv_rmse"], "--max-cv-rmse", help="Baseline criterion: flag fits whose CV(RMSE) in % is above this."),
    max_nmbe: float = _opt(DEFAULTS["max_nmbe"], "--max-nmbe", help="Baseline criterion: flag fits whose |NMBE| in % is above this."),
    baseline_min_r2: float = _opt(DEFAULTS["baseline_min_r2"], "--baseline-min-r2", help="Baseline criterion: flag fits whose R² is below this."),
    previous: Path | None = _opt(None, "--previous", metavar="OLD.xlsx", show_default=False, readable=False, help="An earlier results workbook of the same model: each group is compared with its earlier fit (Chow test, coefficient changes, flags) on the sheet 'since previous run'."),
    reference: list[str] | None = _opt(None, "--reference", metavar="COL=LEVEL", show_default=False, help="The reference level of a category input (default: its first level in sorted order); repeat for several."),
    weights: str | None = _opt(None, "--weights", metavar="W", show_default=False, help="Weighted least squares: each row's weight is the column W, 1/COL or 1/COL^2 (COL an input or the response); weights are scaled to average 1 within each group."),
    calibration: bool = _opt(False, "--calibration", show_default=False, help="Each group is a calibration line: limits of detection and quantification on groups, each standard's back-calculated value on observations."),
    back_calc_limit: float = _opt(DEFAULTS["back_calc_limit"], "--back-calc-limit", help="With --calibration: flag standards whose back-calculated value is off by more than this %."),
    back_calc_limit_lowest: float = _opt(DEFAULTS["back_calc_limit_lowest"], "--back-calc-limit-lowest", help="The same at each group's lowest non-zero standard."),
    job_file: Path | None = _opt(None, "--job", help="TOML job file with settings; options given here override it.", show_default=False, metavar="JOB.toml", readable=False),
    strict: bool = _opt(False, "--strict", help="Stop with an error if any row cannot be used.", show_default=False),
    csv_delimiter: str | None = _opt(None, "--csv-delimiter", help="Field separator of a .csv input (default: guessed).", show_default=False, metavar="C"),
    csv_decimal: str | None = _opt(None, "--csv-decimal", help="Decimal mark of a .csv input (default: '.').", show_default=False, metavar="C"),
    max_unpacked_mb: int = _opt(DEFAULTS["max_unpacked_bytes"] // MB, "--max-unpacked-mb",
                                help="Refuse workbooks that unpack to more than this many MB."),
    quiet: bool = _opt(False, "--quiet", "-q", help="No progress bar and no summary; only the results path.", show_default=False),
    debug: bool = _opt(False, "--debug", help="Show the full traceback of an error, and any warnings.", show_default=False),
) -> None:
    if workbook is not None and len(workbook) == 1:
        ctx.params["workbook"] = workbook[0]         # one WORKBOOK is one file (or a folder), not a list of one
    _run_fit(ctx, job_file, quiet, debug)


def _run_fit(ctx: typer.Context, job_file: Path | None, quiet: bool, debug: bool) -> None:
    """The fit command's work: the job from the job file and the options typed, run, results path and summary."""
    given = _given_on_command_line(ctx)
    with error_boundary(debug):
        settings = job_file_settings(job_file) if job_file is not None else {}
        settings.update(_settings_from_options(ctx.params, given))
        _require(ctx, settings)
        job = make_job(settings)
        for path in job.inputs:
            refuse_special_file(path)
        from .pipeline import run_job, summary_lines

        with stage_bar(not quiet) as bar:
            results, path = run_job(job, progress=bar.stage)
        print_timings(results, bar)
        typer.echo(f"results: {path}")
        if not quiet:
            for line in summary_lines(results):
                typer.echo(line)


def _given_on_command_line(ctx: typer.Context) -> set[str]:
    """Names of the parameters the user actually typed (only those override the job file)."""
    given = set()
    for name in ctx.params:
        source = ctx.get_parameter_source(name)
        if source is not None and source.name in ("COMMANDLINE", "ENVIRONMENT", "PROMPT"):
            given.add(name)
    return given


_NOT_SETTINGS = {"job_file", "quiet", "debug"}
_RENAMED = {"sheet": "sheets"}


def _settings_from_options(params: dict[str, Any], given: set[str]) -> dict[str, Any]:
    """Settings (FitJob/Thresholds field names) for the options given on the command line."""
    settings: dict[str, Any] = {}
    for name in given - _NOT_SETTINGS:
        value = params[name]
        if isinstance(value, enum.Enum):
            value = value.value
        if name == "no_intercept":
            settings["intercept"] = not value
        elif name == "max_unpacked_mb":
            if value < 1:
                raise JobError(f"--max-unpacked-mb must be a whole number, 1 or more; found {value}")
            settings["max_unpacked_bytes"] = int(value) * MB
        elif name in ("sheet", "group", "x"):
            settings[_RENAMED.get(name, name)] = tuple(value or ())
        else:
            settings[name] = value
    return settings


def _require(ctx: typer.Context, settings: dict[str, Any]) -> None:
    """Missing required settings are usage errors (exit 2), whether typed or in the job file."""
    if not settings.get("workbook"):          # none typed (None) or an empty list in the job file
        ctx.fail("Missing argument 'WORKBOOK' (or set workbook in the --job file).")
    if not settings.get("y"):
        ctx.fail("Missing option '--y' (or set y in the --job file).")
    if not settings.get("x"):
        ctx.fail("Missing option '--x' (or set x in the --job file).")


@app.command("demo")
def demo(
    folder: Path = typer.Option(Path("sheetfit-demo"), "--dir", metavar="DIR", readable=False,
                             help="Folder to write into (created if needed); its two demo files are replaced."),
    scenario: DemoScenario = typer.Option(DemoScenario(DEMO_SCENARIOS[0]), "--scenario",
                                          help="Which invented example: cold-storage (monthly electricity use of "
                                               "cold-storage sites) or calibration (calibration runs of lab "
                                               "instruments, with limits and back-calculated standards)."),
    quiet: bool = typer.Option(False, "--quiet", "-q", help="No progress bar and no summary; only the paths."),
    debug: bool = typer.Option(False, "--debug", help="Show the full traceback of an error, and any warnings."),
) -> None:
    """Write a bundled demo workbook (invented data; --scenario picks which) and its results into DIR."""
    with error_boundary(debug):
        from .demo import run_demo
        from .pipeline import summary_lines

        with stage_bar(not quiet) as bar:
            workbook, results, path = run_demo(Path(folder), progress=bar.stage, scenario=scenario.value)
        typer.echo(f"demo workbook: {workbook}")
        typer.echo(f"results: {path}")
        if not quiet:
            for line in summary_lines(results):
                typer.echo(line)


# ── predict ──

PREDICT_STAGES = ("reading", "predicting", "writing")


@app.command("predict")
def predict(
    results_workbook: Path = typer.Argument(..., metavar="RESULTS.xlsx", show_default=False, readable=False,
                                            help="A results workbook written by `sheetfit fit`."),
    new_rows: Path = typer.Argument(..., metavar="NEW_ROWS", show_default=False, readable=False,
                                    help="Workbook or CSV with the group key columns and the input columns."),
    sheet: str | None = _opt(None, "--sheet", metavar="NAME", show_default=False,
                             help="Sheet of NEW_ROWS to read (default: the first sheet)."),
    out: Path | None = _opt(None, "--out", metavar="PREDICTIONS.xlsx", show_default=False, readable=False,
                            help="Where to write (default: <new rows name>-predicted.xlsx)."),
    overwrite: bool = _opt(False, "--overwrite", help="Replace the output if it exists.", show_default=False),
    level: float | None = _opt(None, "--level", show_default=False,
                               help="Confidence level of the intervals (default: the fit's level)."),
    actual: str | None = _opt(None, "--actual", metavar="COL", show_default=False,
                              help="Column of measured use in NEW_ROWS (a reporting period): adds the avoided use "
                                   "per row and, per group, its total with an interval and whether it is more "
                                   "than noise."),
    inverse: bool = _opt(False, "--inverse", show_default=False,
                         help="Read input values back from measured responses (in the column named as the fit's "
                              "response) through each group's calibration line, with intervals."),
    replicates: str | None = _opt(None, "--replicates", metavar="COL", show_default=False,
                                  help="With --inverse: column of how many measurements each response averages "
                                       "(default: 1)."),
    quiet: bool = _opt(False, "--quiet", "-q", help="No progress bar and no summary; only the output path.",
                       show_default=False),
    debug: bool = _opt(False, "--debug", help="Show the full traceback of an error, and any warnings.", show_default=False),
) -> None:
    """Apply the models stored in a results workbook to new rows.

    Writes each row's predicted value, the confidence interval of the mean, the prediction
    interval of a new observation and an extrapolation flag; rows that cannot be predicted
    (unknown group, missing input) get a reason. A group or input column missing from the new
    rows, or no row that can be predicted, is an error (exit 1) and nothing is written.

    \b
    Examples:
      sheetfit predict usage-fit.xlsx plan.xlsx --sheet Plan --out plan-predicted.xlsx
      sheetfit predict baseline-fit.xlsx after-upgrade.xlsx --actual kWh

    \b
    Exit status: 0 done (some rows may have a reason); 1 bad input or no row predicted;
    2 wrong usage; 130 interrupted (Ctrl-C); 143 stopped (SIGTERM).
    """
    with error_boundary(debug):
        refuse_special_file(results_workbook)
        refuse_special_file(new_rows)
        if level is not None:
            level = check_setting("level", level)
        if replicates is not None and not inverse:
            raise JobError("--replicates needs --inverse (it counts the measurements behind each response)")
        if inverse and actual is not None:
            raise JobError("--inverse and --actual do not go together; run them separately")
        from .pipeline import predict_workbook

        done: list[Any] = []
        with stage_bar(not quiet, PREDICT_STAGES) as bar:
            path = predict_workbook(results_workbook, new_rows, sheet, out, overwrite, level=level,
                                    actual=actual, inverse=inverse, replicates=replicates,
                                    progress=bar.stage, summary=done.append)
        typer.echo(f"predictions: {path}")
        if not quiet:
            for line in done[0].lines() if done else ():
                typer.echo(line)


def main() -> None:
    """Console-script entry point (`sheetfit`, `python -m sheetfit`)."""
    app(prog_name=PROG)
