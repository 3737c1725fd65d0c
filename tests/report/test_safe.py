"""Output safety: refusals with one-line OutputErrors, and a write that is complete or absent."""

from __future__ import annotations

import os
from pathlib import Path

import openpyxl
import pytest
import xlsxwriter

import sheetfit.report.tables as tables
from sheetfit.errors import OutputError
from sheetfit.report import write_results
from sheetfit.report.safe import TEMP_MARK, check_output_path


def snapshot(folder: Path) -> dict[str, bytes]:
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


@pytest.fixture
def scratch_root(system_tmp):
    """The private system temp folder, so leftovers of xlsxwriter would show."""
    return system_tmp


def test_output_equal_to_input_is_refused(make_results):
    res = make_results()
    before = res.job.workbook.read_bytes()
    with pytest.raises(OutputError, match="is the input workbook"):
        write_results(res, res.job.workbook.with_suffix(".xlsx"), overwrite=True)
    assert res.job.workbook.read_bytes() == before


def test_output_reached_through_another_path_to_the_input_is_refused(make_results, tmp_path):
    res = make_results()
    link = tmp_path / "alias.xlsx"
    os.link(res.job.workbook, link)                 # the same file under a second name
    with pytest.raises(OutputError, match="is the input workbook"):
        write_results(res, link, overwrite=True)


def test_existing_output_is_kept_without_overwrite(make_results, tmp_path):
    res = make_results()
    out = tmp_path / "results.xlsx"
    out.write_bytes(b"colleague's file")
    with pytest.raises(OutputError, match="--overwrite") as err:
        write_results(res, out)
    assert "\n" not in str(err.value)
    assert out.read_bytes() == b"colleague's file"
    write_results(res, out, overwrite=True)
    assert openpyxl.load_workbook(out).sheetnames[0] == "attention"


def test_default_output_sits_beside_the_input(make_results):
    res = make_results()
    path = write_results(res)
    assert path == res.job.workbook.with_name("input-fit.xlsx").resolve() and path.exists()


@pytest.mark.parametrize("name, message", [("missing/results.xlsx", "does not exist"),
                                           ("results.csv", "must end in .xlsx")])
def test_bad_output_paths_are_refused(make_results, tmp_path, name, message):
    with pytest.raises(OutputError, match=message):
        write_results(make_results(), tmp_path / name)


def test_a_folder_as_output_is_refused(make_results, tmp_path):
    (tmp_path / "dir.xlsx").mkdir()
    with pytest.raises(OutputError, match="is a folder"):
        write_results(make_results(), tmp_path / "dir.xlsx")


def test_unwritable_folder_is_refused(make_results, tmp_path, monkeypatch):
    folder = tmp_path / "locked"
    folder.mkdir()
    import sheetfit.report.safe as safe
    real_access = os.access
    monkeypatch.setattr(safe.os, "access", lambda p, mode: False if Path(p) == folder else real_access(p, mode))
    with pytest.raises(OutputError, match="not writable"):
        write_results(make_results(), folder / "r.xlsx")


def test_read_only_folder_is_refused_for_real(make_results, tmp_path):
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        # root ignores permission bits; /proc accepts no new files even from root
        with pytest.raises(OutputError, match="/proc"):
            write_results(make_results(), Path("/proc") / "sheetfit-results.xlsx")
        return
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o500)
    try:
        with pytest.raises(OutputError):
            write_results(make_results(), folder / "r.xlsx")
    finally:
        folder.chmod(0o700)


@pytest.mark.parametrize("exc", [RuntimeError("boom"), KeyboardInterrupt()])
def test_failure_mid_write_leaves_the_folder_as_it_was(make_results, tmp_path, monkeypatch, scratch_root, exc):
    res = make_results()
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    (out_dir / "results.xlsx").write_bytes(b"previous results")
    before = snapshot(out_dir)

    def fail_after_some_rows(ctx):          # groups and coefficients are already written by then
        raise exc

    monkeypatch.setattr(tables, "checks_sheet", fail_after_some_rows)
    with pytest.raises(type(exc)):
        write_results(res, out_dir / "results.xlsx", overwrite=True)
    assert snapshot(out_dir) == before
    assert not list(scratch_root.iterdir())         # xlsxwriter's row files went too


def test_failure_while_zipping_leaves_no_file(make_results, tmp_path, monkeypatch, scratch_root):
    res = make_results()
    out_dir = tmp_path / "out"
    out_dir.mkdir()

    def broken_close(self):
        with open(self.filename, "wb") as fh:     # a partial file exists when the failure strikes
            fh.write(b"PK partial")
        raise OSError("disk full")

    monkeypatch.setattr(xlsxwriter.Workbook, "close", broken_close)
    with pytest.raises(OutputError, match="disk full"):      # one line, not a traceback
        write_results(res, out_dir / "results.xlsx")
    assert list(out_dir.iterdir()) == [] and not list(scratch_root.iterdir())


def test_temp_file_is_hidden_beside_the_target_and_renamed_at_the_end(make_results, tmp_path, monkeypatch):
    seen: list[Path] = []
    real_close = xlsxwriter.Workbook.close

    def spy(self):
        seen.append(Path(self.filename))
        return real_close(self)

    monkeypatch.setattr(xlsxwriter.Workbook, "close", spy)
    out = write_results(make_results(), tmp_path / "results.xlsx")
    assert seen[0].parent == out.parent and seen[0].name.startswith(".") and TEMP_MARK in seen[0].name
    assert not seen[0].exists() and [p.name for p in tmp_path.iterdir() if p.is_file()] == ["results.xlsx"]


def test_preflight_check_is_the_same_rule(tmp_path):
    src = tmp_path / "in.xlsx"
    src.write_bytes(b"x")
    assert check_output_path(src, tmp_path / "out.xlsx", False) == (tmp_path / "out.xlsx").resolve()
    with pytest.raises(OutputError):
        check_output_path(src, src, True)
