"""Regression tests for inputs that once broke the reader: each gives rows with reasons, or one line
naming the problem and the fix, never a traceback, a hang or unbounded memory.

Oracles: the numbers and text written into each generated file; Python's `float`/`repr` for number
labels; `unicodedata` for Unicode forms; xlrd's and python-calamine's own behaviour on damaged input
(checked as canaries so the reason for each guard stays visible). No timed tests: where a fault was
slowness, the test shows the structure that removes it (input growing by factors of ten, a bound
on the bytes held) and the measurements live in the report that fixed it.
"""

from __future__ import annotations

import math
import os
import re
import shutil
import subprocess
import sys
import unicodedata
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sheetfit import errors
from sheetfit.job import FitJob
from sheetfit.read import check_path, csvfile, xlsxscan
from sheetfit.read.cells import key_label, label, number_label, parse_text
from sheetfit.read.columns import parse_column
from sheetfit.read.csvfile import CsvBook
from sheetfit.read.observations import read_observations
from sheetfit.read.tidy import REASON, SOURCE_ROW
from tests.corpus.writers import _CT, _RELS, _WB, _WB_RELS, xlsx

H = ["Site", "Load kWh", "CDD"]


def _job(path: Path, **kw) -> FitJob:
    return FitJob(workbook=path, **{"y": "Load kWh", "x": ("CDD",), "group": ("Site",), **kw})


def _csv(path: Path, text: str | bytes) -> Path:
    path.write_bytes(text if isinstance(text, bytes) else text.encode("utf-8"))
    return path


def _rows(sites) -> str:
    return "".join(f"{s},{10 + k * 1.5 + k % 3},{k}\n" for k, s in enumerate(sites))


# ---------------------------------------------------------------- 1. group keys stay as written

BIG_IDS = ["9007199254740993", "9007199254740992", "12345678901234567", "12345678901234568"]


def test_text_ids_beyond_float_precision_stay_apart_in_a_csv(tmp_path):
    """CSV values are text: IDs one float cannot tell apart are four groups, each labelled as written."""
    path = _csv(tmp_path / "ids.csv", "Site,Load kWh,CDD\n" + _rows(BIG_IDS * 3))
    data = read_observations(_job(path)).data
    assert data["Site"].tolist() == BIG_IDS * 3


def test_text_ids_in_xlsx_text_cells_stay_apart(tmp_path):
    path = tmp_path / "ids.xlsx"
    xlsx([H] + [[s, k, k] for k, s in enumerate(BIG_IDS * 2)])(path)          # openpyxl writes str as text
    assert read_observations(_job(path)).data["Site"].tolist() == BIG_IDS * 2


def test_number_cells_get_the_shortest_label_that_reads_back(tmp_path):
    """Stored as numbers the two 2**53 neighbours are one float already, so one label; no '.0', no exponent."""
    path = tmp_path / "numbers.xlsx"
    xlsx([H, [9007199254740993, 1, 1], [9007199254740992, 2, 2], [1.234567890123456e16, 3, 3], [1e15, 4, 4],
          [101, 5, 5], [102.5, 6, 6]])(path)          # openpyxl writes 16 significant digits at most
    labels = read_observations(_job(path)).data["Site"].tolist()
    assert labels == ["9007199254740992", "9007199254740992", "12345678901234560", "1000000000000000", "101",
                      "102.5"]


@pytest.mark.parametrize("value,text", [(1e15, "1000000000000000"), (1.2345678901234568e16, "12345678901234568"),
                                        (1e20, "100000000000000000000"), (1e21, "1e+21"), (0.1, "0.1"),
                                        (-0.0, "0"), (1e-05, "1e-05"), (-2.5, "-2.5")])
def test_number_label_examples(value, text):
    assert number_label(value) == text


@settings(max_examples=300, deadline=None)
@given(st.floats(allow_nan=False, allow_infinity=False))
def test_number_label_reads_back_exactly(x):
    text = number_label(x)
    assert float(text) == x                                   # float() is the oracle
    assert not text.endswith(".0")
    assert len(text) <= len(repr(x)) + 5 or "e" not in repr(x)   # positional only where repr used an exponent


def test_text_labels_keep_their_digits_and_still_match_numbers():
    assert [label(t) for t in ("+12345678901234567.50", "-12345678901234567.0", " 101 ", "101.000", "0.10",
                               "-0", "0101")] == \
        ["12345678901234567.5", "-12345678901234567", "101", "101", "0.1", "0", "0101"]
    assert label("1000000000000000") == label(1e15) and label("12345678901234568") == label(1.2345678901234568e16)


def test_one_name_in_two_unicode_forms_is_one_group_with_a_warning(tmp_path):
    composed = "Genève"
    decomposed = unicodedata.normalize("NFD", composed)
    assert composed != decomposed
    path = _csv(tmp_path / "forms.csv", "Site,Load kWh,CDD\n" + _rows([composed, decomposed, "Zürich"] * 3))
    obs = read_observations(_job(path))
    assert obs.data["Site"].tolist() == [composed, composed, "Zürich"] * 3
    assert all(unicodedata.is_normalized("NFC", s) for s in obs.data["Site"])
    twice = [w for w in obs.info.warnings if "two ways" in w]
    assert len(twice) == 1 and '"Genève" (Site)' in twice[0] and "Zürich" not in twice[0]
    assert key_label(decomposed) == key_label(composed) == composed      # what prediction matches new rows by


# ---------------------------------------------------------------- 2. damaged legacy .xls

def _soffice_xls(folder: Path) -> bytes:
    if not (shutil.which("soffice") or shutil.which("libreoffice")):
        pytest.skip("soffice (LibreOffice) is not installed; it is needed to make a .xls file")
    from tests.corpus.writers import via_soffice

    path = folder / "legacy.xls"
    via_soffice(xlsx([H] + [["A" if k % 2 else "B", 10 + k, k] for k in range(12)]), "xls")(path)
    return path.read_bytes()


def test_damaged_xls_sheet_stream_gives_one_line(tmp_path):
    import xlrd

    raw = bytearray(_soffice_xls(tmp_path))
    at = raw.find(b"\xbd\x00")                       # the first MULRK record (numbers of one row)
    assert at > 0
    raw[at + 8: at + 10] = (58895).to_bytes(2, "little")   # its first cell's format: one that does not exist
    path = tmp_path / "damaged.xls"
    path.write_bytes(bytes(raw))
    with open(os.devnull, "w") as quiet:
        book = xlrd.open_workbook(str(path), formatting_info=True, on_demand=True, logfile=quiet)
        with pytest.raises(KeyError):                # canary: what xlrd itself raises on this sheet
            book.sheet_by_index(0)
    with pytest.raises(errors.NotAWorkbookError) as caught:
        read_observations(_job(path))
    msg = str(caught.value)
    assert msg.startswith('"damaged.xls" is damaged') and 'sheet "Data"' in msg and "\n" not in msg


def test_reading_an_xls_prints_nothing(tmp_path, capsys):
    path = tmp_path / "ok.xls"
    path.write_bytes(_soffice_xls(tmp_path))
    assert read_observations(_job(path)).info.rows_read == 12
    assert capsys.readouterr() == ("", "")


def _looping_compound_file() -> bytes:
    """A compound file whose Workbook stream (128 bytes, so in short sectors) chains 0 → 1 → 0 → …"""
    import struct

    sec, end, free = 512, 0xFFFFFFFE, 0xFFFFFFFF
    header = (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\0" * 16 + struct.pack("<HHHHH", 0x3E, 3, 0xFFFE, 9, 6) +
              b"\0" * 6 + struct.pack("<IIIIIIIII", 0, 1, 1, 0, 4096, 2, 1, end, 0) +
              struct.pack("<I", 0) + struct.pack("<I", free) * 108)
    fat = struct.pack(f"<{sec // 4}I", 0xFFFFFFFD, end, end, end, *([free] * (sec // 4 - 4)))

    def entry(name: str, kind: int, child: int, start: int, size: int) -> bytes:
        raw = name.encode("utf-16-le") + b"\0\0"
        return raw.ljust(64, b"\0") + struct.pack("<HBB3I", len(raw), kind, 1, free, free, child) + \
            b"\0" * 36 + struct.pack("<IQ", start, size)

    directory = (entry("Root Entry", 5, 1, 3, 512) + entry("Workbook", 2, free, 0, 128)).ljust(sec, b"\0")
    short_table = struct.pack(f"<{sec // 4}I", 1, 0, *([free] * (sec // 4 - 2)))
    return header + fat + directory + short_table + b"\x09\x08\x10\x00\x00\x06\x05\x00".ljust(sec, b"\0")


def test_a_looping_short_sector_chain_is_refused_not_followed(tmp_path):
    """xlrd follows this chain forever (a MemoryError after 28 s under a 1 GB cap, the machine's memory
    without one); run in a child process with a memory cap so a regression fails instead of swapping."""
    path = tmp_path / "loop.xls"
    path.write_bytes(_looping_compound_file())
    code = ("import resource, sys; resource.setrlimit(resource.RLIMIT_AS, (1 << 30, 1 << 30))\n"
            "from pathlib import Path\nfrom sheetfit.read.xls import XlsBook\n"
            "from sheetfit.errors import SheetfitError\n"
            "try:\n    XlsBook(Path(sys.argv[1]))\nexcept SheetfitError as e:\n    print(e)\n")
    done = subprocess.run([sys.executable, "-c", code, str(path)], capture_output=True, text=True, timeout=120,
                          check=False)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == ('"loop.xls" is damaged and cannot be read (the chain of sectors of its '
                                   'Workbook stream loops); open it in a spreadsheet application and save it again')


# ---------------------------------------------------------------- 3. text encodings cut short

UTF16_TEXT = "Site,Load kWh,CDD\n" + _rows(["Genève", "Zürich"] * 6)


def test_utf16_csv_cut_at_an_odd_byte_reads_what_decodes_with_a_warning(tmp_path):
    path = _csv(tmp_path / "cut.csv", UTF16_TEXT.encode("utf-16")[:-1])
    obs = read_observations(_job(path))
    assert obs.info.rows_read == 12 and obs.data[REASON].tolist() == [""] * 12
    assert any("ends in the middle of a character" in w and "last line may be incomplete" in w
               for w in obs.info.warnings)


def test_utf16_csv_cut_inside_the_last_line_keeps_that_row_with_its_number(tmp_path):
    raw = UTF16_TEXT.encode("utf-16")
    path = _csv(tmp_path / "cut2.csv", raw[: raw.rindex(",".encode("utf-16-le")) + 3])   # "…,1" + half a char
    data = read_observations(_job(path)).data
    assert data[SOURCE_ROW].tolist()[-1] == 13 and data[REASON].tolist()[-1] == "CDD: empty cell"


def test_utf16_csv_damaged_inside_is_one_line(tmp_path):
    raw = UTF16_TEXT.encode("utf-16")
    path = _csv(tmp_path / "bad16.csv", raw[:20] + b"\x00\xdc" + raw[20:])        # a lone low surrogate
    with pytest.raises(errors.NotAWorkbookError, match=r'^"bad16.csv" is damaged .*UTF-16.*offset 20'):
        read_observations(_job(path))


def test_utf8_csv_cut_inside_a_character(tmp_path):
    path = _csv(tmp_path / "cut8.csv", ("Site,Load kWh,CDD\n" + _rows(["Genève"] * 3) + "Genè").encode()[:-1])
    obs = read_observations(_job(path))
    assert obs.data["Site"].tolist() == ["Genève"] * 3 + ["Gen"]
    assert any("ends in the middle of a character" in w for w in obs.info.warnings)
    assert not any("Windows-1252" in w for w in obs.info.warnings)


# ---------------------------------------------------------------- 4. very wide CSV lines

def test_a_line_of_ten_million_delimiters_is_refused_naming_its_line(tmp_path):
    path = _csv(tmp_path / "wide.csv", "Site,Load kWh,CDD\nA,1,2\n" + "," * (10 << 20) + "\nB,3,4\n")
    with pytest.raises(errors.NotAWorkbookError) as caught:
        read_observations(_job(path))
    assert str(caught.value) == ('"wide.csv" line 3 holds 10,485,761 fields, more than the 16,384 columns a sheet '
                                 'can hold; check that line and the delimiter (,), or set it with --csv-delimiter')


def test_the_line_number_counts_lines_not_records(tmp_path):
    path = _csv(tmp_path / "wide2.csv", 'Site,Load kWh,CDD\nA,"two\nlines",2\n' + ";" * 20000 + "," * 16384 + "\n")
    with pytest.raises(errors.NotAWorkbookError, match=r'^"wide2.csv" line 4 holds 16,385 fields'):
        read_observations(_job(path))


def test_one_wide_line_does_not_widen_the_other_rows(tmp_path):
    path = _csv(tmp_path / "edge.csv", "Site,Load kWh,CDD\n" + _rows("AB" * 5) + "," * 16383 + "\n")
    grid = CsvBook(path).grid("edge")
    assert [len(r) for r in grid.rows] == [3] * 11 + [16384]
    obs = read_observations(_job(path))
    assert obs.info.rows_read == 10 and obs.data[REASON].tolist() == [""] * 10     # a line of empty fields is blank


def test_ragged_rows_shorter_than_the_header(tmp_path):
    path = _csv(tmp_path / "short.csv", "Site,Load kWh,CDD\nA,1\nA,2,3\nB\n")
    assert read_observations(_job(path)).data[REASON].tolist() == \
        ["CDD: empty cell", "", "Load kWh: empty cell; CDD: empty cell"]


# ---------------------------------------------------------------- 5. the sep= hint line

def test_sep_hint_sets_the_delimiter_and_is_not_a_row(tmp_path):
    path = _csv(tmp_path / "hint.csv", "sep=;\r\nSite;Load kWh;CDD\r\nA;1,5;1\r\nA;x;2\r\nB;3;3\r\n")
    obs = read_observations(_job(path))
    assert obs.info.header_row == 2
    assert obs.data[SOURCE_ROW].tolist() == [3, 4, 5]
    assert obs.data[REASON].tolist() == ["", 'Load kWh: text "x" is not a number', ""]
    assert obs.data["Load kWh"].tolist()[0] == 1.5
    assert "delimiter ; (from the sep= line)" in obs.info.reader


def test_sep_hint_with_a_bom_and_a_delimiter_set_by_the_job(tmp_path):
    path = _csv(tmp_path / "hint2.csv", "\ufeffsep=|\nSite|Load kWh|CDD\nA|1|1\nA|2|2\n".encode())
    obs = read_observations(_job(path, csv_delimiter="|"))
    assert obs.data[SOURCE_ROW].tolist() == [3, 4] and "delimiter | (set)" in obs.info.reader


def test_sep_hint_and_a_wide_line_number(tmp_path):
    path = _csv(tmp_path / "hint3.csv", "sep=,\nSite,Load kWh,CDD\n" + "," * 20000 + "\n")
    with pytest.raises(errors.NotAWorkbookError, match=r'^"hint3.csv" line 3 holds 20,001 fields'):
        read_observations(_job(path))


# ---------------------------------------------------------------- 6. number patterns are linear

OLD_AFFIX = re.compile(r"(?P<s1>[+-]?)[ \u00a0]*(?P<c1>[$€£¥]?)[ \u00a0]*(?P<s2>[+-]?)[ \u00a0]*(?P<body>.*?)"
                       r"[ \u00a0]*(?P<c2>[$€£¥]?)[ \u00a0]*(?P<pct>%?)", re.DOTALL)


@settings(max_examples=500, deadline=None)
@given(st.text(alphabet="+-$€ \u00a0%12,.x", max_size=12))
def test_affixes_split_like_the_old_pattern(text):
    """The old pattern (cubic on long runs of spaces) is the oracle on short text, where it is harmless."""
    from sheetfit.read.cells import _affixes

    assert _affixes(text) == OLD_AFFIX.fullmatch(text).group("s1", "c1", "s2", "body", "c2", "pct")


@pytest.mark.parametrize("n", [1_000, 10_000, 100_000])
def test_spaces_between_digits_at_growing_lengths(n):
    """'1' + n spaces + '2' once took 50 s at n = 1,600 (three neighbouring space runs in one pattern);
    the text is now cut off at 100 characters and every pattern is linear, so n = 100,000 returns at once."""
    value, problem, _ = parse_text("1" + " " * n + "2")
    assert problem == f'text "1…" ({n + 2:,} characters) is not a number' and math.isnan(value)


@pytest.mark.parametrize("n", [1_000, 10_000, 100_000])
def test_plain_number_pattern_at_growing_lengths(n):
    """`\\d+\\.?\\d*` was quadratic on '111…1x' (45 s for one 32,767-character cell); now linear."""
    from sheetfit.read.cells import PLAIN_NUMBER

    assert PLAIN_NUMBER.fullmatch("1" * n + "x") is None
    assert PLAIN_NUMBER.fullmatch(" " + "1" * n + ".5e3 ") is not None


def test_long_text_is_never_a_number_on_any_path():
    long_digits = "1" * 150
    cells = [str(k) for k in range(100)] + [long_digits, "1" + " " * 1600 + "2", " " * 200 + "7", "9" * 100]
    parsed = parse_column(cells)
    expected = f'text "{"1" * 29}…" (150 characters) is not a number'
    assert parsed.problems[100] == parse_text(long_digits)[1] == expected
    assert parsed.problems[101].endswith("(1,602 characters) is not a number")
    assert parsed.values[102] == 7.0 and parsed.values[103] == float("9" * 100)     # 100 after stripping: read


# ---------------------------------------------------------------- 7. cells of 32,767 characters

def test_cells_of_the_largest_size_a_sheet_holds(tmp_path):
    big_label = ("North " * 6000)[:32767]
    path = tmp_path / "huge.xlsx"
    xlsx([H + [("Note " * 7000)[:32767]],
          [big_label, 1, 1], ["A", "1" * 32766 + "x", 2], ["A", "1" + " " * 32765 + "2", 3], ["A", 4, 4]])(path)
    data = read_observations(_job(path)).data
    assert data["Site"].tolist()[0] == big_label.strip()
    assert data[REASON].tolist() == ["", f'Load kWh: text "{"1" * 29}…" (32,767 characters) is not a number',
                                     'Load kWh: text "1…" (32,767 characters) is not a number', ""]


# ---------------------------------------------------------------- 8. whitespace after the last row

_SHEET_HEAD = b'<?xml version="1.0" encoding="UTF-8"?><worksheet xmlns="http://schemas.openxmlformats.org/' \
              b'spreadsheetml/2006/main"><sheetData>'


_HEADER_ROW = (b'<row r="1">' + b"".join(b'<c r="%s1" t="inlineStr"><is><t>%s</t></is></c>' % (col, name.encode())
                                         for col, name in zip((b"A", b"B", b"C"), H)) + b"</row>")


def _row(r: int, site: str, y: str, x: int) -> bytes:
    return (f'<row r="{r}"><c r="A{r}" t="inlineStr"><is><t>{site}</t></is></c>{y.replace("R", str(r))}'
            f'<c r="C{r}"><v>{x}</v></c></row>').encode()


def _padded_xlsx(path: Path, pad_mb: int) -> None:
    """Rows 1–4, then `pad_mb` MB of spaces, then row 5 with an error cell, all streamed into the zip."""
    rows = _HEADER_ROW + b"".join(_row(r, "A", f'<c r="BR"><v>{r}</v></c>', r) for r in (2, 3, 4))
    last = _row(5, "B", '<c r="BR" t="e"><v>#N/A</v></c>', 5)
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, text in (("[Content_Types].xml", _CT), ("_rels/.rels", _RELS), ("xl/workbook.xml", _WB),
                           ("xl/_rels/workbook.xml.rels", _WB_RELS)):
            zf.writestr(name, text)
        info = zipfile.ZipInfo("xl/worksheets/sheet1.xml")
        info.compress_type = zipfile.ZIP_DEFLATED
        with zf.open(info, "w") as fh:
            fh.write(_SHEET_HEAD + rows)
            block = b" " * (1 << 20)
            for _ in range(pad_mb):
                fh.write(block)
            fh.write(last + b"</sheetData></worksheet>")


def test_whitespace_padding_is_scanned_in_bounded_pieces(tmp_path):
    """50 MB of spaces after the rows (a few kB compressed): once carried over whole, chunk after chunk
    (2.5 GB and 178 s at 1.2 GB of padding); now every piece is at most CHUNK + MAX_CARRY bytes and
    together they are the whole part, byte for byte in count."""
    path = tmp_path / "padded.xlsx"
    _padded_xlsx(path, 50)
    assert path.stat().st_size < 200_000
    with zipfile.ZipFile(path) as zf:
        size = zf.getinfo("xl/worksheets/sheet1.xml").file_size
        with zf.open("xl/worksheets/sheet1.xml") as fh:
            lengths = [len(piece) for piece in xlsxscan.sheet_pieces(fh)]
        marks = xlsxscan.scan_sheet(zf, "xl/worksheets/sheet1.xml")
    assert sum(lengths) == size > 50 << 20
    assert max(lengths) <= xlsxscan.CHUNK + xlsxscan.MAX_CARRY
    assert marks.errors == {(5, 1): "#N/A"}                  # the cell after the padding is still found
    obs = read_observations(_job(path))
    assert obs.data[REASON].tolist() == ["", "", "", "Load kWh: error value #N/A"]


def test_small_pieces_find_the_same_marks_as_the_exact_parse(monkeypatch, tmp_path):
    """Cut at cells as well as rows: with tiny chunks and carry the marks equal the element-by-element parse."""
    from tests.test_read import _messy_workbook

    path = tmp_path / "messy.xlsx"
    _messy_workbook(path, n=400)
    monkeypatch.setattr(xlsxscan, "CHUNK", 700)
    monkeypatch.setattr(xlsxscan, "MAX_CARRY", 300)
    with zipfile.ZipFile(path) as zf:
        pieces = xlsxscan.scan_sheet(zf, "xl/worksheets/sheet1.xml")
        exact = xlsxscan._scan_slow(zf, "xl/worksheets/sheet1.xml")
    assert pieces == exact and len(exact.errors) > 5 and len(exact.hidden_rows) > 5


def test_a_tag_longer_than_the_carry_is_a_damaged_file(tmp_path, monkeypatch):
    """A start tag still open where a chunk ends and begun more than MAX_CARRY bytes before: refused."""
    monkeypatch.setattr(xlsxscan, "CHUNK", 4096)
    monkeypatch.setattr(xlsxscan, "MAX_CARRY", 1024)
    path = tmp_path / "longtag.xlsx"
    sheet = (_SHEET_HEAD + _HEADER_ROW + b'<row r="2"' + b" " * 5000 + b'><c r="A2" t="inlineStr"><is><t>A</t></is>'
             b'</c><c r="B2"><v>1</v></c><c r="C2"><v>1</v></c></row></sheetData></worksheet>')
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for name, text in (("[Content_Types].xml", _CT), ("_rels/.rels", _RELS), ("xl/workbook.xml", _WB),
                           ("xl/_rels/workbook.xml.rels", _WB_RELS), ("xl/worksheets/sheet1.xml", sheet)):
            zf.writestr(name, text)
    with pytest.raises(errors.NotAWorkbookError) as caught:
        read_observations(_job(path))
    assert str(caught.value) == ('"longtag.xlsx" is damaged and cannot be read (its sheet XML holds a tag longer '
                                 'than 1,024 bytes); open it in a spreadsheet application and save it again')


# ---------------------------------------------------------------- 9. a row number used twice

def _edited(tmp_path: Path, name: str, edit) -> Path:
    src = tmp_path / f"src-{name}"
    xlsx([H] + [["A" if k % 2 else "B", 10 + k, k] for k in range(24)])(src)
    path = tmp_path / name
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zout:
        for info in zin.infolist():
            data = zin.read(info)
            zout.writestr(info, edit(data) if info.filename == "xl/worksheets/sheet1.xml" else data)
    return path


def _repeat_row_5(data: bytes) -> bytes:
    """Row 6 claims number 5, its cells too (A6 → A5)."""
    data = data.replace(b'<row r="6"', b'<row r="5"')
    return re.sub(rb'r="([A-Z]+)6"', rb'r="\g<1>5"', data)


def test_calamine_keeps_one_of_two_rows_with_one_number(tmp_path):
    """Canary: why the reader refuses such a sheet instead of reading it."""
    import python_calamine as pc

    path = _edited(tmp_path, "dup.xlsx", _repeat_row_5)
    rows = pc.CalamineWorkbook.from_path(str(path)).get_sheet_by_index(0).to_python()
    assert len(rows) == 25 and rows[3] == ["B", 12.0, 2.0]                    # sheet rows 4, 5, 6:
    assert rows[4] == ["B", 14.0, 4.0] and rows[5] == ["", "", ""]            # row 5's first copy ("A", 13) is gone


def test_a_repeated_row_number_is_refused_naming_sheet_and_row(tmp_path):
    path = _edited(tmp_path, "dup.xlsx", _repeat_row_5)
    with pytest.raises(errors.NotAWorkbookError) as caught:
        read_observations(_job(path))
    assert str(caught.value) == ('"dup.xlsx" is damaged and cannot be read (sheet "Data" holds two rows numbered 5 '
                                 'in its XML, and only one of them would be read); open it in a spreadsheet '
                                 'application and save it again')


def test_a_repeated_row_number_without_cell_references(tmp_path):
    path = _edited(tmp_path, "dup-noref.xlsx", lambda d: re.sub(rb' r="[A-Z]+\d+"', b"", _repeat_row_5(d)))
    with pytest.raises(errors.NotAWorkbookError, match="two rows numbered 5"):
        read_observations(_job(path))


def test_rows_out_of_order_are_all_read(tmp_path):
    def swap(data: bytes) -> bytes:
        five = re.search(rb'<row r="5".*?</row>', data).group()
        six = re.search(rb'<row r="6".*?</row>', data).group()
        return data.replace(five + six, six + five)

    data = read_observations(_job(_edited(tmp_path, "swap.xlsx", swap))).data
    assert sorted(data[SOURCE_ROW].tolist()) == list(range(2, 26))


# ---------------------------------------------------------------- 10. FIFOs, devices, unreadable files

@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no named pipes on this system")
def test_a_fifo_is_refused_without_opening_it(tmp_path):
    """Opening a FIFO waits for a writer; run in a child with a timeout so a regression fails, not hangs."""
    fifo = tmp_path / "pipe.xlsx"
    os.mkfifo(fifo)
    code = ("import sys\nfrom pathlib import Path\nfrom sheetfit.job import FitJob\n"
            "from sheetfit.read.observations import read_observations\nfrom sheetfit.errors import InputFileError\n"
            "try:\n    read_observations(FitJob(workbook=Path(sys.argv[1]), y='a', x=('b',)))\n"
            "except InputFileError as e:\n    print(e)\n")
    done = subprocess.run([sys.executable, "-c", code, str(fifo)], capture_output=True, text=True, timeout=60,
                          check=False)
    assert done.stdout.strip() == (f'"{fifo}" is not a regular file (it is a named pipe (FIFO)); save the data to '
                                   f'a file (.xlsx, .xlsm, .xls, .ods or .csv) and give its path')


def test_a_device_is_refused():
    with pytest.raises(errors.InputFileError, match=r"is not a regular file \(it is a device\)"):
        check_path(Path(os.devnull))


def test_a_file_that_cannot_be_opened_is_one_line(tmp_path, monkeypatch):
    path = _csv(tmp_path / "locked.csv", "Site,Load kWh,CDD\nA,1,1\n")

    def refuse(self, *args, **kwargs):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(Path, "open", refuse)
    with pytest.raises(errors.InputFileError) as caught:
        check_path(path)
    assert str(caught.value) == f'input file "{path}" cannot be read (Permission denied); check its permissions'


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() == 0, reason="permissions do not bind root")
def test_an_unreadable_file_is_one_line(tmp_path):
    path = _csv(tmp_path / "locked.csv", "Site,Load kWh,CDD\nA,1,1\n")
    path.chmod(0)
    try:
        with pytest.raises(errors.InputFileError, match="cannot be read .*check its permissions"):
            read_observations(_job(path))
    finally:
        path.chmod(0o600)


def test_a_path_under_a_file_is_not_found(tmp_path):
    path = _csv(tmp_path / "f.csv", "x")
    with pytest.raises(errors.InputFileError, match="not found"):
        check_path(path / "inside.csv")


def test_csv_module_names_its_line_on_a_broken_quote(tmp_path):
    path = _csv(tmp_path / "q.csv", "Site,Load kWh,CDD\nA,1,2\n" + 'B,"' + "x" * 200_000 + '",3\n')
    with pytest.raises(errors.NotAWorkbookError, match=r'^"q.csv" is not readable as CSV \(line \d'):
        read_observations(_job(path))


def test_module_constants_are_the_documented_ones():
    assert csvfile.MAX_FIELDS == 16_384 and xlsxscan.MAX_CARRY == 1 << 20



@pytest.mark.parametrize("name", ["source sheet", "source row", "reason"])
@pytest.mark.parametrize("role", ["y", "x", "group"])
def test_a_data_frame_column_named_like_the_tidy_columns_is_refused(name, role):
    """fit_frame refuses these names in one line, as the workbook reader does, instead of overwriting them."""
    import sheetfit
    from sheetfit.errors import JobError

    rng = np.random.default_rng(3)
    frame = pd.DataFrame({"g": ["A"] * 12, "x": rng.normal(size=12), "y": rng.normal(size=12)})
    cols = {"y": "y", "x": "x", "group": "g"}
    frame = frame.rename(columns={cols[role]: name})
    kw = {"y": "y", "x": ["x"], "group": ["g"]}
    kw[role] = name if role == "y" else [name]
    with pytest.raises(JobError, match="rename it"):
        sheetfit.fit_frame(frame, **kw)


def test_a_data_frame_without_a_named_column_says_which_exist():
    import sheetfit
    from sheetfit.errors import ColumnNotFoundError

    frame = pd.DataFrame({"Site": ["A"] * 5, "x": range(5), "kWh": range(5)})
    with pytest.raises(ColumnNotFoundError, match="Site"):
        sheetfit.fit_frame(frame, y="kWh", x=["x"], group=["Sites"])
