"""Writing the results file: file-system failures are one line, and killed runs leave nothing for long.

A full disk (OSError 28) or a name too long for the file system (OSError 36) gives one OutputError
naming the file and the fix, and leaves neither the temporary file nor the scratch folder. A run
killed outright leaves files whose names say they are sheetfit's (with machine and process id);
the next run removes those of dead processes and nothing else.
"""

from __future__ import annotations

import errno
import os
import signal
import subprocess
import sys
import tempfile
import textwrap
import zipfile

import numpy as np
import pandas as pd
import pytest

import sheetfit
import sheetfit.report.fastrows as fastrows
from sheetfit.errors import OutputError
from sheetfit.report.safe import SCRATCH_PREFIX, TEMP_MARK, host_tag, remove_leftovers



@pytest.fixture(scope="module")
def results():
    rng = np.random.default_rng(1)
    xs = rng.uniform(0, 10, 60)
    df = pd.DataFrame({"site": np.repeat(["a", "b"], 30), "x": xs, "y": 2 + xs + rng.normal(0, 1, 60)})
    return sheetfit.fit_frame(df, y="y", x=["x"], group="site")


def dead_pid() -> int:
    """The id of a process that has ended (and been reaped)."""
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def no_space(*args, **kwargs):
    raise OSError(errno.ENOSPC, "No space left on device")


# --- one line for a full disk or a name too long --------------------------------------------------

@pytest.mark.parametrize("where", ["zip", "bulk", "publish"])
def test_full_disk_is_one_line_and_leaves_nothing(results, tmp_path, system_tmp, monkeypatch, where):
    out = tmp_path / "out"
    out.mkdir()
    if where == "zip":                           # while xlsxwriter writes the archive
        monkeypatch.setattr(zipfile.ZipFile, "write", no_space)
    elif where == "bulk":                        # while the bulk rows are spliced in
        monkeypatch.setattr(fastrows, "THRESHOLD", 0)
        monkeypatch.setattr(fastrows, "splice", no_space)
    else:                                        # while the finished file is flushed to disk
        monkeypatch.setattr(os, "fsync", no_space)
    target = out / "results.xlsx"
    with pytest.raises(OutputError) as err:
        sheetfit.write_results(results, target)
    message = str(err.value)
    assert "\n" not in message and str(target) in message and "free some space" in message
    assert list(out.iterdir()) == [] and list(system_tmp.iterdir()) == []


def test_name_too_long_is_one_line(results, tmp_path, system_tmp):
    target = tmp_path / ("r" * 300 + ".xlsx")
    with pytest.raises(OutputError) as err:
        sheetfit.write_results(results, target)
    message = str(err.value)
    assert "\n" not in message and "too long" in message and "shorter name" in message
    assert [p.name for p in tmp_path.iterdir()] == ["system-tmp"] and list(system_tmp.iterdir()) == []


def test_name_too_long_through_the_cli(tmp_path):
    rng = np.random.default_rng(2)
    book = tmp_path / "in.csv"
    xs = rng.uniform(0, 10, 40)
    pd.DataFrame({"site": np.repeat(["a", "b"], 20), "x": xs, "y": xs + rng.normal(0, 1, 40)}).to_csv(book, index=False)
    # the real command line (tests/conftest.run_cli would stat the over-long name itself)
    done = subprocess.run([sys.executable, "-m", "sheetfit", "fit", str(book), "--group", "site", "--y", "y",
                           "--x", "x", "--out", str(tmp_path / ("r" * 300 + ".xlsx"))],
                          capture_output=True, text=True, timeout=300, stdin=subprocess.DEVNULL,
                          env={**os.environ, "COLUMNS": "100", "PYTHONIOENCODING": "utf-8"})
    assert done.returncode == 1
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and "too long" in lines[0] and "Traceback" not in done.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.csv"]


# --- leftovers of killed runs -------------------------------------------------------------------------

def test_leftovers_of_dead_runs_go_and_nothing_else(results, tmp_path, system_tmp):
    out = tmp_path / "out"
    out.mkdir()
    host, dead = host_tag(), dead_pid()
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(120)"])
    try:
        gone = [out / f".results{TEMP_MARK}-{host}-{dead}-0123abcd.xlsx",
                out / f".other name{TEMP_MARK}-{host}-{dead}-89abcdef.xlsx"]
        scratch_gone = system_tmp / f"{SCRATCH_PREFIX}-{host}-{dead}-k2j4_x9q"
        kept = [out / f".results{TEMP_MARK}-{host}-{sleeper.pid}-0123abcd.xlsx",     # its process runs
                out / f".results{TEMP_MARK}-{'f' * 8 if host != 'f' * 8 else 'e' * 8}-{dead}-0123abcd.xlsx",
                out / f"results{TEMP_MARK}-{host}-{dead}-0123abcd.xlsx",              # not hidden: a user's
                out / f".results{TEMP_MARK}-{host}-{dead}-0123abcd.xlsx.bak",
                out / f".results{TEMP_MARK}-{host}-{dead}-notahex1.xlsx",
                out / ".results.sheetfit-tmp.xlsx", out / "results.xlsx.tmp"]
        scratch_kept = [system_tmp / f"{SCRATCH_PREFIX}-{host}-{sleeper.pid}-abc", system_tmp / "sheetfit-keep-me",
                        system_tmp / f"sheetfit-{host}-{dead}-abc"]
        for p in gone + kept:
            p.write_bytes(b"x")
        folder_named_like_ours = out / f".dir{TEMP_MARK}-{host}-{dead}-0123abcd.xlsx"
        folder_named_like_ours.mkdir()
        link = out / f".link{TEMP_MARK}-{host}-{dead}-0123abcd.xlsx"
        link.symlink_to(kept[2])
        for d in [scratch_gone, *scratch_kept]:
            d.mkdir()
            (d / "row-file").write_bytes(b"x")
        sheetfit.write_results(results, out / "fresh.xlsx")
        assert not any(p.exists() for p in gone) and not scratch_gone.exists()
        assert all(p.exists() for p in kept) and all((d / "row-file").exists() for d in scratch_kept)
        assert folder_named_like_ours.is_dir() and link.is_symlink()
        assert (out / "fresh.xlsx").exists()
    finally:
        sleeper.kill()
        sleeper.wait()


def test_a_killed_write_leaves_recognisable_files_that_the_next_run_removes(results, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    scratch_root = tmp_path / "system-tmp"
    scratch_root.mkdir()
    script = textwrap.dedent(f"""
        import sys, time, tempfile
        import numpy as np, pandas as pd
        import sheetfit
        rng = np.random.default_rng(1)
        xs = rng.uniform(0, 10, 60)
        df = pd.DataFrame({{"site": np.repeat(["a", "b"], 30), "x": xs, "y": 2 + xs + rng.normal(0, 1, 60)}})
        res = sheetfit.fit_frame(df, y="y", x=["x"], group="site")
        def stall(ctx):
            print("writing", flush=True)
            time.sleep(120)
        sheetfit.write_results(res, {str(out / 'results.xlsx')!r}, extra_sheets=[stall])
    """)
    env = {**os.environ, "TMPDIR": str(scratch_root)}
    proc = subprocess.Popen([sys.executable, "-c", script], stdout=subprocess.PIPE, text=True, env=env)
    try:
        assert proc.stdout.readline().strip() == "writing"
        temp = [p.name for p in out.iterdir()]
        scratch = [p.name for p in scratch_root.iterdir()]
        proc.send_signal(signal.SIGKILL)
        proc.wait()
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert len(temp) == 1 and temp[0].startswith(".results" + TEMP_MARK) and f"-{proc.pid}-" in temp[0]
    assert len(scratch) == 1 and scratch[0].startswith(f"{SCRATCH_PREFIX}-{host_tag()}-{proc.pid}-")
    assert [p.name for p in out.iterdir()] == temp                   # what a killed run leaves…
    tempfile.tempdir = str(scratch_root)
    try:
        sheetfit.write_results(results, out / "again.xlsx")          # …the next run removes
    finally:
        tempfile.tempdir = None
    assert [p.name for p in out.iterdir()] == ["again.xlsx"] and list(scratch_root.iterdir()) == []


def test_remove_leftovers_never_follows_a_folder_that_cannot_be_read(tmp_path):
    assert remove_leftovers(tmp_path / "missing") == []
