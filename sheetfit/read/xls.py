"""Legacy .xls (BIFF): read with xlrd, which reports error cells, dates, hidden rows/columns and merged
cells itself, so no XML scan is needed (compare `xlsx`). Such files hold at most 65,536 rows, so
speed is not a concern here.

Damaged files: whatever xlrd raises while opening the file or decoding a sheet (KeyError,
IndexError, struct errors, assertions…) becomes one "damaged" line. One damage xlrd does not
survive is checked first: a compound file whose chain of short sectors for the workbook stream
loops makes xlrd grow a list without end (gigabytes within seconds), so `_check_short_chain`
walks that chain once. xlrd's own notes go to a buffer, never to the terminal; its warnings about
damaged streams become reading warnings.
"""

from __future__ import annotations

import datetime as dt
import io
from pathlib import Path

from ..errors import NotAWorkbookError
from ..provenance import installed_version
from .book import Book
from .cells import ErrorCell
from .file_errors import damaged_error, encrypted_error, short_text
from .grid import Grid


class XlsBook(Book):
    """A BIFF workbook read with xlrd (formatting information on, for hidden rows and merges)."""

    file_format = "xls"

    def __init__(self, path: Path):
        import xlrd

        self.path = Path(path)
        self.reader = f"xlrd {installed_version('xlrd')}"
        self._log = io.StringIO()
        data = self.path.read_bytes()
        _check_short_chain(data, self.path.name)
        try:
            self._wb = xlrd.open_workbook(file_contents=data, formatting_info=True, on_demand=True,
                                          logfile=self._log)
        except Exception as exc:  # xlrd raises plain XLRDError/AssertionError/struct errors on bad files
            text = short_text(exc)
            if "encrypt" in text.lower() or "password" in text.lower():
                raise encrypted_error(self.path.name) from None
            raise NotAWorkbookError(f'"{self.path.name}" is not a readable .xls workbook ({text}); '
                                    f'open it in a spreadsheet application and save it as .xlsx') from None

    def sheet_names(self) -> list[str]:
        return list(self._wb.sheet_names())

    def grid(self, sheet: str) -> Grid:
        try:
            return self._grid(sheet)
        except Exception as exc:  # a damaged sheet stream: KeyError, IndexError, struct.error, AssertionError…
            what = short_text(exc)
            what = f"{type(exc).__name__} {what}".strip() if len(what) < 12 else what
            raise damaged_error(self.path.name, f'sheet "{sheet}" does not decode: {what}') from None

    def warnings(self) -> list[str]:
        notes = [" ".join(line.split()) for line in self._log.getvalue().splitlines() if "WARNING" in line]
        return [f'"{self.path.name}" may be damaged; xlrd reported: {short_text(notes[0])}'] if notes else []

    def _grid(self, sheet: str) -> Grid:
        import xlrd

        ws = self._wb.sheet_by_name(sheet)
        datemode = self._wb.datemode
        rows = []
        for r in range(ws.nrows):
            out = []
            for ctype, value in zip(ws.row_types(r), ws.row_values(r)):
                if ctype in (xlrd.XL_CELL_EMPTY, xlrd.XL_CELL_BLANK):
                    out.append("")
                elif ctype == xlrd.XL_CELL_NUMBER:
                    out.append(float(value))
                elif ctype == xlrd.XL_CELL_TEXT:
                    out.append(value)
                elif ctype == xlrd.XL_CELL_BOOLEAN:
                    out.append(bool(value))
                elif ctype == xlrd.XL_CELL_ERROR:
                    out.append(ErrorCell(xlrd.error_text_from_code.get(value, "#VALUE!")))
                elif ctype == xlrd.XL_CELL_DATE:
                    out.append(_date(value, datemode))
                else:
                    out.append(value)
            rows.append(out)
        hidden_rows = frozenset(r + 1 for r, info in ws.rowinfo_map.items() if getattr(info, "hidden", 0))
        hidden_cols = frozenset(c for c, info in ws.colinfo_map.items() if getattr(info, "hidden", 0))
        merged = [(r1 + 1, c1, r2, c2 - 1) for r1, r2, c1, c2 in ws.merged_cells]
        grid = Grid(sheet, rows, top=1, left=0, merged=merged, hidden_rows=hidden_rows, hidden_cols=hidden_cols)
        grid.square()
        return grid

    def close(self) -> None:
        try:
            self._wb.release_resources()
        except Exception:
            pass


def _check_short_chain(data: bytes, name: str) -> None:
    """Refuse a compound file whose short-sector chain for the workbook stream loops or leaves the table.

    xlrd follows that chain without noting the sectors it has seen, so a loop never ends."""
    from xlrd import compdoc

    if not data.startswith(compdoc.SIGNATURE):
        return
    try:
        doc = compdoc.CompDoc(data, logfile=io.StringIO())
    except Exception:  # xlrd reports a damaged header or directory itself, in one line
        return
    for node in doc.dirlist:
        if node.etype != 2 or node.name.lower() not in ("workbook", "book") or \
                node.tot_size >= doc.min_size_std_stream:
            continue
        seen: set[int] = set()
        sid = node.first_SID
        while sid >= 0:
            if sid in seen or sid >= len(doc.SSAT):
                raise damaged_error(name, f"the chain of sectors of its {node.name} stream "
                                          f"{'loops' if sid in seen else 'points outside the file'}")
            seen.add(sid)
            sid = doc.SSAT[sid]


def _date(value: float, datemode: int) -> object:
    """A date cell as date, time or datetime, as the other readers give it."""
    import xlrd

    try:
        stamp = xlrd.xldate_as_datetime(value, datemode)
    except Exception:
        return float(value)
    if 0 <= value < 1:
        return stamp.time()
    if stamp.time() == dt.time(0):
        return stamp.date()
    return stamp
