""".xlsx/.xlsm: cell values by python-calamine, plus what calamine cannot report (error cells,
formulas without a saved result, hidden rows/columns) from `sheetfit.read.xlsxscan`, run in a
second thread while calamine reads. Tables and defined names (`--table`) become `Region`s.
A sheet whose XML numbers two rows alike (calamine would keep one) is refused as damaged.
"""

from __future__ import annotations

import zipfile
import zlib
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path, PurePosixPath

from ..errors import NotAWorkbookError, TableNotFoundError, not_found_message
from ..provenance import installed_version
from .calamine import CalamineZipBook, SheetMarks, marked_grid
from .file_errors import damaged_error, short_text
from .grid import Grid, Region, parse_range
from .xlsxscan import scan_sheet


class XlsxBook(CalamineZipBook):
    """An .xlsx/.xlsm workbook read with python-calamine plus the XML scan."""

    def __init__(self, path: Path, file_format: str = "xlsx"):
        super().__init__(path)
        self.file_format = file_format
        self.reader = (f"python-calamine {installed_version('python-calamine')} (values) "
                       f"+ XML scan (errors, formulas, hidden)")
        self._parts, self._names = _workbook_parts(self._zip)
        self._kinds = {m.name: str(m.typ) for m in self._wb.sheets_metadata}

    def sheet_names(self) -> list[str]:
        return [n for n in self._wb.sheet_names if self._kinds.get(n, "WorkSheet").endswith("WorkSheet")]

    def grid(self, sheet: str) -> Grid:
        part = self._parts.get(sheet)
        with ThreadPoolExecutor(max_workers=1) as pool:
            scan = pool.submit(scan_sheet, self._zip, part) if part else None
            ws, rows, start = self.calamine_sheet(sheet)
            merged = [(r1 + 1, c1, r2 + 1, c2) for (r1, c1), (r2, c2) in (ws.merged_cell_ranges or [])]
            marks = _scan_result(scan, self.path.name) if scan else SheetMarks()
        if marks.repeated_row is not None:
            raise damaged_error(self.path.name, f'sheet "{sheet}" holds two rows numbered {marks.repeated_row} in '
                                                f'its XML, and only one of them would be read')
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
        raise damaged_error(name, short_text(exc) or type(exc).__name__) from None


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
                                    f'({short_text(exc)}); save it again') from None

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
