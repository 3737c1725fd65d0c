"""Several workbooks read as one table (sheetfit/read/many.py), the settings that name them (job.py) and their
rows on `about` (results/about.py).

Oracles: statsmodels OLS per group (coefficients, std errors, R², F at 1e-9), the same run on one workbook
holding every row with a `file` column (every table cell equal), hashlib.sha256 of each file for `about`.
Data are seeded and invented, rounded to 6 decimals so .xlsx and .csv store the same numbers.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import xlsxwriter

import sheetfit
from sheetfit.errors import (
    ColumnNotFoundError,
    InputFileError,
    JobError,
    NotAWorkbookError,
    OutputError,
    UnusableRowsError,
)
from sheetfit.job import FitJob, check_setting, job_file_settings, make_job
from sheetfit.pipeline import run_job
from sheetfit.read.many import FILE_KEY, file_key, files_of, input_files, read_inputs
from sheetfit.read.tidy import SOURCE_FILE, SOURCE_ROW, SOURCE_SHEET
from sheetfit.results.headers import COEFFICIENT, F_STAT, R2, STD_ERROR

SITES = ("north", "south", "east")


def site_frame(k: int, rows: int = 16, seed: int = 3) -> pd.DataFrame:
    """One site's invented readings: two meters, degree days and use with a site-specific line."""
    rng = np.random.default_rng(seed + k)
    dd = np.round(rng.uniform(0, 30, rows), 6)
    kwh = np.round(120 + 10 * k + (2.5 + 0.3 * k) * dd + rng.normal(0, 3, rows), 6)
    return pd.DataFrame({"Meter": np.tile(["A", "B"], rows // 2), "dd": dd, "kWh": kwh})


def write_xlsx(path: Path, frame: pd.DataFrame, sheet: str = "Data") -> Path:
    with xlsxwriter.Workbook(str(path)) as wb:
        ws = wb.add_worksheet(sheet)
        ws.write_row(0, 0, list(frame.columns))
        for r, row in enumerate(frame.itertuples(index=False), start=1):
            ws.write_row(r, 0, list(row))
    return path


def write_sites(folder: Path, formats=("xlsx", "csv", "xlsx")) -> list[Path]:
    """north.xlsx, south.csv, east.xlsx (by default) in `folder`; returns them in that order."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for k, (site, fmt) in enumerate(zip(SITES, formats)):
        path = folder / f"{site}.{fmt}"
        if fmt == "csv":
            site_frame(k).to_csv(path, index=False)
        else:
            write_xlsx(path, site_frame(k))
        paths.append(path)
    return paths


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


# ── reading ──

def test_several_files_are_one_table_with_the_file_name_first(tmp_path):
    paths = write_sites(tmp_path / "in")
    obs = read_inputs(make_job({"workbook": paths, "y": "kWh", "x": ["dd"], "group": ["Meter"]}))
    assert obs.group_columns == (FILE_KEY, "Meter")
    d = obs.data
    assert list(d.columns[:4]) == [SOURCE_FILE, SOURCE_SHEET, SOURCE_ROW, FILE_KEY]
    assert len(d) == 3 * 16
    for k, path in enumerate(paths):
        mine = d[d[FILE_KEY] == path.name]
        assert (mine[SOURCE_FILE] == path.name).all()
        # each row keeps its own sheet and row (header in row 1, data from row 2)
        assert mine[SOURCE_ROW].tolist() == list(range(2, 18))
        assert set(mine[SOURCE_SHEET]) == {"Data" if path.suffix == ".xlsx" else path.stem}
        np.testing.assert_array_equal(mine["kWh"].to_numpy(), site_frame(k)["kWh"].to_numpy())   # numpy: exact
    assert obs.info.several and [f.file_name for f in obs.info.files] == [p.name for p in paths]
    assert obs.info.rows_read == 48 and obs.info.file_key == FILE_KEY


def test_combined_fit_equals_one_workbook_with_a_file_column_and_statsmodels(tmp_path):
    paths = write_sites(tmp_path / "in")
    many = sheetfit.fit_workbook(paths, y="kWh", x="dd", group="Meter")
    frames = [site_frame(k).assign(file=p.name) for k, p in enumerate(paths)]
    whole = pd.concat(frames, ignore_index=True)[["file", "Meter", "dd", "kWh"]]
    one = sheetfit.fit_workbook(write_xlsx(tmp_path / "all.xlsx", whole), y="kWh", x="dd", group=["file", "Meter"])
    # the same run on one workbook holding every row with a file column: every cell of every table equal, but
    # the checks' notes, which name source rows (each file's own rows here, the stacked rows there)
    for table in ("groups", "coefficients", "checks"):
        ours, theirs = getattr(many, table), getattr(one, table)
        if table == "checks":
            ours, theirs = ours.drop(columns="note"), theirs.drop(columns="note")
        pd.testing.assert_frame_equal(ours, theirs, check_exact=False, rtol=1e-12)
    for (name, meter), g in whole.groupby(["file", "Meter"]):
        ref = sm.OLS(g["kWh"].to_numpy(), sm.add_constant(g[["dd"]].to_numpy())).fit()    # statsmodels OLS
        c = many.coefficients[(many.coefficients[FILE_KEY] == name) & (many.coefficients["Meter"] == meter)]
        np.testing.assert_allclose(c[COEFFICIENT].to_numpy(float), ref.params, rtol=1e-9)
        np.testing.assert_allclose(c[STD_ERROR].to_numpy(float), ref.bse, rtol=1e-9)
        row = many.groups[(many.groups[FILE_KEY] == name) & (many.groups["Meter"] == meter)].iloc[0]
        assert row[R2] == pytest.approx(ref.rsquared, rel=1e-9)
        assert row[F_STAT] == pytest.approx(ref.fvalue, rel=1e-9)


def test_without_group_each_file_is_a_group(tmp_path):
    paths = write_sites(tmp_path / "in")
    res = sheetfit.fit_workbook(paths, y="kWh", x="dd")
    assert list(res.groups[FILE_KEY]) == [p.name for p in paths]
    for k, p in enumerate(paths):
        g = site_frame(k)
        ref = sm.OLS(g["kWh"].to_numpy(), sm.add_constant(g[["dd"]].to_numpy())).fit()    # statsmodels OLS
        c = res.coefficients[res.coefficients[FILE_KEY] == p.name]
        np.testing.assert_allclose(c[COEFFICIENT].to_numpy(float), ref.params, rtol=1e-9)


def test_group_file_names_the_key_once(tmp_path):
    paths = write_sites(tmp_path / "in")
    res = sheetfit.fit_workbook(paths, y="kWh", x="dd", group=["Meter", FILE_KEY])
    assert list(res.groups.columns[:2]) == [FILE_KEY, "Meter"] and len(res.groups) == 6


def test_a_column_named_file_moves_the_key_to_file_name(tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    for k, site in enumerate(SITES[:2]):
        write_xlsx(folder / f"{site}.xlsx", site_frame(k).assign(file=f"batch {k}"))
    obs = read_inputs(make_job({"workbook": folder, "y": "kWh", "x": ["dd"], "group": ["file"]}))
    assert obs.group_columns == ("file name", "file")         # the user's own `file` column stays theirs
    assert set(obs.data["file name"]) == {"north.xlsx", "south.xlsx"}
    assert set(obs.data["file"]) == {"batch 0", "batch 1"}
    assert file_key(["file", "file name"]) == "file name 2"


def test_a_folder_reads_its_workbooks_sorted_and_leaves_out_the_rest(tmp_path):
    folder = tmp_path / "sites"
    write_sites(folder)
    write_xlsx(folder / "north-fit.xlsx", site_frame(0))          # a results workbook's default name
    (folder / "~$north.xlsx").write_bytes(b"lock")               # an open workbook's lock file
    (folder / ".hidden.csv").write_text("x\n1\n", encoding="utf-8")
    (folder / "notes.txt").write_text("not data", encoding="utf-8")
    (folder / "old").mkdir()
    write_xlsx(folder / "old" / "west.xlsx", site_frame(3))        # not directly inside: left out
    found = input_files(make_job({"workbook": folder, "y": "kWh", "x": ["dd"]}))
    assert [p.name for p in found.files] == ["east.xlsx", "north.xlsx", "south.csv"]
    assert "north-fit.xlsx" in found.left_out[0]
    obs = read_inputs(make_job({"workbook": folder, "y": "kWh", "x": ["dd"]}))
    assert list(dict.fromkeys(obs.data[FILE_KEY])) == ["east.xlsx", "north.xlsx", "south.csv"]
    assert any("north-fit.xlsx" in w for w in obs.info.warnings)


def test_a_folder_without_workbooks_is_one_line(tmp_path):
    (tmp_path / "empty").mkdir()
    write_xlsx(tmp_path / "empty" / "a-fit.xlsx", site_frame(0))
    with pytest.raises(InputFileError) as err:
        input_files(make_job({"workbook": tmp_path / "empty", "y": "kWh", "x": ["dd"]}))
    assert "holds no workbook" in str(err.value) and "a-fit.xlsx" in str(err.value)


def test_the_same_name_twice_is_refused(tmp_path):
    one = write_sites(tmp_path / "a")
    two = write_sites(tmp_path / "b")
    with pytest.raises(JobError, match="given twice"):
        input_files(make_job({"workbook": [one[0], one[0]], "y": "kWh", "x": ["dd"]}))
    with pytest.raises(JobError, match='two input files are named "north.xlsx"'):
        input_files(make_job({"workbook": [one[0], two[0]], "y": "kWh", "x": ["dd"]}))


def test_a_file_missing_a_column_names_the_file_the_column_and_its_columns(tmp_path):
    paths = write_sites(tmp_path / "in")
    write_xlsx(paths[2], site_frame(2).rename(columns={"dd": "degree days"}))
    with pytest.raises(ColumnNotFoundError) as err:
        read_inputs(make_job({"workbook": paths, "y": "kWh", "x": ["dd"], "group": ["Meter"]}))
    msg = str(err.value)
    assert msg.startswith('file "east.xlsx": ') and '"dd" not found' in msg and '"degree days"' in msg
    assert "\n" not in msg


@pytest.mark.parametrize("content, words", [
    (b"Meter,dd,kWh\nA,1,2\n", "is not a workbook"),                        # text renamed .xlsx
    (b"PK\x03\x04 broken zip", "east.xlsx"),                                # a damaged archive
    (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + "EncryptedPackage".encode("utf-16-le") + b"\0" * 600,
     "password-protected"),                                                 # an encrypted workbook
])
def test_an_unreadable_file_is_named_and_nothing_is_written(tmp_path, content, words):
    paths = write_sites(tmp_path / "in")
    paths[2].write_bytes(content)
    job = make_job({"workbook": paths, "y": "kWh", "x": ["dd"]})
    before = sorted(os.listdir(tmp_path / "in"))
    with pytest.raises((NotAWorkbookError, InputFileError)) as err:
        run_job(job)
    assert "east.xlsx" in str(err.value) and words in str(err.value) and "\n" not in str(err.value)
    assert sorted(os.listdir(tmp_path / "in")) == before and not job.output_path.exists()


def test_files_laid_out_differently_are_refused(tmp_path):
    paths = write_sites(tmp_path / "in", formats=("xlsx", "xlsx", "xlsx"))
    write_xlsx(paths[1], site_frame(1).assign(sheet="x"))      # its sheet key becomes "sheet name"
    with pytest.raises(JobError) as err:
        read_inputs(make_job({"workbook": paths, "y": "kWh", "x": ["dd"], "all_sheets": True}))
    assert str(err.value) == ('"south.xlsx" is laid out unlike "north.xlsx": its group columns are "sheet name", '
                              'those of "north.xlsx" are "sheet"; give every file the same headers')
    write_xlsx(paths[1], site_frame(1).assign(**{"log(dd)": 1.0}))   # a column named like the term
    with pytest.raises(JobError, match='its input terms are "log[(]dd[)]", those of "north.xlsx" are '
                                       '"log[(]dd[)] of dd"'):
        read_inputs(make_job({"workbook": paths, "y": "kWh", "x": ["log(dd)"]}))


def test_dates_in_one_file_and_numbers_in_another_are_refused(tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    frame = site_frame(0)
    with xlsxwriter.Workbook(str(folder / "a.xlsx")) as wb:
        ws = wb.add_worksheet("Data")
        dated = wb.add_format({"num_format": "yyyy-mm-dd"})
        ws.write_row(0, 0, ["Meter", "dd", "kWh"])
        for r, row in enumerate(frame.itertuples(index=False), start=1):
            ws.write_row(r, 0, [row.Meter, row.kWh])
            ws.write_number(r, 1, 45000 + r, dated)
            ws.write_number(r, 2, row.kWh)
    write_xlsx(folder / "b.xlsx", frame)
    with pytest.raises(JobError, match='column "dd" holds dates in "a.xlsx" but plain numbers in "b.xlsx"'):
        read_inputs(make_job({"workbook": folder, "y": "kWh", "x": ["dd"]}))


def test_dates_count_from_each_groups_start_within_its_file(tmp_path):
    folder = tmp_path / "in"
    folder.mkdir()
    for k, start in enumerate((45000, 45100)):
        with xlsxwriter.Workbook(str(folder / f"s{k}.xlsx")) as wb:
            ws = wb.add_worksheet("Data")
            dated = wb.add_format({"num_format": "yyyy-mm-dd"})
            ws.write_row(0, 0, ["Day", "kWh"])
            for r in range(1, 9):
                ws.write_number(r, 0, start + 3 * r, dated)
                ws.write_number(r, 1, 10.0 + r + (r % 3))
    obs = read_inputs(make_job({"workbook": folder, "y": "kWh", "x": ["Day"]}))
    # the model's days: 0, 3, 6… in each file (numpy: exact integers)
    for name in ("s0.xlsx", "s1.xlsx"):
        np.testing.assert_array_equal(obs.data.loc[obs.data[FILE_KEY] == name, "Day"].to_numpy(), 3.0 * np.arange(8))
    assert obs.dates["Day"].notna().all() and len(obs.dates) == len(obs.data)


def test_strict_names_the_file(tmp_path):
    paths = write_sites(tmp_path / "in", formats=("xlsx", "xlsx", "csv"))
    bad = site_frame(2).astype({"kWh": object})
    bad.loc[3, "kWh"] = "n/a"
    bad.to_csv(paths[2], index=False)
    with pytest.raises(UnusableRowsError) as err:
        read_inputs(make_job({"workbook": paths, "y": "kWh", "x": ["dd"], "strict": True}))
    assert str(err.value).startswith('file "east.csv": --strict: 1 rows cannot be used: east!row 5')


# ── about: every file's SHA-256 ──

def test_about_lists_each_file_with_its_sha256_before_and_after(tmp_path):
    paths = write_sites(tmp_path / "in")
    results, out = run_job(make_job({"workbook": paths, "y": "kWh", "x": ["dd"], "group": ["Meter"]}))
    about = dict(results.about)
    for i, p in enumerate(paths, start=1):
        assert about[f"file {i}"] == p.name
        assert about[f"file {i} SHA-256 before"] == sha(p)             # hashlib.sha256 of the file
        assert about[f"file {i} SHA-256 after"] == sha(p)
        assert about[f"file {i} rows read"] == 16
    assert "input SHA-256 before" not in about and about["rows read"] == 48
    assert out == (tmp_path / "in" / "north-and-2-more-fit.xlsx").resolve()


def test_one_file_keeps_its_about_rows(tmp_path):
    path = write_sites(tmp_path / "in")[0]
    results, _ = run_job(make_job({"workbook": path, "y": "kWh", "x": ["dd"]}))
    about = dict(results.about)
    assert about["input file"] == path.name and about["input SHA-256 before"] == sha(path)   # hashlib.sha256
    assert about["input SHA-256 after"] == sha(path) and "file 1" not in about
    assert FILE_KEY not in results.groups.columns


# ── settings: the workbook setting, the output path and the output guard ──

def test_workbook_setting_takes_one_path_or_a_list(tmp_path):
    assert check_setting("workbook", "a.xlsx") == Path("a.xlsx")
    assert check_setting("workbook", ["a.xlsx", "b.csv"]) == (Path("a.xlsx"), Path("b.csv"))
    for bad in ([], ["a.xlsx", ""], [1], 3):
        with pytest.raises(JobError, match='setting "workbook"'):
            check_setting("workbook", bad)


def test_output_path_of_several_files_and_of_a_folder(tmp_path):
    base = {"y": "kWh", "x": ["dd"]}
    assert make_job({**base, "workbook": ["d/a.xlsx", "b.xlsx", "c.csv"]}).output_path == Path("d/a-and-2-more-fit.xlsx")
    assert make_job({**base, "workbook": ["d/a.xlsx"]}).output_path == Path("d/a-fit.xlsx")
    (tmp_path / "sites").mkdir()
    assert make_job({**base, "workbook": tmp_path / "sites"}).output_path == tmp_path / "sites-fit.xlsx"
    cwd = os.getcwd()
    try:
        os.chdir(tmp_path / "sites")
        assert make_job({**base, "workbook": "."}).output_path == tmp_path / "sites-fit.xlsx"
    finally:
        os.chdir(cwd)
    assert make_job({**base, "workbook": "a.xlsx"}).several_files is False
    assert make_job({**base, "workbook": ["a.xlsx"]}).several_files is True


def test_job_file_lists_are_taken_from_the_job_files_folder(tmp_path):
    (tmp_path / "jobs").mkdir()
    job_file = tmp_path / "jobs" / "job.toml"
    job_file.write_text(f'workbook = ["data/a.xlsx", "{tmp_path / "b.csv"}"]\ny = "kWh"\nx = ["dd"]\n',
                        encoding="utf-8")
    job = make_job(job_file_settings(job_file))
    assert job.workbook == (tmp_path / "jobs" / "data" / "a.xlsx", tmp_path / "b.csv")


def test_the_output_is_never_one_of_the_inputs(tmp_path):
    paths = write_sites(tmp_path / "in")
    job = make_job({"workbook": paths, "y": "kWh", "x": ["dd"], "out": paths[2], "overwrite": True})
    with pytest.raises(OutputError, match=r'is one of the input files \("east.xlsx"\)'):
        run_job(job)
    assert files_of([tmp_path / "in"]) == tuple(sorted(paths, key=lambda p: p.name))


def test_the_api_takes_a_folder(tmp_path):
    write_sites(tmp_path / "in")
    res = sheetfit.fit_workbook(tmp_path / "in", y="kWh", x="dd", group="Meter")
    assert sorted(set(res.groups[FILE_KEY])) == ["east.xlsx", "north.xlsx", "south.csv"]
    assert isinstance(res.job, FitJob) and res.info.several
