"""Shared fixtures: run the real command line in a subprocess; guard input files against change."""

from __future__ import annotations

import hashlib
import os
import subprocess
import sys
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest


def sha256(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


INPUT_SUFFIXES = {".xlsx", ".xlsm", ".xls", ".ods", ".csv", ".toml"}


def run_cli(*args: object, cwd: Path | None = None, timeout: float = 300) -> subprocess.CompletedProcess:
    """`python -m sheetfit ARGS…` with captured text output (no terminal, so no progress bar).

    Every existing input file named in ARGS (workbooks, CSV, job files) must have the same SHA-256
    and modification time after the run: checked here, automatically, for every CLI call.
    """
    env = {**os.environ, "COLUMNS": "100", "PYTHONIOENCODING": "utf-8"}
    inputs = [Path(cwd or ".") / str(a) for a in args
              if Path(str(a)).suffix.lower() in INPUT_SUFFIXES and (Path(cwd or ".") / str(a)).is_file()]
    before = {p: (sha256(p), p.stat().st_mtime_ns) for p in inputs}
    done = subprocess.run([sys.executable, "-m", "sheetfit", *map(str, args)], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout, stdin=subprocess.DEVNULL)
    for p, (digest, mtime) in before.items():
        if not _is_output(p, args):
            assert (sha256(p), p.stat().st_mtime_ns) == (digest, mtime), f"input {p} changed by the run"
    return done


def _is_output(path: Path, args: tuple) -> bool:
    """True when `path` follows --out in ARGS (a results file the run may replace with --overwrite)."""
    words = [str(a) for a in args]
    return any(w == "--out" and i + 1 < len(words) and Path(words[i + 1]).name == path.name
               for i, w in enumerate(words))


@pytest.fixture
def cli() -> Callable[..., subprocess.CompletedProcess]:
    """The real command line, run as a subprocess: cli('fit', path, '--y', …)."""
    return run_cli


@pytest.fixture
def workbook_guard() -> Iterator[Callable[[Path], Path]]:
    """guard(path) records a file's SHA-256 now; the test fails if the file differs at the end."""
    recorded: dict[Path, str] = {}

    def guard(path: Path) -> Path:
        path = Path(path)
        recorded[path] = sha256(path)
        return path

    yield guard
    for path, digest in recorded.items():
        assert path.exists(), f"{path} disappeared"
        assert sha256(path) == digest, f"{path} was modified"


@pytest.fixture
def system_tmp(tmp_path, monkeypatch):
    """The system temp folder (xlsxwriter's row files and scratch folders go there) pointed at a private one."""
    import tempfile

    root = tmp_path / "system-tmp"
    root.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(root))
    return root
