""".xlsx/.xlsm sheet XML → `SheetMarks`: error cells, formulas without a saved result and hidden
rows/columns, the things python-calamine does not report.

One streaming pass over the sheet part's decompressed bytes (`scan_sheet`), run by `XlsxBook` in a
second thread while calamine reads the values. It finds `t="e"` cells, formula cells with no `<v>`
and hidden rows/columns by plain substring and regular-expression search, so a sheet without any
of them costs one decompression. Cells without an `r` reference (legal, rare) switch to an exact
element-by-element parse (`_scan_slow`).
"""

from __future__ import annotations

import re
import zipfile

from .calamine import SheetMarks
from .grid import column_index

_CHUNK = 1 << 23
_ROW_START = re.compile(rb"<(?:\w+:)?row[\s>]")
_HIDDEN_ROW = re.compile(rb"<(?:\w+:)?row\s[^>]*?\bhidden=\"(?:1|true)\"[^>]*>")
_COL_TAG = re.compile(rb"<(?:\w+:)?col\s[^>]*>")
_CELL_TAG = re.compile(rb"<(?:\w+:)?c\s[^>]*>")
_VALUE = re.compile(rb"<(?:\w+:)?v>([^<]*)</(?:\w+:)?v>")
_CELL_END = re.compile(rb"</(?:\w+:)?c>")
_NO_VALUE = re.compile(rb"<(?:\w+:)?f\b[^>]*?(?:/>|>[^<]*</(?:\w+:)?f>)\s*"
                       rb"(?P<v><(?:\w+:)?v\s*/>|<(?:\w+:)?v\s*>\s*</(?:\w+:)?v>)?\s*</(?:\w+:)?c>")
_REF = re.compile(r"([A-Za-z]{1,3})(\d+)")


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
    """Error cells, formulas without saved results and hidden rows/columns of one sheet part."""
    try:
        return _scan_fast(zf, part)
    except _NeedsSlowScan:
        return _scan_slow(zf, part)


def _scan_fast(zf: zipfile.ZipFile, part: str) -> SheetMarks:
    """Marks by byte search, chunk by chunk, each chunk cut at a row start; _NeedsSlowScan when refs lack."""
    marks = SheetMarks()
    carry, before_data = b"", True
    with zf.open(part) as fh:
        while True:
            chunk = fh.read(_CHUNK)
            buf = carry + chunk
            if chunk:
                cut = _last_row_start(buf)
                buf, carry = (buf[:cut], buf[cut:]) if cut > 0 else (b"", buf)
            if before_data and buf:
                at = buf.find(b"sheetData")
                head = buf if at < 0 else buf[:at]
                for tag in _COL_TAG.findall(head):
                    _hidden_cols(tag, marks.hidden_cols)
                before_data = at < 0
            if buf:
                _scan_buffer(buf, marks)
            if not chunk:
                return marks


def _last_row_start(buf: bytes) -> int:
    """Offset of the last `<row` in the buffer (searched near the end first), -1 when none."""
    start = max(0, len(buf) - (1 << 20))
    while True:
        hits = [m.start() for m in _ROW_START.finditer(buf, start)]
        if hits or start == 0:
            return hits[-1] if hits else -1
        start = 0


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
    row = 0
    with zf.open(part) as fh:
        for _, el in iterparse(fh, events=("end",)):
            tag = el.tag.rsplit("}", 1)[-1]
            if tag == "row":
                row = int(el.get("r")) if el.get("r") else row + 1
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
    return marks
