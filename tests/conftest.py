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


def run_cli(*args: object, cwd: Path | None = None, timeout: float = 300) -> subprocess.CompletedProcess:
    """`python -m sheetfit ARGS…` with captured text output (no terminal, so no progress bar)."""
    env = {**os.environ, "COLUMNS": "100", "PYTHONIOENCODING": "utf-8"}
    return subprocess.run([sys.executable, "-m", "sheetfit", *map(str, args)], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout, stdin=subprocess.DEVNULL)


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
