"""End to end: `sheetfit fit` on several workbooks at once (several WORKBOOK arguments, a folder, a job file's
list) through the real CLI on real files, read back with openpyxl.

Oracles: statsmodels OLS per file and meter (coefficients and std errors at 1e-9, as the results workbook
stores them), hashlib.sha256 of every input for the `about` sheet. Data are invented and seeded.
"""

from __future__ import annotations

import hashlib

import numpy as np
import openpyxl
import pandas as pd
import statsmodels.api as sm
import xlsxwriter

from tests.conftest import run_cli as run
from tests.e2e.test_cli_errors import one_error_line

FIT = ("--group", "Meter", "--y", "kWh", "--x", "dd")
SITES = ("north", "south", "east")


def _frame(k: int, rows: int = 14) -> pd.DataFrame:
    rng = np.random.default_rng(90 + k)
    dd = np.round(rng.uniform(0, 25, rows), 6)
    kwh = np.round(200 + 15 * k + (3.0 - 0.4 * k) * dd + rng.normal(0, 4, rows), 6)
    return pd.DataFrame({"Meter": np.tile(["A", "B"], rows // 2), "dd": dd, "kWh": kwh})


def _sites(folder, formats=("xlsx", "csv", "xlsx")):
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for k, (site, fmt) in enumerate(zip(SITES, formats)):
        path = folder / f"{site}.{fmt}"
        frame = _frame(k)
        if fmt == "csv":
            frame.to_csv(path, index=False)
        else:
            with xlsxwriter.Workbook(str(path)) as wb:
                ws = wb.add_worksheet("Readings")
                ws.write_row(0, 0, list(frame.columns))
                for i, r in enumerate(frame.itertuples(index=False), start=1):
                    ws.write_row(i, 0, list(r))
        paths.append(path)
    return paths


def _table(path, sheet: str) -> pd.DataFrame:
    rows = list(openpyxl.load_workbook(path, read_only=True)[sheet].values)
    return pd.DataFrame(rows[1:], columns=rows[0])


def _about(path) -> dict:
    return {r[0]: r[1] for r in openpyxl.load_workbook(path, read_only=True)["about"].values if r[0]}


def _sha(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_a_folder_is_fitted_per_file_and_meter(tmp_path):
    paths = _sites(tmp_path / "sites")
    proc = run("fit", tmp_path / "sites", *FIT, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    out = tmp_path / "sites-fit.xlsx"                      # beside the folder, not inside it
    assert f"results: {out}" in proc.stdout.splitlines()
    assert "6 groups: 6 fitted" in proc.stdout
    coef = _table(out, "coefficients")
    assert list(coef.columns[:2]) == ["file", "Meter"]
    for k, path in enumerate(paths):
        frame = _frame(k)
        for meter, g in frame.groupby("Meter"):
            ref = sm.OLS(g["kWh"].to_numpy(), sm.add_constant(g[["dd"]].to_numpy())).fit()   # statsmodels OLS
            mine = coef[(coef["file"] == path.name) & (coef["Meter"] == meter)]
            np.testing.assert_allclose(mine["coefficient"].to_numpy(float), ref.params, rtol=1e-9)
            np.testing.assert_allclose(mine["std error"].to_numpy(float), ref.bse, rtol=1e-9)
    about = _about(out)
    names = sorted(p.name for p in paths)
    for i, name in enumerate(names, start=1):
        assert about[f"file {i}"] == name
        digest = _sha(tmp_path / "sites" / name)           # hashlib.sha256 of the input file
        assert about[f"file {i} SHA-256 before"] == digest and about[f"file {i} SHA-256 after"] == digest
    obs = _table(out, "observations")
    assert set(obs["file"]) == set(names) and obs["source row"].min() == 2
    # run again: the folder's contents are unchanged and the earlier results are not read as an input
    again = run("fit", tmp_path / "sites", *FIT, "--out", tmp_path / "sites" / "sites-fit.xlsx", cwd=tmp_path)
    assert again.returncode == 0, again.stderr
    third = run("fit", tmp_path / "sites", *FIT, "--overwrite", cwd=tmp_path)
    assert third.returncode == 0, third.stderr
    assert "sites-fit.xlsx" in _about(out)["warning 1"]


def test_several_arguments_of_mixed_formats(tmp_path, workbook_guard):
    paths = [workbook_guard(p) for p in _sites(tmp_path / "in")]
    proc = run("fit", paths[0], paths[1], *FIT, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    out = tmp_path / "in" / "north-and-1-more-fit.xlsx"
    assert out.is_file()
    groups = _table(out, "groups")
    assert list(zip(groups["file"], groups["Meter"])) == [("north.xlsx", "A"), ("north.xlsx", "B"),
                                                          ("south.csv", "A"), ("south.csv", "B")]
    one = run("fit", paths[2], *FIT, cwd=tmp_path)            # one argument is one file, as before
    assert one.returncode == 0, one.stderr
    assert "file" not in _table(tmp_path / "in" / "east-fit.xlsx", "groups").columns


def test_a_job_file_lists_the_workbooks(tmp_path):
    _sites(tmp_path / "data")
    job = tmp_path / "job.toml"
    job.write_text('workbook = ["data/east.xlsx", "data/south.csv"]\ngroup = ["Meter"]\ny = "kWh"\nx = ["dd"]\n',
                   encoding="utf-8")
    proc = run("fit", "--job", job, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    groups = _table(tmp_path / "data" / "east-and-1-more-fit.xlsx", "groups")
    assert list(dict.fromkeys(groups["file"])) == ["east.xlsx", "south.csv"]


def test_one_unreadable_file_is_named_and_nothing_is_written(tmp_path, workbook_guard):
    paths = _sites(tmp_path / "sites")
    paths[1].write_bytes(b"\x00\x01\x02 not a table \x00" * 40)          # south.csv: binary junk
    for p in paths:
        workbook_guard(p)
    before = sorted(p.name for p in tmp_path.rglob("*"))
    err = one_error_line(run("fit", tmp_path / "sites", *FIT, cwd=tmp_path))
    assert '"south.csv" is not a workbook' in err
    assert sorted(p.name for p in tmp_path.rglob("*")) == before


def test_a_file_missing_a_column_is_named_with_the_columns_it_has(tmp_path):
    paths = _sites(tmp_path / "in", formats=("xlsx", "csv", "csv"))
    _frame(2).rename(columns={"dd": "DD"}).to_csv(paths[2], index=False)
    err = one_error_line(run("fit", *paths, *FIT, cwd=tmp_path))
    assert 'file "east.csv": column "dd" not found' in err and '"DD"' in err
    assert sorted(p.name for p in (tmp_path / "in").iterdir()) == ["east.csv", "north.xlsx", "south.csv"]


def test_a_missing_file_among_several_is_said_before_reading(tmp_path):
    paths = _sites(tmp_path / "in")
    err = one_error_line(run("fit", paths[0], tmp_path / "in" / "west.xlsx", *FIT, cwd=tmp_path))
    assert "west.xlsx" in err and "not found" in err


def test_help_says_how_several_workbooks_are_read(tmp_path):
    proc = run("fit", "--help", cwd=tmp_path)
    assert proc.returncode == 0
    text = " ".join(proc.stdout.split())
    assert "[WORKBOOK]..." in text and "or a folder" in text and "<first name>-and-N-more-fit.xlsx" in text
