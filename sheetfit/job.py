"""The run's settings: what to read, which model to fit, which thresholds judge it.

Built from CLI options, a TOML job file (`--job`) or the Python API's keyword settings; CLI options
win over the file. Every setting is described once, in SCHEMA (expected type, allowed range or
choices, what it means); the job file, the API keywords and the CLI values all pass through
`check_setting`, so a wrong value is one line naming the key, the expected type and the value found.
"""

from __future__ import annotations

import math
import numbers
import os
import tomllib
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from .errors import JobError, closest

ADJUST_METHODS = ("bh", "holm", "none")
ROBUST_KINDS = ("hc0", "hc1", "hc2", "hc3")
INFERENCE_KINDS = ("classic", "robust")
OBSERVATION_MODES = ("all", "flagged", "none")
CHANGE_POINT_SHAPES = ("none", "heating", "cooling", "two-slopes", "heating-cooling", "auto")
MAX_LAGS = 10_000


@dataclass(frozen=True)
class Setting:
    """One setting's contract: its kind, the values allowed, what it means and its option on the CLI.

    kind: path | text | texts (a list of texts; one text is a list of one) | bool | int | number | choice.
    low/high bound numbers (`low_open`/`high_open`: the bound itself is excluded); `optional` allows
    None (the default).
    """

    kind: str
    description: str
    option: str = ""
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    choices: tuple[str, ...] = ()
    optional: bool = False

    def expected(self) -> str:
        """'a number above 0 and below 1', 'true or false', 'one of "bh", "holm", "none"'…"""
        if self.kind == "choice":
            return "one of " + ", ".join(f'"{c}"' for c in self.choices)
        base = {"path": "a file path (text)", "text": "a non-empty text",
                "texts": "a list of non-empty texts (or one text)",
                "bool": "true or false", "int": "a whole number", "number": "a finite number"}[self.kind]
        bounds = []
        if self.low is not None:
            bounds.append(f"above {self.low:g}" if self.low_open else f"{self.low:g} or more")
        if self.high is not None:
            bounds.append(f"below {self.high:g}" if self.high_open else f"at most {self.high:g}")
        return base + (" " + " and ".join(bounds) if bounds else "")


def _threshold(description: str, option: str) -> Setting:
    return Setting("number", description, option, low=0.0, low_open=True)


SCHEMA: dict[str, Setting] = {
    "workbook": Setting("path", "the workbook or CSV file to read", "WORKBOOK"),
    "y": Setting("text", "the response column", "--y"),
    "x": Setting("texts", "the input terms (columns, COL^k, log(COL), sqrt(COL))", "--x"),
    "group": Setting("texts", "the columns whose values split the rows into groups", "--group"),
    "sheets": Setting("texts", "the sheets to read (default: the first)", "--sheet"),
    "all_sheets": Setting("bool", "read every sheet", "--all-sheets"),
    "table": Setting("text", "a named table or defined name to read instead of a sheet", "--table", optional=True),
    "header_row": Setting("int", "the header's row number (default: first non-empty row)", "--header-row",
                          low=1, optional=True),
    "intercept": Setting("bool", "fit an intercept", "--no-intercept"),
    "level": Setting("number", "the confidence level of the intervals", "--level", low=0.5, high=1.0,
                     high_open=True),
    "order": Setting("text", "the column giving the order within a group", "--order", optional=True),
    "strict": Setting("bool", "stop if any row cannot be used", "--strict"),
    "csv_delimiter": Setting("text", "the field separator of a .csv input", "--csv-delimiter", optional=True),
    "csv_decimal": Setting("text", "the decimal mark of a .csv input", "--csv-decimal", optional=True),
    "max_unpacked_bytes": Setting("int", "refuse workbooks that unpack to more bytes than this",
                                  "--max-unpacked-mb", low=1),
    "out": Setting("path", "the results workbook to write", "--out", optional=True),
    "overwrite": Setting("bool", "replace an existing results workbook", "--overwrite"),
    "max_charts": Setting("int", "at most this many charts", "--max-charts", low=0),
    "observations": Setting("choice", "rows on the observations sheet", "--observations",
                            choices=OBSERVATION_MODES),
    "alpha": Setting("number", "the level of every p-value-based verdict", "--alpha", low=0.0, high=1.0,
                     low_open=True, high_open=True),
    "adjust": Setting("choice", "the p-value adjustment across groups", "--adjust", choices=ADJUST_METHODS),
    "min_r2": Setting("number", "flag fits whose R² is below this", "--min-r2", low=0.0, high=1.0),
    "rows_per_coefficient": _threshold("flag fits with fewer rows per coefficient", "--rows-per-coefficient"),
    "leverage_factor": _threshold("highlight rows with leverage above factor·p/n", "--leverage-factor"),
    "studentized_cutoff": _threshold("highlight rows with |studentized residual| above this",
                                     "--studentized-cutoff"),
    "cooks_factor": _threshold("highlight rows with Cook's distance above factor/n", "--cooks-factor"),
    "vif_max": _threshold("flag inputs whose VIF exceeds this", "--vif-max"),
    "condition_max": _threshold("flag designs whose condition number exceeds this", "--condition-max"),
    "bg_lags": Setting("int", "lags of the Breusch–Godfrey test", "--bg-lags", low=1, high=MAX_LAGS),
    "hac_lags": Setting("int", "lags of the Newey–West std errors (default: from n)", "--hac-lags", low=0,
                        high=MAX_LAGS, optional=True),
    "robust": Setting("choice", "the kind of robust std errors", "--robust", choices=ROBUST_KINDS),
    "inference": Setting("choice", "the std errors behind intervals and flags", "--inference",
                         choices=INFERENCE_KINDS),
    "change_point": Setting("choice", "the change-point shape of the temperature input", "--change-point",
                            choices=CHANGE_POINT_SHAPES),
    "change_point_input": Setting("text", "the input whose change point is searched (default: the first "
                                  "plain-column input)", "--change-point-input", optional=True),
    "baseline_checks": Setting("bool", "judge fits by the energy-baseline criteria (on with --change-point)",
                               "--baseline-checks", optional=True),
    "previous": Setting("path", "an earlier results workbook of the same model to compare this run with",
                        "--previous", optional=True),
    "weights": Setting("text", "row weights of a weighted least-squares fit: a column, 1/COL or 1/COL^2",
                       "--weights", optional=True),
    "calibration": Setting("bool", "treat each group as a calibration line: detection and quantification limits, "
                           "back-calculated standards", "--calibration"),
    "back_calc_limit": _threshold("flag standards whose back-calculated value deviates by more than this %",
                                  "--back-calc-limit"),
    "back_calc_limit_lowest": _threshold("the same at the lowest non-zero standard, in %",
                                         "--back-calc-limit-lowest"),
    "max_cv_rmse": _threshold("flag baselines whose CV(RMSE) in % is above this", "--max-cv-rmse"),
    "max_nmbe": _threshold("flag baselines whose |NMBE| in % is above this", "--max-nmbe"),
    "baseline_min_r2": Setting("number", "flag baselines whose R² is below this", "--baseline-min-r2",
                               low=0.0, high=1.0),
}
TABLES = ("thresholds", "checks")        # job-file tables whose keys join the top-level ones


def _shown(value: Any) -> str:
    """The value found, as the user wrote it, with its kind: '"high" (text)', '[1, 2] (a list)'."""
    if isinstance(value, bool):
        return f"{str(value).lower()} (true/false)"
    if isinstance(value, str):
        return f'"{value}" (text)'
    if isinstance(value, (list, tuple)):
        return f"{list(value)!r} (a list)"
    if isinstance(value, dict):
        return "a table"
    if isinstance(value, numbers.Number):
        return f"{value!r}"
    return f"{value!r} (a {type(value).__name__})"


def _refuse(key: str, spec: Setting, value: Any, where: str = "") -> JobError:
    option = f" ({spec.option})" if spec.option and spec.option != key else ""
    hint = " (write it without quotes)" if _quoted(spec, value) else ""
    return JobError(f'{where}setting "{key}"{option} must be {spec.expected()}; found {_shown(value)}{hint}')


def _quoted(spec: Setting, value: Any) -> bool:
    """True when a text would be a right value without its quotes (`overwrite = "false"`, `alpha = "0.1"`)."""
    if not isinstance(value, str):
        return False
    if spec.kind == "bool":
        return value.strip().lower() in ("true", "false")
    if spec.kind in ("int", "number"):
        try:
            float(value)
        except ValueError:
            return False
        return True
    return False


def check_setting(key: str, value: Any, where: str = "") -> Any:
    """`value` checked against SCHEMA[key] and normalised (tuple of texts, Path, float, int); else JobError.

    `where` prefixes the message (e.g. 'job file job.toml: ').
    """
    spec = SCHEMA.get(key)
    if spec is None:
        raise unknown_setting(key, where)
    if value is None and spec.optional:
        return None
    kind = spec.kind
    if kind == "bool":
        if not isinstance(value, bool):
            raise _refuse(key, spec, value, where)
        return value
    if kind in ("text", "choice"):
        if isinstance(value, str) and not value and spec.optional:
            return None                     # an empty text is the default (`--csv-delimiter ""`)
        if not isinstance(value, str) or not value or (kind == "choice" and value not in spec.choices):
            raise _refuse(key, spec, value, where)
        return value
    if kind == "path":
        if not isinstance(value, (str, os.PathLike)) or not str(value).strip():
            raise _refuse(key, spec, value, where)
        return Path(value)
    if kind == "texts":
        items = (value,) if isinstance(value, str) else value
        if not isinstance(items, (list, tuple)) or not all(isinstance(v, str) and v for v in items):
            raise _refuse(key, spec, value, where)
        return tuple(items)
    return _check_number(key, spec, value, where)


def _check_number(key: str, spec: Setting, value: Any, where: str) -> int | float:
    """An int or number setting: a real number (not a boolean, not text), finite, whole if int, in range."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise _refuse(key, spec, value, where)
    try:
        number = float(value)
    except OverflowError:                   # an int beyond any float
        raise _refuse(key, spec, value, where) from None
    if not math.isfinite(number):
        raise _refuse(key, spec, value, where)
    if spec.kind == "int":
        if isinstance(value, numbers.Integral):
            number = int(value)
        elif number.is_integer():
            number = int(number)
        else:
            raise _refuse(key, spec, value, where)
    if spec.low is not None and (number < spec.low or (spec.low_open and number == spec.low)):
        raise _refuse(key, spec, value, where)
    if spec.high is not None and (number > spec.high or (spec.high_open and number == spec.high)):
        raise _refuse(key, spec, value, where)
    return number


def unknown_setting(key: str, where: str = "") -> JobError:
    """The error for a key no setting has: names the closest known key (or lists them all)."""
    near = closest(str(key), SCHEMA)
    tail = (f'closest known setting: "{near}"' if near is not None
            else "known settings: " + ", ".join(SCHEMA))
    return JobError(f'{where}unknown setting "{key}"; {tail}')


def _check_fields(obj: Any) -> None:
    for f in fields(obj):
        if f.name in SCHEMA:
            check_setting(f.name, getattr(obj, f.name))


@dataclass(frozen=True)
class Thresholds:
    """Cut-offs that turn statistics into verdicts; defaults are common practice unless noted."""

    alpha: float = 0.05                  # level for every p-value-based verdict
    adjust: str = "bh"                   # multiple-testing adjustment across groups: bh | holm | none
    min_r2: float = 0.5                  # R² below this is flagged as a weak fit (common practice, context-dependent)
    rows_per_coefficient: float = 10.0   # observations per estimated coefficient (common practice)
    leverage_factor: float = 2.0         # row highlighted when leverage > factor·p/n (common practice)
    studentized_cutoff: float = 3.0      # row highlighted when |externally studentized residual| > this
    cooks_factor: float = 4.0            # row highlighted when Cook's distance > factor/n (common practice)
    vif_max: float = 10.0                # VIF above this flags collinearity (common practice)
    condition_max: float = 30.0          # condition number of the unit-length-scaled design (common practice)
    bg_lags: int = 1                     # Breusch–Godfrey lag order
    hac_lags: int | None = None          # Newey–West lag; None → floor(4·(n/100)^(2/9))
    robust: str = "hc3"                  # heteroscedasticity-robust covariance kind
    inference: str = "classic"           # classic | robust: which std errors drive intervals and flags
    max_cv_rmse: float = 20.0            # baseline criterion, % (common practice for monthly energy baselines)
    max_nmbe: float = 0.5                # baseline criterion, |NMBE| in % (common practice)
    baseline_min_r2: float = 0.75        # baseline criterion (common practice for energy baselines)
    back_calc_limit: float = 15.0        # calibration: standard flagged beyond ±this % (common practice)
    back_calc_limit_lowest: float = 20.0  # the same at the lowest non-zero standard (common practice)

    def validate(self) -> "Thresholds":
        """Every field against SCHEMA (type, finiteness, range, choices); JobError on the first wrong one."""
        _check_fields(self)
        return self


@dataclass(frozen=True)
class FitJob:
    """Everything one run needs: input region, model, thresholds and output choices."""

    workbook: Path
    y: str
    x: tuple[str, ...]
    group: tuple[str, ...] = ()
    sheets: tuple[str, ...] = ()         # empty → the first sheet
    all_sheets: bool = False
    table: str | None = None             # a named table or defined name instead of a whole sheet
    header_row: int | None = None        # 1-based; None → first non-empty row
    intercept: bool = True
    level: float = 0.95                  # confidence level of coefficient and mean intervals
    order: str | None = None             # column giving the sequence within a group (dates, times, counters)
    strict: bool = False
    csv_delimiter: str | None = None
    csv_decimal: str | None = None
    max_unpacked_bytes: int = 2 * 1024**3
    out: Path | None = None
    overwrite: bool = False
    max_charts: int = 60
    observations: str = "all"            # all | flagged | none
    change_point: str = "none"           # none | heating | cooling | two-slopes | heating-cooling | auto
    change_point_input: str | None = None  # the temperature column; None → the first plain-column input
    baseline_checks: bool | None = None  # energy-baseline criteria; None → on exactly when change_point is set
    previous: Path | None = None         # an earlier results workbook: what changed since (results.changes)
    weights: str | None = None           # weighted least squares: COL, 1/COL or 1/COL^2 (terms.parse_weights)
    calibration: bool = False            # calibration-line extras: limits on groups, back-calculated standards
    thresholds: Thresholds = field(default_factory=Thresholds)

    def validate(self) -> "FitJob":
        """Required settings present, then every field against SCHEMA; JobError on the first problem."""
        if not self.y:
            raise JobError("no response column given; name it with --y COLUMN")
        if not self.x:
            raise JobError("no input term given; name at least one with --x TERM")
        _check_fields(self)
        if not isinstance(self.thresholds, Thresholds):
            raise JobError(f"thresholds must be a sheetfit.job.Thresholds; found {_shown(self.thresholds)}")
        self.thresholds.validate()
        if self.calibration and (len(self.x) != 1 or not self.intercept or self.change_point != "none"):
            raise JobError("--calibration needs a straight line in one input with a constant: one --x column, "
                           "without --no-intercept or --change-point")
        thr = self.thresholds
        if not self.calibration and (thr.back_calc_limit, thr.back_calc_limit_lowest) != (15.0, 20.0):
            raise JobError("--back-calc-limit and --back-calc-limit-lowest apply to calibration lines; add "
                           "--calibration or leave them out")
        if self.change_point == "none" and self.change_point_input is not None:
            raise JobError("--change-point-input names the temperature of a change-point model; add "
                           "--change-point SHAPE or leave it out")
        if self.change_point != "none" and self.weights:
            raise JobError("--weights cannot be combined with --change-point yet (the change-point search is "
                           "unweighted); leave one of them out")
        if self.change_point != "none" and not self.intercept:
            raise JobError("--change-point needs the constant (the use where the temperature has no effect); "
                           "leave out --no-intercept")
        return self

    @property
    def judge_baseline(self) -> bool:
        """Whether the energy-baseline criteria are checks of this run."""
        return self.change_point != "none" if self.baseline_checks is None else bool(self.baseline_checks)

    @property
    def output_path(self) -> Path:
        """Where results go: --out, else `<input stem>-fit.xlsx` beside the input."""
        if self.out is not None:
            return Path(self.out)
        src = Path(self.workbook)
        return src.with_name(f"{src.stem}-fit.xlsx")

    def settings_rows(self) -> list[tuple[str, str]]:
        """(setting, value) pairs for the `about` sheet, each setting once.

        Left out because `about` lists them already: the input file, the response, the terms, the
        intercept, the sheets and the header row (as read).
        """
        rows: list[tuple[str, str]] = []
        unused = set() if self.change_point != "none" else set(CHANGE_POINT_SETTINGS)
        if not self.judge_baseline:
            unused |= set(BASELINE_SETTINGS)
        if not self.calibration:
            unused |= set(CALIBRATION_SETTINGS)
        unused |= {name for name in OPTIONAL_FEATURES if getattr(self, name) is None}
        for f in fields(self):
            if f.name in SHOWN_ELSEWHERE or f.name in unused:
                continue
            rows.append((f.name.replace("_", " "), _show(getattr(self, f.name))))
        for f in fields(self.thresholds):
            if f.name not in unused:
                rows.append((f.name.replace("_", " "), _show(getattr(self.thresholds, f.name))))
        return rows


CHANGE_POINT_SETTINGS = ("change_point", "change_point_input")      # listed on `about` only when used
CALIBRATION_SETTINGS = ("calibration", "back_calc_limit", "back_calc_limit_lowest")
BASELINE_SETTINGS = ("baseline_checks", "max_cv_rmse", "max_nmbe", "baseline_min_r2")
OPTIONAL_FEATURES = ("weights", "previous")     # listed on `about` only when given
SHOWN_ELSEWHERE = ("thresholds", "workbook", "y", "x", "intercept", "sheets", "header_row")


def _show(value: Any) -> str:
    if value is None:
        return "(default)"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (tuple, list)):
        return ", ".join(str(v) for v in value) if value else "(none)"
    return str(value)


_JOB_KEYS = {f.name for f in fields(FitJob)} - {"thresholds"}
_THRESHOLD_KEYS = {f.name for f in fields(Thresholds)}
assert _JOB_KEYS | _THRESHOLD_KEYS == set(SCHEMA), "SCHEMA must describe every FitJob/Thresholds field"


def load_job_file(path: Path) -> dict[str, Any]:
    """Read a TOML job file into a flat dict of FitJob/Thresholds field names (dashes allowed).

    Every key and value is checked against SCHEMA (JobError naming the file, the key, the expected
    type and the value found); values are returned as written (paths stay text, relative to the
    file: see `job_file_settings`).
    """
    path = Path(path)
    where = f"job file {path.name}: "
    raw = _read_toml(path)
    flat: dict[str, Any] = {}
    for key, value in raw.items():
        if isinstance(value, dict) and key.replace("-", "_") not in SCHEMA:
            if key not in TABLES:
                near = closest(key, TABLES)
                raise JobError(f'{where}unknown table [{key}]; settings go at the top or under '
                               f'[{near or TABLES[0]}]')
            items = value.items()
        else:
            items = [(key, value)]
        for k, v in items:
            name = k.replace("-", "_")
            if name in flat:
                raise JobError(f'{where}setting "{name}" is given twice; keep one')
            check_setting(name, v, where)
            flat[name] = v
    return flat


def _read_toml(path: Path) -> dict[str, Any]:
    """The parsed file; a missing file, a folder, an unreadable or special file or bad TOML → JobError."""
    if path.is_dir():
        raise JobError(f'job file "{path}" is a folder; give the path of a TOML file to --job')
    if path.exists() and not path.is_file():
        raise JobError(f'job file "{path}" is not a regular file (a pipe, device or socket); '
                       f'give the path of a TOML file to --job')
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise JobError(f'job file "{path}" not found; check the path given to --job') from None
    except OSError as exc:
        raise JobError(f'job file "{path}" cannot be read ({exc.strerror or exc}); check its permissions') from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise JobError(f'job file "{path}" is not valid TOML: {" ".join(str(exc).split())}') from None


def job_file_settings(path: Path) -> dict[str, Any]:
    """The job file's settings, with its relative workbook/out/previous paths taken from the job file's folder."""
    settings = load_job_file(path)
    for key in ("workbook", "out", "previous"):
        value = settings.get(key)
        if isinstance(value, str) and value and not Path(value).expanduser().is_absolute():
            settings[key] = str(Path(path).parent / Path(value).expanduser())
    return settings


def make_job(settings: dict[str, Any]) -> FitJob:
    """Build and validate a FitJob from a flat dict of settings (job file merged with CLI options).

    None means "the default". Every value is checked against SCHEMA first, so a wrong type is a
    JobError naming the key, never a TypeError from deep inside a run.
    """
    job_kw: dict[str, Any] = {}
    thr_kw: dict[str, Any] = {}
    for key, value in settings.items():
        if value is None:
            continue
        value = check_setting(key, value)
        (thr_kw if key in _THRESHOLD_KEYS else job_kw)[key] = value
    if "workbook" not in job_kw:
        raise JobError("no workbook given; pass WORKBOOK or set workbook in the job file")
    if "y" not in job_kw:
        raise JobError("no response column given; name it with --y COLUMN")
    if "x" not in job_kw:
        raise JobError("no input term given; name at least one with --x TERM")
    return FitJob(thresholds=Thresholds(**thr_kw), **job_kw).validate()
