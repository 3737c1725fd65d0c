"""The demo generator: deterministic, the committed workbook is its output, and each site is built
the way workbooks/README.md says (checked on the data, by construction; no statistics needed)."""

from __future__ import annotations

import tomllib
from pathlib import Path

import openpyxl
import pandas as pd
import pytest

from sheetfit import demo
from sheetfit.demo import CDD, KWH, MONTH, PALLETS, REGION, SITE
from sheetfit.job import load_job_file

ROOT = Path(__file__).resolve().parents[1]
COMMITTED = ROOT / "workbooks" / demo.FILE_NAME
JOB_FILE = ROOT / "workbooks" / "cold-storage-sites.toml"
BEHAVIOUR = {site: how for site, _, how in demo.SITES}
SITE_OF = {how: site for site, _, how in demo.SITES if how != "ok"}


@pytest.fixture(scope="module")
def frame() -> pd.DataFrame:
    return demo.generate_demo()


def numbers(values: pd.Series) -> pd.Series:
    return pd.to_numeric(values.where(values.map(lambda v: isinstance(v, (int, float)))), errors="coerce")


def cell_values(path: Path) -> dict[str, list[tuple]]:
    book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    try:
        return {ws.title: list(ws.iter_rows(values_only=True)) for ws in book.worksheets}
    finally:
        book.close()


def test_same_seed_same_frame(frame):
    pd.testing.assert_frame_equal(frame, demo.generate_demo(demo.SEED))
    assert not frame[KWH].equals(demo.generate_demo(demo.SEED + 1)[KWH])


def test_bytes_are_reproducible(tmp_path):
    a = demo.write_demo_workbook(tmp_path / "a.xlsx")
    b = demo.write_demo_workbook(tmp_path / "b.xlsx")
    assert a.read_bytes() == b.read_bytes()


def test_committed_workbook_is_a_fresh_generation(tmp_path):
    fresh = demo.write_demo_workbook(tmp_path / demo.FILE_NAME)
    assert cell_values(COMMITTED) == cell_values(fresh)


def test_workbook_holds_the_frame(frame):
    rows = cell_values(COMMITTED)[demo.SHEET]
    assert rows[0] == demo.COLUMNS
    assert len(rows) - 1 == len(frame)
    for written, (_, expected) in zip(rows[1:], frame.iterrows()):
        want = tuple(None if isinstance(v, float) and pd.isna(v) else v for v in expected)
        assert written[:2] == want[:2]
        assert written[2] == want[2].to_pydatetime()
        assert written[3:] == want[3:]


def test_month_cells_are_dates_with_a_date_format():
    book = openpyxl.load_workbook(COMMITTED)
    try:
        sheet = book[demo.SHEET]
        cells = [row[2] for row in sheet.iter_rows(min_row=2)]
        assert all(c.is_date for c in cells)
        assert {c.number_format for c in cells} == {"yyyy-mm"}
    finally:
        book.close()


def test_layout(frame):
    assert len(demo.SITES) == 24 and frame[SITE].nunique() == 24
    assert set(frame[REGION]) == set(demo.REGIONS)
    months = sorted(frame[MONTH].unique())
    assert len(months) == 36 and months[0] == pd.Timestamp("2022-01-01") and months[-1] == pd.Timestamp("2024-12-01")
    sizes = frame.groupby(SITE).size()
    assert sizes.drop(SITE_OF["short"]).eq(36).all()
    assert not frame.duplicated([SITE, MONTH]).any()
    assert (frame[CDD] > 0).all()
    assert sorted(frame[MONTH]) == list(frame[MONTH])          # month by month, as README says


def test_short_site_has_two_rows(frame):
    rows = frame[frame[SITE] == SITE_OF["short"]]
    assert len(rows) == demo.SHORT_MONTHS == 2
    assert set(rows[MONTH]) == {pd.Timestamp("2024-11-01"), pd.Timestamp("2024-12-01")}


def test_constant_input_site_has_one_pallets_value(frame):
    rows = frame[frame[SITE] == SITE_OF["constant pallets"]]
    assert set(rows[PALLETS]) == {demo.CONSTANT_PALLETS}
    assert rows[CDD].nunique() > 10


def site_series(frame, how, column):
    rows = frame[frame[SITE] == SITE_OF[how]].sort_values(MONTH)
    return numbers(rows[column]).reset_index(drop=True)


def test_wild_point_is_ten_times_its_neighbours(frame):
    kwh = site_series(frame, "wild point", KWH)
    others = kwh.drop(demo.WILD_MONTH)
    assert kwh[demo.WILD_MONTH] > 5 * others.max()
    assert others.max() < 2 * others.min()


def test_high_leverage_point_is_far_out_in_pallets_only(frame):
    pallets = site_series(frame, "high leverage", PALLETS)
    kwh = site_series(frame, "high leverage", KWH)
    others = pallets.drop(demo.LEVERAGE_MONTH)
    assert pallets[demo.LEVERAGE_MONTH] > 2.5 * others.max()
    assert kwh.drop(demo.LEVERAGE_MONTH).min() <= kwh[demo.LEVERAGE_MONTH] <= kwh.drop(demo.LEVERAGE_MONTH).max()


def test_messy_cells_are_where_the_readme_says(frame):
    readme = (ROOT / "workbooks" / "README.md").read_text(encoding="utf-8")
    rows = cell_values(COMMITTED)[demo.SHEET]
    for cell in demo.MESSY_CELLS:
        month = pd.Timestamp(demo.month_dates()[cell.month])
        index = frame.index[(frame[SITE] == cell.site) & (frame[MONTH] == month)][0]
        sheet_row = index + 2                                   # 1-based, under the header
        value = rows[sheet_row - 1][demo.COLUMNS.index(cell.column)]
        assert BEHAVIOUR[cell.site] == "ok"
        assert f"| {sheet_row} | {cell.site}, {month:%Y-%m} |" in readme
        if cell.kind == "text number":
            assert isinstance(value, str) and float(value.replace(",", "")) > 0
            assert f"`{value}`" in readme
        elif cell.kind == "error":
            assert value == "#N/A"
        else:
            assert value is None


def test_readme_names_every_misbehaving_site():
    readme = (ROOT / "workbooks" / "README.md").read_text(encoding="utf-8")
    for site in SITE_OF.values():
        assert f"| {site} |" in readme


def test_job_file_matches_the_demo_job():
    settings = load_job_file(JOB_FILE)
    assert settings.pop("workbook") == demo.FILE_NAME
    assert {k: tuple(v) if isinstance(v, list) else v for k, v in settings.items()} == demo.DEMO_JOB
    assert tomllib.loads(JOB_FILE.read_text(encoding="utf-8"))  # plain TOML


def test_cli_writes_to_its_folder(tmp_path, cli):
    folder = tmp_path / "out"
    proc = cli("demo", "--dir", folder)
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.splitlines()
    assert f"demo workbook: {folder / demo.FILE_NAME}" in lines
    assert f"results: {folder / demo.RESULTS_NAME}" in lines
    assert cell_values(folder / demo.FILE_NAME) == cell_values(COMMITTED)
    groups = cell_values(folder / demo.RESULTS_NAME)["groups"]
    header, body = groups[0], groups[1:]
    status = {row[header.index(SITE)]: row[header.index("status")] for row in body}
    assert status[SITE_OF["short"]] == status[SITE_OF["constant pallets"]] == "not fitted"
    assert sum(s == "fitted" for s in status.values()) == 22
    again = cli("demo", "--dir", folder, "--quiet")               # rerun replaces its own files
    assert again.returncode == 0, again.stderr
    assert len(again.stdout.splitlines()) == 2


def test_demo_flags_the_sites_built_to_misbehave(tmp_path):
    """Sites built to break one assumption are flagged; well-behaved ones are not (by construction)."""
    import sheetfit

    workbook = demo.write_demo_workbook(tmp_path / demo.FILE_NAME)
    job = demo.DEMO_JOB
    results = sheetfit.fit_workbook(workbook, sheet=job["sheets"], group=job["group"], y=job["y"], x=job["x"],
                                    order=job["order"])
    groups = results.groups.set_index(SITE)
    flagged = set(groups.index[groups["flags"] > 0])
    built = {site for how, site in SITE_OF.items() if how not in ("short", "constant pallets")}
    assert built <= flagged
    assert flagged - built == set()
