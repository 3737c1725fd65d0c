"""Messy and hostile input files, generated, each with the outcome the reader must give.

Every case is made by code (tests/corpus/writers.py) — no opaque binaries. Expected values come
from how each file is built: the numbers written, the text shapes whose meaning the documented
reading rules (sheetfit/cells.py) fix, the cells left empty or in error.

`python -m tests.corpus.build DIR` (from the project root) writes every case into DIR and prints
one line per case: file, settings, expected outcome.
"""

from __future__ import annotations

import datetime as dt
import math
import os
import shutil
import sys
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from .writers import (
    _LAUGH_SHEET,
    _LAUGHS,
    _SHEET_OPEN,
    H,
    _big_unpacked,
    _cached_formula,
    _corrupt_member,
    _cp1252,
    _defined_name,
    _docx,
    _formulas,
    _hide,
    _inline,
    _lengthy_comment_laughs,
    _merge_groups,
    _merge_header,
    _table,
    _truncated,
    ods,
    ods_rows,
    ole2,
    raw_xlsx,
    text_file,
    via_soffice,
    xlsx,
)

NAN = math.nan
JOB = {"y": "Load kWh", "x": ("CDD",), "group": ("Site",)}


@dataclass
class Case:
    """One input file and what reading it must give."""

    name: str
    filename: str
    make: Callable[[Path], None]
    job: dict = field(default_factory=lambda: dict(JOB))
    reasons: dict | None = None          # row or (sheet, row) → exact reason ('' = used); every row listed
    values: dict = field(default_factory=dict)    # (row, column) → expected number (NaN allowed)
    labels: dict = field(default_factory=dict)    # (row, column) or (sheet, row, column) → expected label
    info: dict = field(default_factory=dict)      # ReadInfo field → expected value
    warnings: tuple[str, ...] = ()       # substrings, each expected in some warning
    error: tuple[str, str] | None = None  # (exception class, message substring); the CLI exits 1
    needs: str | None = None             # "soffice" when LibreOffice must convert the file

    def build(self, folder: Path) -> Path:
        path = Path(folder) / self.filename
        self.make(path)
        return path


def _used(*rows) -> dict:
    return {r: "" for r in rows}


def _job(**kw) -> dict:
    return {**JOB, **kw}


D = dt.date
TEXT_NUMBERS = [  # (cell text, value under the documented rules)
    (" 1,234.5 ", 1234.5), ("1.234,5", 1234.5), ("12,5", 12.5), ("12%", 0.12), ("$1,200", 1200.0),
    ("1 200 €", 1200.0), ("\u22123.5", -3.5), ("(12.5)", -12.5), ("\u00a042\u00a0", 42.0), ("1,234", 1234.0),
    ("0,125", 0.125), ("£7", 7.0), ("¥1,000", 1000.0), ("1.5e3", 1500.0), ("1.234", 1.234), ("-$5", -5.0),
]
NOT_NUMBERS = ["abc", "1,23,4", "01/02/2024", "nan", "12 kg", "--5", "inf"]
ERRORS = ["#N/A", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#NULL!"]


def _fifo(path: Path) -> None:
    """A named pipe: opening it would wait for a writer, so the reader must refuse it unopened."""
    path.unlink(missing_ok=True)
    os.mkfifo(path)


def _cases() -> list[Case]:
    c: list[Case] = []
    add = c.append

    # ---- ordinary and messy values (.xlsx)
    add(Case("clean", "clean.xlsx", xlsx([H, ["A", 10, 1], ["A", 12, 2], ["B", 9, 3], ["B", 11, 4]]),
             reasons=_used(2, 3, 4, 5), values={(2, "Load kWh"): 10.0, (5, "CDD"): 4.0},
             info={"rows_read": 4, "header_row": 1, "file_format": "xlsx", "sheets": ("Data",),
                   "region": "whole sheet", "hidden_rows": 0, "date_columns": ()}))
    rows = [H] + [["A", t, i] for i, (t, _) in enumerate(TEXT_NUMBERS)] + [["B", t, 0] for t in NOT_NUMBERS]
    n_ok = len(TEXT_NUMBERS)
    add(Case("numbers stored as text", "text-numbers.xlsx", xlsx(rows),
             reasons={**_used(*range(2, 2 + n_ok)),
                      **{2 + n_ok + k: f'Load kWh: text "{t.strip()}" is not a number' for k, t in enumerate(NOT_NUMBERS)}},
             values={(2 + i, "Load kWh"): v for i, (_, v) in enumerate(TEXT_NUMBERS)}))
    add(Case("error values", "errors.xlsx",
             xlsx([H] + [["A", ("e", e), 1] for e in ERRORS] + [["B", None, ("e", "#N/A")], ["B", 5, 2], ["B", 6, 3]]),
             reasons={**{2 + k: f"Load kWh: error value {e}" for k, e in enumerate(ERRORS)},
                      9: "Load kWh: empty cell; CDD: error value #N/A", 10: "", 11: ""},
             values={(2, "Load kWh"): NAN, (10, "Load kWh"): 5.0}))
    add(Case("empty cells, spaces and text", "empties.xlsx",
             xlsx([H, ["A", 1, 1], ["A", None, 2], ["A", "   ", 3], ["A", "n/a", 4], ["A", 5, "\u00a0"]]),
             reasons={2: "", 3: "Load kWh: empty cell", 4: "Load kWh: empty cell",
                      5: 'Load kWh: text "n/a" is not a number', 6: "CDD: empty cell"}))
    add(Case("booleans", "booleans.xlsx", xlsx([H, ["A", 1, True], ["A", 2, False], ["A", 3, "TRUE"]]),
             reasons=_used(2, 3, 4), values={(2, "CDD"): 1.0, (3, "CDD"): 0.0, (4, "CDD"): 1.0}))
    add(Case("dates as inputs and order", "dates.xlsx",
             xlsx([["Site", "Load kWh", "Day", "Month"],
                   ["A", 1, D(2024, 1, 1), D(2024, 1, 1)], ["A", 2, D(2024, 1, 3), D(2024, 2, 1)],
                   ["A", 3, D(2024, 1, 10), D(2024, 3, 1)],
                   ["B", 4, dt.datetime(2024, 2, 1, 12, 0), D(2024, 5, 1)], ["B", 5, D(2024, 2, 2), D(2024, 6, 1)]]),
             job=_job(x=("Day",), order="Month"), reasons=_used(2, 3, 4, 5, 6),
             values={(2, "Day"): 0.0, (3, "Day"): 2.0, (4, "Day"): 9.0, (5, "Day"): 0.0, (6, "Day"): 0.5,
                     (3, "Month"): 31.0, (6, "Month"): 31.0},
             info={"date_columns": ("Day", "Month")}))
    add(Case("times of day", "times.xlsx",
             xlsx([["Site", "Load kWh", "Clock"], ["A", 1, dt.time(6)], ["A", 2, dt.time(12)], ["A", 3, dt.time(18)]]),
             job=_job(x=("Clock",)), reasons=_used(2, 3, 4),
             values={(2, "Clock"): 0.0, (3, "Clock"): 0.25, (4, "Clock"): 0.5}, info={"date_columns": ("Clock",)}))
    add(Case("formulas without saved results", "formulas.xlsx",
             xlsx([H, ["A", 1, 1], ["A", None, 2], ["A", None, 3], ["A", 4, 4]], edit=_formulas),
             reasons={2: "", 3: "Load kWh: formula without a saved result",
                      4: "Load kWh: formula without a saved result", 5: ""},
             warnings=("2 formula cells have no saved result", "Data!B3, Data!B4")))
    add(Case("formula with a saved result", "cached.xlsx", _cached_formula,
             reasons=_used(2, 3, 4), values={(3, "Load kWh"): 12.0}))
    add(Case("hidden rows and columns", "hidden.xlsx", xlsx([H, ["A", 1, 1], ["A", 2, 2], ["A", 3, 3]], edit=_hide),
             reasons=_used(2, 3, 4), info={"hidden_rows": 1, "hidden_columns": 1}))

    # ---- headers
    titled = [["Monthly energy report"], [], H, ["A", 1, 1], ["A", 2, 2], ["B", 3, 3]]
    add(Case("header row given", "titled.xlsx", xlsx(titled), job=_job(header_row=3),
             reasons=_used(4, 5, 6), info={"header_row": 3}))
    add(Case("title row taken as header", "titled-no-flag.xlsx", xlsx(titled),
             error=("ColumnNotFoundError", 'column "CDD" not found')))
    add(Case("header after blank rows", "blank-top.xlsx", xlsx([[], [], H, ["A", 1, 1], ["A", 2, 2]]),
             reasons=_used(4, 5), info={"header_row": 3}))
    add(Case("header over merged cells", "merged-header.xlsx",
             xlsx([["Site", "Energy", None, "Temp"], [None, "Load kWh", "CDD", None],
                   ["A", 1, 1, 20], ["A", 2, 2, 21], ["B", 3, 3, 22]], edit=_merge_header),
             job=_job(y="Energy Load kWh", x=("Energy CDD", "Temp")), reasons=_used(3, 4, 5),
             values={(3, "Energy Load kWh"): 1.0, (5, "Temp"): 22.0}, info={"header_row": 1}))
    add(Case("group labels in merged cells", "merged-groups.xlsx",
             xlsx([H, ["North", 1, 1], [None, 2, 2], [None, 3, 3], ["South", 4, 4]], edit=_merge_groups),
             reasons=_used(2, 3, 4, 5), labels={(3, "Site"): "North", (4, "Site"): "North", (5, "Site"): "South"},
             warnings=("Data!A2:A4",)))
    add(Case("duplicate header used", "dup-used.xlsx", xlsx([["Site", "Load kWh", "Load kWh", "CDD"], ["A", 1, 2, 3]]),
             error=("DuplicateHeaderError", '"Load kWh" in columns B, C')))
    add(Case("duplicate header unused", "dup-unused.xlsx",
             xlsx([H + ["Note", "Note"], ["A", 1, 1, "x", "y"], ["A", 2, 2, "x", "y"]]), reasons=_used(2, 3)))

    add(Case("text that looks like sheet markup", "markup-text.xlsx",
             xlsx([H + ["Note"], ['t="e"', 1, 1, '<c r="B2" t="e"><v>#N/A</v></c>'], ["A", 2, 2, '<f>1</f></c> hidden="1"'],
                   ["A", 3, 3, "</row><row r=\"9\" hidden=\"1\">"]]),
             reasons=_used(2, 3, 4), labels={(2, "Site"): 't="e"'}, info={"hidden_rows": 0}))

    # ---- rows and group labels
    add(Case("blank rows skipped", "blank-rows.xlsx",
             xlsx([H + ["Note"], ["A", 1, 1], ["A", 2, 2], [], ["B", 3, 3], [None, None, None, None], ["B", 4, 4],
                   [None, None, None, "see memo"]]),
             reasons={2: "", 3: "", 5: "", 7: "", 8: "Load kWh: empty cell; CDD: empty cell"},
             labels={(8, "Site"): "(blank)"}, info={"rows_read": 5}))
    blank_group = xlsx([H, ["A", 1, 1], [None, 2, 2], ["A", 3, 3]])
    add(Case("blank group label", "blank-group.xlsx", blank_group, reasons=_used(2, 3, 4),
             labels={(3, "Site"): "(blank)"}))
    add(Case("blank group label, strict", "blank-group-strict.xlsx", blank_group, job=_job(strict=True),
             error=("UnusableRowsError", "Data!row 3 (Site: blank group label)")))
    add(Case("numbers and text that look alike", "labels.xlsx",
             xlsx([H, [101, 1, 1], [101.0, 2, 2], ["101", 3, 3], [" 101 ", 4, 4], ["0101", 5, 5], [102.5, 6, 6],
                   ["102.50", 7, 7], [("s", "=1+2"), 8, 8], ["@SUM(A1)", 9, 9], [True, 10, 10]]),
             reasons=_used(*range(2, 12)),
             labels={(2, "Site"): "101", (3, "Site"): "101", (4, "Site"): "101", (5, "Site"): "101",
                     (6, "Site"): "0101", (7, "Site"): "102.5", (8, "Site"): "102.5", (9, "Site"): "=1+2",
                     (10, "Site"): "@SUM(A1)", (11, "Site"): "TRUE"}))
    add(Case("strict with a bad row", "strict.xlsx", xlsx([H, ["A", 1, 1], ["A", "x", 2], ["A", 3, 3]]),
             job=_job(strict=True), error=("UnusableRowsError", 'Data!row 3 (Load kWh: text "x" is not a number)')))

    # ---- what to read: sheets, tables, names
    add(Case("sheet not found", "sheets.xlsx", xlsx([H, ["A", 1, 1]]), job=_job(sheets=("Dta",)),
             error=("SheetNotFoundError", 'sheet "Dta" not found; the sheets that exist are: "Data"; closest match: "Data"')))
    add(Case("response column not found", "col.xlsx", xlsx([H, ["A", 1, 1]]), job=_job(y="Load kW"),
             error=("ColumnNotFoundError", 'closest match: "Load kWh"')))
    add(Case("input column not found", "xcol.xlsx", xlsx([H, ["A", 1, 1]]), job=_job(x=("CCD",)),
             error=("ColumnNotFoundError", 'column "CCD" not found')))
    add(Case("response also an input", "role.xlsx", xlsx([H, ["A", 1, 1]]), job=_job(x=("Load kWh",)),
             error=("JobError", "both the response and an input")))
    add(Case("named table", "table.xlsx", _table, job=_job(table="Sales"), reasons=_used(3, 4, 5),
             info={"region": 'table "Sales"', "header_row": 2, "rows_read": 3}))
    add(Case("table not found", "table-missing.xlsx", _table, job=_job(table="Sale"),
             error=("TableNotFoundError", 'closest match: "Sales"')))
    add(Case("defined name", "defined.xlsx",
             xlsx([["junk"], ["junk", "more junk"], [None] + H, ["x", "A", 1, 1], ["x", "A", 2, 2], ["x", "B", 3, 3],
                   ["x", "outside", 9, 9]], edit=_defined_name),
             job=_job(table="Block"), reasons=_used(4, 5, 6), info={"header_row": 3, "rows_read": 3}))
    add(Case("several sheets", "two-sheets.xlsx",
             xlsx([H, ["A", 1, 1], ["B", 2, 2]], title="North", more={"South": [H, ["A", 3, 3]], "Notes": [["n"]]}),
             job=_job(sheets=("North", "South")),
             reasons={("North", 2): "", ("North", 3): "", ("South", 2): ""},
             labels={("North", 2, "sheet"): "North", ("South", 2, "sheet"): "South", ("South", 2, "Site"): "A"},
             info={"sheets": ("North", "South")}))
    add(Case("all sheets, a header already named sheet", "sheet-header.xlsx",
             xlsx([["sheet"] + H, ["s1", "A", 1, 1]], title="One", more={"Two": [["sheet"] + H, ["s2", "A", 2, 2]]}),
             job=_job(all_sheets=True, group=("sheet", "Site")), reasons={("One", 2): "", ("Two", 2): ""},
             labels={("One", 2, "sheet name"): "One", ("Two", 2, "sheet name"): "Two", ("Two", 2, "sheet"): "s2"}))
    add(Case("all sheets, one without the columns", "notes-sheet.xlsx",
             xlsx([H, ["A", 1, 1]], title="One", more={"Notes": [["read me"]], "Two": [H, ["A", 2, 2]]}),
             job=_job(all_sheets=True), reasons={("One", 2): "", ("Two", 2): ""}, warnings=('"Notes"',)))
    add(Case("response with no usable numbers", "no-y.xlsx", xlsx([H, ["A", "x", 1], ["A", "y", 2]]),
             error=("NoUsableDataError", 'response column "Load kWh" has no usable numbers')))
    add(Case("input with no usable numbers", "no-x.xlsx", xlsx([H + ["Note"], ["A", 1, None, "a"], ["A", 2, None, "b"]]),
             error=("NoUsableDataError", 'input column "CDD" has no usable numbers')))
    add(Case("header only", "header-only.xlsx", xlsx([H]), error=("NoUsableDataError", "no data rows")))
    add(Case("empty sheet", "empty-sheet.xlsx", xlsx([]), error=("NoUsableDataError", "is empty")))
    add(Case("macro-enabled name", "macro.xlsm", xlsx([H, ["A", 1, 1]]), reasons=_used(2),
             info={"file_format": "xlsm"}))
    no_refs = ('<x:worksheet xmlns:x="http://schemas.openxmlformats.org/spreadsheetml/2006/main"><x:sheetData>'
               '<x:row>' + "".join(f'<x:c t="inlineStr"><x:is><x:t>{h}</x:t></x:is></x:c>' for h in H) + '</x:row>'
               '<x:row hidden="1"><x:c t="inlineStr"><x:is><x:t>A</x:t></x:is></x:c><x:c t="e"><x:v>#N/A</x:v></x:c>'
               '<x:c><x:v>1</x:v></x:c></x:row>'
               '<x:row><x:c t="inlineStr"><x:is><x:t>A</x:t></x:is></x:c><x:c><x:v>3</x:v></x:c><x:c><x:v>2</x:v>'
               '</x:c></x:row><x:row><x:c t="inlineStr"><x:is><x:t>B</x:t></x:is></x:c><x:c><x:f>1+1</x:f></x:c>'
               '<x:c><x:v>3</x:v></x:c></x:row></x:sheetData></x:worksheet>')
    shared = (_SHEET_OPEN + '<row r="1">' + "".join(_inline(h) for h in H) + '</row>'
              '<row r="2"><c r="A2" t="inlineStr"><is><t>A</t></is></c><c r="B2"><f t="shared" ref="B2:B3" si="0">'
              'C2*2</f></c><c r="C2"><v>1</v></c></row>'
              '<row r="3"><c r="A3" t="inlineStr"><is><t>A</t></is></c><c r="B3"><f t="shared" si="0"/></c>'
              '<c r="C3"><v>2</v></c></row>'
              '<row r="4"><c r="A4" t="inlineStr"><is><t>A</t></is></c><c r="B4" t="str"><f>""</f><v></v></c>'
              '<c r="C4"><v>3</v></c></row>'
              '<row r="5"><c r="A5" t="inlineStr"><is><t>A</t></is></c><c r="B5"><f>C5*2</f><v>8</v></c>'
              '<c r="C5"><v>4</v></c></row></sheetData></worksheet>')
    add(Case("shared formulas without results, an empty text result", "shared.xlsx", raw_xlsx(shared),
             reasons={2: "Load kWh: formula without a saved result", 3: "Load kWh: formula without a saved result",
                      4: "Load kWh: empty cell", 5: ""},
             values={(5, "Load kWh"): 8.0}, warnings=("Data!B2, Data!B3",)))
    add(Case("cells without references, prefixed tags", "no-refs.xlsx", raw_xlsx(no_refs),
             reasons={2: "Load kWh: error value #N/A", 3: "", 4: "Load kWh: formula without a saved result"},
             info={"hidden_rows": 1}, warnings=("Data!B4",)))

    # ---- refused files
    add(Case("missing file", "missing.xlsx", lambda p: None, error=("InputFileError", "not found")))
    add(Case("a folder", "folder.xlsx", lambda p: p.mkdir(exist_ok=True), error=("InputFileError", "is a folder")))
    add(Case("text renamed .xlsx", "text.xlsx", text_file("Site,Load\nA,1\n"),
             error=("NotAWorkbookError", "it holds plain text")))
    add(Case("web page renamed .xls", "page.xls", text_file("<html><body><table></table></body></html>"),
             error=("NotAWorkbookError", "a web page (HTML)")))
    add(Case("PDF renamed .xlsx", "doc.xlsx", text_file(b"%PDF-1.4\n%\xe2\xe3\xcf\xd3\n\x00\x00"),
             error=("NotAWorkbookError", "a PDF document")))
    add(Case("empty file", "empty.xlsx", text_file(b""), error=("NotAWorkbookError", "is empty (0 bytes)")))
    add(Case("truncated zip", "truncated.xlsx", _truncated, error=("NotAWorkbookError", "damaged zip")))
    add(Case("damaged sheet data", "corrupt.xlsx", _corrupt_member, error=("NotAWorkbookError", "is damaged")))
    add(Case("Word document renamed .xlsx", "letter.xlsx", _docx, error=("NotAWorkbookError", "a Word document")))
    add(Case("encrypted workbook", "locked.xlsx",
             text_file(ole2({"EncryptionInfo": b"\x04\x00\x04\x00\x40\x00\x00\x00", "EncryptedPackage": b"\x01" * 64})),
             error=("NotAWorkbookError", "password-protected")))
    add(Case("XML entity expansion", "laughs.xlsx", raw_xlsx(_LAUGH_SHEET, prolog='<?xml version="1.0"?>' + _LAUGHS),
             error=("NotAWorkbookError", "declares an XML document type")))
    add(Case("entity expansion after a long comment", "laughs2.xlsx", _lengthy_comment_laughs,
             error=("NotAWorkbookError", "declares an XML document type")))
    add(Case("unpacked size over the limit", "big.xlsx", _big_unpacked, job=_job(max_unpacked_bytes=2 * 2**20),
             error=("NotAWorkbookError", "refused before unpacking")))
    twice = (_SHEET_OPEN + '<row r="1">' + "".join(_inline(h) for h in H) + '</row>' +
             "".join(f'<row r="{r}"><c r="A{r}" t="inlineStr"><is><t>A</t></is></c><c r="B{r}"><v>{k}</v></c>'
                     f'<c r="C{r}"><v>{k}</v></c></row>' for k, r in enumerate((2, 3, 3, 4))) +
             '</sheetData></worksheet>')
    add(Case("a row number used twice", "twice.xlsx", raw_xlsx(twice),
             error=("NotAWorkbookError", 'sheet "Data" holds two rows numbered 3')))
    if hasattr(os, "mkfifo"):
        add(Case("a named pipe", "pipe.csv", _fifo, error=("InputFileError", "is not a regular file (it is a named pipe")))
    add(Case("encrypted OpenDocument", "locked.ods",
             ods(ods_rows([H, ["A", 1, 1]]), manifest_extra='<manifest:file-entry manifest:full-path="x"><manifest:'
                 'encryption-data/></manifest:file-entry>'),
             error=("NotAWorkbookError", "password-protected")))

    # ---- OpenDocument
    add(Case("OpenDocument sheet", "sheet.ods",
             ods(ods_rows([H, [("merge", ("North", 2)), 1, 1], [("covered", None), "12,5", 2], ["South", ("e", "#DIV/0!"), 3],
                           ["South", None, 4], ["South", 5, 5]], hidden=(3,))),
             reasons={2: "", 3: "", 4: "Load kWh: error value #DIV/0!", 5: "Load kWh: empty cell", 6: ""},
             values={(3, "Load kWh"): 12.5}, labels={(3, "Site"): "North"},
             info={"file_format": "ods", "hidden_rows": 1}))

    add(Case("OpenDocument formula without a result", "formula.ods",
             ods(ods_rows([H, ["A", 1, 1], ["A", ("f", "[.C3]*2"), 2], ["A", 3, 3]])),
             reasons={2: "", 3: "Load kWh: formula without a saved result", 4: ""}, warnings=("Data!B3",)))

    # ---- legacy .xls, converted by LibreOffice from an openpyxl workbook
    add(Case("legacy xls", "legacy.xls",
             via_soffice(xlsx([H + ["Day"], ["A", 1, True, D(2024, 1, 1)], ["A", ("e", "#N/A"), 2, D(2024, 1, 3)],
                               ["A", " 12,5 ", 3, D(2024, 1, 4)], ["B", 4, 4, D(2024, 1, 5)]], edit=_hide), "xls"),
             job=_job(x=("CDD", "Day")),
             reasons={2: "", 3: "Load kWh: error value #N/A", 4: "", 5: ""},
             values={(2, "CDD"): 1.0, (4, "Load kWh"): 12.5, (4, "Day"): 3.0, (5, "Day"): 0.0},
             info={"file_format": "xls", "hidden_rows": 1, "hidden_columns": 1, "date_columns": ("Day",)},
             needs="soffice"))

    # ---- delimited text
    add(Case("CSV with commas", "comma.csv", text_file('Site,Load kWh,CDD\nA,10,1\nA,"1,234",2\nB,#N/A,3\nB,12.5,4\n'),
             reasons={2: "", 3: "", 4: "Load kWh: error value #N/A", 5: ""}, values={(3, "Load kWh"): 1234.0},
             info={"file_format": "csv", "sheets": ("comma",)}))
    add(Case("CSV with semicolons and decimal commas", "semicolon.csv",
             text_file("Site;Load kWh;CDD\nA;12,5;1\nA;1.234,5;2\nB;1,234;3\nB;7;4\n"), reasons=_used(2, 3, 4, 5),
             values={(2, "Load kWh"): 12.5, (3, "Load kWh"): 1234.5, (4, "Load kWh"): 1.234}))
    add(Case("CSV with tabs", "tabs.csv", text_file("Site\tLoad kWh\tCDD\nA\t1\t1\nA\t2\t2\n"), reasons=_used(2, 3)))
    add(Case("CSV with pipes", "pipes.txt", text_file("Site|Load kWh|CDD\nA|1|1\nA|2|2\n"), reasons=_used(2, 3)))
    add(Case("CSV with the decimal mark set", "set-decimal.csv", text_file("Site;Load kWh;CDD\nA;1.5;1\nA;2,5;2\n"),
             job=_job(csv_delimiter=";", csv_decimal=","),
             reasons={2: 'Load kWh: text "1.5" is not a number with "," as decimal mark', 3: ""},
             values={(3, "Load kWh"): 2.5}))
    add(Case("CSV in Windows-1252", "latin.csv", _cp1252, reasons=_used(2, 3, 4),
             labels={(2, "Site"): "Zürich", (4, "Site"): "Genève"}, warnings=("Windows-1252",)))
    add(Case("CSV with a sep= line", "sep-line.csv", text_file("sep=;\r\nSite;Load kWh;CDD\r\nA;1,5;1\r\nA;2;2\r\n"),
             reasons=_used(3, 4), values={(3, "Load kWh"): 1.5}, info={"header_row": 2}))
    add(Case("UTF-16 CSV cut at an odd byte", "cut16.csv",
             text_file(("Site,Load kWh,CDD\nGenève,1,1\nGenève,2,2\n".encode("utf-16"))[:-1]),
             reasons=_used(2, 3), labels={(3, "Site"): "Genève"}, warnings=("ends in the middle of a character",)))
    add(Case("IDs beyond a float's digits", "ids.csv",
             text_file("Site,Load kWh,CDD\n9007199254740993,1,1\n9007199254740992,2,2\n"), reasons=_used(2, 3),
             labels={(2, "Site"): "9007199254740993", (3, "Site"): "9007199254740992"}))
    add(Case("CSV line wider than a sheet", "wide.csv", text_file("Site,Load kWh,CDD\nA,1,1\n" + "," * 20000 + "\n"),
             error=("NotAWorkbookError", '"wide.csv" line 3 holds 20,001 fields')))
    add(Case("CSV with ISO dates", "dates.csv",
             text_file("Site,Load kWh,Date\nA,1,2024-01-01\nA,2,2024-01-08 12:00\nB,3,2024-03-01\n"),
             job=_job(x=("Date",)), reasons=_used(2, 3, 4),
             values={(2, "Date"): 0.0, (3, "Date"): 7.5, (4, "Date"): 0.0}, info={"date_columns": ("Date",)}))
    return c


CASES = _cases()


def main(argv: list[str]) -> int:
    if len(argv) != 1:
        print("usage: python -m tests.corpus.build DIR", file=sys.stderr)
        return 2
    folder = Path(argv[0])
    folder.mkdir(parents=True, exist_ok=True)
    for case in CASES:
        if case.needs and not shutil.which(case.needs):
            print(f"skipped {case.filename}: needs {case.needs}")
            continue
        case.build(folder)
        outcome = f"error {case.error[0]}: {case.error[1]}" if case.error else f"{len(case.reasons or {})} rows"
        print(f"{case.filename}\t{case.job}\t{outcome}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
