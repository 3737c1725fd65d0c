""".xlsx/.xlsm: cell values by python-calamine; what calamine cannot report by one streaming pass
over the sheet's XML bytes, run in a second thread while calamine reads.

calamine returns '' for error cells and for formulas without a saved result, and says nothing of
hidden rows and columns. The byte scan finds `t="e"` cells, formula cells with no `<v>`, and
hidden rows/columns by plain substring and regular-expression search on the decompressed XML, so
a sheet without any of them costs one decompression. Cells without an `r` reference (legal,
rare) switch to an exact element-by-element parse.
"""

from __future__ import annotations

import re
import zipfile
import zlib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath

from ..errors import NotAWorkbookError, TableNotFoundError, not_found_message
from .cells import NO_RESULT, ErrorCell
from .sources import Book, Grid, Region, parse_range

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
    m = re.search(rb"\s" + name + rb'\s*=\s*"([^"]*)"', tag)
    return m.group(1) if m else None


def _ref(ref: bytes | str | None) -> tuple[int, int] | None:
    if ref is None:
        return None
    m = _REF.fullmatch(ref.decode() if isinstance(ref, bytes) else ref)
    if m is None:
        return None
    col = 0
    for ch in m.group(1).upper():
        col = col * 26 + ord(ch) - 64
    return int(m.group(2)), col - 1


class _NeedsSlowScan(Exception):
    """A row or cell without an `r` reference: positions must be counted element by element."""


@dataclass
class SheetMarks:
    """What the XML says beyond calamine's values (1-based rows, 0-based columns)."""

    errors: dict[tuple[int, int], str] = field(default_factory=dict)
    no_result: list[tuple[int, int]] = field(default_factory=list)
    hidden_rows: set[int] = field(default_factory=set)
    hidden_cols: set[int] = field(default_factory=set)


def scan_sheet(zf: zipfile.ZipFile, part: str) -> SheetMarks:
    """Error cells, formulas without saved results and hidden rows/columns of one sheet part."""
    try:
        return _scan_fast(zf, part)
    except _NeedsSlowScan:
        return _scan_slow(zf, part)


def _scan_fast(zf: zipfile.ZipFile, part: str) -> SheetMarks:
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
    start = max(0, len(buf) - (1 << 20))
    while True:
        hits = [m.start() for m in _ROW_START.finditer(buf, start)]
        if hits or start == 0:
            return hits[-1] if hits else -1
        start = 0


def _hidden_cols(tag: bytes, out: set[int]) -> None:
    if _attr(tag, b"hidden") in (b"1", b"true"):
        lo, hi = int(_attr(tag, b"min") or 1), int(_attr(tag, b"max") or 1)
        out.update(range(lo - 1, min(hi, 16384)))


def _scan_buffer(buf: bytes, marks: SheetMarks) -> None:
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


class CalamineZipBook(Book):
    """A zipped workbook (.xlsx, .ods) whose values python-calamine reads and whose XML sheetfit scans."""

    def _open(self) -> None:
        import python_calamine as pc

        self._pc = pc
        self._wb = _calamine_call(lambda: pc.CalamineWorkbook.from_path(str(self.path)), self.path.name)
        self._zip = zipfile.ZipFile(self.path)

    def close(self) -> None:
        self._zip.close()
        try:
            self._wb.close()
        except Exception:
            pass


class XlsxBook(CalamineZipBook):
    """An .xlsx/.xlsm workbook read with python-calamine plus the XML scan."""

    def __init__(self, path: Path, file_format: str = "xlsx"):
        self.path, self.file_format = Path(path), file_format
        self.reader = f"python-calamine {_version('python-calamine')} (values) + XML scan (errors, formulas, hidden)"
        self._open()
        self._parts, self._names = _workbook_parts(self._zip)
        self._kinds = {m.name: str(m.typ) for m in self._wb.sheets_metadata}

    def sheet_names(self) -> list[str]:
        return [n for n in self._wb.sheet_names if self._kinds.get(n, "WorkSheet").endswith("WorkSheet")]

    def grid(self, sheet: str) -> Grid:
        part = self._parts.get(sheet)
        with ThreadPoolExecutor(max_workers=1) as pool:
            scan = pool.submit(scan_sheet, self._zip, part) if part else None
            ws = _calamine_call(lambda: self._wb.get_sheet_by_name(sheet), self.path.name)
            rows = _calamine_call(ws.to_python, self.path.name)
            start = ws.start or (0, 0)
            merged = [(r1 + 1, c1, r2 + 1, c2) for (r1, c1), (r2, c2) in (ws.merged_cell_ranges or [])]
            marks = _scan_result(scan, self.path.name) if scan else SheetMarks()
        return marked_grid(sheet, rows, start, merged, marks)

    def region_names(self) -> list[str]:
        return self._table_names() + [n for n in self._names if not n.startswith("_xlnm.")]

    def _table_names(self) -> list[str]:
        if not hasattr(self, "_tables"):
            try:
                self._tables = self._pc.CalamineWorkbook.from_path(str(self.path), load_tables=True)
                self._table_list = list(self._tables.table_names or [])
            except Exception:  # a workbook whose table parts calamine cannot read has no usable tables
                self._tables, self._table_list = None, []
        return self._table_list

    def region(self, name: str) -> Region:
        tables = self._table_names()
        hit = name if name in tables else next((t for t in tables if t.lower() == name.lower()), None)
        if hit is not None:
            t = self._tables.get_table_by_name(hit)
            (r1, c1), (r2, c2) = t.start, t.end
            return Region(t.sheet, header_row=r1, bottom=r2 + 1, left=c1, right=c2,
                          label=f'table "{hit}"', headers=tuple(str(c) for c in t.columns))
        key = name if name in self._names else next((k for k in self._names if k.lower() == name.lower()), None)
        if key is None:
            raise TableNotFoundError(not_found_message("table or defined name", name, self.region_names()))
        target = self._names[key]
        sheet, _, ref = target.rpartition("!")
        sheet = sheet.strip()
        if sheet.startswith("'") and sheet.endswith("'"):
            sheet = sheet[1:-1].replace("''", "'")
        try:
            if not sheet or "," in ref:
                raise ValueError(ref)
            top, left, bottom, right = parse_range(ref.replace("$", ""))
        except ValueError:
            raise TableNotFoundError(f'defined name "{key}" refers to "{target}", not to one block of cells on '
                                     f'one sheet; point it at a range such as Data!$A$1:$D$100') from None
        if sheet not in self.sheet_names():
            raise TableNotFoundError(f'defined name "{key}" refers to sheet "{sheet}", which does not exist')
        return Region(sheet, header_row=top, bottom=bottom, left=left, right=right,
                      label=f'defined name "{key}" ({target})')


def _scan_result(future, name: str) -> SheetMarks:
    """The scan's marks; a part that cannot be unpacked or parsed means a damaged file."""
    try:
        return future.result()
    except Exception as exc:  # zlib, zip, XML or defusedxml errors all mean the same to the user
        raise NotAWorkbookError(f'"{name}" is damaged and cannot be read ({_short(exc) or type(exc).__name__}); '
                                f'open it in a spreadsheet application and save it again') from None


def _version(dist: str) -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version(dist)
    except PackageNotFoundError:
        return "?"


def marked_grid(sheet: str, rows: list, start: tuple[int, int], merged: list, marks: SheetMarks) -> Grid:
    """A calamine grid with the error cells and formulas without results that calamine reads as blanks."""
    grid = Grid(sheet, rows, top=start[0] + 1, left=start[1], merged=merged,
                hidden_rows=frozenset(marks.hidden_rows), hidden_cols=frozenset(marks.hidden_cols),
                rectangular=True)
    for (r, c), code in marks.errors.items():
        grid.put(r, c, ErrorCell(code))
    for r, c in marks.no_result:
        grid.put(r, c, NO_RESULT)
    grid.no_result = sorted(marks.no_result)
    grid.square()
    return grid


def _calamine_call(fn, name: str):
    """Run a calamine call; its errors become one-line NotAWorkbookError messages."""
    import python_calamine as pc

    try:
        return fn()
    except pc.PasswordError:
        raise NotAWorkbookError(f'"{name}" is password-protected (encrypted); remove the password in a '
                                f'spreadsheet application and save a copy to read') from None
    except (pc.ZipError, pc.XmlError) as exc:
        raise NotAWorkbookError(f'"{name}" is damaged and cannot be read ({_short(exc)}); open it in a '
                                f'spreadsheet application and save it again') from None
    except pc.WorksheetNotFound:
        raise
    except pc.CalamineError as exc:
        raise NotAWorkbookError(f'"{name}" cannot be read ({_short(exc)}); save it again as .xlsx') from None


def _short(exc: BaseException) -> str:
    return " ".join(str(exc).split())[:160]


def _workbook_parts(zf: zipfile.ZipFile) -> tuple[dict[str, str], dict[str, str]]:
    """Sheet name → XML part path, and defined name → reference, from the workbook part and its relations."""
    from defusedxml import ElementTree as ET
    from defusedxml.common import DefusedXmlException

    def local(tag: str) -> str:
        return tag.rsplit("}", 1)[-1]

    def load(name: str):
        try:
            return ET.fromstring(zf.read(name))
        except KeyError:
            return None
        except (ET.ParseError, DefusedXmlException, zlib.error, zipfile.BadZipFile, EOFError) as exc:
            raise NotAWorkbookError(f'"{Path(zf.filename or "").name}" has a damaged part {name} '
                                    f'({_short(exc)}); save it again') from None

    book = "xl/workbook.xml"
    root_rels = load("_rels/.rels")
    if root_rels is not None:
        for rel in root_rels:
            if rel.get("Type", "").endswith("/officeDocument"):
                book = rel.get("Target", book).lstrip("/")
    wb = load(book)
    base = PurePosixPath(book).parent
    rels_root = load(str(base / "_rels" / (PurePosixPath(book).name + ".rels")))
    targets = {}
    for rel in (rels_root if rels_root is not None else []):
        tgt = rel.get("Target", "")
        targets[rel.get("Id")] = tgt.lstrip("/") if tgt.startswith("/") else str(base / tgt)
    parts: dict[str, str] = {}
    names: dict[str, str] = {}
    if wb is None:
        return parts, names
    for el in wb.iter():
        tag = local(el.tag)
        if tag == "sheet":
            rid = next((v for k, v in el.attrib.items() if local(k) == "id"), None)
            if rid in targets and targets[rid] in zf.NameToInfo:
                parts[el.get("name", "")] = targets[rid]
        elif tag == "definedName" and el.get("name") and (el.text or "").strip():
            names.setdefault(el.get("name"), el.text.strip())
    return parts, names
