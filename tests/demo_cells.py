"""Every cell of a results workbook as plain data, to prove a change keeps the demo's results.

Run as `python -m tests.demo_cells OUT.json.gz` to record the demo's cells after an intended
change of the results (the file is read by tests/test_demo_unchanged.py).
"""

from __future__ import annotations

import gzip
import json
import sys
import tempfile
from pathlib import Path

# about rows that differ from run to run or machine to machine
VOLATILE_ABOUT = ("run at", "time to", "python", "numpy", "pandas", "scipy", "statsmodels", "openpyxl",
                  "xlsxwriter", "sheetfit", "input file", "input SHA-256")


def cells_of(path: Path, folder: str = "") -> dict[str, list[list]]:
    """Sheet name → rows of cell values (formulas as their text); `folder` in text becomes <folder>."""
    import openpyxl

    book = openpyxl.load_workbook(path, read_only=True)
    out: dict[str, list[list]] = {}
    for ws in book.worksheets:
        rows = [list(r) for r in ws.iter_rows(values_only=True)]
        if ws.title == "about":
            rows = [r for r in rows if not (r and isinstance(r[0], str) and r[0].startswith(VOLATILE_ABOUT))]
        out[ws.title] = [[_plain(v, folder) for v in r] for r in rows]
    book.close()
    return out


def _plain(v, folder: str):
    if isinstance(v, str):
        return v.replace(folder, "<folder>") if folder else v
    if isinstance(v, (float, int)) or v is None:
        return v
    return str(v)


def demo_cells() -> dict[str, list[list]]:
    """Run the demo in a temporary folder and return its results' cells."""
    from sheetfit.demo import run_demo

    with tempfile.TemporaryDirectory() as tmp:
        _, _, results_path = run_demo(Path(tmp))
        return cells_of(results_path, str(Path(tmp)))


if __name__ == "__main__":
    target = Path(sys.argv[1])
    with gzip.open(target, "wt", encoding="utf-8") as fh:
        json.dump(demo_cells(), fh, separators=(",", ":"))
    print(f"recorded {target}")
