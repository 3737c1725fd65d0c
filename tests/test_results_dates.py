"""Date and time columns on `observations`: the user's dates shown as dates, the days the model used beside them.

Oracles: the datetimes written into the input file (read back with openpyxl, an independent xlsx
reader), day counts computed by hand with Python's datetime arithmetic, and statsmodels OLS fitted on
those hand-made day counts for the coefficients.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import openpyxl
import pandas as pd
import pytest

import sheetfit
from tests.oracle import statsmodels_fit

DAYS = "Day (days from group start)"


def dated_rows(seed: int = 11) -> pd.DataFrame:
    """Two sites, a reading every few days; site B's readings carry a time of day."""
    rng = np.random.default_rng(seed)
    rows = []
    for site, start, timed in (("A", dt.datetime(2023, 3, 1), False), ("B", dt.datetime(2023, 5, 10), True)):
        offsets = np.sort(rng.choice(200, size=18, replace=False))
        for o in offsets:
            when = start + dt.timedelta(days=int(o))
            if timed:
                when += dt.timedelta(hours=int(rng.integers(0, 24)), minutes=int(rng.integers(0, 60)))
            x = float(rng.uniform(0, 30))
            rows.append((site, when, x, 50 + 2.0 * x + 0.1 * o + float(rng.normal())))
    return pd.DataFrame(rows, columns=["Site", "Day", "x", "y"])


def write_xlsx(frame: pd.DataFrame, path) -> None:
    import xlsxwriter

    wb = xlsxwriter.Workbook(path)
    ws = wb.add_worksheet("Data")
    when = wb.add_format({"num_format": "yyyy-mm-dd hh:mm"})
    ws.write_row(0, 0, list(frame.columns))
    for r, (site, day, x, y) in enumerate(frame.itertuples(index=False), start=1):
        ws.write_string(r, 0, site)
        ws.write_datetime(r, 1, day.to_pydatetime(), when)
        ws.write_number(r, 2, x)
        ws.write_number(r, 3, y)
    wb.close()


def hand_days(frame: pd.DataFrame) -> np.ndarray:
    """Days since each site's earliest reading (Python datetime arithmetic)."""
    first = frame.groupby("Site")["Day"].transform("min")
    return np.array([(a - b) / dt.timedelta(days=1) for a, b in zip(frame["Day"], first)])


def observations_back(path) -> tuple[list, list[tuple], openpyxl.worksheet.worksheet.Worksheet]:
    wb = openpyxl.load_workbook(path)
    ws = wb["observations"]
    head = [c.value for c in ws[1]]
    return head, [tuple(r) for r in ws.iter_rows(min_row=2)], ws


@pytest.mark.parametrize("role", ["order", "input"])
def test_dates_show_as_dates_with_the_days_beside_them(role, tmp_path, cli):
    frame = dated_rows()
    write_xlsx(frame, tmp_path / "dated.xlsx")
    args = ["--x", "x", "--order", "Day"] if role == "order" else ["--x", "x", "--x", "Day"]
    done = cli("fit", "dated.xlsx", "--group", "Site", "--y", "y", *args, "--out", "out.xlsx", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    head, rows, _ = observations_back(tmp_path / "out.xlsx")
    at = head.index("Day")
    assert head[at + 1] == DAYS                                      # the day counts stand right beside
    by_row = {r[head.index("source row")].value: r for r in rows}
    days = hand_days(frame)
    for i, (site, when, _, _) in enumerate(frame.itertuples(index=False)):
        cell = by_row[i + 2][at]
        assert cell.is_date and isinstance(cell.value, dt.datetime), cell.value
        assert abs(cell.value - when.to_pydatetime()) < dt.timedelta(seconds=1), (cell.value, when)
        assert by_row[i + 2][at + 1].value == pytest.approx(days[i], abs=1e-6)
    formats = {r[at].number_format for r in rows}
    assert formats == {"yyyy-mm-dd hh:mm"}                           # site B has times of day: shown
    if role == "input":                                              # the model used the day counts
        wb = openpyxl.load_workbook(tmp_path / "out.xlsx", read_only=True)
        coef = list(wb["coefficients"].iter_rows(values_only=True))
        h = coef[0]
        for site, sub in frame.assign(days=days).groupby("Site"):
            ref = statsmodels_fit(sub, "y", ["x", "days"], True)     # statsmodels on hand-made day counts
            got = [r[h.index("coefficient")] for r in coef[1:] if r[0] == site]
            np.testing.assert_allclose(got, ref.params, rtol=1e-9)


def test_whole_days_show_without_a_time(tmp_path, cli):
    frame = dated_rows()
    frame["Day"] = frame["Day"].dt.normalize()
    frame = frame.drop_duplicates(["Site", "Day"])
    write_xlsx(frame, tmp_path / "days.xlsx")
    done = cli("fit", "days.xlsx", "--group", "Site", "--y", "y", "--x", "x", "--order", "Day",
               "--out", "out.xlsx", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    head, rows, _ = observations_back(tmp_path / "out.xlsx")
    at = head.index("Day")
    assert {r[at].number_format for r in rows} == {"yyyy-mm-dd"}
    assert [r[at].value for r in rows] == [d.to_pydatetime() for d in frame["Day"]]


def test_a_data_frame_with_dates_gives_the_same_columns(tmp_path):
    frame = dated_rows()
    res = sheetfit.fit_frame(frame, y="y", x=["x", "Day"], group="Site")
    obs = res.observations
    assert list(obs.columns[list(obs.columns).index("Day"):][:2]) == ["Day", DAYS]
    assert pd.api.types.is_datetime64_any_dtype(obs["Day"])
    assert (obs["Day"].to_numpy() == frame["Day"].to_numpy()).all()
    np.testing.assert_allclose(obs[DAYS].to_numpy(), hand_days(frame), rtol=0, atol=1e-9)
    assert res.info.date_columns == ("Day",)
    for site, sub in frame.assign(days=hand_days(frame)).groupby("Site"):
        ref = statsmodels_fit(sub, "y", ["x", "days"], True)            # statsmodels
        got = res.coefficients[res.coefficients["Site"] == site]["coefficient"].to_numpy()
        np.testing.assert_allclose(got, ref.params, rtol=1e-9)
    path = sheetfit.write_results(res, tmp_path / "frame.xlsx")
    head, rows, _ = observations_back(path)
    assert head[head.index("Day") + 1] == DAYS and all(r[head.index("Day")].is_date for r in rows)
