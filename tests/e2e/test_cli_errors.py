"""The command line's contract (design.md, "Command line"): bad input → exit 1 and one line on
stderr, no traceback, input untouched, nothing written; wrong usage → exit 2; --debug shows the
traceback. The first part drives the real CLI in a subprocess; the second checks, in process with
the pipeline replaced by a recorder, that every option lands in the right FitJob field.
"""

from __future__ import annotations

import sys
import types
from pathlib import Path

import pytest
import xlsxwriter
from typer.testing import CliRunner

from sheetfit.cli import MB, app
from sheetfit.errors import NoUsableDataError, OutputError
from sheetfit.job import FitJob, Thresholds

SITES = ("North", "South", "East")


def write_book(path: Path, rows_per_site: int = 12) -> Path:
    """A small two-sheet workbook: `Readings` (Site, Month, kWh, Degree days) and `Notes`."""
    with xlsxwriter.Workbook(str(path)) as book:
        sheet = book.add_worksheet("Readings")
        sheet.write_row(0, 0, ["Site", "Month", "kWh", "Degree days"])
        r = 1
        for s, site in enumerate(SITES):
            for m in range(rows_per_site):
                dd = 10.0 + 7.0 * m + s
                sheet.write_row(r, 0, [site, m + 1, 500.0 + 3.0 * dd + ((m * 7919) % 13) - 6.0, dd])
                r += 1
        book.add_worksheet("Notes").write(0, 0, "free text")
    return path


def one_error_line(proc) -> str:
    """The CLI's contract for bad input: exit 1, exactly one line on stderr, no traceback."""
    lines = proc.stderr.splitlines()
    assert proc.returncode == 1, (proc.returncode, proc.stderr)
    assert len(lines) == 1, proc.stderr
    assert "Traceback" not in proc.stderr
    assert lines[0].startswith("sheetfit: error: ")
    return lines[0]


@pytest.fixture
def book(tmp_path, workbook_guard) -> Path:
    return workbook_guard(write_book(tmp_path / "usage.xlsx"))


FIT = ("--sheet", "Readings", "--group", "Site", "--y", "kWh", "--x", "Degree days")


# ── the real command line on real files ──

def test_missing_file(tmp_path, cli):
    err = one_error_line(cli("fit", tmp_path / "nope.xlsx", *FIT))
    assert "nope.xlsx" in err
    assert list(tmp_path.iterdir()) == []


def test_folder_instead_of_file(tmp_path, cli):
    (tmp_path / "data.xlsx").mkdir()
    err = one_error_line(cli("fit", tmp_path / "data.xlsx", *FIT))
    assert "data.xlsx" in err


def test_text_file_renamed_xlsx(tmp_path, cli, workbook_guard):
    fake = tmp_path / "notes.xlsx"
    fake.write_text("Site,kWh\nNorth,1\n", encoding="utf-8")
    workbook_guard(fake)
    one_error_line(cli("fit", fake, *FIT))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.xlsx"]


def test_sheet_not_found_lists_sheets_and_closest(book, cli):
    err = one_error_line(cli("fit", book, "--sheet", "Readngs", "--group", "Site", "--y", "kWh",
                             "--x", "Degree days"))
    assert '"Readings"' in err and '"Notes"' in err          # what exists
    assert 'closest match: "Readings"' in err               # wording of errors.not_found_message
    assert not (book.parent / "usage-fit.xlsx").exists()


def test_column_not_found_names_closest(book, cli):
    err = one_error_line(cli("fit", book, "--sheet", "Readings", "--group", "Site", "--y", "kwh usage",
                             "--x", "Degree days"))
    assert "kwh usage" in err and '"kWh"' in err


@pytest.mark.parametrize("term", ["log(Degree days", "Degree days^13", "Degree days^1.5", "exp(Degree days)"])
def test_bad_term(book, cli, term):
    err = one_error_line(cli("fit", book, "--sheet", "Readings", "--group", "Site", "--y", "kWh", "--x", term))
    assert term in err or "Degree days" in err


def test_out_equal_to_input_is_refused(book, cli):
    one_error_line(cli("fit", book, *FIT, "--out", book))
    one_error_line(cli("fit", book, *FIT, "--out", book, "--overwrite"))


def test_existing_output_kept_without_overwrite(book, cli):
    out = book.parent / "kept.xlsx"
    out.write_bytes(b"precious")
    err = one_error_line(cli("fit", book, *FIT, "--out", out))
    assert "--overwrite" in err
    assert out.read_bytes() == b"precious"


def test_nothing_fitted_is_exit_1(tmp_path, cli, workbook_guard):
    # two rows per site, two coefficients: no group has a residual degree of freedom
    small = workbook_guard(write_book(tmp_path / "small.xlsx", rows_per_site=2))
    one_error_line(cli("fit", small, *FIT))
    assert not (tmp_path / "small-fit.xlsx").exists()


def test_bad_job_file(book, cli):
    job = book.parent / "job.toml"
    job.write_text('y = "kWh"\nx = ["Degree days"]\ncolour = "blue"\n', encoding="utf-8")
    assert "colour" in one_error_line(cli("fit", book, "--job", job))
    assert "job" in one_error_line(cli("fit", book, "--job", book.parent / "missing.toml"))


def test_out_of_range_setting_is_exit_1(book, cli):
    assert "--alpha" in one_error_line(cli("fit", book, *FIT, "--alpha", "1.5"))


def test_debug_shows_traceback(tmp_path, cli):
    proc = cli("fit", tmp_path / "nope.xlsx", *FIT, "--debug")
    assert proc.returncode == 1
    assert "Traceback" in proc.stderr


@pytest.mark.parametrize("args", [
    ("fit", "x.xlsx", "--x", "a"),                       # no --y
    ("fit", "x.xlsx", "--y", "a"),                       # no --x
    ("fit", "--y", "a", "--x", "b"),                     # no WORKBOOK
    ("fit", "x.xlsx", "--y", "a", "--x", "b", "--adjust", "sometimes"),
    ("fit", "x.xlsx", "--y", "a", "--x", "b", "--level"),
    ("fit", "x.xlsx", "--y", "a", "--x", "b", "--colour", "blue"),
    ("fitt",),
])
def test_wrong_usage_is_exit_2(cli, tmp_path, args):
    proc = cli(*args, cwd=tmp_path)
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr


def test_success_prints_path_and_keeps_input(book, cli):
    proc = cli("fit", book, *FIT)
    assert proc.returncode == 0, proc.stderr
    out = book.parent / "usage-fit.xlsx"
    assert out.is_file()
    assert f"results: {out}" in proc.stdout.splitlines()
    again = cli("fit", book, *FIT, "--quiet", "--overwrite")
    assert again.returncode == 0, again.stderr
    assert again.stdout.splitlines() == [f"results: {out}"]


# ── option parsing, with the pipeline replaced by a recorder ──

@pytest.fixture
def recorder(monkeypatch):
    """Replace sheetfit.pipeline with a stub that records the FitJob it is given."""
    calls: list[dict] = []
    fake = types.ModuleType("sheetfit.pipeline")

    def run_job(job, progress=None):
        calls.append({"job": job, "progress": progress})
        if fake.error is not None:
            raise fake.error
        return "RESULTS", Path(job.output_path)

    fake.run_job = run_job
    fake.summary_lines = lambda results: ["3 groups: 3 fitted, 0 not fitted, 1 flagged"]
    fake.error = None
    monkeypatch.setitem(sys.modules, "sheetfit.pipeline", fake)
    fake.calls = calls
    return fake


runner = CliRunner()


def test_every_option_reaches_the_job(recorder, tmp_path):
    args = ["fit", str(tmp_path / "in.xlsx"), "--sheet", "A", "--sheet", "B", "--all-sheets", "--table", "T",
            "--header-row", "3", "--group", "G1", "--group", "G2", "--y", "Y", "--x", "X1", "--x", "log(X2)",
            "--no-intercept", "--level", "0.9", "--order", "Month", "--out", str(tmp_path / "o.xlsx"),
            "--overwrite", "--strict", "--csv-delimiter", ";", "--csv-decimal", ",", "--max-charts", "5",
            "--observations", "flagged", "--alpha", "0.01", "--adjust", "holm", "--min-r2", "0.3",
            "--rows-per-coefficient", "8", "--leverage-factor", "3", "--studentized-cutoff", "2.5",
            "--cooks-factor", "5", "--vif-max", "20", "--condition-max", "40", "--bg-lags", "2",
            "--hac-lags", "4", "--robust", "hc1", "--inference", "robust", "--max-unpacked-mb", "100"]
    result = runner.invoke(app, args)
    assert result.exit_code == 0, result.output
    job: FitJob = recorder.calls[0]["job"]
    assert job == FitJob(
        workbook=tmp_path / "in.xlsx", y="Y", x=("X1", "log(X2)"), group=("G1", "G2"), sheets=("A", "B"),
        all_sheets=True, table="T", header_row=3, intercept=False, level=0.9, order="Month", strict=True,
        csv_delimiter=";", csv_decimal=",", max_unpacked_bytes=100 * MB, out=tmp_path / "o.xlsx", overwrite=True,
        max_charts=5, observations="flagged",
        thresholds=Thresholds(alpha=0.01, adjust="holm", min_r2=0.3, rows_per_coefficient=8.0,
                              leverage_factor=3.0, studentized_cutoff=2.5, cooks_factor=5.0, vif_max=20.0,
                              condition_max=40.0, bg_lags=2, hac_lags=4, robust="hc1", inference="robust"))


def test_defaults_equal_the_library_defaults(recorder, tmp_path):
    result = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X"])
    assert result.exit_code == 0, result.output
    assert recorder.calls[0]["job"] == FitJob(workbook=tmp_path / "in.xlsx", y="Y", x=("X",))
    assert recorder.calls[0]["progress"].__self__.enabled is False   # no bar: output is not a terminal


def test_command_line_overrides_job_file_only_where_given(recorder, tmp_path):
    (tmp_path / "jobs").mkdir()
    job_file = tmp_path / "jobs" / "job.toml"
    job_file.write_text('workbook = "data/in.xlsx"\ny = "Y"\nx = ["X"]\ngroup = ["G"]\nintercept = false\n'
                        "[thresholds]\nalpha = 0.01\nmin-r2 = 0.2\n", encoding="utf-8")
    result = runner.invoke(app, ["fit", "--job", str(job_file), "--x", "Z", "--min-r2", "0.5"])
    assert result.exit_code == 0, result.output
    job: FitJob = recorder.calls[0]["job"]
    assert job.workbook == tmp_path / "jobs" / "data" / "in.xlsx"   # relative to the job file
    assert (job.y, job.x, job.group, job.intercept) == ("Y", ("Z",), ("G",), False)
    assert (job.thresholds.alpha, job.thresholds.min_r2) == (0.01, 0.5)


def test_quiet_prints_only_the_path(recorder, tmp_path):
    loud = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X"])
    quiet = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X", "--quiet"])
    path = tmp_path / "in-fit.xlsx"
    assert loud.stdout.splitlines() == [f"results: {path}", "3 groups: 3 fitted, 0 not fitted, 1 flagged"]
    assert quiet.stdout.splitlines() == [f"results: {path}"]


@pytest.mark.parametrize("error", [NoUsableDataError("no group has enough rows to fit; check --group"),
                                   OutputError("line one\nline two")])
def test_sheetfit_errors_become_one_line(recorder, tmp_path, error):
    recorder.error = error
    result = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X"])
    assert result.exit_code == 1
    assert result.stderr.count("\n") == 1 and result.stderr.startswith("sheetfit: error: ")
    debug = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X", "--debug"])
    assert debug.exception is error


def test_interrupt_is_exit_130(recorder, tmp_path):
    recorder.error = KeyboardInterrupt()
    result = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X"])
    assert result.exit_code == 130
    assert result.stderr == "sheetfit: interrupted; no output written\n"
