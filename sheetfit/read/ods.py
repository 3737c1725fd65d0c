""".ods: cell values by python-calamine (see `sheetfit.read.calamine`); error cells, formulas without
results, hidden rows/columns and merged cells from one element-by-element pass over content.xml
(defusedxml), run only when a quick byte search shows the file has any of them.
"""

from __future__ import annotations

import zipfile
from pathlib import Path

from ..provenance import installed_version
from .calamine import CalamineZipBook, SheetMarks, marked_grid
from .file_errors import damaged_error
from .grid import Grid

_T = "{urn:oasis:names:tc:opendocument:xmlns:table:1.0}"
_O = "{urn:oasis:names:tc:opendocument:xmlns:office:1.0}"
_C = "{urn:org:documentfoundation:names:experimental:calc:xmlns:calcext:1.0}"
_TRIGGERS = (b'value-type="error"', b'visibility="collapse"', b'visibility="filter"', b"-spanned=")
_MAX_HIDDEN = 1 << 20


def _needs_scan(zf: zipfile.ZipFile) -> bool:
    """True when content.xml holds error cells, hidden rows/columns, merged cells or a formula with no value."""
    tail = b""
    with zf.open("content.xml") as fh:
        while chunk := fh.read(1 << 23):
            buf = tail + chunk
            if any(t in buf for t in _TRIGGERS) or _formula_without_value(buf):
                return True
            tail = chunk[-4096:]
    return False


def _formula_without_value(buf: bytes) -> bool:
    pos = buf.find(b'formula="')
    while pos >= 0:
        start, end = buf.rfind(b"<", 0, pos), buf.find(b">", pos)
        if end < 0:
            return False            # the tag continues in the next chunk, which repeats this tail
        if b"value-type=" not in buf[start:end]:
            return True
        pos = buf.find(b'formula="', end)
    return False


def scan_ods(zf: zipfile.ZipFile, sheet: str) -> tuple[SheetMarks, list[tuple[int, int, int, int]]]:
    """Marks and merged ranges (1-based rows, 0-based columns) of one sheet of content.xml."""
    from defusedxml.ElementTree import iterparse

    marks, merged = SheetMarks(), []
    inside, row, col, rrep = False, 0, 0, 1
    colpos = 0
    with zf.open("content.xml") as fh:
        for event, el in iterparse(fh, events=("start", "end")):
            tag = el.tag
            if tag == _T + "table":
                if event == "start":
                    inside, row, colpos = el.get(_T + "name") == sheet, 0, 0
                else:
                    if inside:
                        break
                    el.clear()
                continue
            if not inside:
                if event == "end" and tag == _T + "table-row":
                    el.clear()
                continue
            if event == "start":
                if tag == _T + "table-column":
                    rep = int(el.get(_T + "number-columns-repeated", "1"))
                    if el.get(_T + "visibility", "visible") != "visible":
                        marks.hidden_cols.update(range(colpos, min(colpos + rep, 16384)))
                    colpos += rep
                elif tag == _T + "table-row":
                    rrep, col = int(el.get(_T + "number-rows-repeated", "1")), 0
                    if el.get(_T + "visibility", "visible") != "visible" and len(marks.hidden_rows) < _MAX_HIDDEN:
                        marks.hidden_rows.update(range(row + 1, row + 1 + min(rrep, _MAX_HIDDEN)))
                elif tag == _T + "table-cell":
                    cs = int(el.get(_T + "number-columns-spanned", "1"))
                    rs = int(el.get(_T + "number-rows-spanned", "1"))
                    if cs > 1 or rs > 1:
                        merged.append((row + 1, col, row + rs, col + cs - 1))
                continue
            if tag in (_T + "table-cell", _T + "covered-table-cell"):
                rep = int(el.get(_T + "number-columns-repeated", "1"))
                if tag == _T + "table-cell":
                    kind = el.get(_C + "value-type") or el.get(_O + "value-type")
                    if kind == "error":
                        code = "".join(el.itertext()).strip() or "#VALUE!"
                        for k in range(min(rep, 16384)):
                            marks.errors[(row + 1, col + k)] = code
                    elif el.get(_T + "formula") and kind is None:
                        marks.no_result.extend((row + 1, col + k) for k in range(min(rep, 16384)))
                col += rep
                el.clear()
            elif tag == _T + "table-row":
                row += rrep
                el.clear()
    return marks, merged


class OdsBook(CalamineZipBook):
    """An OpenDocument spreadsheet read with python-calamine plus the content.xml pass."""

    file_format = "ods"

    def __init__(self, path: Path):
        super().__init__(path)
        self.reader = (f"python-calamine {installed_version('python-calamine')} (values) "
                       f"+ content.xml pass (errors, hidden, merged)")
        try:
            self._scan = _needs_scan(self._zip)
        except Exception as exc:  # zlib or zip errors while unpacking content.xml
            raise damaged_error(self.path.name, str(exc)) from None

    def sheet_names(self) -> list[str]:
        return list(self._wb.sheet_names)

    def grid(self, sheet: str) -> Grid:
        _, rows, start = self.calamine_sheet(sheet)
        try:
            marks, merged = scan_ods(self._zip, sheet) if self._scan else (SheetMarks(), [])
        except Exception as exc:  # zlib, zip, XML or defusedxml errors all mean a damaged file
            raise damaged_error(self.path.name, str(exc)) from None
        return marked_grid(sheet, rows, start, merged, marks)
