"""A case of the combination matrix from data to results: its seeded rows, its input files in every format
(one file, or the table split in two by group), the run by its route (API or the real CLI) and the result
tables read back. The cases themselves are defined in tests/combinations.py.

Data are invented (seeded numpy); only the reference values of the tests come from statsmodels and scipy.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import shutil
import subprocess
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd

import sheetfit
from sheetfit.results.calibration import BACK_CALCULATED, DEVIATION, STANDARD_OFF
from sheetfit.results.headers import WEIGHT_USED
from tests.combinations import (
    BAD_CELL,
    CREW,
    DATA_REFERENCE,
    DAY,
    EQUAL_WEIGHT,
    EQUAL_WEIGHT_GROUP,
    FIRST_DAY,
    GAS,
    GAS_BLANK_GROUP,
    GROUP,
    HEADER,
    LEVEL_EFFECT,
    LEVEL_PATTERN,
    LEVEL_SLOPE,
    LEVELS,
    RESPONSE_KEY,
    RESPONSE_VALUE,
    SEQ,
    SHIFT,
    STANDARDS,
    TEMPERATURE_PART,
    WEIGHT,
    Case,
    Y,
)
from tests.corpus import writers

SHEETS = ("groups", "coefficients", "checks", "observations")
CHANGE_TABLES = ("since previous run", "coefficient changes")     # README: the sheets --previous adds
OBS_VALUES = ("fitted value", "residual", "leverage", "Cook's distance", "studentized residual")
CALIBRATION_ROWS = (BACK_CALCULATED, DEVIATION, STANDARD_OFF)
PART = "_part"            # the table's column saying which input file holds the row (0 or 1)
RowId = tuple[str, str, int]         # (response, file name, row in that file): one row of `observations`
Key = tuple[tuple[str, str], ...]    # a group: (group column, value) for each key column, in the results' order
SOURCE_FILE = "source file"          # README: on observations when several files are read


# ---------------------------------------------------------------- seeded data

def _second_part(term: str, f: pd.DataFrame, days: np.ndarray) -> np.ndarray:
    """y's part beyond the temperature for each term kind: the second input's effect, level effects, products."""
    cdd, pallets = f["CDD"].to_numpy(float), f["Pallets"].to_numpy(float)
    shift = f[SHIFT].map(LEVEL_EFFECT[SHIFT]).to_numpy(float)
    return {"plain": lambda: 0.4 * pallets, "power": lambda: -0.08 * cdd**2, "log": lambda: 12.0 * np.log(pallets),
            "sqrt": lambda: 2.5 * np.sqrt(pallets), "date": lambda: 0.3 * days, "one": lambda: np.zeros(len(f)),
            "category": lambda: shift, "levels": lambda: f[CREW].map(LEVEL_EFFECT[CREW]).to_numpy(float),
            "product": lambda: 0.4 * pallets + 0.01 * cdd * pallets,
            "slope by level": lambda: shift + cdd * f[SHIFT].map(LEVEL_SLOPE).to_numpy(float)}[term]()


def _levels(column: str, g: int, m: int, good: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Group g's levels of a category column (LEVEL_PATTERN): every level it shows on at least two of its
    usable rows (`good`), the other rows at one of them."""
    levels, ref = LEVELS[column], DATA_REFERENCE[column]
    others = [v for v in levels if v != ref]
    present = {"all": list(levels), "no other": [v for v in levels if v != others[0]], "no reference": others,
               "one level": [others[-1]]}[LEVEL_PATTERN.get(g, "all")]
    out = np.array(rng.choice(np.array(present, dtype=object), size=m), dtype=object)
    out[good] = rng.permutation(np.resize(np.array(present, dtype=object), int(good.sum())))
    return out


def make_table(case: Case, seed: int | None = None) -> pd.DataFrame:
    """The rows of the input, in file order (seeded by the case id, or by `seed`), with PART saying which file
    holds each.

    Per group: inputs on different scales, levels of Shift and Crew (some groups lacking a level, the
    reference or all levels but one: LEVEL_PATTERN), a temperature part of the case's shape (a clear bend in
    CDD for change-point cases; the STANDARDS' levels for a one-input line), errors that are
    heteroscedastic (group 1), AR(1) along the sequence (group 2) or plain (group 3), so robust std
    errors come into play where groups are big enough, a second response Gas (one blank cell in group 2),
    and positive weights (all equal in group 3, a few extra rows with weights that are not positive where
    the case weights by them). Groups interleave in the file; with an order column the rows are shuffled
    and Seq gives the sequence, without one the file order is the sequence. With two files, group g goes to
    file g mod 2 (one group: its rows alternate along the sequence).
    """
    rng = np.random.default_rng(case.seed if seed is None else seed)
    parts = []
    for g, n in enumerate(case.group_sizes()):
        bad = BAD_CELL.get(case.term) if g == 0 else None
        bad_weights = case.weight_problems(g)
        m = n + (bad is not None) + len(bad_weights)
        good = np.ones(m, dtype=bool)
        good[m - len(bad_weights):] = False                   # extra rows at the end of the group's sequence
        good[m // 2] &= bad is None
        cdd = rng.uniform(1.0, 30.0, m)
        if case.standards:
            cdd = rng.permutation(np.resize(STANDARDS, m))
        offsets = np.sort(rng.choice(4 * m, size=m, replace=False)) + 11 * g
        frame = pd.DataFrame({GROUP: f"S{g + 1:02d}", DAY: [FIRST_DAY + dt.timedelta(days=int(o)) for o in offsets],
                              "CDD": cdd, "Pallets": rng.uniform(5.0, 200.0, m),
                              SHIFT: _levels(SHIFT, g, m, good, rng), CREW: _levels(CREW, g, m, good, rng)})
        second = _second_part(case.term, frame, (offsets - offsets.min()).astype(float))
        temperature = TEMPERATURE_PART[case.data_shape(g)](cdd)
        frame[Y] = 40.0 * case.intercept + temperature + second + _errors(rng, g, cdd)
        frame[GAS] = 30.0 * case.intercept + 0.8 * temperature + 0.5 * second + rng.normal(scale=1.5, size=m)
        if g == GAS_BLANK_GROUP:
            frame.loc[m // 3, GAS] = np.nan
        weight = np.full(m, EQUAL_WEIGHT) if g == EQUAL_WEIGHT_GROUP else rng.uniform(0.5, 4.0, m)
        weight[m - len(bad_weights):] = bad_weights
        frame[WEIGHT] = weight
        if bad is not None:
            frame[bad[0]] = frame[bad[0]].astype(object)
            frame.loc[m // 2, bad[0]] = bad[1]
        frame["_time"] = np.cumsum(rng.exponential(size=m))
        frame[PART] = g % 2 if case.files > 1 else 0
        parts.append(frame)
    table = pd.concat(parts, ignore_index=True).sort_values("_time", kind="stable")
    table[SEQ] = np.arange(1, len(table) + 1)
    if case.files > 1 and case.sizes == "one":
        table[PART] = (table[SEQ] - 1) % 2
    if case.order:
        table = table.iloc[rng.permutation(len(table))]
    return table[[*HEADER, PART]].reset_index(drop=True)


def _errors(rng: np.random.Generator, g: int, cdd: np.ndarray) -> np.ndarray:
    """Group g's errors: spread growing with CDD (g mod 3 = 0), AR(1) along the sequence (1) or plain (2)."""
    m = len(cdd)
    kind = g % 3
    if kind == 0:
        return rng.normal(size=m) * 0.004 * cdd**2.5
    if kind == 1:
        e = rng.normal(scale=2.0, size=m)
        err = np.empty(m)
        err[0] = e[0]
        for i in range(1, m):
            err[i] = 0.9 * err[i - 1] + e[i]
        return err
    return rng.normal(scale=2.0, size=m)


# ---------------------------------------------------------------- input files

def with_file_rows(case: Case, table: pd.DataFrame) -> pd.DataFrame:
    """The table with each row's file name (`_file`) and its row number in that file (`_file_row`, header row 1)."""
    names = case.file_names()
    return table.assign(_file=[names[k] for k in table[PART]], _file_row=table.groupby(PART).cumcount() + 2)


def every_row(case: Case, table: pd.DataFrame) -> set[RowId]:
    """Every row read, once per response (README: with --y repeated every row appears once per response)."""
    t = with_file_rows(case, table)
    return {(r, f, int(i)) for r in case.ys for f, i in zip(t["_file"], t["_file_row"])}


def file_tables(case: Case, table: pd.DataFrame) -> list[tuple[str, pd.DataFrame]]:
    """(file name, its rows in file order) of each input file of the case."""
    return [(name, table[table[PART] == k]) for k, name in enumerate(case.file_names())]


def _cell(v):
    """A cell as written: None for a blank (NaN, None, '')."""
    if v is None or (isinstance(v, float) and np.isnan(v)) or v == "":
        return None
    if isinstance(v, (np.integer, int)) and not isinstance(v, bool):
        return int(v)
    return float(v) if isinstance(v, (np.floating, float)) else v


def _rows(table: pd.DataFrame) -> list[list]:
    return [[_cell(r[c]) for c in HEADER] for r in table.to_dict("records")]


def _csv(table: pd.DataFrame, path: Path) -> None:
    out = io.StringIO()
    w = csv.writer(out, lineterminator="\n")
    w.writerow(HEADER)
    for row in _rows(table):
        w.writerow(["" if v is None else v.isoformat() if isinstance(v, dt.date) else repr(v)
                    if isinstance(v, float) else v for v in row])
    path.write_text(out.getvalue(), encoding="utf-8")


def _ods_cell(v) -> str:
    if v is None:
        return "<table:table-cell/>"
    if isinstance(v, dt.date):
        return (f'<table:table-cell office:value-type="date" office:date-value="{v.isoformat()}">'
                f'<text:p>{v.isoformat()}</text:p></table:table-cell>')
    if isinstance(v, (int, float)):
        return (f'<table:table-cell office:value-type="float" office:value="{v!r}"><text:p>{v!r}</text:p>'
                f'</table:table-cell>')
    return f'<table:table-cell office:value-type="string"><text:p>{v}</text:p></table:table-cell>'


def _ods(table: pd.DataFrame, path: Path) -> None:
    xml = "".join("<table:table-row>" + "".join(_ods_cell(v) for v in row) + "</table:table-row>"
                  for row in [HEADER, *_rows(table)])
    writers.ods(xml)(path)


def write_input(case: Case, table: pd.DataFrame, path: Path) -> None:
    """One file's rows as an input file of the case's format (.xls: see convert_to_xls)."""
    if case.format == "csv":
        _csv(table, path)
    elif case.format == "ods":
        _ods(table, path)
    elif case.format in ("xlsx", "xls"):     # .xls: this .xlsx, converted by LibreOffice in one batch
        writers.xlsx([HEADER, *_rows(table)], title="Data")(path)
    else:
        raise ValueError(case.format)


def soffice() -> str | None:
    return shutil.which("soffice") or shutil.which("libreoffice")


def convert_to_xls(sources: list[Path], outdir: Path) -> None:
    """Convert .xlsx files to legacy .xls with LibreOffice, all in one call (its start-up is slow)."""
    outdir.mkdir(parents=True, exist_ok=True)
    subprocess.run([soffice(), "--headless", f"-env:UserInstallation=file://{outdir}/profile", "--convert-to",
                    "xls", "--outdir", str(outdir), *map(str, sources)], check=True, capture_output=True,
                   timeout=300)


# ---------------------------------------------------------------- the run and its tables

def num(values) -> np.ndarray:
    """A column as float64, empty workbook cells (None) as NaN."""
    return pd.to_numeric(pd.Series(list(values), dtype=object), errors="coerce").to_numpy(dtype=float)


def text(value) -> str:
    """A text cell as str, an empty workbook cell (None) or a missing value (NaN) as ''."""
    return "" if value is None or (isinstance(value, float) and np.isnan(value)) else str(value)


def of_group(frame: pd.DataFrame, key: Key) -> pd.DataFrame:
    """The rows of one group: those holding the key's value in each of its group columns."""
    mask = np.ones(len(frame), dtype=bool)
    for column, value in key:
        mask &= (frame[column].astype(str) == value).to_numpy()
    return frame[mask]


def key_of(case: Case, row: pd.Series) -> Key:
    """A results row's group: its value in each group column of the case."""
    return tuple((column, str(row[column])) for column in case.keys)


def row_ids(case: Case, frame: pd.DataFrame) -> list[RowId]:
    """Each row of an observations table as (response, file name, source row)."""
    n = len(frame)
    responses = frame[RESPONSE_KEY].astype(str) if case.responses > 1 else [case.ys[0]] * n
    files = frame[SOURCE_FILE].astype(str) if case.files > 1 else [case.file_names()[0]] * n
    return list(zip(responses, files, num(frame["source row"]).astype(int).tolist()))



def read_sheet(book, name: str) -> pd.DataFrame | None:
    """A table sheet of the results workbook (header in row 1; on `since previous run` the row starting with
    its first column header, below the title and notes); None for an observations sheet without rows."""
    ws = book[name]
    rows = list(ws.iter_rows(values_only=True))
    if name == CHANGE_TABLES[0]:
        rows = rows[next(i for i, r in enumerate(rows) if r and "what changed" in r):]
    if not rows or (name == "observations" and "source row" not in rows[0]):     # observations = none: a note
        return None
    head = [h for h in rows[0]]
    width = max((i + 1 for i, h in enumerate(head) if h is not None), default=0)
    return pd.DataFrame([list(r[:width]) + [None] * (width - len(r)) for r in rows[1:]], columns=head[:width])


def run_case(case: Case, sources: list[Path], out: Path, cli, previous: Path | None = None
             ) -> dict[str, pd.DataFrame]:
    """sheetfit on the input file(s), by the case's route; the four tables (in memory, or read back from `out`),
    and with `previous` (an earlier results workbook) the two tables of what changed (CHANGE_TABLES).
    Two files are given as a list (API) or as two WORKBOOK arguments (CLI)."""
    if case.route == "api":
        res = sheetfit.fit_workbook(sources[0] if case.files == 1 else sources, **case.settings(),
                                    **({"previous": previous} if previous is not None else {}))
        assert res.info.date_columns == ((DAY,) if case.term == "date" else ()), res.info.date_columns
        sheetfit.write_results(res, out)
        changes = (None, None) if res.changes is None else (res.changes.groups, res.changes.coefficients)
        return {"groups": res.groups, "coefficients": res.coefficients, "checks": res.checks,
                "observations": res.observations, "_in_memory": True, **dict(zip(CHANGE_TABLES, changes))}
    extra = ["--previous", str(previous)] if previous is not None else []
    done = cli("fit", *[s.name for s in sources], *case.cli_args(), *extra, "--out", out.name, cwd=sources[0].parent)
    assert done.returncode == 0, done.stderr
    book = openpyxl.load_workbook(out, read_only=True, data_only=True)
    tables = {name: read_sheet(book, name) for name in SHEETS}
    tables |= {name: read_sheet(book, name) if name in book.sheetnames else None for name in CHANGE_TABLES}
    book.close()
    if tables["observations"] is None:             # observations = none: no rows, the columns a run would have
        ours = [*([WEIGHT_USED] if case.weights != "none" else []), *(CALIBRATION_ROWS if case.calibration else [])]
        y = RESPONSE_VALUE if case.responses > 1 else Y
        tables["observations"] = pd.DataFrame(columns=[*case.keys, "source file", "source row", y, "used in fit",
                                                       "row flags", *OBS_VALUES, *ours])
    return tables
