"""The run's settings: what to read, which model to fit, which thresholds judge it.

Built from CLI options or a TOML job file (`--job`); CLI options win over the file.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from .errors import JobError

ADJUST_METHODS = ("bh", "holm", "none")
ROBUST_KINDS = ("hc0", "hc1", "hc2", "hc3")
INFERENCE_KINDS = ("classic", "robust")
OBSERVATION_MODES = ("all", "flagged", "none")


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

    def validate(self) -> "Thresholds":
        if not 0 < self.alpha < 1:
            raise JobError(f"--alpha must be between 0 and 1, got {self.alpha}")
        if self.adjust not in ADJUST_METHODS:
            raise JobError(f"--adjust must be one of {', '.join(ADJUST_METHODS)}, got {self.adjust!r}")
        if self.robust not in ROBUST_KINDS:
            raise JobError(f"--robust must be one of {', '.join(ROBUST_KINDS)}, got {self.robust!r}")
        if self.inference not in INFERENCE_KINDS:
            raise JobError(f"--inference must be one of {', '.join(INFERENCE_KINDS)}, got {self.inference!r}")
        if not 0 <= self.min_r2 <= 1:
            raise JobError(f"--min-r2 must be between 0 and 1, got {self.min_r2}")
        if self.bg_lags < 1:
            raise JobError(f"--bg-lags must be at least 1, got {self.bg_lags}")
        if self.hac_lags is not None and self.hac_lags < 0:
            raise JobError(f"--hac-lags must be 0 or more, got {self.hac_lags}")
        for name in ("rows_per_coefficient", "leverage_factor", "studentized_cutoff", "cooks_factor",
                     "vif_max", "condition_max"):
            if getattr(self, name) <= 0:
                raise JobError(f"--{name.replace('_', '-')} must be positive, got {getattr(self, name)}")
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
    thresholds: Thresholds = field(default_factory=Thresholds)

    def validate(self) -> "FitJob":
        if not self.y:
            raise JobError("no response column given; name it with --y COLUMN")
        if not self.x:
            raise JobError("no input term given; name at least one with --x TERM")
        if not 0.5 <= self.level < 1:
            raise JobError(f"--level must be at least 0.5 and below 1, got {self.level}")
        if self.max_charts < 0:
            raise JobError(f"--max-charts must be 0 or more, got {self.max_charts}")
        if self.observations not in OBSERVATION_MODES:
            raise JobError(f"--observations must be one of {', '.join(OBSERVATION_MODES)}, got {self.observations!r}")
        if self.header_row is not None and self.header_row < 1:
            raise JobError(f"--header-row counts from 1, got {self.header_row}")
        if self.max_unpacked_bytes <= 0:
            raise JobError("--max-unpacked-mb must be positive")
        self.thresholds.validate()
        return self

    @property
    def output_path(self) -> Path:
        """Where results go: --out, else `<input stem>-fit.xlsx` beside the input."""
        if self.out is not None:
            return Path(self.out)
        src = Path(self.workbook)
        return src.with_name(f"{src.stem}-fit.xlsx")

    def settings_rows(self) -> list[tuple[str, str]]:
        """(setting, value) pairs for the `about` sheet."""
        rows: list[tuple[str, str]] = []
        for f in fields(self):
            if f.name in ("thresholds", "workbook"):
                continue
            rows.append((f.name.replace("_", " "), _show(getattr(self, f.name))))
        for f in fields(self.thresholds):
            rows.append((f.name.replace("_", " "), _show(getattr(self.thresholds, f.name))))
        return rows


def _show(value: Any) -> str:
    if value is None:
        return "(default)"
    if isinstance(value, (tuple, list)):
        return ", ".join(str(v) for v in value) if value else "(none)"
    return str(value)


_JOB_KEYS = {f.name for f in fields(FitJob)} - {"thresholds"}
_THRESHOLD_KEYS = {f.name for f in fields(Thresholds)}


def load_job_file(path: Path) -> dict[str, Any]:
    """Read a TOML job file into a flat dict of FitJob/Thresholds field names (dashes allowed)."""
    path = Path(path)
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise JobError(f'job file "{path}" not found; check the path given to --job') from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise JobError(f'job file "{path}" is not valid TOML: {exc}') from None
    flat: dict[str, Any] = {}
    for key, value in raw.items():
        if isinstance(value, dict):  # [checks] / [thresholds] tables flatten into one namespace
            for k, v in value.items():
                flat[k.replace("-", "_")] = v
        else:
            flat[key.replace("-", "_")] = value
    unknown = sorted(set(flat) - _JOB_KEYS - _THRESHOLD_KEYS)
    if unknown:
        raise JobError(f"job file {path.name} has unknown settings: {', '.join(unknown)}; "
                       f"known ones are: {', '.join(sorted(_JOB_KEYS | _THRESHOLD_KEYS))}")
    return flat


def make_job(settings: dict[str, Any]) -> FitJob:
    """Build and validate a FitJob from a flat dict of settings (job file merged with CLI options)."""
    job_kw: dict[str, Any] = {}
    thr_kw: dict[str, Any] = {}
    for key, value in settings.items():
        if value is None:
            continue
        if key in _THRESHOLD_KEYS:
            thr_kw[key] = value
        elif key in _JOB_KEYS:
            job_kw[key] = value
        else:
            raise JobError(f"unknown setting {key!r}")
    for key in ("x", "group", "sheets"):
        if key in job_kw:
            v = job_kw[key]
            job_kw[key] = (v,) if isinstance(v, str) else tuple(v)
    for key in ("workbook", "out"):
        if key in job_kw and job_kw[key] is not None:
            job_kw[key] = Path(job_kw[key])
    if "workbook" not in job_kw:
        raise JobError("no workbook given; pass WORKBOOK or set workbook in the job file")
    if "y" not in job_kw:
        raise JobError("no response column given; name it with --y COLUMN")
    if "x" not in job_kw:
        raise JobError("no input term given; name at least one with --x TERM")
    try:
        thresholds = Thresholds(**thr_kw)
        job = FitJob(thresholds=thresholds, **job_kw)
    except TypeError as exc:
        raise JobError(f"bad setting: {exc}") from None
    return job.validate()
