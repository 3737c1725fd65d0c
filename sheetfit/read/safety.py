"""Safety checks and format sniffing: what an input file is, decided from its bytes before any reader opens it.

Checks run on the raw bytes, in this order: the path exists and is a regular file (a FIFO, device or
socket is refused before anything opens it, since opening or reading one can wait forever) that can
be opened; the content (not the name) says which format it is; a zip's declared unpacked size is
within the limit; no XML part declares a document type (the door to entity-expansion attacks);
encrypted files are named as such.
`sniff` returns the format name that `sheetfit.read.formats.open_book` takes.
"""

from __future__ import annotations

import os
import stat
import zipfile
import zlib
from pathlib import Path

from ..errors import InputFileError, NotAWorkbookError
from .file_errors import encrypted_error

WORKBOOK_SUFFIXES = (".xlsx", ".xlsm", ".xls", ".ods")
TEXT_SUFFIXES = (".csv", ".tsv", ".txt")
_ZIP_MAGIC = (b"PK\x03\x04", b"PK\x05\x06")
_OLE_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"
_ENCRYPTED_MARK = "EncryptedPackage".encode("utf-16-le")
_FIX = "save it again as .xlsx, .xlsm, .xls, .ods or .csv"


_KINDS = ((stat.S_ISFIFO, "a named pipe (FIFO)"), (stat.S_ISSOCK, "a socket"), (stat.S_ISCHR, "a device"),
          (stat.S_ISBLK, "a device"))          # worded as the CLI's own check of its argument


def check_path(path: Path) -> None:
    """Missing file, folder, anything but a regular file, or an unreadable one → InputFileError (one line).

    Decided from `os.stat` before any open: opening a FIFO waits for a writer that may never come."""
    try:
        mode = os.stat(path).st_mode
    except (FileNotFoundError, NotADirectoryError):
        raise InputFileError(f'input file "{path}" not found; check the path and the file name') from None
    except OSError as exc:
        raise InputFileError(f'input file "{path}" cannot be read ({exc.strerror or exc}); check the path '
                             f'and its permissions') from None
    if stat.S_ISDIR(mode):
        raise InputFileError(f'"{path}" is a folder, not a file; give the path of a workbook '
                             f'(.xlsx, .xlsm, .xls, .ods) or a .csv file')
    if not stat.S_ISREG(mode):
        kind = next((name for test, name in _KINDS if test(mode)), "a special file")
        raise InputFileError(f'"{path}" is not a regular file (it is {kind}); save the data to a file '
                             f'(.xlsx, .xlsm, .xls, .ods or .csv) and give its path')
    try:
        with path.open("rb"):
            pass
    except OSError as exc:
        raise InputFileError(f'input file "{path}" cannot be read ({exc.strerror or exc}); '
                             f'check its permissions') from None


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
                raise encrypted_error(name)
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
