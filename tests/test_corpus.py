"""Every generated corpus case through `read_observations`: the rows used, the exact reasons, the
values, the labels, the provenance, or the refusal with its one-line message.

Expected outcomes are fixed by how each file is built (tests/corpus/build.py) and by the reading
rules documented in sheetfit/read/cells.py and sheetfit/read/observations.py.
"""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pytest

from sheetfit import errors
from sheetfit.job import FitJob
from sheetfit.read.observations import read_observations
from sheetfit.read.tidy import REASON, SOURCE_ROW, SOURCE_SHEET
from tests.corpus.build import CASES, Case


def _job(path: Path, case: Case) -> FitJob:
    return FitJob(workbook=path, **case.job)


def _row_index(data, key) -> int:
    sheet, row = key if isinstance(key, tuple) else (None, key)
    hit = data[SOURCE_ROW] == row
    if sheet is not None:
        hit &= data[SOURCE_SHEET] == sheet
    idx = np.flatnonzero(hit.to_numpy())
    assert len(idx) == 1, f"row {key} appears {len(idx)} times"
    return int(idx[0])


@pytest.mark.parametrize("case", CASES, ids=[c.name for c in CASES])
def test_corpus_case(case: Case, tmp_path: Path, workbook_guard) -> None:
    if case.needs and not shutil.which(case.needs):
        pytest.skip(f"{case.needs} (LibreOffice) is not installed; it is needed to make a .xls file")
    path = case.build(tmp_path)
    if path.is_file():
        workbook_guard(path)      # the reader must never change its input
    if case.error:
        kind, text = case.error
        with pytest.raises(getattr(errors, kind)) as caught:
            read_observations(_job(path, case))
        message = str(caught.value)
        assert text in message
        assert "\n" not in message and "Traceback" not in message
        assert isinstance(caught.value, errors.SheetfitError)
        return
    obs = read_observations(_job(path, case))
    data = obs.data
    keys = [(s, r) if any(isinstance(k, tuple) for k in case.reasons) else r
            for s, r in zip(data[SOURCE_SHEET], data[SOURCE_ROW])]
    assert sorted(map(str, keys)) == sorted(map(str, case.reasons)), "rows read differ from the rows expected"
    for key, reason in case.reasons.items():
        assert data[REASON].iloc[_row_index(data, key)] == reason, f"reason of row {key}"
    for (row, col), expected in case.values.items():
        got = data[col].iloc[_row_index(data, row)]
        if math.isnan(expected):
            assert math.isnan(got), f"{col} row {row}: {got}"
        else:
            assert got == pytest.approx(expected, rel=1e-12, abs=1e-12), f"{col} row {row}"
    for key, expected in case.labels.items():
        *where, col = key
        assert data[col].iloc[_row_index(data, tuple(where) if len(where) == 2 else where[0])] == expected
    for name, expected in case.info.items():
        assert getattr(obs.info, name) == expected, name
    for text in case.warnings:
        assert any(text in w for w in obs.info.warnings), f"no warning mentions {text!r}: {obs.info.warnings}"
    assert obs.info.rows_read == len(data)
    assert len(obs.info.file_sha256) == 64
