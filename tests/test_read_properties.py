"""Property-based tests: whatever the data cells hold, the reader does not crash, every non-blank row
comes back exactly once, each row is either usable (finite numbers) or carries a reason naming the
column and the problem, and the counts add up.
"""

from __future__ import annotations

import csv
import datetime as dt
import math
import re
import tempfile
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from sheetfit.errors import NoUsableDataError
from sheetfit.job import FitJob
from sheetfit.read.observations import read_observations
from sheetfit.read.tidy import REASON, SOURCE_ROW

COLUMNS = ("Load kWh", "CDD", "Pallets")
SPLIT = re.compile("; (?=(?:" + "|".join(map(re.escape, COLUMNS)) + "): )")   # quoted cell text may hold "; "
MESSY = ["1,5", "1.234,5", "12%", "$1,200", "(3)", "\u22122", "#N/A", "#DIV/0!", " 7 ", "", "   ", "abc", "1e999",
         "2024-02-30", "2024-01-02", "TRUE", "=1+2", "nan", "\u00a0", "0,125", "١٢"]

CELL = st.one_of(
    st.none(), st.floats(allow_nan=False, allow_infinity=False, min_value=-1e300, max_value=1e300),
    st.integers(-10**12, 10**12), st.booleans(), st.sampled_from(MESSY), st.text(max_size=10),
    st.dates(min_value=dt.date(1950, 1, 1), max_value=dt.date(2099, 12, 31)),
    st.datetimes(min_value=dt.datetime(1950, 1, 1), max_value=dt.datetime(2099, 12, 31)))
ROW = st.one_of(st.just(None),                                   # a blank row
                st.tuples(st.integers(0, 3), st.tuples(CELL, CELL, CELL)))
SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _write_xlsx(path: Path, rows) -> None:
    import xlsxwriter

    wb = xlsxwriter.Workbook(path)
    ws = wb.add_worksheet("Data")
    datef = wb.add_format({"num_format": "yyyy-mm-dd hh:mm"})
    ws.write_row(0, 0, ("Site",) + COLUMNS)
    for r, row in enumerate(rows, start=1):
        if row is None:
            continue
        group, cells = row
        ws.write_string(r, 0, f"G{group}")
        for c, v in enumerate(cells, start=1):
            if v is None:
                continue
            if isinstance(v, bool):
                ws.write_boolean(r, c, v)
            elif isinstance(v, (int, float)):
                ws.write_number(r, c, v)
            elif isinstance(v, (dt.date, dt.datetime)):
                ws.write_datetime(r, c, v, datef)
            else:
                ws.write_string(r, c, v)
    wb.close()


def _write_csv(path: Path, rows) -> None:
    with path.open("w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(("Site",) + COLUMNS)
        for row in rows:
            if row is None:
                w.writerow([])
                continue
            group, cells = row
            w.writerow([f"G{group}"] + ["" if v is None else str(v) for v in cells])


def _check(path: Path, rows) -> None:
    job = FitJob(workbook=path, y="Load kWh", x=("CDD", "Pallets"), group=("Site",))
    expected_rows = [r for r, row in enumerate(rows, start=2) if row is not None]
    try:
        obs = read_observations(job)
    except NoUsableDataError:
        # allowed only when some needed column holds no typed number at all (text may still fail to parse)
        typed = [[isinstance(v, (int, float, dt.date)) for _, cells in filter(None, rows) for v in [cells[k]]]
                 for k in range(3)]
        assert not expected_rows or not all(any(t) for t in typed) or path.suffix == ".csv"
        return
    data = obs.data
    assert data[SOURCE_ROW].tolist() == expected_rows                 # every row, once, in order
    assert obs.info.rows_read == len(data) == len(expected_rows)      # counts add up
    # README: an input column that holds text and no number is a category (its levels are text, '' blank)
    levels = set(obs.category_columns)
    assert levels <= {"CDD", "Pallets"}
    for _, row in data.iterrows():
        reason = row[REASON]
        finite = {c: (row[c] != "") if c in levels else math.isfinite(row[c]) for c in COLUMNS}
        if reason == "":
            assert all(finite.values())
        else:
            named = [part.split(": ", 1)[0] for part in SPLIT.split(reason)]
            assert set(named) <= set(COLUMNS) and named
            assert {c for c in COLUMNS if not finite[c]} == set(named)
            assert "\n" not in reason


def _round_trip(rows, name: str, write) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / name
        write(path, rows)
        _check(path, rows)


@SETTINGS
@given(st.lists(ROW, min_size=1, max_size=25))
def test_any_cells_in_an_xlsx(rows):
    _round_trip(rows, "p.xlsx", _write_xlsx)


@SETTINGS
@given(st.lists(ROW, min_size=1, max_size=25))
def test_any_cells_in_a_csv(rows):
    _round_trip(rows, "p.csv", _write_csv)
