"""Every setting described once, in SCHEMA (expected type, allowed range or choices, what it means), and
`check_setting`, which every value passes through (the job file, the API keywords and the CLI values):
a wrong value is one line naming the key, the expected type and the value found.
"""

from __future__ import annotations

import math
import numbers
import os
from dataclasses import dataclass, fields
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

    kind: path | paths (one path, or a non-empty list of them) | text | texts (a list of texts; one text is a
    list of one) | bool | int | number | choice.
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
        base = {"path": "a file path (text)", "paths": "a file or folder path (text), or a list of them",
                "text": "a non-empty text",
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
    "workbook": Setting("paths", "the workbook or CSV file to read; several files, or a folder of them, are read "
                        "as one table with the file name as the first group column", "WORKBOOK"),
    "y": Setting("text", "the response column", "--y"),
    "responses": Setting("texts", "several response columns, each fitted against the same inputs (--y repeated)",
                         "--y"),
    "x": Setting("texts", "the input terms (columns, COL^k, log(COL), sqrt(COL), levels(COL), A by B)", "--x"),
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
    "reference": Setting("texts", "the reference level of a category input, as COLUMN=LEVEL (default: the first "
                         "level in sorted order)", "--reference"),
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


def shown_value(value: Any) -> str:
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
    return JobError(f'{where}setting "{key}"{option} must be {spec.expected()}; found {shown_value(value)}{hint}')


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
    if kind == "paths":
        return _check_paths(key, spec, value, where)
    if kind == "texts":
        items = (value,) if isinstance(value, str) else value
        if not isinstance(items, (list, tuple)) or not all(isinstance(v, str) and v for v in items):
            raise _refuse(key, spec, value, where)
        return tuple(items)
    return _check_number(key, spec, value, where)


def _check_paths(key: str, spec: Setting, value: Any, where: str) -> Path | tuple[Path, ...]:
    """One path → a Path; a non-empty list of paths → a tuple of Paths (even a list of one: several-files mode)."""
    def ok(v: Any) -> bool:
        return isinstance(v, (str, os.PathLike)) and bool(str(v).strip())

    if ok(value):
        return Path(value)
    if isinstance(value, (list, tuple)) and value and all(ok(v) for v in value):
        return tuple(Path(v) for v in value)
    raise _refuse(key, spec, value, where)


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


def check_fields(obj: Any) -> None:
    """Every field of a settings dataclass that SCHEMA describes, checked (JobError on the first wrong one)."""
    for f in fields(obj):
        if f.name in SCHEMA:
            check_setting(f.name, getattr(obj, f.name))
