"""Input files: safety checks and format sniffing before any reader touches them, and the grid type
every per-format reader returns.

Checks run on the raw bytes, in this order: the path exists and is a file; the content (not the
name) says which format it is; a zip's declared unpacked size is within the limit; no XML part
declares a document type (the door to entity-expansion attacks); encrypted files are named as such.
"""

from __future__ import annotations

import hashlib
import re
import zipfile
import zlib
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import InputFileError, NotAWorkbookError

WORKBOOK_SUFFIXES = (".xlsx", ".xlsm", ".xls", ".ods")
TEXT_SUFFIXES = (".csv", ".tsv", ".txt")
_ZIP_MAGIC = (b"PK\x03\x04", b"PK\x05\x06")
_OLE_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"
_ENCRYPTED_MARK = "EncryptedPackage".encode("utf-16-le")
_FIX = "save it again as .xlsx, .xlsm, .xls, .ods or .csv"


@dataclass
class Grid:
    """Cell values of one sheet: rows[i][j] is the cell at sheet row top+i (1-based), column left+j (0-based)."""

    sheet: str
    rows: list[list]
    top: int = 1
    left: int = 0
    merged: list[tuple[int, int, int, int]] = field(default_factory=list)  # (row1, col1, row2, col2), inclusive
    hidden_rows: frozenset[int] = frozenset()
    hidden_cols: frozenset[int] = frozenset()
    no_result: list[tuple[int, int]] = field(default_factory=list)        # formulas without saved results

    rectangular: bool = False           # every row has `width` cells (readers that guarantee it set this)

    @property
    def bottom(self) -> int:
        return self.top + len(self.rows) - 1

    @property
    def width(self) -> int:
        if self.rectangular:
            return len(self.rows[0]) if self.rows else 0
        return max((len(r) for r in self.rows), default=0)

    @property
    def right(self) -> int:
        return self.left + self.width - 1

    def get(self, row: int, col: int) -> object:
        i, j = row - self.top, col - self.left
        if 0 <= i < len(self.rows) and 0 <= j < len(self.rows[i]):
            return self.rows[i][j]
        return ""

    def put(self, row: int, col: int, value: object) -> None:
        """Set one cell, growing the grid when the cell lies outside it."""
        if not self.rows:
            self.top, self.left = row, col
            self.rows = [[""]]
        if row < self.top:
            self.rows[:0] = [[] for _ in range(self.top - row)]
            self.top = row
        if col < self.left:
            pad = [""] * (self.left - col)
            self.rows = [pad + r for r in self.rows]
            self.left = col
        self.rectangular = False
        i, j = row - self.top, col - self.left
        while len(self.rows) <= i:
            self.rows.append([])
        r = self.rows[i]
        if len(r) <= j:
            r.extend([""] * (j + 1 - len(r)))
        r[j] = value

    def square(self) -> None:
        """Pad short rows with empty cells so every row has the same length."""
        if self.rectangular:
            return
        w = self.width
        for r in self.rows:
            if len(r) < w:
                r.extend([""] * (w - len(r)))
        self.rectangular = True


@dataclass(frozen=True)
class Region:
    """A rectangle of one sheet (1-based rows, 0-based columns, inclusive) named by a table or a defined name."""

    sheet: str
    header_row: int                         # 1-based row holding the column names
    bottom: int                             # last data row
    left: int
    right: int
    label: str                              # 'table "Sales"', 'defined name "Data" (Data!B2:D40)'
    headers: tuple[str, ...] | None = None  # a table's own column names; None → read the header row


def col_letter(col: int) -> str:
    """0-based column index → spreadsheet letters (0 → A, 26 → AA)."""
    s, n = "", col + 1
    while n:
        n, rem = divmod(n - 1, 26)
        s = chr(65 + rem) + s
    return s


def cell_ref(row: int, col: int) -> str:
    return f"{col_letter(col)}{row}"


_A1 = re.compile(r"\$?([A-Za-z]{1,3})?\$?(\d+)?")


def parse_range(ref: str) -> tuple[int, int, int, int]:
    """'$B$2:$D$10' → (2, 1, 10, 3); whole columns ('A:D') and whole rows ('2:9') allowed."""
    parts = ref.split(":")
    if len(parts) > 2:
        raise ValueError(ref)
    bounds = []
    for part in parts:
        m = _A1.fullmatch(part.strip())
        if m is None or not (m.group(1) or m.group(2)):
            raise ValueError(ref)
        col = None
        if m.group(1):
            col = 0
            for ch in m.group(1).upper():
                col = col * 26 + ord(ch) - 64
            col -= 1
        bounds.append((int(m.group(2)) if m.group(2) else None, col))
    (r1, c1), (r2, c2) = bounds[0], bounds[-1]
    top, bottom = (r1 or 1), (r2 or (1_048_576 if r1 is None else r1))
    left, right = (c1 if c1 is not None else 0), (c2 if c2 is not None else (16_383 if c1 is None else c1))
    return min(top, bottom), min(left, right), max(top, bottom), max(left, right)


def check_path(path: Path) -> None:
    """Missing file, folder or unreadable path → InputFileError."""
    if not path.exists():
        raise InputFileError(f'input file "{path}" not found; check the path and the file name')
    if path.is_dir():
        raise InputFileError(f'"{path}" is a folder, not a file; give the path of a workbook '
                             f'(.xlsx, .xlsm, .xls, .ods) or a .csv file')
    try:
        with path.open("rb"):
            pass
    except OSError as exc:
        raise InputFileError(f'input file "{path}" cannot be opened ({exc.strerror or exc}); '
                             f'check its permissions') from None


def file_sha256(path: Path) -> str:
    """SHA-256 of the file's bytes, read in 1 MB pieces."""
    h = hashlib.sha256()
    with path.open("rb") as fh:
        while chunk := fh.read(1 << 20):
            h.update(chunk)
    return h.hexdigest()


def sniff(path: Path, max_unpacked_bytes: int) -> str:
    """The file's format from its content: xlsx, xlsm, xls, ods or csv; refuses what cannot be read safely."""
    check_path(path)
    name = path.name
    with path.open("rb") as fh:
        head = fh.read(8)
    if not head:
        raise NotAWorkbookError(f'"{name}" is empty (0 bytes); {_FIX}')
    suffix = path.suffix.lower()
    if head[:4] in _ZIP_MAGIC:
        return _sniff_zip(path, suffix, max_unpacked_bytes)
    if head == _OLE_MAGIC:
        if _contains(path, _ENCRYPTED_MARK):
            raise NotAWorkbookError(f'"{name}" is password-protected (encrypted); open it in a spreadsheet '
                                    f'application, remove the password and save a copy to read')
        return "xls"
    with path.open("rb") as fh:
        sample = fh.read(8192)
    textual = sample.count(b"\x00") * 10 <= len(sample) or (
        sample[:2] in (b"\xff\xfe", b"\xfe\xff") and suffix in TEXT_SUFFIXES)
    if suffix in WORKBOOK_SUFFIXES or not textual:
        raise NotAWorkbookError(f'"{name}" is not a workbook: it holds {_describe(sample)}; {_FIX}')
    return "csv"


def _describe(sample: bytes) -> str:
    low = sample.lstrip().lower()
    if low.startswith((b"<html", b"<!doctype html", b"<table")) or b"<html" in low[:512]:
        return "a web page (HTML)"
    if low.startswith(b"<?xml"):
        return "XML text"
    if low.startswith(b"%pdf"):
        return "a PDF document"
    if b"\x00" in sample:
        return "unrecognised binary data"
    return "plain text"


def _contains(path: Path, needle: bytes) -> bool:
    tail = b""
    with path.open("rb") as fh:
        while chunk := fh.read(1 << 20):
            if needle in tail + chunk:
                return True
            tail = chunk[-len(needle):]
    return False


def _sniff_zip(path: Path, suffix: str, limit: int) -> str:
    name = path.name
    try:
        with zipfile.ZipFile(path) as zf:
            infos = zf.infolist()
            total = sum(i.file_size for i in infos)
            if total > limit:
                raise NotAWorkbookError(
                    f'"{name}" would unpack to {total / 2**20:,.0f} MB, over the limit of {limit / 2**20:,.0f} MB; '
                    f'refused before unpacking. If you trust the file, raise the limit (--max-unpacked-mb)')
            names = {i.filename for i in infos}
            kind = _zip_kind(zf, names, suffix)
            if kind == "ods" and "META-INF/manifest.xml" in names and \
                    b"encryption-data" in zf.read("META-INF/manifest.xml"):
                raise NotAWorkbookError(f'"{name}" is password-protected (encrypted); remove the password in '
                                        f'a spreadsheet application and save a copy to read')
            for info in infos:
                if not info.filename.lower().endswith((".xml", ".rels", ".vml")):
                    continue
                try:
                    hostile = _declares_doctype(zf, info)
                except (zlib.error, zipfile.BadZipFile, EOFError) as exc:
                    raise NotAWorkbookError(f'"{name}" is damaged: its part {info.filename} cannot be unpacked '
                                            f'({exc}); {_FIX}') from None
                if hostile:
                    raise NotAWorkbookError(
                        f'"{name}" is refused: its part {info.filename} declares an XML document type, which '
                        f'workbooks never need and entity-expansion attacks use; {_FIX} from a trusted source')
            return kind
    except zipfile.BadZipFile as exc:
        raise NotAWorkbookError(f'"{name}" is a damaged zip archive ({exc}); {_FIX}') from None
    except (zipfile.LargeZipFile, NotImplementedError, RuntimeError, EOFError, OSError, ValueError,
            zlib.error) as exc:
        raise NotAWorkbookError(f'"{name}" cannot be unpacked ({exc}); {_FIX}') from None


def _zip_kind(zf: zipfile.ZipFile, names: set[str], suffix: str) -> str:
    if "mimetype" in names:
        mime = zf.read("mimetype")[:100].strip()
        if mime == b"application/vnd.oasis.opendocument.spreadsheet":
            return "ods"
        raise NotAWorkbookError(f'"{Path(zf.filename or "").name}" is an OpenDocument file but not a '
                                f'spreadsheet ({mime.decode("ascii", "replace")}); {_FIX}')
    if "xl/workbook.bin" in names:
        raise NotAWorkbookError(f'"{Path(zf.filename or "").name}" is a binary workbook (.xlsb), which sheetfit '
                                f'does not read; {_FIX}')
    types = zf.read("[Content_Types].xml") if "[Content_Types].xml" in names else b""
    if b"spreadsheetml" in types or b"ms-excel.sheet" in types or any(n.startswith("xl/") for n in names):
        return "xlsm" if (b"macroEnabled" in types or suffix == ".xlsm") else "xlsx"
    what = "a Word document" if "word/document.xml" in names else \
        "a presentation" if "ppt/presentation.xml" in names else "other files"
    raise NotAWorkbookError(f'"{Path(zf.filename or "").name}" is a zip archive holding {what}, not a '
                            f'workbook; {_FIX}')


def _declares_doctype(zf: zipfile.ZipFile, info: zipfile.ZipInfo, cap: int = 1 << 22) -> bool:
    """True when the part's prolog (before the root element) declares a document type or an entity."""
    with zf.open(info) as fh:
        buf = fh.read(65536)
        utf16 = buf[:2] in (b"\xff\xfe", b"\xfe\xff")
        while True:
            verdict = _prolog_verdict(buf.decode("utf-16", "ignore").encode() if utf16 else buf)
            if verdict is not None:
                return verdict
            chunk = fh.read(65536)
            if not chunk:
                return False
            buf += chunk
            if len(buf) > cap:         # a prolog this long is not a workbook's
                return True


def _prolog_verdict(buf: bytes) -> bool | None:
    """Walk the XML declaration, processing instructions and comments: True at '<!' (a DOCTYPE), False at
    the root element, None when more bytes are needed."""
    pos = 0
    while True:
        while pos < len(buf) and buf[pos] in b" \t\r\n":
            pos += 1
        if buf.startswith(b"\xef\xbb\xbf", pos):
            pos += 3
            continue
        if len(buf) - pos < 4:
            return None
        if buf.startswith(b"<?", pos):
            close = b"?>"
        elif buf.startswith(b"<!--", pos):
            close = b"-->"
        elif buf.startswith(b"<!", pos):
            return True
        else:
            return False
        end = buf.find(close, pos)
        if end < 0:
            return None
        pos = end + len(close)


class Book:
    """One open input file; subclasses read one format."""

    file_format = ""
    reader = ""
    decimal: str | None = None        # decimal mark fixed for text cells (CSV); None → point rule, then comma rule

    def sheet_names(self) -> list[str]:
        raise NotImplementedError

    def grid(self, sheet: str) -> Grid:
        raise NotImplementedError

    def region(self, name: str) -> Region:
        from ..errors import TableNotFoundError

        raise TableNotFoundError(f'table or defined name "{name}" not found: {self.file_format} files are read '
                                 f'sheet by sheet; use --sheet (and --header-row), or save as .xlsx')

    def region_names(self) -> list[str]:
        return []

    def warnings(self) -> list[str]:
        return []

    def close(self) -> None:
        pass


def open_book(path: Path, file_format: str, *, csv_delimiter: str | None = None,
              csv_decimal: str | None = None) -> Book:
    """The reader for a sniffed format."""
    if file_format in ("xlsx", "xlsm"):
        from .xlsx import XlsxBook
        return XlsxBook(path, file_format)
    if file_format == "ods":
        from .ods import OdsBook
        return OdsBook(path)
    if file_format == "xls":
        from .xls import XlsBook
        return XlsBook(path)
    from .csvfile import CsvBook
    return CsvBook(path, delimiter=csv_delimiter, decimal=csv_decimal)
