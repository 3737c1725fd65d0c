"""DEVELOPERS.md stays a true map: every path and module it names exists.

Paths such as `sheetfit/checks/variance.py`, folders such as `sheetfit/read/`, and bare module
names (`engine.py`) in a table row that names a folder are looked up in the working tree.
"""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
DOC = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
PATH = re.compile(r"`((?:sheetfit|tests|bench)/[\w./-]*)`")
MODULE = re.compile(r"`([\w]+\.py)`")
FOLDER = re.compile(r"`(sheetfit/\w+/)`")


def test_every_named_path_exists():
    missing = [p for p in PATH.findall(DOC) if not (ROOT / p).exists()]
    assert not missing, f"DEVELOPERS.md names paths that do not exist: {missing}"


def test_every_module_named_in_a_stage_row_exists_in_its_folder():
    missing = []
    for line in DOC.splitlines():
        folders = FOLDER.findall(line)
        if not line.startswith("|") or not folders:
            continue
        folder = ROOT / folders[0]
        for name in MODULE.findall(line):
            if not (folder / name).exists():
                missing.append(f"{folders[0]}{name}")
    assert not missing, f"DEVELOPERS.md names modules that do not exist: {missing}"


def test_every_stage_folder_is_on_the_map():
    folders = sorted(p.name for p in (ROOT / "sheetfit").iterdir()
                     if p.is_dir() and (p / "__init__.py").exists())
    absent = [f for f in folders if f"`sheetfit/{f}/`" not in DOC]
    assert not absent, f"folders missing from DEVELOPERS.md: {absent}"


def test_every_top_level_module_is_on_the_map():
    modules = sorted(p.name for p in (ROOT / "sheetfit").glob("*.py"))
    absent = [m for m in modules if f"`sheetfit/{m}`" not in DOC]
    assert not absent, f"modules missing from DEVELOPERS.md: {absent}"
