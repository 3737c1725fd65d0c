"""File writers for the input corpus: openpyxl and xlsxwriter workbooks, hand-written zip parts
(.xlsx and .ods), a minimal compound file, and LibreOffice conversion for .xls."""

from __future__ import annotations

import shutil
import struct
import subprocess
import zipfile
from collections.abc import Callable
from pathlib import Path

H = ["Site", "Load kWh", "CDD"]


# ---------------------------------------------------------------- writers

def xlsx(rows: list[list], *, title: str = "Data", edit: Callable | None = None,
         more: dict[str, list[list]] | None = None) -> Callable[[Path], None]:
    """An openpyxl workbook; ('e', '#N/A') is an error cell, ('s', '=1') text; edit(wb) may change more."""
    def make(path: Path) -> None:
        import openpyxl

        wb = openpyxl.Workbook()
        ws = wb.active
        ws.title = title
        for sheet_name, sheet_rows in [(title, rows), *((more or {}).items())]:
            ws = wb[sheet_name] if sheet_name in wb.sheetnames else wb.create_sheet(sheet_name)
            for r, row in enumerate(sheet_rows, start=1):
                for c, v in enumerate(row, start=1):
                    if isinstance(v, tuple):          # ("e", "#N/A") error cell, ("s", "=1+2") text kept as text
                        cell = ws.cell(r, c, v[1])
                        cell.data_type = v[0]
                    elif v is not None:
                        ws.cell(r, c, v)
        if edit:
            edit(wb)
        wb.save(path)
    return make


def text_file(content: str | bytes, encoding: str = "utf-8") -> Callable[[Path], None]:
    def make(path: Path) -> None:
        path.write_bytes(content if isinstance(content, bytes) else content.encode(encoding))
    return make


def zip_parts(parts: dict[str, str | bytes]) -> Callable[[Path], None]:
    def make(path: Path) -> None:
        with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
            for name, data in parts.items():
                zf.writestr(name, data)
    return make


_CT = ('<?xml version="1.0" encoding="UTF-8"?><Types xmlns="http://schemas.openxmlformats.org/package/2006/'
       'content-types"><Default Extension="rels" ContentType="application/vnd.openxmlformats-package.'
       'relationships+xml"/><Default Extension="xml" ContentType="application/xml"/><Override PartName='
       '"/xl/workbook.xml" ContentType="application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.'
       'main+xml"/><Override PartName="/xl/worksheets/sheet1.xml" ContentType="application/vnd.openxmlformats-'
       'officedocument.spreadsheetml.worksheet+xml"/></Types>')
_RELS = ('<?xml version="1.0" encoding="UTF-8"?><Relationships xmlns="http://schemas.openxmlformats.org/package/'
         '2006/relationships"><Relationship Id="rId1" Type="http://schemas.openxmlformats.org/officeDocument/2006/'
         'relationships/officeDocument" Target="xl/workbook.xml"/></Relationships>')
_WB = ('<?xml version="1.0" encoding="UTF-8"?><workbook xmlns="http://schemas.openxmlformats.org/spreadsheetml/'
       '2006/main" xmlns:r="http://schemas.openxmlformats.org/officeDocument/2006/relationships"><sheets><sheet '
       'name="Data" sheetId="1" r:id="rId1"/></sheets></workbook>')
_WB_RELS = ('<?xml version="1.0" encoding="UTF-8"?><Relationships xmlns="http://schemas.openxmlformats.org/package/'
            '2006/relationships"><Relationship Id="rId1" Type="http://schemas.openxmlformats.org/officeDocument/'
            '2006/relationships/worksheet" Target="worksheets/sheet1.xml"/></Relationships>')


def raw_xlsx(sheet_xml: str, prolog: str = '<?xml version="1.0" encoding="UTF-8"?>') -> Callable[[Path], None]:
    """A minimal hand-written .xlsx whose one sheet is `sheet_xml` (after `prolog`)."""
    return zip_parts({"[Content_Types].xml": _CT, "_rels/.rels": _RELS, "xl/workbook.xml": _WB,
                      "xl/_rels/workbook.xml.rels": _WB_RELS, "xl/worksheets/sheet1.xml": prolog + sheet_xml})


def _inline(text: str) -> str:
    return f'<c t="inlineStr"><is><t>{text}</t></is></c>'


_LAUGHS = ('<!DOCTYPE worksheet [<!ENTITY a "lol">' +
           "".join(f'<!ENTITY {chr(98 + i)} "{("&" + chr(97 + i) + ";") * 10}">' for i in range(9)) + "]>")
_SHEET_OPEN = '<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main"><sheetData>'
_LAUGH_SHEET = (_SHEET_OPEN + f'<row r="1">{_inline("Site")}{_inline("Load kWh")}{_inline("CDD")}</row>'
                '<row r="2"><c r="A2" t="inlineStr"><is><t>&j;</t></is></c><c r="B2"><v>1</v></c>'
                '<c r="C2"><v>2</v></c></row></sheetData></worksheet>')

_ODS_NS = ('xmlns:office="urn:oasis:names:tc:opendocument:xmlns:office:1.0" '
           'xmlns:table="urn:oasis:names:tc:opendocument:xmlns:table:1.0" '
           'xmlns:text="urn:oasis:names:tc:opendocument:xmlns:text:1.0" '
           'xmlns:calcext="urn:org:documentfoundation:names:experimental:calc:xmlns:calcext:1.0"')
_ODS_MANIFEST = ('<?xml version="1.0" encoding="UTF-8"?><manifest:manifest xmlns:manifest="urn:oasis:names:tc:'
                 'opendocument:xmlns:manifest:1.0" manifest:version="1.2"><manifest:file-entry manifest:full-path'
                 '="/" manifest:media-type="application/vnd.oasis.opendocument.spreadsheet"/><manifest:file-entry '
                 'manifest:full-path="content.xml" manifest:media-type="text/xml"/>{extra}</manifest:manifest>')


def ods(table_xml: str, manifest_extra: str = "") -> Callable[[Path], None]:
    """A minimal hand-written .ods holding one table named Data."""
    content = (f'<?xml version="1.0" encoding="UTF-8"?><office:document-content {_ODS_NS} office:version="1.2">'
               f'<office:body><office:spreadsheet><table:table table:name="Data">{table_xml}</table:table>'
               f'</office:spreadsheet></office:body></office:document-content>')

    def make(path: Path) -> None:
        with zipfile.ZipFile(path, "w") as zf:
            zf.writestr(zipfile.ZipInfo("mimetype"), "application/vnd.oasis.opendocument.spreadsheet")
            zf.writestr("content.xml", content, compress_type=zipfile.ZIP_DEFLATED)
            zf.writestr("META-INF/manifest.xml", _ODS_MANIFEST.format(extra=manifest_extra))
    return make


def _ods_cell(v) -> str:
    if v is None:
        return "<table:table-cell/>"
    if isinstance(v, tuple):
        kind, payload = v
        if kind == "e":
            return (f'<table:table-cell table:formula="of:=1/0" office:value-type="string" office:string-value="" '
                    f'calcext:value-type="error"><text:p>{payload}</text:p></table:table-cell>')
        if kind == "merge":
            return (f'<table:table-cell office:value-type="string" table:number-rows-spanned="{payload[1]}" '
                    f'table:number-columns-spanned="1"><text:p>{payload[0]}</text:p></table:table-cell>')
        if kind == "covered":
            return "<table:covered-table-cell/>"
        if kind == "f":                    # a formula whose result was never stored
            return f'<table:table-cell table:formula="of:={payload}"/>'

    if isinstance(v, (int, float)):
        return f'<table:table-cell office:value-type="float" office:value="{v}"><text:p>{v}</text:p></table:table-cell>'
    return f'<table:table-cell office:value-type="string"><text:p>{v}</text:p></table:table-cell>'


def ods_rows(rows: list[list], hidden: tuple[int, ...] = ()) -> str:
    out = []
    for r, row in enumerate(rows, start=1):
        vis = ' table:visibility="collapse"' if r in hidden else ""
        out.append(f"<table:table-row{vis}>" + "".join(_ods_cell(v) for v in row) + "</table:table-row>")
    return "".join(out)


def ole2(streams: dict[str, bytes]) -> bytes:
    """A minimal compound file (version 3, 512-byte sectors) holding streams of ≥ 4096 bytes each."""
    sec = 512
    end, free, fat_mark = 0xFFFFFFFE, 0xFFFFFFFF, 0xFFFFFFFD
    names = list(streams)
    datas = [streams[n].ljust(4096, b"\0") for n in names]
    fat = [fat_mark, end]                    # sector 0: FAT, sector 1: directory
    starts = []
    for data in datas:
        count = -(-len(data) // sec)
        first = len(fat)
        starts.append(first)
        fat += [first + k + 1 for k in range(count - 1)] + [end]
    fat += [free] * (sec // 4 - len(fat))

    def entry(name: str, kind: int, left: int, right: int, child: int, start: int, size: int) -> bytes:
        raw = (name.encode("utf-16-le") + b"\0\0") if name else b""
        return (raw.ljust(64, b"\0") + struct.pack("<HBB3I", len(raw), kind, 1, left, right, child) +
                b"\0" * 16 + b"\0" * 4 + b"\0" * 16 + struct.pack("<IQ", start, size))

    nostream = 0xFFFFFFFF
    entries = [entry("Root Entry", 5, nostream, nostream, 1, end, 0)]
    for k, (n, d) in enumerate(zip(names, datas)):
        entries.append(entry(n, 2, nostream, k + 2 if k + 1 < len(names) else nostream, nostream, starts[k], len(d)))
    directory = b"".join(entries).ljust(sec, b"\0")
    header = (b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\0" * 16 + struct.pack("<HHHHH", 0x3E, 3, 0xFFFE, 9, 6) +
              b"\0" * 6 + struct.pack("<IIIIIIIII", 0, 1, 1, 0, 4096, end, 0, end, 0) +
              struct.pack("<I", 0) + struct.pack("<I", free) * 108)
    return header + struct.pack(f"<{sec // 4}I", *fat) + directory + b"".join(datas)


def via_soffice(inner: Callable[[Path], None], fmt: str) -> Callable[[Path], None]:
    """Build an .xlsx with `inner`, then let LibreOffice convert it to `fmt`."""
    def make(path: Path) -> None:
        work = path.parent / f"_{path.stem}_src"
        work.mkdir(exist_ok=True)
        src = work / f"{path.stem}.xlsx"
        inner(src)
        exe = shutil.which("soffice") or shutil.which("libreoffice")
        subprocess.run([exe, "--headless", f"-env:UserInstallation=file://{work}/profile", "--convert-to", fmt,
                        "--outdir", str(work), str(src)], check=True, capture_output=True, timeout=120)
        shutil.move(str(work / f"{path.stem}.{fmt}"), path)
        shutil.rmtree(work, ignore_errors=True)
    return make


def _hide(wb) -> None:
    ws = wb["Data"]
    ws.row_dimensions[3].hidden = True
    ws.column_dimensions["C"].hidden = True


def _merge_header(wb) -> None:
    ws = wb["Data"]
    ws.merge_cells("A1:A2")
    ws.merge_cells("B1:C1")
    ws.merge_cells("D1:D2")


def _merge_groups(wb) -> None:
    wb["Data"].merge_cells("A2:A4")


def _formulas(wb) -> None:
    ws = wb["Data"]
    ws["B3"] = "=C3*2"
    ws["B4"] = "=C4*2"


def _defined_name(wb) -> None:
    from openpyxl.workbook.defined_name import DefinedName

    wb.defined_names["Block"] = DefinedName("Block", attr_text="Data!$B$3:$D$6")


def _table(path: Path) -> None:
    import xlsxwriter

    wb = xlsxwriter.Workbook(path)
    ws = wb.add_worksheet("Data")
    ws.write_row(0, 0, ["Notes above the table"])
    ws.write_row(1, 1, H)
    for i, row in enumerate([["A", 10, 1], ["A", 12, 2], ["B", 9, 3]], start=2):
        ws.write_row(i, 1, row)
    ws.add_table("B2:D5", {"name": "Sales", "columns": [{"header": h} for h in H]})
    ws.write_row(8, 0, ["stray", "text", "below"])
    wb.close()


def _cached_formula(path: Path) -> None:
    import xlsxwriter

    wb = xlsxwriter.Workbook(path)
    ws = wb.add_worksheet("Data")
    ws.write_row(0, 0, H)
    ws.write_row(1, 0, ["A", 10, 1])
    ws.write_string(2, 0, "A")
    ws.write_formula(2, 1, "=C3*6", None, 12)
    ws.write_number(2, 2, 2)
    ws.write_row(3, 0, ["A", 13, 3])
    wb.close()


def _big_unpacked(path: Path) -> None:
    xlsx([H, ["A", 1, 2], ["A", 2, 3]])(path)
    with zipfile.ZipFile(path, "a", zipfile.ZIP_DEFLATED) as zf:
        zf.writestr("xl/media/padding.bin", b"\0" * (3 * 2**20))


def _truncated(path: Path) -> None:
    xlsx([H, ["A", 1, 2]])(path)
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])


def _corrupt_member(path: Path) -> None:
    xlsx([H] + [["A", i, i * 2] for i in range(300)])(path)
    data = bytearray(path.read_bytes())
    with zipfile.ZipFile(path) as zf:
        info = zf.getinfo("xl/worksheets/sheet1.xml")
    start = info.header_offset + 30 + len(info.filename) + len(info.extra) + 200
    for k in range(40):
        data[start + k] ^= 0x5A
    path.write_bytes(bytes(data))


def _docx(path: Path) -> None:
    zip_parts({"[Content_Types].xml": "<Types/>", "word/document.xml": "<w:document/>"})(path)


def _lengthy_comment_laughs(path: Path) -> None:
    raw_xlsx(_LAUGH_SHEET, prolog='<?xml version="1.0"?><!--' + "x" * 200_000 + "-->" + _LAUGHS)(path)


def _cp1252(path: Path) -> None:
    path.write_bytes("Site,Load kWh,CDD\nZürich,10,1\nZürich,12,2\nGenève,9,3\n".encode("cp1252"))
