"""Seeded generator of the calibration demo workbook: standards and unknowns of invented lab instruments.

Twelve fictional instruments each measure a fictional analyte (quillate, in mg/L) on a run of
standards in triplicate, blank included. Most give a straight line with constant scatter; four are
built to misbehave in one way each, so the calibration results have something to show. A second
sheet holds unknown samples to read back through the lines. Both sheets carry the weight the (invented)
method prescribes for each row: 1, except on the instrument whose scatter grows with concentration.
Regenerated from the seed, byte for byte.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import pandas as pd

SEED = 20250374  # chosen so each misbehaving instrument fails its own check and no ordinary one fails any
SHEET = "Standards"
UNKNOWNS_SHEET = "Unknowns"
FILE_NAME = "lab-calibration.xlsx"
RESULTS_NAME = "lab-calibration-fit.xlsx"
WEIGHTED_RESULTS_NAME = "lab-calibration-weighted-fit.xlsx"
WEIGHT_FORMAT = "0.00000"                   # weights are written at full precision; five decimals are shown
CREATED = dt.datetime(2025, 1, 1, 0, 0, 0)  # fixed creation time → reproducible bytes
FIRST_RUN = dt.date(2025, 3, 3)             # the first instrument's run; one working day apart after it

INSTRUMENT, RUN_DATE, CONCENTRATION = "Instrument", "Run date", "Concentration (mg/L)"
REPLICATE, SIGNAL, WEIGHT = "Replicate", "Signal", "Weight"
SAMPLE, MEASUREMENTS = "Sample ID", "Measurements"
COLUMNS = (INSTRUMENT, RUN_DATE, CONCENTRATION, REPLICATE, SIGNAL, WEIGHT)
UNKNOWN_COLUMNS = (INSTRUMENT, SAMPLE, SIGNAL, MEASUREMENTS, WEIGHT)

# The job the calibration demo runs; workbooks/lab-calibration.toml holds the same settings.
CALIBRATION_JOB: dict[str, Any] = {
    "sheets": (SHEET,),
    "group": (INSTRUMENT,),
    "y": SIGNAL,
    "x": (CONCENTRATION,),
    "calibration": True,
}
# The same job fitted with the method's weights; workbooks/lab-calibration-weighted.toml holds it.
WEIGHTED_JOB: dict[str, Any] = {**CALIBRATION_JOB, "weights": WEIGHT}

# Standard levels (mg/L), blank first. Ordinary runs use eight or seven; one instrument only three.
EIGHT_LEVELS = (0.0, 0.5, 1.0, 2.0, 5.0, 10.0, 15.0, 20.0)
SEVEN_LEVELS = (0.0, 1.0, 2.0, 5.0, 10.0, 15.0, 20.0)
FEW_LEVELS = (0.0, 5.0, 20.0)
REPLICATES = 3

# (instrument, standard levels, behaviour). "ok" instruments are well-behaved; each other breaks one thing.
INSTRUMENTS: tuple[tuple[str, tuple[float, ...], str], ...] = (
    ("Amberline", EIGHT_LEVELS, "ok"),
    ("Birchwell", SEVEN_LEVELS, "ok"),
    ("Cobblemere", EIGHT_LEVELS, "curved"),
    ("Dapplecote", SEVEN_LEVELS, "ok"),
    ("Emberhythe", SEVEN_LEVELS, "drifting standard"),
    ("Fernsholt", EIGHT_LEVELS, "ok"),
    ("Gorsemoor", EIGHT_LEVELS, "growing spread"),
    ("Hollinbrae", SEVEN_LEVELS, "ok"),
    ("Ivydown", FEW_LEVELS, "few levels"),
    ("Juniperley", EIGHT_LEVELS, "ok"),
    ("Kestlewold", SEVEN_LEVELS, "ok"),
    ("Larchwick", EIGHT_LEVELS, "ok"),
)

CURVE_SHORTFALL = 0.08    # "curved": the signal falls short of the line by 8 % at the top standard (saturation)
DRIFT_LEVEL = 2.0         # "drifting standard": the working standard of this level (mg/L)…
DRIFT_FACTOR = 0.78       # …holds 78 % of its label (partly degraded): its replicates all read low
SPREAD_GROWTH = 0.5       # "growing spread": scatter at c mg/L is (1 + 0.5·c) × that at the blank (11 × at 20)
UNKNOWN_INSTRUMENT = "Quarrybank"  # named on the Unknowns sheet, absent from the standards
ABOVE_RANGE = ("Birchwell", 27.0)   # a sample of this instrument at 27 mg/L, beyond its top standard (20 mg/L)
BELOW_LOQ = ("Hollinbrae", 0.5)     # a sample of this instrument at half its (true) limit of quantification
LOW_SAMPLE = ("Gorsemoor", 1.0)     # a low sample (mg/L) on the growing-spread instrument, beside its high ones
PROVISIONAL_DECIMALS = 2            # the provisional read-back value behind an unknown's weight, in 0.01 mg/L


@dataclass(frozen=True)
class Line:
    """One instrument's true response: blank signal, counts per mg/L, and scatter in mg/L."""

    blank: float
    slope: float
    scatter: float      # std deviation of one measurement, in concentration units (mg/L)


@dataclass(frozen=True)
class CalibrationRuns:
    """The two sheets of the workbook as frames: the standards and the unknown samples."""

    standards: pd.DataFrame   # COLUMNS: one row per instrument, level and replicate
    unknowns: pd.DataFrame    # UNKNOWN_COLUMNS: one row per sample


def run_dates() -> list[dt.date]:
    """Each instrument's run date: working days (Monday to Friday) from FIRST_RUN, in INSTRUMENTS order."""
    dates, day = [], FIRST_RUN
    while len(dates) < len(INSTRUMENTS):
        if day.weekday() < 5:
            dates.append(day)
        day += dt.timedelta(days=1)
    return dates


def _lines(rng: Any) -> dict[str, Line]:
    """Each instrument's true calibration line, drawn in INSTRUMENTS order."""
    return {name: Line(blank=float(rng.uniform(60.0, 240.0)), slope=float(rng.uniform(900.0, 2600.0)),
                       scatter=float(rng.uniform(0.012, 0.025)))
            for name, _, _ in INSTRUMENTS}


def true_signal(line: Line, behaviour: str, concentration: Any) -> Any:
    """The signal an instrument gives without scatter, its built-in misbehaviour included."""
    import numpy as np

    x = np.asarray(concentration, dtype=np.float64)
    if behaviour == "curved":   # the detector saturates: the line bends down towards the top standard
        x = x * (1.0 - CURVE_SHORTFALL * x / max(EIGHT_LEVELS))
    elif behaviour == "drifting standard":
        x = np.where(x == DRIFT_LEVEL, DRIFT_FACTOR * x, x)
    return line.blank + line.slope * x


def _scatter(line: Line, behaviour: str, concentration: Any) -> Any:
    """Std deviation of one measurement's signal at each concentration (counts)."""
    import numpy as np

    x = np.asarray(concentration, dtype=np.float64)
    if behaviour == "growing spread":
        return line.slope * line.scatter * (1.0 + SPREAD_GROWTH * x)
    return np.full(x.shape, line.slope * line.scatter)


def method_weight(behaviour: str, concentration: Any) -> Any:
    """The weight the method prescribes at each concentration: 1/(1 + 0.5·c)², the inverse of the
    validated variance, on the growing-spread instrument; 1 (an ordinary fit) on every other."""
    import numpy as np

    x = np.asarray(concentration, dtype=np.float64)
    if behaviour == "growing spread":
        return 1.0 / (1.0 + SPREAD_GROWTH * x) ** 2
    return np.ones(x.shape)


def _standards(lines: dict[str, Line], rng: Any) -> pd.DataFrame:
    """The standards: per instrument, its levels in increasing order, each measured REPLICATES times."""
    import numpy as np
    import pandas as pd

    rows = []
    for (name, levels, behaviour), day in zip(INSTRUMENTS, run_dates()):
        x = np.repeat(np.asarray(levels, dtype=np.float64), REPLICATES)
        signal = true_signal(lines[name], behaviour, x) + rng.normal(0.0, 1.0, len(x)) * _scatter(
            lines[name], behaviour, x)
        replicate = np.tile(np.arange(1, REPLICATES + 1), len(levels))
        weight = method_weight(behaviour, x)
        rows += [(name, pd.Timestamp(day), float(x[i]), int(replicate[i]), round(float(signal[i]), 1),
                  float(weight[i])) for i in range(len(x))]
    return pd.DataFrame(rows, columns=list(COLUMNS))


def _unknowns(lines: dict[str, Line], standards: pd.DataFrame, rng: Any) -> pd.DataFrame:
    """Two to four samples per instrument, each the mean of 1–3 measurements, plus the special cases:
    one above the calibrated range, one below the limit of quantification, one low sample on the
    growing-spread instrument, and one of an unknown instrument. The low sample's draws come last,
    so every other sample keeps the values it had before that sample was added."""
    import numpy as np
    import pandas as pd

    drawn: list[tuple[str, float, int, float]] = []     # (instrument, concentration, measurements, z)
    for name, levels, _ in INSTRUMENTS:
        top = max(levels)
        conc = list(rng.uniform(0.1 * top, 0.9 * top, int(rng.integers(2, 5))))
        if name == ABOVE_RANGE[0]:
            conc.append(ABOVE_RANGE[1])
        if name == BELOW_LOQ[0]:
            conc.append(BELOW_LOQ[1] * 10.0 * lines[name].scatter)   # 10·σ/slope in mg/L is 10·scatter
        drawn += [(name, c, int(rng.integers(1, 4)), float(rng.normal(0.0, 1.0))) for c in conc]
    low = (LOW_SAMPLE[0], LOW_SAMPLE[1], int(rng.integers(1, 4)), float(rng.normal(0.0, 1.0)))
    after = max(i for i, d in enumerate(drawn) if d[0] == LOW_SAMPLE[0])
    drawn.insert(after + 1, low)
    behaviour = {name: how for name, _, how in INSTRUMENTS}
    rows: list[tuple[str, str, float, int]] = []
    for name, c, m, z in drawn:
        line, how = lines[name], behaviour[name]
        noise = z * float(_scatter(line, how, c)) / np.sqrt(m)
        rows.append((name, f"U-{len(rows) + 1:03d}", round(float(true_signal(line, how, c)) + noise, 1), m))
    like = lines[INSTRUMENTS[0][0]]                               # a plausible signal, for no known line
    rows.append((UNKNOWN_INSTRUMENT, f"U-{len(rows) + 1:03d}", round(like.blank + 8.0 * like.slope, 1), 2))
    frame = pd.DataFrame(rows, columns=list(UNKNOWN_COLUMNS[:-1]))
    return frame.assign(**{WEIGHT: sample_weights(frame, standards)})


def provisional_read_back(unknowns: pd.DataFrame, standards: pd.DataFrame) -> Any:
    """Each sample's concentration read back through its instrument's unweighted straight line
    (numpy least squares), rounded to PROVISIONAL_DECIMALS and never below 0; NaN for no known line."""
    import numpy as np

    out = np.full(len(unknowns), np.nan)
    for name, rows in standards.groupby(INSTRUMENT, sort=False):
        slope, constant = np.polyfit(rows[CONCENTRATION].to_numpy(float), rows[SIGNAL].to_numpy(float), 1)
        here = (unknowns[INSTRUMENT] == name).to_numpy()
        out[here] = (unknowns.loc[here, SIGNAL].to_numpy(float) - constant) / slope
    return np.maximum(np.round(out, PROVISIONAL_DECIMALS), 0.0)


def sample_weights(unknowns: pd.DataFrame, standards: pd.DataFrame) -> Any:
    """Each sample's weight under the method, taken at its provisional (unweighted) read-back value;
    1 where the instrument's weights are all 1 or the instrument is unknown."""
    import numpy as np

    behaviour = {name: how for name, _, how in INSTRUMENTS}
    level = provisional_read_back(unknowns, standards)
    how = unknowns[INSTRUMENT].map(behaviour).fillna("ok").to_numpy(dtype=object)
    return np.array([float(method_weight(h, c)) for h, c in zip(how, level)])


def generate_calibration(seed: int = SEED) -> CalibrationRuns:
    """The standards and the unknowns of the calibration demo, from one random stream per seed."""
    import numpy as np

    rng = np.random.default_rng(seed)
    lines = _lines(rng)
    standards = _standards(lines, rng)
    return CalibrationRuns(standards=standards, unknowns=_unknowns(lines, standards, rng))


def write_calibration_workbook(path: Path | str, seed: int = SEED) -> Path:
    """Write the calibration workbook: the Standards sheet and the Unknowns sheet."""
    import xlsxwriter

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    runs = generate_calibration(seed)
    options = {"strings_to_numbers": False, "strings_to_formulas": False, "strings_to_urls": False}
    with xlsxwriter.Workbook(str(path), options) as book:
        book.set_properties({"title": "Lab instruments: calibration standards and unknowns (invented demo data)",
                             "created": CREATED})
        _write_standards(book, book.add_worksheet(SHEET), runs.standards)
        _write_unknowns(book, book.add_worksheet(UNKNOWNS_SHEET), runs.unknowns)
    return path


def _finish(sheet: Any, rows: int, widths: tuple[int, ...]) -> None:
    """Column widths, a frozen header and a filter over the rows."""
    for c, width in enumerate(widths):
        sheet.set_column(c, c, width)
    sheet.freeze_panes(1, 0)
    sheet.autofilter(0, 0, rows, len(widths) - 1)


def _write_standards(book: Any, sheet: Any, frame: pd.DataFrame) -> None:
    """The standards sheet: a bold header, dates as dates, numbers with formats."""
    head = book.add_format({"bold": True, "bottom": 1})
    date_fmt = book.add_format({"num_format": "yyyy-mm-dd"})
    conc_fmt = book.add_format({"num_format": "0.00"})
    signal_fmt = book.add_format({"num_format": "#,##0.0"})
    weight_fmt = book.add_format({"num_format": WEIGHT_FORMAT})
    sheet.write_row(0, 0, COLUMNS, head)
    for r, (name, day, conc, rep, signal, weight) in enumerate(frame.itertuples(index=False), start=1):
        sheet.write_string(r, 0, name)
        sheet.write_datetime(r, 1, day.to_pydatetime(), date_fmt)
        sheet.write_number(r, 2, conc, conc_fmt)
        sheet.write_number(r, 3, rep)
        sheet.write_number(r, 4, signal, signal_fmt)
        sheet.write_number(r, 5, weight, weight_fmt)
    _finish(sheet, len(frame), (13, 11, 20, 10, 11, 10))


def _write_unknowns(book: Any, sheet: Any, frame: pd.DataFrame) -> None:
    """The unknowns sheet: instrument, sample, mean signal, how many measurements it averages, its weight."""
    head = book.add_format({"bold": True, "bottom": 1})
    signal_fmt = book.add_format({"num_format": "#,##0.0"})
    weight_fmt = book.add_format({"num_format": WEIGHT_FORMAT})
    sheet.write_row(0, 0, UNKNOWN_COLUMNS, head)
    for r, (name, sample, signal, m, weight) in enumerate(frame.itertuples(index=False), start=1):
        sheet.write_string(r, 0, name)
        sheet.write_string(r, 1, sample)
        sheet.write_number(r, 2, signal, signal_fmt)
        sheet.write_number(r, 3, m)
        sheet.write_number(r, 4, weight, weight_fmt)
    _finish(sheet, len(frame), (13, 11, 11, 14, 10))
