"""The run's settings: what to read, which model to fit, which thresholds judge it.

Built from CLI options, a TOML job file (`--job`) or the Python API's keyword settings; CLI options
win over the file. Every setting is described once, in SCHEMA (expected type, allowed range or
choices, what it means); the job file, the API keywords and the CLI values all pass through
`check_setting`, so a wrong value is one line naming the key, the expected type and the value found.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from .errors import JobError, closest
from .settings import (  # noqa: F401  (re-exported: the settings' names are part of sheetfit.job)
    ADJUST_METHODS,
    CHANGE_POINT_SHAPES,
    INFERENCE_KINDS,
    MAX_LAGS,
    OBSERVATION_MODES,
    ROBUST_KINDS,
    SCHEMA,
    TABLES,
    Setting,
    check_fields,
    check_setting,
    shown_value,
    unknown_setting,
)

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
        check_fields(self)
        return self


@dataclass(frozen=True)
class FitJob:
    """Everything one run needs: input region, model, thresholds and output choices."""

    workbook: Path | tuple[Path, ...]     # one file; or several files / a folder read as one table (read.many)
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
    reference: tuple[str, ...] = ()      # COLUMN=LEVEL: the reference level of a category input
    responses: tuple[str, ...] = ()      # --y repeated: every response (y is the first); empty for one response
    weights: str | None = None           # weighted least squares: COL, 1/COL or 1/COL^2 (terms.parse_weights)
    calibration: bool = False            # calibration-line extras: limits on groups, back-calculated standards
    thresholds: Thresholds = field(default_factory=Thresholds)

    def validate(self) -> "FitJob":
        """Required settings present, then every field against SCHEMA; JobError on the first problem."""
        if not self.y:
            raise JobError("no response column given; name it with --y COLUMN")
        if not self.x:
            raise JobError("no input term given; name at least one with --x TERM")
        check_fields(self)
        if not isinstance(self.thresholds, Thresholds):
            raise JobError(f"thresholds must be a sheetfit.job.Thresholds; found {shown_value(self.thresholds)}")
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
        self.reference_levels()
        if self.responses and self.weights and any(r in str(self.weights) for r in self.responses):
            raise JobError("--weights cannot use a response's own column when several responses are fitted; give a "
                           "weight column or an input instead, or fit the responses one at a time")
        if self.change_point != "none" and self.weights:
            raise JobError("--weights cannot be combined with --change-point yet (the change-point search is "
                           "unweighted); leave one of them out")
        if self.change_point != "none" and not self.intercept:
            raise JobError("--change-point needs the constant (the use where the temperature has no effect); "
                           "leave out --no-intercept")
        return self

    @property
    def all_responses(self) -> tuple[str, ...]:
        """Every response column of the run (the one `y` unless --y was repeated)."""
        return tuple(self.responses) or (self.y,)

    def reference_levels(self) -> dict[str, str]:
        """--reference as {column: level}; JobError in one line for an entry without '='."""
        out: dict[str, str] = {}
        for item in self.reference:
            col, sep, level = str(item).partition("=")
            if not sep or not col.strip() or not level.strip():
                raise JobError(f'--reference "{item}": write COLUMN=LEVEL, for example --reference "Shift=day"')
            out[col.strip()] = level.strip()
        return out

    @property
    def judge_baseline(self) -> bool:
        """Whether the energy-baseline criteria are checks of this run."""
        return self.change_point != "none" if self.baseline_checks is None else bool(self.baseline_checks)

    @property
    def inputs(self) -> tuple[Path, ...]:
        """The input paths as given (a folder stays a folder; `read.many.input_files` lists what it holds)."""
        return tuple(Path(p) for p in self.workbook) if isinstance(self.workbook, tuple) else (Path(self.workbook),)

    @property
    def several_files(self) -> bool:
        """Whether the input is a list of paths or a folder: read as one table with the file name as a group key.

        A list of one path counts too, so a script's output keeps one layout however many files it lists."""
        return isinstance(self.workbook, tuple) or Path(self.workbook).is_dir()

    @property
    def output_path(self) -> Path:
        """Where results go: --out, else beside the (first) input: `<input stem>-fit.xlsx` for one file or a
        list of one, `<first stem>-and-N-more-fit.xlsx` for a list of N + 1, `<folder name>-fit.xlsx` for a
        folder (beside it, not inside, so a later run over the folder does not read it)."""
        if self.out is not None:
            return Path(self.out)
        first = _named(self.inputs[0])
        more = len(self.inputs) - 1
        return first.parent / (f"{first.stem}-and-{more}-more-fit.xlsx" if more else f"{first.stem}-fit.xlsx")

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
        unused |= {name for name in OPTIONAL_FEATURES if getattr(self, name) in (None, ())}
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
OPTIONAL_FEATURES = ("weights", "previous", "reference", "responses")     # listed on `about` only when given
SHOWN_ELSEWHERE = ("thresholds", "workbook", "y", "x", "intercept", "sheets", "header_row")


def _named(path: Path) -> Path:
    """`path` with a last part to name the output after ('.' and '..' are resolved; a root stays 'inputs')."""
    if path.name in ("", ".", ".."):
        path = path.resolve()
    return path if path.name else path / "inputs"


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
    """The job file's settings, with its relative workbook/out/previous paths (each path of a list of
    workbooks too) taken from the job file's folder."""
    settings = load_job_file(path)
    for key in ("workbook", "out", "previous"):
        value = settings.get(key)
        if isinstance(value, list):
            settings[key] = [_from_folder(Path(path).parent, v) for v in value]
        elif isinstance(value, str):
            settings[key] = _from_folder(Path(path).parent, value)
    return settings


def _from_folder(folder: Path, value: str) -> str:
    """A job file's path: absolute as written, else taken from the job file's folder."""
    if value and not Path(value).expanduser().is_absolute():
        return str(folder / Path(value).expanduser())
    return value


def make_job(settings: dict[str, Any]) -> FitJob:
    """Build and validate a FitJob from a flat dict of settings (job file merged with CLI options).

    None means "the default". Every value is checked against SCHEMA first, so a wrong type is a
    JobError naming the key, never a TypeError from deep inside a run.
    """
    job_kw: dict[str, Any] = {}
    thr_kw: dict[str, Any] = {}
    settings = _responses(settings)
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


def _responses(settings: dict[str, Any]) -> dict[str, Any]:
    """`y` given as a list (--y repeated, or a list in a job file): the first is `y`, all are `responses`."""
    y = settings.get("y")
    if isinstance(y, (list, tuple)):
        names = list(dict.fromkeys(str(v) if isinstance(v, str) else v for v in y))
        settings = {**settings, "y": names[0] if names else None}
        if len(names) > 1:
            settings["responses"] = names
    return settings
