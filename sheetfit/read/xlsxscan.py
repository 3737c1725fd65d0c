""".xlsx/.xlsm sheet XML → `SheetMarks`: error cells, formulas without a saved result, hidden
rows/columns, the things python-calamine does not report, and a row number the XML repeats.

One streaming pass over the sheet part's decompressed bytes (`scan_sheet`), run by `XlsxBook` in a
second thread while calamine reads the values. It finds `t="e"` cells, formula cells with no `<v>`
and hidden rows/columns by plain substring and regular-expression search, so a sheet without any
of them costs one decompression. Cells without an `r` reference (legal, rare) switch to an exact
element-by-element parse (`_scan_slow`).

The bytes come in pieces (`sheet_pieces`) of at most CHUNK + MAX_CARRY bytes, each cut where a row
or cell starts, so every cell lies whole in one piece. Only the last MAX_CARRY bytes of a chunk
are searched for that start; when none is there (whitespace padding, or one cell larger than
that), only an unfinished tag is carried over, and a tag longer than MAX_CARRY means a damaged
file. Memory therefore stays O(CHUNK) whatever follows the last row.

Row numbers (`<row r="5">`) are collected as they pass: two rows claiming one number make
calamine keep only one of them, so `SheetMarks.repeated_row` names the first such number and the
reader refuses the sheet rather than lose a row without a word.
"""

from __future__ import annotations

import re
import zipfile
from array import array
from collections.abc import Iterator
from itertools import islice
from operator import ge
from typing import IO

from .calamine import SheetMarks
from .grid import column_index

CHUNK = 1 << 23                       # bytes decompressed per read
MAX_CARRY = 1 << 20                   # most bytes of an unfinished row, cell or tag carried to the next piece
_PIECE_START = re.compile(rb"<(?:\w+:)?(?:row|c)[\s>/]")
_ROW_NUMBER = re.compile(rb'<row r="(\d+)"')
_ANY_ROW_NUMBER = re.compile(rb'<(?:\w+:)?row\s[^>]*?\br\s*=\s*"(\d+)"')
_HIDDEN_ROW = re.compile(rb"<(?:\w+:)?row\s[^>]*?\bhidden=\"(?:1|true)\"[^>]*>")
_COL_TAG = re.compile(rb"<(?:\w+:)?col\s[^>]*>")
_CELL_TAG = re.compile(rb"<(?:\w+:)?c\s[^>]*>")
_VALUE = re.compile(rb"<(?:\w+:)?v>([^<]*)</(?:\w+:)?v>")
_CELL_END = re.compile(rb"</(?:\w+:)?c>")
# the spaces after </f> and after <v/> are separate runs (`\s*(?:<v/>\s*)?`), never two `\s*` in a row
_NO_VALUE = re.compile(rb"<(?:\w+:)?f\b[^>]*?(?:/>|>[^<]*</(?:\w+:)?f>)\s*"
                       rb"(?:(?P<v><(?:\w+:)?v\s*/>|<(?:\w+:)?v\s*>\s*</(?:\w+:)?v>)\s*)?</(?:\w+:)?c>")
_REF = re.compile(r"([A-Za-z]{1,3})(\d+)")


class TagTooLongError(ValueError):
    """The sheet XML holds one tag longer than MAX_CARRY bytes: no workbook writer makes one."""


def _attr(tag: bytes, name: bytes) -> bytes | None:
    """Value of attribute `name` in one start tag, None when absent."""
    m = re.search(rb"\s" + name + rb'\s*=\s*"([^"]*)"', tag)
    return m.group(1) if m else None


def _ref(ref: bytes | str | None) -> tuple[int, int] | None:
    """'B3' → (3, 1): 1-based row, 0-based column; None when missing or malformed."""
    if ref is None:
        return None
    m = _REF.fullmatch(ref.decode() if isinstance(ref, bytes) else ref)
    if m is None:
        return None
    return int(m.group(2)), column_index(m.group(1))


class _NeedsSlowScan(Exception):
    """A row or cell without an `r` reference: positions must be counted element by element."""


def scan_sheet(zf: zipfile.ZipFile, part: str) -> SheetMarks:
    """Error cells, formulas without saved results, hidden rows/columns and a repeated row of one sheet part."""
    try:
        return _scan_fast(zf, part)
    except _NeedsSlowScan:
        return _scan_slow(zf, part)


def sheet_pieces(fh: IO[bytes]) -> Iterator[bytes]:
    """The stream's bytes in order, in pieces of at most CHUNK + MAX_CARRY bytes, each ending where a
    row or cell starts (or, with none near a chunk's end, before an unfinished tag)."""
    carry = b""
    while True:
        chunk = fh.read(CHUNK)
        if not chunk:
            if carry:
                yield carry
            return
        buf = carry + chunk
        cut = _cut(buf)
        carry = buf[cut:]
        if cut:
            yield buf[:cut]


def _cut(buf: bytes) -> int:
    """Where to end a piece: the last row or cell start in the last MAX_CARRY bytes, else the start of
    an unfinished last tag, else the end; TagTooLongError when that tag is longer than MAX_CARRY."""
    lo = max(0, len(buf) - MAX_CARRY)
    at = len(buf)
    for _ in range(64):                  # in sheet data a cell starts within the last few tags
        at = buf.rfind(b"<", lo, at)
        if at < 0:
            break
        if _PIECE_START.match(buf, at):
            return at
    else:
        last = -1
        for m in _PIECE_START.finditer(buf, lo, at):
            last = m.start()
        if last >= 0:
            return last
    open_at = buf.rfind(b"<")
    if open_at < 0 or buf.find(b">", open_at) >= 0:
        return len(buf)
    if open_at < lo:
        raise TagTooLongError(f"its sheet XML holds a tag longer than {MAX_CARRY:,} bytes")
    return open_at


def _scan_fast(zf: zipfile.ZipFile, part: str) -> SheetMarks:
    """Marks by byte search, piece by piece; _NeedsSlowScan when refs lack."""
    marks = SheetMarks()
    rows = _RowNumbers()
    before_data = True
    with zf.open(part) as fh:
        for buf in sheet_pieces(fh):
            if b"<" not in buf:             # padding between elements: nothing to find
                continue
            if before_data:
                at = buf.find(b"sheetData")
                head = buf if at < 0 else buf[:at]
                for tag in _COL_TAG.findall(head):
                    _hidden_cols(tag, marks.hidden_cols)
                before_data = at < 0
                rows.prefixed = at > 0 and buf[at - 1:at] == b":"
            rows.add_from(buf)
            _scan_buffer(buf, marks)
    marks.repeated_row = rows.repeated()
    return marks


class _RowNumbers:
    """The `r` numbers of the rows seen so far, to find one claimed twice."""

    def __init__(self, prefixed: bool = False) -> None:
        self.numbers = array("q")
        self.ordered = True               # strictly increasing so far: then nothing is repeated
        self.prefixed = prefixed          # tags written with a namespace prefix (<x:row>)

    def add_from(self, buf: bytes) -> None:
        found = _ROW_NUMBER.findall(buf)        # the common form, found by a fast literal search
        if self.prefixed or len(found) != buf.count(b"<row"):      # prefixed tags, `r` not first: general form
            found = _ANY_ROW_NUMBER.findall(buf)
        self.add(list(map(int, found)))

    def add(self, numbers: list[int]) -> None:
        if not numbers:
            return
        if self.ordered and ((self.numbers and numbers[0] <= self.numbers[-1]) or
                             any(map(ge, numbers, islice(numbers, 1, None)))):
            self.ordered = False
        self.numbers.extend(numbers)

    def repeated(self) -> int | None:
        """The smallest row number claimed by two rows, None when each number is claimed once."""
        if self.ordered:
            return None
        seen = sorted(self.numbers)
        return next((a for a, b in zip(seen, islice(seen, 1, None)) if a == b), None)


def _hidden_cols(tag: bytes, out: set[int]) -> None:
    """Add the 0-based columns a hidden `<col min= max=>` tag covers."""
    if _attr(tag, b"hidden") in (b"1", b"true"):
        lo, hi = int(_attr(tag, b"min") or 1), int(_attr(tag, b"max") or 1)
        out.update(range(lo - 1, min(hi, 16384)))


def _scan_buffer(buf: bytes, marks: SheetMarks) -> None:
    """Hidden rows, error cells and formulas without a value in whole rows of sheet XML."""
    if b'hidden="1"' in buf or b'hidden="true"' in buf:
        for m in _HIDDEN_ROW.finditer(buf):
            r = _attr(m.group(), b"r")
            if r is None:
                raise _NeedsSlowScan
            marks.hidden_rows.add(int(r))
    pos = buf.find(b't="e"')
    while pos >= 0:
        start = buf.rfind(b"<", 0, pos)
        tag = _CELL_TAG.match(buf, start)
        if tag is not None and tag.end() > pos:
            where = _ref(_attr(tag.group(), b"r"))
            if where is None:
                raise _NeedsSlowScan
            end = _CELL_END.search(buf, tag.end())
            value = _VALUE.search(buf, tag.end(), end.start()) if end else None
            marks.errors[where] = _unescape(value.group(1)) if value else "#VALUE!"
        pos = buf.find(b't="e"', pos + 5)
    if b"<f" in buf or b":f>" in buf or b":f " in buf:
        for m in _NO_VALUE.finditer(buf):
            tag = _CELL_TAG.match(buf, buf.rfind(b"<", 0, m.start()))
            if tag is None:
                continue
            if m.group("v") is not None and _attr(tag.group(), b"t") == b"str":
                continue                      # a saved empty-text result
            if _attr(tag.group(), b"t") == b"e":
                continue
            where = _ref(_attr(tag.group(), b"r"))
            if where is None:
                raise _NeedsSlowScan
            marks.no_result.append(where)


def _unescape(raw: bytes) -> str:
    """Text of an XML value with the three entities error codes can hold decoded."""
    return raw.decode("utf-8", "replace").replace("&amp;", "&").replace("&lt;", "<").replace("&gt;", ">")


def _scan_slow(zf: zipfile.ZipFile, part: str) -> SheetMarks:
    """Exact positions by counting rows and cells, for sheets whose rows or cells lack `r` references."""
    from defusedxml.ElementTree import iterparse

    marks = SheetMarks()
    rows = _RowNumbers()
    row = 0
    with zf.open(part) as fh:
        for _, el in iterparse(fh, events=("end",)):
            tag = el.tag.rsplit("}", 1)[-1]
            if tag == "row":
                row = int(el.get("r")) if el.get("r") else row + 1
                rows.add([row])
                if el.get("hidden") in ("1", "true"):
                    marks.hidden_rows.add(row)
                col = -1
                for c in el:
                    where = _ref(c.get("r"))
                    col = where[1] if where else col + 1
                    kids = {k.tag.rsplit("}", 1)[-1]: k for k in c}
                    value = kids.get("v")
                    if c.get("t") == "e":
                        marks.errors[(row, col)] = (value.text or "").strip() or "#VALUE!" if value is not None \
                            else "#VALUE!"
                    elif "f" in kids and (value is None or (not value.text and c.get("t") != "str")):
                        marks.no_result.append((row, col))
                el.clear()
            elif tag == "col":
                _hidden_cols(b' hidden="%s" min="%s" max="%s"' % tuple(
                    (el.get(k) or "").encode() for k in ("hidden", "min", "max")), marks.hidden_cols)
    marks.repeated_row = rows.repeated()
    return marks
