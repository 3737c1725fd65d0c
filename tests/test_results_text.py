"""Input text stays text (chart titles and series names included) and every text cell fits a cell.

Oracles: the chart XML inside the written workbook (literal text, no reference), Python's
`warnings` (xlsxwriter warns of an unknown sheet when it reads a name as a reference), and the
spreadsheet limit of 32,767 UTF-16 units per cell, checked on every cell of every sheet.
"""

from __future__ import annotations

import re
import warnings
import zipfile
from pathlib import Path
from xml.etree import ElementTree as ET

import numpy as np
import openpyxl
import pandas as pd
import pytest

import sheetfit
from sheetfit.results.headers import CELL_LIMIT, CUT_MARK, cell_text, utf16_len
from sheetfit.results.store import unique_labels
from sheetfit.results.store_read import read_store

NS = {"c": "http://schemas.openxmlformats.org/drawingml/2006/chart",
      "a": "http://schemas.openxmlformats.org/drawingml/2006/main"}
HOSTILE = ["Sales!Q4", "=cmd|' /C calc'!A0", "Sheet1!$A$1 total", "=SUM(A1:A2)", "'data'!B2"]


def chart_texts(path: Path) -> tuple[list[str], list[str]]:
    """(literal texts of titles, axis titles and series names, reference formulas) of every chart."""
    texts, formulas = [], []
    with zipfile.ZipFile(path) as z:
        for name in z.namelist():
            if re.match(r"xl/charts/chart\d+\.xml$", name):
                root = ET.fromstring(z.read(name))
                texts += ["".join(t.text or "" for t in r.iter(f"{{{NS['a']}}}t"))
                          for r in root.iter(f"{{{NS['c']}}}rich")]
                texts += [v.text or "" for tx in root.iter(f"{{{NS['c']}}}tx") for v in tx.findall("c:v", NS)]
                formulas += [f.text or "" for tx in root.iter(f"{{{NS['c']}}}tx") for f in tx.iter(f"{{{NS['c']}}}f")]
    return texts, formulas


def fit(df: pd.DataFrame, y: str, x: list[str], group: str, **kw):
    return sheetfit.fit_frame(df, y=y, x=x, group=group, **kw)


@pytest.mark.parametrize("y, x", [(HOSTILE[0], HOSTILE[1]), (HOSTILE[2], HOSTILE[3]), (HOSTILE[4], "plain")])
def test_names_that_look_like_references_stay_text_in_charts(tmp_path, y, x):
    rng = np.random.default_rng(2)
    xs = rng.uniform(1, 10, 60)
    df = pd.DataFrame({"site": np.repeat(["Sheet2!A1", "b"], 30), x: xs, y: 3 + xs + rng.normal(0, 1, 60)})
    with warnings.catch_warnings():
        warnings.simplefilter("error")          # "Unknown worksheet reference …" would raise here
        res = fit(df, y, [x], "site")
        path = sheetfit.write_results(res, tmp_path / "results.xlsx")
    texts, formulas = chart_texts(path)
    assert y in texts and x in texts                                   # axis titles, literal
    assert f"{y} against {x}" in texts                                 # the explorer's chart title
    data_refs = [f for f in formulas if not f.startswith(("'chart data'!", "explorer!", "'explorer'!"))]
    assert data_refs == [], data_refs                                  # no name became a reference
    assert read_store(path).y == y


def test_long_reference_like_equation_stays_text(tmp_path):
    rng = np.random.default_rng(3)
    xs = rng.uniform(1, 10, 40)
    df = pd.DataFrame({"g": ["a"] * 40, "Q!A1": xs, "y": 2 * xs + rng.normal(0, 1, 40)})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        path = sheetfit.write_results(fit(df, "y", ["Q!A1"], "g"), tmp_path / "r.xlsx")
    texts, _ = chart_texts(path)
    assert any(t.startswith("y = ") and "Q!A1" in t for t in texts)    # the fit chart's equation title


# --- every text cell fits a cell --------------------------------------------------------------------

def all_text_cells(path: Path):
    """(sheet, cell, text) of every text cell: formulas as written and their cached results."""
    for data_only in (False, True):
        wb = openpyxl.load_workbook(path, read_only=True, data_only=data_only)
        for ws in wb.worksheets:
            for row in ws.iter_rows():
                for c in row:
                    if isinstance(c.value, str):
                        yield ws.title, c.coordinate, c.value
        wb.close()


def long_frame() -> tuple[pd.DataFrame, str, str]:
    rng = np.random.default_rng(6)
    y = "Y" * CELL_LIMIT                          # a reason naming it passes the limit
    a, b = "A" * CELL_LIMIT, "A" * (CELL_LIMIT - 1) + "B"     # labels of exactly the limit, nearly alike
    emoji = "📈" * (CELL_LIMIT // 2 + 5)          # fits in characters, not in UTF-16 units
    n = 30
    xs = rng.uniform(0, 10, 4 * n + 2)
    ys = 1 + 2 * xs + rng.normal(0, 1, 4 * n + 2)
    ys[n:2 * n] += 8 * (xs[n:2 * n] - 5) ** 2     # curved: flagged, with reasons on the charts sheet
    ys = ys.astype(object)
    ys[3] = "not a number"
    df = pd.DataFrame({"site": [a] * n + [b] * n + [emoji] * n + ["short"] * n + ["C" * CELL_LIMIT] * 2,
                       "x": xs, y: ys})
    return df, y, a


def test_every_text_cell_fits_and_cuts_show(tmp_path):
    df, y, a = long_frame()
    res = fit(df, y, ["x"], "site")
    assert (res.groups["status"] == "fitted").sum() == 4             # the 2-row group is not fitted
    with warnings.catch_warnings():
        warnings.simplefilter("error")            # xlsxwriter warns when a rich string is too long
        path = sheetfit.write_results(res, tmp_path / "long.xlsx")
    cut = 0
    for sheet, cell, text in all_text_cells(path):
        assert utf16_len(text) <= CELL_LIMIT, (sheet, cell, utf16_len(text))
        cut += text.endswith(CUT_MARK)
    assert cut > 0
    wb = openpyxl.load_workbook(path, read_only=True)
    head = [c for c in next(wb["observations"].iter_rows(values_only=True))]
    assert head[3] == cell_text(y) == y                               # exactly the limit: whole
    reasons = [r[head.index("reason")] for r in wb["observations"].iter_rows(min_row=2, values_only=True)]
    assert reasons[3].startswith("YYY") and reasons[3].endswith(CUT_MARK) and len(reasons[3]) == CELL_LIMIT
    labels = [r[0] for r in wb["groups"].iter_rows(min_row=2, values_only=True)]
    assert labels[:2] == [a, "A" * (CELL_LIMIT - 1) + "B"]              # labels of exactly the limit stay whole
    wb.close()
    store = read_store(path)
    assert len(set(s.lower() for s in store.labels)) == len(store) == 4
    new = pd.DataFrame({"site": [a, "short"], "x": [5.0, 5.0]})
    got = sheetfit.predict(path, new)
    assert np.isfinite(got["predicted value"].to_numpy(dtype=float)).all()


def test_cut_text_counts_utf16_units_and_shows_the_cut():
    assert cell_text("x" * CELL_LIMIT) == "x" * CELL_LIMIT
    cut = cell_text("x" * (CELL_LIMIT + 1))
    assert len(cut) == CELL_LIMIT and cut.endswith(CUT_MARK)
    emoji = cell_text("📈" * CELL_LIMIT)                               # 2 units each
    assert utf16_len(emoji) <= CELL_LIMIT and emoji.endswith(CUT_MARK) and "\ud83d" not in emoji
    assert cell_text("abc", 2) == "a" + CUT_MARK


def test_labels_that_agree_up_to_the_limit_stay_unique():
    # two key columns of 20,000 characters: the joined labels agree in their first 32,767 characters
    keys = [("k" * 20_000, "m" * 20_000 + str(i)) for i in range(3)] + [("x",), ("X",)]
    labels = unique_labels(keys)
    assert all(utf16_len(s) <= CELL_LIMIT for s in labels)
    assert len({s.lower() for s in labels}) == len(labels)
    assert labels[1].endswith(f"{CUT_MARK} (2)") and labels[4] == "X (2)"
