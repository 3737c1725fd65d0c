"""Where a result came from: sheetfit's version, installed package versions and file fingerprints."""

from __future__ import annotations

import hashlib
from pathlib import Path

__version__ = "0.1.0"


def installed_version(dist: str) -> str:
    """The installed version of a distribution, '(not installed)' when it is absent."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version(dist)
    except PackageNotFoundError:
        return "(not installed)"


def file_sha256(path: Path) -> str:
    """SHA-256 of a file's bytes, read in 1 MiB chunks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()
