"""The reader end to end on generated workbooks, checked against openpyxl (an independent reader of the
same files) and hashlib; plus the behaviours the corpus does not single out.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import os
import zipfile
from pathlib import Path

import numpy as np
import pytest

from sheetfit import errors
from sheetfit.job import FitJob
from sheetfit.read import xlsx, xlsxscan
from sheetfit.read.observations import read_observations
from sheetfit.read.tidy import REASON, SOURCE_ROW, SOURCE_SHEET

ERRS = ["#N/A", "#DIV/0!", "#VALUE!", "#REF!"]


def _messy_workbook(path: Path, n: int = 3000, seed: int = 7) -> None:
    """xlsxwriter workbook: numbers, plain-number text, empties, error results, blank rows, hidden rows."""
    import xlsxwriter

    rng = np.random.default_rng(seed)
    wb = xlsxwriter.Workbook(path)
    ws = wb.add_worksheet("Data")
    datef = wb.add_format({"num_format": "yyyy-mm-dd"})
    ws.write_row(0, 0, ["Site", "Load kWh", "CDD", "Day", "Note"])
    for i in range(1, n + 1):
        kind = rng.integers(0, 20)
        if kind == 0:
            continue                                       # blank row
        ws.write(i, 0, f"S{rng.integers(0, 40)}" if kind % 3 else int(rng.integers(0, 40)))
        y = float(rng.normal(100, 15))
        if kind == 1:
            ws.write_formula(i, 1, "=NA()", None, ERRS[i % len(ERRS)])
        elif kind == 2:
            ws.write_string(i, 1, f"{y:.3f}")
        elif kind == 3:
            ws.write_string(i, 1, "n/a")
        elif kind != 4:
            ws.write_number(i, 1, y)
        ws.write_number(i, 2, float(rng.normal(5, 2)))
        ws.write_number(i, 3, 45000 + int(rng.integers(0, 400)), datef)
        ws.write_string(i, 4, "note")
        if kind == 5:
            ws.set_row(i, None, None, {"hidden": True})
    ws.set_column(4, 4, None, None, {"hidden": True})
    wb.close()


def _openpyxl_view(path: Path):
    """Per data row: (row, site cell, y cell with its type, hidden) as openpyxl reads them."""
    import openpyxl

    wb = openpyxl.load_workbook(path, data_only=True)
    ws = wb["Data"]
    out = []
    for row in ws.iter_rows(min_row=2):
        if all(c.value is None for c in row):
            continue
        y = row[1]
        out.append((row[0].row, row[0].value, y.value, y.data_type, bool(ws.row_dimensions[row[0].row].hidden)))
    return out


@pytest.fixture(scope="module")
def messy(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("messy") / "messy.xlsx"
    _messy_workbook(path)
    return path


def _job(path: Path, **kw) -> FitJob:
    base = {"y": "Load kWh", "x": ("CDD", "Day"), "group": ("Site",)}
    return FitJob(workbook=path, **{**base, **kw})


def test_agrees_with_openpyxl_row_by_row(messy, workbook_guard):
    workbook_guard(messy)
    obs = read_observations(_job(messy))
    data = obs.data
    view = _openpyxl_view(messy)
    assert data[SOURCE_ROW].tolist() == [r for r, *_ in view]          # every non-blank row, once, in order
    for (row, site, y, kind, _), (got_y, reason, got_site) in zip(
            view, zip(data["Load kWh"], data[REASON], data["Site"])):
        assert got_site == str(site)
        if kind == "e":
            assert reason == f"Load kWh: error value {y}" and np.isnan(got_y)
        elif y is None:
            assert reason == "Load kWh: empty cell"
        elif kind == "s" and y == "n/a":
            assert reason == 'Load kWh: text "n/a" is not a number'
        else:
            assert reason == "" and got_y == float(y), row          # float() is the oracle for plain text
    assert obs.info.hidden_rows == sum(h for *_, h in view)
    assert obs.info.hidden_columns == 0                   # the hidden column (Note) is not used
    assert obs.info.rows_read == len(view)
    assert obs.info.file_sha256 == hashlib.sha256(messy.read_bytes()).hexdigest()


def test_dates_are_days_since_each_groups_earliest(messy):
    import openpyxl

    obs = read_observations(_job(messy))
    ws = openpyxl.load_workbook(messy, data_only=True)["Data"]
    first: dict[str, dt.datetime] = {}
    raw = {}
    for row in ws.iter_rows(min_row=2):
        if row[3].value is not None:
            first[str(row[0].value)] = min(first.get(str(row[0].value), row[3].value), row[3].value)
            raw[row[0].row] = (str(row[0].value), row[3].value)
    for r, days, kept in zip(obs.data[SOURCE_ROW], obs.data["Day"], obs.dates["Day"]):
        site, stamp = raw[r]
        assert days == (stamp - first[site]).days
        assert kept.to_pydatetime() == stamp                 # the date itself is kept beside the day count
    assert obs.info.date_columns == ("Day",)
    assert list(obs.dates.columns) == ["Day"] and obs.dates.index.equals(obs.data.index)


def test_small_scan_chunks_give_the_same_marks(messy, monkeypatch):
    """The XML scan cuts its buffer between rows; tiny chunks must find the same cells."""
    with zipfile.ZipFile(messy) as zf:
        whole = xlsxscan.scan_sheet(zf, "xl/worksheets/sheet1.xml")
        monkeypatch.setattr(xlsxscan, "CHUNK", 1500)
        pieces = xlsxscan.scan_sheet(zf, "xl/worksheets/sheet1.xml")
        exact = xlsxscan._scan_slow(zf, "xl/worksheets/sheet1.xml")       # element-by-element parse
    assert whole == pieces == exact
    assert len(whole.errors) > 50 and len(whole.hidden_rows) > 50 and whole.hidden_cols == {4}


def test_input_bytes_and_time_unchanged(messy):
    before = (hashlib.sha256(messy.read_bytes()).hexdigest(), os.stat(messy).st_mtime_ns)
    read_observations(_job(messy))
    assert (hashlib.sha256(messy.read_bytes()).hexdigest(), os.stat(messy).st_mtime_ns) == before


def _simple(path: Path, rows, title="Data") -> Path:
    import openpyxl

    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = title
    for r in rows:
        ws.append(r)
    wb.save(path)
    return path


def test_frame_contract(tmp_path):
    path = _simple(tmp_path / "c.xlsx", [["Region", "Site", "Load kWh", "CDD", "Month"],
                                         ["N", 1, 10, 1, 3], ["N", 1, 11, 2, 4], ["S", 2, None, 3, 5]])
    obs = read_observations(_job(path, x=("CDD^2", "log(CDD)"), group=("Region", "Site"), order="Month"))
    d = obs.data
    assert list(d.columns) == [SOURCE_SHEET, SOURCE_ROW, "Region", "Site", "Load kWh", "CDD", "Month", REASON]
    assert str(d[SOURCE_ROW].dtype) == "int64"
    assert all(str(d[c].dtype) == "float64" for c in ("Load kWh", "CDD", "Month"))
    assert all(str(d[c].dtype) == "str" for c in (SOURCE_SHEET, "Region", "Site", REASON))
    assert obs.numeric_columns == ("Load kWh", "CDD", "Month")
    assert obs.group_columns == ("Region", "Site") and obs.order == "Month"
    assert [t.label for t in obs.terms] == ["CDD^2", "log(CDD)"]
    assert d[REASON].tolist() == ["", "", "Load kWh: empty cell"]


def test_sheet_names_match_without_case(tmp_path):
    path = _simple(tmp_path / "s.xlsx", [["Site", "Load kWh", "CDD", "Day"], ["A", 1, 2, 3]], title="Energy Data")
    assert read_observations(_job(path, sheets=("energy data",))).info.sheets == ("Energy Data",)


def test_header_row_beyond_the_sheet(tmp_path):
    path = _simple(tmp_path / "h.xlsx", [["Site", "Load kWh", "CDD", "Day"], ["A", 1, 2, 3]])
    with pytest.raises(errors.NoUsableDataError, match="below the last filled row"):
        read_observations(_job(path, header_row=9))


def test_reserved_column_name(tmp_path):
    path = _simple(tmp_path / "r.xlsx", [["reason", "Load kWh", "CDD", "Day"], ["A", 1, 2, 3]])
    with pytest.raises(errors.JobError, match="rename it"):
        read_observations(_job(path, group=("reason",)))


def test_group_and_number_column_at_once(tmp_path):
    path = _simple(tmp_path / "g.xlsx", [["Site", "Load kWh", "CDD", "Day"], ["A", 1, 2, 3]])
    with pytest.raises(errors.JobError, match="both a group column and a number column"):
        read_observations(_job(path, group=("CDD",)))


def test_strict_passes_clean_rows(tmp_path):
    path = _simple(tmp_path / "ok.xlsx", [["Site", "Load kWh", "CDD", "Day"], ["A", 1, 2, 3], ["A", 2, 3, 4]])
    assert read_observations(_job(path, strict=True)).info.rows_read == 2


def test_strict_lists_first_rows_in_one_line(tmp_path):
    rows = [["Site", "Load kWh", "CDD", "Day"]] + [["A", "bad", 2, 3]] * 8 + [["A", 1, 2, 3]]
    path = _simple(tmp_path / "st.xlsx", rows)
    with pytest.raises(errors.UnusableRowsError) as caught:
        read_observations(_job(path, strict=True))
    msg = str(caught.value)
    assert "8 rows cannot be used" in msg and "Data!row 2" in msg and "and 3 more" in msg and "\n" not in msg


def test_calamine_refuses_entity_expansion(tmp_path):
    """Second line of defence: even without the prolog check, calamine does not expand DTD entities."""
    import python_calamine as pc

    from tests.corpus.build import CASES

    case = next(c for c in CASES if c.filename == "laughs.xlsx")
    path = case.build(tmp_path)
    with pytest.raises(pc.CalamineError, match="entity"):
        pc.CalamineWorkbook.from_path(str(path)).get_sheet_by_index(0).to_python()


def test_defusedxml_guards_the_xml_the_reader_parses(tmp_path):
    """The workbook part is parsed with defusedxml: a DTD there is refused even past the prolog check."""
    from tests.corpus.build import CASES

    case = next(c for c in CASES if c.filename == "clean.xlsx")
    path = case.build(tmp_path)
    hostile = tmp_path / "hostile.xlsx"
    with zipfile.ZipFile(path) as src, zipfile.ZipFile(hostile, "w") as dst:
        for info in src.infolist():
            data = src.read(info)
            if info.filename == "xl/workbook.xml":
                data = b'<!DOCTYPE workbook [<!ENTITY e "x">]>' + data
            dst.writestr(info, data)
    with zipfile.ZipFile(hostile) as zf, pytest.raises(errors.NotAWorkbookError, match="damaged part"):
        xlsx._workbook_parts(zf)


def test_csv_delimiter_and_decimal_detection(tmp_path):
    p = tmp_path / "d.csv"
    p.write_text("Site;Load kWh;CDD;Day\n" + "".join(f"A;{k},5;{k};{k}\n" for k in range(100)), encoding="utf-8")
    obs = read_observations(_job(p))
    assert obs.data["Load kWh"].tolist() == [k + 0.5 for k in range(100)]
    assert "delimiter ; (detected)" in obs.info.reader and "decimal mark , (detected)" in obs.info.reader


def test_csv_bad_settings(tmp_path):
    p = tmp_path / "d.csv"
    p.write_text("Site,Load kWh,CDD,Day\nA,1,2,3\n", encoding="utf-8")
    with pytest.raises(errors.JobError, match="decimal mark"):
        read_observations(_job(p, csv_decimal=";"))
    with pytest.raises(errors.JobError, match="delimiter"):
        read_observations(_job(p, csv_delimiter="ab"))


def test_what_calamine_returns_for_each_cell_type(tmp_path):
    """Canary for the reader's assumptions: calamine gives '' for error cells and for formulas without a
    saved result (so the XML scan must supply them), Python types for the rest."""
    import python_calamine as pc

    path = _simple(tmp_path / "types.xlsx", [[f"h{k}" for k in range(1, 9)]])
    import openpyxl

    wb = openpyxl.load_workbook(path)
    ws = wb.active
    values = [1.5, "12", True, dt.date(2024, 1, 2), dt.datetime(2024, 1, 2, 6), dt.time(6), None, "#N/A"]
    for c, v in enumerate(values, start=1):
        ws.cell(2, c, v)
    ws.cell(2, 8).data_type = "e"
    ws.cell(3, 1, "=1+1")
    wb.save(path)
    got = pc.CalamineWorkbook.from_path(str(path)).get_sheet_by_index(0).to_python()
    assert [type(v).__name__ for v in got[1]] == ["float", "str", "bool", "date", "datetime", "time", "str", "str"]
    assert got[1][6] == "" and got[1][7] == ""
    assert len(got) == 2          # a row holding only a formula without result is not even in calamine's range
    obs = read_observations(FitJob(workbook=path, y="h1", x=("h2",)))        # the reader brings that row back
    assert obs.data[REASON].tolist() == ["", "h1: formula without a saved result; h2: empty cell"]
    assert obs.data[SOURCE_ROW].tolist() == [2, 3]


def test_a_scan_that_cannot_unpack_means_a_damaged_file():
    import zlib
    from concurrent.futures import Future

    failed: Future = Future()
    failed.set_exception(zlib.error("invalid distance too far back"))
    with pytest.raises(errors.NotAWorkbookError, match='"x.xlsx" is damaged'):
        xlsx._scan_result(failed, "x.xlsx")


def test_day_numbers_become_the_dates_they_count():
    from sheetfit.read.tidy import serial_dates

    epoch = dt.datetime(1899, 12, 30)                                  # the spreadsheet's day 0
    stamps = [dt.datetime(2024, 1, 31), dt.datetime(2024, 2, 29, 8, 30), dt.datetime(1900, 3, 1, 23, 59, 59, 125000),
              dt.datetime(9999, 12, 31, 12)]
    days = np.array([(s - epoch) / dt.timedelta(days=1) for s in stamps] + [np.nan, 1e300])
    got = serial_dates(days)
    # oracle: Python's datetime arithmetic; kept to the millisecond, the finest a spreadsheet stores
    assert [g.astype("datetime64[ms]").item() for g in got[:4]] == stamps
    assert np.isnat(got[4:]).all()
