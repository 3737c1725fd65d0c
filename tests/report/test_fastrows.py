"""The bulk row path (sheetfit.report.fastrows): the same workbook as xlsxwriter's own row writing.

Oracles: openpyxl and python-calamine (independent xlsx readers) read the cells back; the
xlsxwriter path (fast path forced off) is the reference for formats, highlights and filters;
LibreOffice re-saves the fast-path workbook to prove a third application parses the rows.
"""

from __future__ import annotations

import math
import struct
import xml.etree.ElementTree as ET
import zipfile
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
import xlsxwriter
from python_calamine import CalamineWorkbook
from sample_results import HOSTILE

from sheetfit.report import fastrows, write_results
from sheetfit.report import tables as T
from sheetfit.report.book import WORKBOOK_OPTIONS, WriteContext
from sheetfit.report.styles import Styles
from tests.lo import SKIP_REASON, SOFFICE, convert, make_profile

FLOATS = [0.0, -0.0, 5e-324, -2.2250738585072014e-308, 1.7976931348623157e308, 1e16, 1e15, 1e-5, 0.1,
          1 / 3, 2.0**53 + 2, 123456789012345678.0, -7.25e-200, 6.02214076e23]
TEXTS = ["plain", "a & b < c > d", 'say "hi"', "it's", "'leading apostrophe", "=1+2", "+A1", "@SUM(A1)",
         "http://x", "  two leading", "trailing ", "\ttab", "line\nbreak", "ctrl\x01\x07\x1fchars",
         "_x0041_ literal", "\ufffe odd", "é中😀", "", None]


def _bits(v: float) -> bytes:
    return struct.pack("<d", v)


def _frame(n: int = 240, seed: int = 3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rand = rng.standard_normal(n) * 10.0 ** rng.integers(-300, 300, n)
    rand[: len(FLOATS)] = FLOATS
    rand[20], rand[21], rand[22] = np.nan, np.inf, -np.inf
    ints = rng.integers(-(2**53) + 1, 2**53 - 1, n)
    texts = [TEXTS[i % len(TEXTS)] for i in range(n)]
    mixed = np.array([[1, "a", 2.5, None, float("nan"), "=x"][i % 6] for i in range(n)], dtype=object)
    return pd.DataFrame({
        "random": rand, "whole": np.arange(n, dtype=np.float64) - 5, "count": ints,
        "text": pd.Series(texts, dtype=object), "flag": rng.random(n) > 0.5, "mixed": mixed,
        "when": pd.Timestamp("2024-05-01") + pd.to_timedelta(np.arange(n), unit="h"),
        "p-value": rng.random(n),
    })


def _write_frame(path: Path, df: pd.DataFrame) -> None:
    """write_table on its own workbook, spliced as write_results does."""
    shell = path.with_suffix(".shell.xlsx")
    wb = xlsxwriter.Workbook(str(shell), {**WORKBOOK_OPTIONS, "tmpdir": str(path.parent)})
    ctx = WriteContext(workbook=wb, results=None, styles=Styles(wb))
    T.write_table(ctx, "table", df, list(df.columns), rules=(T.Rule("flag", '{c}="yes"', "unusual_row"),))
    wb.close()
    if ctx.bulk:
        fastrows.splice(shell, path, ctx.bulk)
    else:
        shell.rename(path)


@pytest.fixture
def pair(tmp_path, monkeypatch):
    """The same frame written with the fast path on and off: (frame, fast path, slow path)."""
    df = _frame()
    monkeypatch.setattr(fastrows, "THRESHOLD", 0)
    _write_frame(tmp_path / "fast.xlsx", df)
    monkeypatch.setattr(fastrows, "THRESHOLD", None)
    _write_frame(tmp_path / "slow.xlsx", df)
    return df, tmp_path / "fast.xlsx", tmp_path / "slow.xlsx"


def test_sheet_xml_is_well_formed(pair):
    _, fast, _ = pair
    with zipfile.ZipFile(fast) as z:
        assert z.testzip() is None
        for name in z.namelist():
            if name.endswith(".xml") or name.endswith(".rels"):
                ET.fromstring(z.read(name))          # raises on malformed XML


def test_round_trip_openpyxl(pair):
    df, fast, slow = pair
    ws = openpyxl.load_workbook(fast)["table"]
    rows = list(ws.iter_rows(min_row=2, values_only=False))
    assert len(rows) == len(df)
    for i, row in enumerate(rows):
        v = {c: row[j] for j, c in enumerate(df.columns)}
        x = df["random"].iloc[i]
        if math.isfinite(x):
            assert v["random"].data_type == "n" and _bits(float(v["random"].value)) == _bits(x)
        else:
            assert v["random"].value is None                 # NaN and ±inf: an empty cell
        assert v["whole"].value == df["whole"].iloc[i]
        assert v["count"].value == int(df["count"].iloc[i]) and v["count"].data_type == "n"
        t = df["text"].iloc[i]
        if t:
            assert v["text"].data_type == "s" and isinstance(v["text"].value, str)
            if not any(ord(ch) < 32 and ch not in "\t\n" for ch in t) and "_x" not in t and "\ufffe" not in t:
                assert v["text"].value == t                  # text, never a formula or a link
        else:
            assert v["text"].value is None                   # '' and None: no cell, as xlsxwriter
        assert v["flag"].value == ("yes" if df["flag"].iloc[i] else "no")
        assert v["when"].is_date and v["when"].value == df["when"].iloc[i].to_pydatetime()
        m = df["mixed"].iloc[i]
        expect = None if m is None or (isinstance(m, float) and math.isnan(m)) else m
        assert v["mixed"].value == expect


def test_same_cells_as_xlsxwriter_path(pair):
    """Values, types, formats and styles equal the xlsxwriter path's; numbers equal after its 16-digit rounding."""
    _, fast, slow = pair
    a, b = openpyxl.load_workbook(fast)["table"], openpyxl.load_workbook(slow)["table"]
    assert a.dimensions == b.dimensions
    for ra, rb in zip(a.iter_rows(), b.iter_rows(), strict=True):
        for ca, cb in zip(ra, rb, strict=True):
            assert ca.data_type == cb.data_type, ca.coordinate
            assert ca.number_format == cb.number_format and ca.style_id == cb.style_id, ca.coordinate
            if isinstance(ca.value, float) or isinstance(cb.value, float):
                # xlsxwriter writes '%.16G'; the fast path writes every bit
                assert float("%.16G" % ca.value) == cb.value or ca.value == cb.value, ca.coordinate
            else:
                assert ca.value == cb.value, ca.coordinate


def test_round_trip_calamine(pair):
    df, fast, _ = pair
    rows = CalamineWorkbook.from_path(str(fast)).get_sheet_by_name("table").to_python()
    head = rows[0]
    for i, row in enumerate(rows[1:]):
        got = dict(zip(head, row))
        x = df["random"].iloc[i]
        if math.isfinite(x):
            assert _bits(float(got["random"])) == _bits(x)
        else:
            assert got["random"] == ""
        assert got["count"] == int(df["count"].iloc[i])
        t = df["text"].iloc[i]
        if t and t.isprintable() and "_x" not in t:
            assert got["text"] == t


# --- whole results workbooks, fast path forced on and off ---------------------------------------

def _results_pair(make_results, tmp_path, monkeypatch, **kw):
    (tmp_path / "out").mkdir(exist_ok=True)
    res = make_results(labels=["North", "South", "East", "West", *HOSTILE], not_fitted=["East"],
                       perfect=["West"], **kw)
    monkeypatch.setattr(fastrows, "THRESHOLD", 0)
    fast = write_results(res, tmp_path / "out" / "fast.xlsx")
    monkeypatch.setattr(fastrows, "THRESHOLD", None)
    slow = write_results(res, tmp_path / "out" / "slow.xlsx")
    return fast, slow


def _compare_books(fast: Path, slow: Path) -> None:
    a, b = openpyxl.load_workbook(fast), openpyxl.load_workbook(slow)
    assert a.sheetnames == b.sheetnames
    for name in a.sheetnames:
        wa, wb_ = a[name], b[name]
        assert wa.dimensions == wb_.dimensions, name
        assert wa.auto_filter.ref == wb_.auto_filter.ref, name
        assert wa.freeze_panes == wb_.freeze_panes, name
        assert [(str(r.sqref), [x.formula for x in r.rules]) for r in wa.conditional_formatting] == \
               [(str(r.sqref), [x.formula for x in r.rules]) for r in wb_.conditional_formatting], name
        assert [(str(d.sqref), d.formula1) for d in wa.data_validations.dataValidation] == \
               [(str(d.sqref), d.formula1) for d in wb_.data_validations.dataValidation], name
        for ra, rb in zip(wa.iter_rows(), wb_.iter_rows(), strict=True):
            for ca, cb in zip(ra, rb, strict=True):
                assert (ca.data_type, ca.number_format) == (cb.data_type, cb.number_format), (name, ca.coordinate)
                if isinstance(ca.value, float) and isinstance(cb.value, (int, float)):
                    assert float("%.16G" % ca.value) == cb.value, (name, ca.coordinate)
                else:
                    assert ca.value == cb.value, (name, ca.coordinate)


def test_results_workbook_same_with_fast_path(make_results, tmp_path, monkeypatch):
    fast, slow = _results_pair(make_results, tmp_path, monkeypatch)
    with zipfile.ZipFile(fast) as z:
        assert z.testzip() is None
    _compare_books(fast, slow)
    assert "observations" in openpyxl.load_workbook(fast, read_only=True).sheetnames


@pytest.mark.parametrize("mode", ["flagged", "none"])
def test_observation_modes_with_fast_path(make_results, tmp_path, monkeypatch, mode):
    fast, slow = _results_pair(make_results, tmp_path, monkeypatch, observations=mode)
    _compare_books(fast, slow)


def test_continuation_sheet_with_fast_path(make_results, tmp_path, monkeypatch):
    monkeypatch.setattr(T, "MAX_DATA_ROWS", 30)        # stands in for the 1,048,575-row sheet limit
    fast, slow = _results_pair(make_results, tmp_path, monkeypatch)
    names = openpyxl.load_workbook(fast, read_only=True).sheetnames
    assert "observations (2)" in names
    _compare_books(fast, slow)


@pytest.mark.skipif(SOFFICE is None, reason=SKIP_REASON)
def test_libreoffice_reads_fast_path_rows(make_results, tmp_path, monkeypatch):
    fast, _ = _results_pair(make_results, tmp_path, monkeypatch)
    outs, _ = convert([fast], "xlsx", tmp_path / "lo", make_profile(tmp_path / "profile"))
    mine = openpyxl.load_workbook(fast)["observations"]
    theirs = openpyxl.load_workbook(outs[0])["observations"]
    for ra, rb in zip(mine.iter_rows(values_only=True), theirs.iter_rows(values_only=True), strict=True):
        for x, y in zip(ra, rb):
            if isinstance(x, float):
                assert y == pytest.approx(x, rel=1e-14, abs=0)     # LibreOffice saves 15 digits
            else:
                assert x == y or (x is None and y in ("", None))


def test_failed_write_stops_the_splice():
    """A failing destination (e.g. a full disk) surfaces as the writer's own error; nothing hangs."""
    class Full:
        def write(self, chunk):
            raise OSError(28, "No space left on device")

    pipe = fastrows._Pipe(Full())
    with pytest.raises(OSError, match="No space"):
        try:
            for _ in range(50):
                pipe.write(b"x" * 1000)
        finally:
            pipe.close()
    assert not pipe._thread.is_alive()
