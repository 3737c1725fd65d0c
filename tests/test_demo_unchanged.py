"""The demo's results workbook keeps every cell value through a change that should not alter results.

Oracle: the cells recorded from the demo before the change (tests/fixtures/demo-results-cells.json.gz,
made by `python -m tests.demo_cells`); run-dependent `about` rows (time, versions) are left out.
Numbers must agree to 1e-12 relative (the same arithmetic gives the same bits; the slack only
absorbs a library's last-bit change), text and formulas exactly.
"""

from __future__ import annotations

import gzip
import json
import math
from pathlib import Path

from tests.demo_cells import demo_cells

FIXTURE = Path(__file__).parent / "fixtures" / "demo-results-cells.json.gz"


def _same(a, b) -> bool:
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) and not isinstance(a, bool):
        if math.isnan(a) or math.isnan(b):
            return math.isnan(a) and math.isnan(b)
        return math.isclose(a, b, rel_tol=1e-12, abs_tol=1e-300)
    return a == b


def test_demo_results_have_the_recorded_cells():
    with gzip.open(FIXTURE, "rt", encoding="utf-8") as fh:
        recorded = json.load(fh)
    now = demo_cells()
    assert list(now) == list(recorded), "sheets differ"
    for sheet, rows in recorded.items():
        got = now[sheet]
        assert len(got) == len(rows), f"{sheet}: {len(got)} rows, recorded {len(rows)}"
        for r, (want_row, got_row) in enumerate(zip(rows, got), start=1):
            assert len(got_row) == len(want_row), f"{sheet} row {r}: width differs"
            for c, (w, g) in enumerate(zip(want_row, got_row), start=1):
                assert _same(w, g), f"{sheet} row {r} column {c}: recorded {w!r}, now {g!r}"
