"""Worksheet rows as XML in bulk: the data rows of large tables, without per-cell xlsxwriter calls.

Builders register blocks of rows (`BulkRows`) while xlsxwriter writes everything else (headers,
column formats, filters, highlights, validation). After `Workbook.close()`, `splice` copies the
archive and inserts the generated rows into those sheets' <sheetData>, fixing <dimension>.
Cells come out as xlsxwriter's constant_memory mode writes them (inline strings, the column's
style index, no cell for blanks), except that numbers keep every bit (shortest round-trip repr
instead of 16 significant digits).
"""

from __future__ import annotations

import queue
import re
import threading
import zipfile
from collections.abc import Iterator, Sequence
from dataclasses import dataclass, field
from itertools import chain
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from xlsxwriter.utility import xl_col_to_name

from ..results.headers import CELL_LIMIT, cell_text

THRESHOLD: int | None = 100_000  # blocks with more cells than this take the fast path; None: never
TEXT_PER_CELL = 20               # …or more than THRESHOLD × this many characters of text
BLOCK_ROWS = 25_000              # rows turned into XML at a time (bounds memory)
COMPRESS_LEVEL = 1               # deflate level of the rewritten archive
MAX_UTF16 = CELL_LIMIT           # UTF-16 units a cell's text may hold

_CTRL_ESCAPED = re.compile("(_x[0-9a-fA-F]{4}_)")
_CTRL = re.compile(r"([\x00-\x08\x0b-\x1f])")
_LEAD, _TRAIL = re.compile(r"^\s"), re.compile(r"\s$")


def use_fast(rows: int, columns: int, chars: int = 0) -> bool:
    """Whether a block of rows × columns cells (holding `chars` characters of text) goes through the
    fast path under the current THRESHOLD: many cells, or much text (xlsxwriter scans every text
    cell several times; here each distinct text is escaped once)."""
    if THRESHOLD is None or rows <= 0:
        return False
    return rows * max(columns, 1) > THRESHOLD or chars > TEXT_PER_CELL * THRESHOLD


def inline_string(s: str, style: str) -> str:
    """The tail of an inline-string cell after `<c r="..."`: escaped as xlsxwriter escapes it."""
    s = cell_text(s)                  # at most MAX_UTF16 units; a longer text is cut, ending in …
    s = _CTRL_ESCAPED.sub(r"_x005F\1", s)
    s = _CTRL.sub(lambda m: f"_x{ord(m.group(1)):04X}_", s)
    s = s.replace("\ufffe", "_xFFFE_").replace("\uffff", "_xFFFF_")
    keep = ' xml:space="preserve"' if _LEAD.search(s) or _TRAIL.search(s) else ""
    s = s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return f'{style} t="inlineStr"><is><t{keep}>{s}</t></is></c>'


def _number(v: float, style: str) -> str:
    return f"{style}><v>{v!r}</v></c>"


class BulkColumn:
    """One column of a bulk block: its cells as XML, by row range, and which rows have a cell."""

    def __init__(self, col: int, values: Any, style: int | None) -> None:
        self.col = col
        self.letter = xl_col_to_name(col)
        self.style = f' s="{style}"' if style else ""
        self.kind = "empty"
        self.valid: np.ndarray | None = None         # None: every row has a cell
        self.widest = 40                             # characters after `<c r="…"` at most (numbers)
        if isinstance(values, np.ndarray) and values.dtype.kind in "iu":
            self.kind, self._ints = "int", values.astype(np.int64, copy=False)
        elif isinstance(values, np.ndarray) and values.dtype.kind == "f":
            a = values.astype(np.float64, copy=False)
            finite = np.isfinite(a)
            self.valid = None if finite.all() else finite
            self._floats = a
            f = a[finite]
            if f.size and np.all(np.abs(f) < 2.0**53) and np.all(f == np.round(f)) and not np.signbit(f[f == 0]).any():
                self.kind = "intfloat"                # whole numbers: written as 3, not 3.0
            else:
                self.kind = "float"
        else:
            self._objects(np.asarray(values, dtype=object))

    def _objects(self, arr: np.ndarray) -> None:
        if pd.api.types.infer_dtype(arr, skipna=True) in ("string", "empty"):
            codes, uniques = pd.factorize(arr, use_na_sentinel=True)
            tails = np.array([inline_string(u, self.style) if u != "" else "" for u in uniques] + [""],
                             dtype=object)
            codes = np.where(codes < 0, len(uniques), codes)
            self.kind, self._tails = "text", tails[codes]
        else:
            self.kind, self._tails = "mixed", np.array([_mixed(v, self.style) for v in arr.tolist()] or [],
                                                       dtype=object)
        self.widest = max((len(t) for t in set(self._tails.tolist())), default=0)
        present = self._tails != ""
        if not present.any():
            self.kind = "empty"
        self.valid = None if present.all() else present

    def cells(self, rows: list[str], lo: int, hi: int) -> list[str] | None:
        """XML of the cells of rows lo..hi-1 ('' where no cell); `rows` are their 1-based numbers as text."""
        L, s = f'<c r="{self.letter}', self.style
        if self.kind == "empty":
            return None
        if self.kind == "int":
            return [f'{L}{r}"{s}><v>{v}</v></c>' for r, v in zip(rows, self._ints[lo:hi].tolist())]
        valid = None if self.valid is None else self.valid[lo:hi].tolist()
        if self.kind in ("float", "intfloat"):
            a = self._floats[lo:hi]
            if self.kind == "intfloat":
                vals = np.where(np.isfinite(a), a, 0).astype(np.int64).tolist()
            else:
                vals = a.tolist()
            if valid is None:
                return [f'{L}{r}"{s}><v>{v!r}</v></c>' for r, v in zip(rows, vals)]
            return [f'{L}{r}"{s}><v>{v!r}</v></c>' if k else "" for r, v, k in zip(rows, vals, valid)]
        tails = self._tails[lo:hi].tolist()
        return [f'{L}{r}"{t}' if t else "" for r, t in zip(rows, tails)]


def _mixed(v: Any, style: str) -> str:
    """A mixed column's cell tail: numbers stay numbers, text is text, blanks and non-finite are none."""
    if v is None or (isinstance(v, str) and v == ""):
        return ""
    if isinstance(v, str):
        return inline_string(v, style)
    if isinstance(v, (bool, np.bool_)):
        return f'{style} t="b"><v>{int(v)}</v></c>'
    if isinstance(v, (int, np.integer)):
        return f"{style}><v>{int(v)}</v></c>"
    if isinstance(v, (float, np.floating)):
        f = float(v)
        return _number(f, style) if np.isfinite(f) else ""
    return inline_string(str(v), style)


@dataclass
class BulkRows:
    """Rows first..first+n-1 (0-based) of a sheet, from column arrays, to be spliced in after close.

    Columns are prepared only after close: asking a Format for its style index earlier would
    change the order xlsxwriter numbers its styles in.
    """

    sheet: str
    first: int
    n: int
    specs: list[tuple[int, Any, Any]] = field(default_factory=list)
    _columns: list[BulkColumn] | None = None

    @property
    def columns(self) -> list[BulkColumn]:
        if self._columns is None:
            self._columns = [BulkColumn(c, v, fmt._get_xf_index() if fmt is not None else None)
                             for c, v, fmt in self.specs]
            self.specs = []
        return self._columns

    def bounds(self) -> tuple[int, int, int, int] | None:
        """(first row, last row, first col, last col) of the cells, 0-based; None without any cell."""
        cols = [c for c in self.columns if c.kind != "empty" and (c.valid is None or c.valid.any())]
        if not cols or self.n == 0:
            return None
        if any(c.valid is None for c in cols):
            r0, r1 = 0, self.n - 1
        else:
            anyrow = np.logical_or.reduce([c.valid for c in cols])
            hit = np.flatnonzero(anyrow)
            r0, r1 = int(hit[0]), int(hit[-1])
        return self.first + r0, self.first + r1, min(c.col for c in cols), max(c.col for c in cols)

    def max_bytes(self) -> int:
        """An upper bound of the UTF-8 size of the rows' XML (to know when ZIP64 is needed)."""
        per_row = 40 + sum(24 + 3 * c.widest for c in self.columns if c.kind != "empty")
        return self.n * per_row

    def xml(self) -> Iterator[str]:
        """The <row> elements, BLOCK_ROWS rows at a time; rows without a cell are left out."""
        cols = sorted((c for c in self.columns if c.kind != "empty"), key=lambda c: c.col)
        all_rows = any(c.valid is None for c in cols)
        for lo in range(0, self.n, BLOCK_ROWS):
            hi = min(self.n, lo + BLOCK_ROWS)
            rows = list(map(str, range(self.first + lo + 1, self.first + hi + 1)))
            cells = [c.cells(rows, lo, hi) for c in cols]
            opens = [f'<row r="{r}">' for r in rows]
            closes = ["</row>"] * (hi - lo)
            if not all_rows and cols:
                keep = np.logical_or.reduce([c.valid[lo:hi] for c in cols])
                for i in np.flatnonzero(~keep).tolist():
                    opens[i] = closes[i] = ""
            elif not cols:
                continue
            yield "".join(chain.from_iterable(zip(opens, *cells, closes)))


def bulk_rows(sheet: str, first: int, columns: Sequence[tuple[int, Any, Any]]) -> BulkRows:
    """A bulk block from (column index, values array, xlsxwriter Format or None) triples.

    Values: an int or float numpy array (non-finite → no cell), or an object array of text,
    None and numbers ('' and None → no cell).
    """
    n = max((len(v) for _, v, _ in columns), default=0)
    return BulkRows(sheet, first, n, list(columns))


# --- splicing the rows into the closed workbook ------------------------------------------------

_DIM = re.compile(r'<dimension ref="([A-Z]+)(\d+)(?::([A-Z]+)(\d+))?"\s*/>')
_ROW_START = re.compile(r'<row r="(\d+)"')


def _col_index(letters: str) -> int:
    n = 0
    for ch in letters:
        n = n * 26 + ord(ch) - 64
    return n - 1


def _sheet_paths(archive: zipfile.ZipFile) -> dict[str, str]:
    """Sheet name → archive member of its XML, from workbook.xml and its relationships."""
    import xml.etree.ElementTree as ET
    ns = {"m": "http://schemas.openxmlformats.org/spreadsheetml/2006/main",
          "r": "http://schemas.openxmlformats.org/officeDocument/2006/relationships",
          "p": "http://schemas.openxmlformats.org/package/2006/relationships"}
    book = ET.fromstring(archive.read("xl/workbook.xml"))
    rels = ET.fromstring(archive.read("xl/_rels/workbook.xml.rels"))
    target = {r.get("Id"): r.get("Target") for r in rels.findall("p:Relationship", ns)}
    out = {}
    for s in book.findall("m:sheets/m:sheet", ns):
        t = target[s.get(f"{{{ns['r']}}}id")]
        out[s.get("name")] = t.lstrip("/") if t.startswith("/") else "xl/" + t
    return out


def _existing_rows(body: str) -> list[tuple[int, str]]:
    """xlsxwriter's own rows of a sheet: (0-based row, its XML)."""
    starts = [(m.start(), int(m.group(1)) - 1) for m in _ROW_START.finditer(body)]
    return [(r, body[p:(starts[i + 1][0] if i + 1 < len(starts) else len(body))])
            for i, (p, r) in enumerate(starts)]


def _sheet_stream(xml: str, blocks: list[BulkRows]) -> Iterator[str]:
    """The sheet XML with `blocks` merged into <sheetData> in row order."""
    empty = "<sheetData/>" in xml
    if empty:
        head, tail, body = xml.split("<sheetData/>", 1)[0], xml.split("<sheetData/>", 1)[1], ""
    else:
        head, rest = xml.split("<sheetData>", 1)
        body, tail = rest.split("</sheetData>", 1)
    own = _existing_rows(body)
    box = [b for b in (blk.bounds() for blk in blocks) if b is not None]
    m = _DIM.search(head)
    if own and m:
        c0, r0 = _col_index(m.group(1)), int(m.group(2)) - 1
        c1, r1 = (_col_index(m.group(3)), int(m.group(4)) - 1) if m.group(3) else (c0, r0)
        box.append((r0, r1, c0, c1))
    if box and m:
        r0, r1 = min(b[0] for b in box), max(b[1] for b in box)
        c0, c1 = min(b[2] for b in box), max(b[3] for b in box)
        ref = f"{xl_col_to_name(c0)}{r0 + 1}"
        if (r0, c0) != (r1, c1):
            ref += f":{xl_col_to_name(c1)}{r1 + 1}"
        head = head[:m.start()] + f'<dimension ref="{ref}"/>' + head[m.end():]
    yield head
    yield "<sheetData>"
    pending = sorted(blocks, key=lambda b: b.first)
    i = 0
    for blk in pending:
        while i < len(own) and own[i][0] < blk.first:
            yield own[i][1]
            i += 1
        if i < len(own) and own[i][0] < blk.first + blk.n:
            raise AssertionError(f"sheet row {own[i][0] + 1} written twice (bulk rows and xlsxwriter)")
        yield from blk.xml()
    for _, row in own[i:]:
        yield row
    yield "</sheetData>"
    yield tail


def splice(shell: Path, out: Any, blocks: Sequence[BulkRows]) -> None:
    """Copy the workbook `shell` to `out` (a path or binary file), inserting each sheet's bulk rows; streams, block by block."""
    by_sheet: dict[str, list[BulkRows]] = {}
    for b in blocks:
        by_sheet.setdefault(b.sheet, []).append(b)
    with zipfile.ZipFile(shell) as src, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED, allowZip64=True,
                                                          compresslevel=COMPRESS_LEVEL) as dst:
        paths = _sheet_paths(src)
        members = {paths[name]: bl for name, bl in by_sheet.items()}
        for info in src.infolist():
            zi = zipfile.ZipInfo(info.filename, info.date_time)
            zi.external_attr, zi.create_system = info.external_attr, info.create_system
            zi.compress_type = zipfile.ZIP_DEFLATED
            zi._compresslevel = COMPRESS_LEVEL          # read by ZipFile.open(…, "w") and writestr
            bl = members.get(info.filename)
            if bl is None:
                dst.writestr(zi, src.read(info), compresslevel=COMPRESS_LEVEL)
                continue
            xml = src.read(info).decode("utf-8")
            size = len(xml.encode("utf-8")) + sum(b.max_bytes() for b in bl)
            with dst.open(zi, "w", force_zip64=size >= zipfile.ZIP64_LIMIT) as fh:
                pipe = _Pipe(fh)
                try:
                    for piece in _sheet_stream(xml, bl):
                        pipe.write(piece.encode("utf-8"))
                finally:
                    pipe.close()


class _Pipe:
    """Writes chunks on a second thread, so deflating (which releases the GIL) overlaps building XML."""

    def __init__(self, fh: Any) -> None:
        self._fh, self._q, self.error = fh, queue.Queue(maxsize=3), None
        self._thread = threading.Thread(target=self._run, name="sheetfit-deflate", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        while (chunk := self._q.get()) is not None:
            if self.error is None:
                try:
                    self._fh.write(chunk)
                except BaseException as exc:       # reported to the writer on its next call
                    self.error = exc

    def write(self, chunk: bytes) -> None:
        if self.error is not None:
            raise self.error
        self._q.put(chunk)

    def close(self) -> None:
        """Wait until every chunk is written; re-raise a failure of the writing thread."""
        self._q.put(None)
        self._thread.join()
        if self.error is not None:
            raise self.error
