"""The command line's boundary: signals, warnings and input paths that are not plain readable files.

- SIGTERM is handled as Ctrl-C: the writer's cleanup runs, no temporary file is left, exit 143 (Ctrl-C 130).
- Python and library warnings never reach stderr (it carries our one-line error or our progress
  only); --debug shows them.
- A named pipe or device is refused before anything opens it (it would block or never end); an
  unreadable file is the reader's one-line "cannot be opened" (exit 1), not a usage error (exit 2).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
import types
import warnings
from pathlib import Path

import numpy as np
import pytest
import xlsxwriter
from typer.testing import CliRunner

from sheetfit.cli import app
from tests.conftest import run_cli
from tests.e2e.test_cli_errors import FIT, one_error_line, write_book

runner = CliRunner()


def _slow_csv(path: Path, rows: int = 100_000) -> Path:
    """A CSV big enough that writing its results takes a few seconds."""
    rng = np.random.default_rng(1)
    g = rng.integers(0, 1000, rows)
    x = rng.uniform(0, 10, rows)
    y = 1 + 2 * x + rng.normal(size=rows)
    with open(path, "w", encoding="utf-8") as fh:
        fh.write("g,x,y\n")
        fh.writelines(f"G{a},{b:.6f},{c:.6f}\n" for a, b, c in zip(g, x, y))
    return path


@pytest.mark.skipif(sys.platform == "win32", reason="POSIX signals")
def test_sigterm_while_writing_is_exit_143_and_leaves_no_temporary_file(tmp_path):
    data = _slow_csv(tmp_path / "big.csv")
    env = {**os.environ, "PYTHONIOENCODING": "utf-8"}
    proc = subprocess.Popen([sys.executable, "-m", "sheetfit", "fit", str(data), "--group", "g", "--y", "y",
                             "--x", "x"], cwd=tmp_path, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            stdin=subprocess.DEVNULL, text=True)
    deadline = time.monotonic() + 240
    sent = False
    while proc.poll() is None and time.monotonic() < deadline:
        if any(".sheetfit-tmp" in p.name for p in tmp_path.iterdir()):     # the writer's temporary file
            # a moment later the workbook is being written (a signal in the instant between creating the
            # temporary file and guarding it is report.safe's concern, not the CLI's)
            time.sleep(0.5)
            if proc.poll() is None:
                proc.send_signal(signal.SIGTERM)
                sent = True
            break
        time.sleep(0.01)
    if not sent:
        proc.kill()
    _, err = proc.communicate(timeout=120)
    assert sent, f"the run ended before its temporary file was seen: {err}"
    assert proc.returncode == 143, err
    assert err.splitlines() == ["sheetfit: stopped by SIGTERM; no output written"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["big.csv"]


@pytest.fixture
def pipeline(monkeypatch):
    """sheetfit.pipeline replaced by a stub whose run_job runs `fake.body` (warnings, interrupts…)."""
    fake = types.ModuleType("sheetfit.pipeline")
    fake.body = lambda: None

    def run_job(job, progress=None):
        fake.body()
        return "RESULTS", Path(job.output_path)

    fake.run_job = run_job
    fake.summary_lines = lambda results: []
    monkeypatch.setitem(sys.modules, "sheetfit.pipeline", fake)
    return fake


def test_sigterm_handler_raises_keyboard_interrupt_in_the_run(pipeline, tmp_path):
    seen = []

    def body():
        try:
            os.kill(os.getpid(), signal.SIGTERM)
            time.sleep(5)
        except KeyboardInterrupt:           # the writer's `except BaseException` cleanup sees this
            seen.append("cleanup ran")
            raise

    pipeline.body = body
    before = signal.getsignal(signal.SIGTERM)
    result = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X"])
    assert result.exit_code == 143
    assert seen == ["cleanup ran"]
    assert result.stderr == "sheetfit: stopped by SIGTERM; no output written\n"
    assert signal.getsignal(signal.SIGTERM) is before        # restored after the command


def test_ctrl_c_is_still_130(pipeline, tmp_path):
    def body():
        raise KeyboardInterrupt

    pipeline.body = body
    result = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X"])
    assert result.exit_code == 130
    assert result.stderr == "sheetfit: interrupted; no output written\n"


def _warn():
    np.float64(1e308) * np.float64(10.0)                           # numpy: RuntimeWarning overflow
    warnings.warn("Ignoring URL since it exceeds Excel's limit", UserWarning)   # as xlsxwriter warns
    with np.errstate(divide="warn"):
        np.log(np.zeros(1))


def test_warnings_stay_off_stderr_unless_debug(pipeline, tmp_path):
    pipeline.body = _warn
    quiet = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X"])
    assert quiet.exit_code == 0
    assert quiet.stderr == ""
    debug = runner.invoke(app, ["fit", str(tmp_path / "in.xlsx"), "--y", "Y", "--x", "X", "--debug"])
    assert debug.exit_code == 0
    lines = debug.stderr.splitlines()
    assert any(line.startswith("sheetfit: warning: RuntimeWarning: overflow") for line in lines), lines
    assert any("UserWarning: Ignoring URL" in line for line in lines), lines


def test_a_real_run_that_overflows_keeps_stderr_empty(tmp_path):
    """Values near the float limit make numpy warn while the results are gathered."""
    book = tmp_path / "huge.xlsx"
    with xlsxwriter.Workbook(str(book)) as wb:
        ws = wb.add_worksheet("d")
        ws.write_row(0, 0, ["g", "x", "y"])
        r = 1
        for g in "ABC":
            for i in range(12):
                ws.write_row(r, 0, [g, i * 1e150, (2 * i + 1 + i % 3) * 1e300])
                r += 1
    proc = run_cli("fit", book, "--group", "g", "--y", "y", "--x", "x", cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr == ""


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes are POSIX")
def test_a_named_pipe_is_refused_at_once(tmp_path, cli):
    pipe = tmp_path / "data.xlsx"
    os.mkfifo(pipe)
    err = one_error_line(cli("fit", pipe, *FIT, timeout=60))
    assert "is not a regular file (it is a named pipe (FIFO))" in err
    book = write_book(tmp_path / "usage.xlsx")
    assert cli("fit", book, *FIT).returncode == 0
    err = one_error_line(cli("predict", tmp_path / "usage-fit.xlsx", pipe, timeout=60))
    assert "named pipe" in err
    err = one_error_line(cli("fit", book, *FIT, "--job", pipe, timeout=60))
    assert "not a regular file" in err


def test_a_device_is_refused(cli, tmp_path):
    if not Path("/dev/null").exists():
        pytest.skip("no /dev/null")
    assert "it is a device" in one_error_line(cli("fit", "/dev/null", *FIT, cwd=tmp_path))


def test_typer_does_not_judge_readability(monkeypatch, tmp_path):
    """Path arguments are not checked by typer (that would be a usage error, exit 2): the run says it."""
    book = write_book(tmp_path / "usage.xlsx")
    real_access = os.access
    monkeypatch.setattr(os, "access", lambda p, mode, *a, **k: False if mode & os.R_OK else real_access(p, mode))

    def refuse(*args, **kwargs):
        from sheetfit.errors import InputFileError
        raise InputFileError(f'input file "{book}" cannot be opened (Permission denied); check its permissions')

    fake = types.ModuleType("sheetfit.pipeline")
    fake.run_job = lambda job, progress=None: refuse()
    fake.predict_workbook = lambda *a, **k: refuse()
    fake.summary_lines = lambda results: []
    monkeypatch.setitem(sys.modules, "sheetfit.pipeline", fake)
    for args in (["fit", str(book), *FIT], ["predict", str(book), str(book)],
                 ["fit", str(book), *FIT, "--out", str(book), "--overwrite"]):
        result = runner.invoke(app, args)
        assert result.exit_code == 1, result.output
        assert "cannot be opened" in result.stderr


@pytest.mark.skipif(os.name != "posix" or os.geteuid() == 0, reason="root reads any file")
def test_an_unreadable_file_is_one_line(tmp_path, cli):
    book = write_book(tmp_path / "usage.xlsx")
    book.chmod(0)
    try:
        err = one_error_line(cli("fit", book, *FIT))
    finally:
        book.chmod(0o600)
    assert "usage.xlsx" in err


def test_predict_help_stays_light():
    from tests.test_startup import HEAVY, probe

    result, out = probe("predict", "--help")
    assert result["code"] in (0, None) and not set(result["heavy"]) & set(HEAVY)
    assert "--level" in out and "--quiet" in out and "143" in out
