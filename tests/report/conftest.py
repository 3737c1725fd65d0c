"""Fixtures of the results-workbook tests: a hand-built FitResults (see sample_results.py)."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest
from sample_results import build_results

from sheetfit.results.types import FitResults


@pytest.fixture
def make_results(tmp_path: Path) -> Callable[..., FitResults]:
    """make_results(labels=…, x=…, flagged=…, max_charts=…, observations=…) → FitResults."""
    def make(**kw) -> FitResults:
        return build_results(tmp_path / "in", **kw)
    return make
