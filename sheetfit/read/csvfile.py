""".csv and other delimited text: Python's csv module, with the delimiter and the decimal mark detected
from a sample of the file unless the job sets them.

Delimiter: among tab ; | and , the one that splits the sampled records into the same number
(at least 2) of fields most often; ties go to tab, then ; then | then ,.
Decimal mark: "," when sampled fields such as "12,5" can only be read with a decimal comma and
none such as "12.5" can only be read with a decimal point; "." in the opposite case; otherwise
not fixed, so each text follows the two-rule order of `sheetfit.read.cells`.
The source row of a record is its position in the file counting from 1, as a spreadsheet shows it.

A first line `sep=;` (written by some spreadsheet applications to name the delimiter) sets the
delimiter unless the job sets one, and is not a record: the header is then on row 2.
A line of more than MAX_FIELDS (16,384, the columns a sheet can hold) fields is refused with its
line number; rows are kept as long as they are (never widened to the widest line).
Text is UTF-8 (with or without BOM), UTF-16 with a BOM, or else read as Windows-1252 with a warning.
A file cut short in the middle of its last character (a UTF-16 file of an odd number of bytes)
is read without that half character, with a warning that its last line may be incomplete;
undecodable bytes anywhere else make it "damaged", in one line.
"""

from __future__ import annotations

import csv
import io
import re
from collections import Counter
from itertools import islice
from pathlib import Path

from ..errors import JobError, NotAWorkbookError
from .book import Book
from .file_errors import damaged_error
from .grid import Grid

_CANDIDATES = ("\t", ";", "|", ",")
_NAMES = {"\t": "tab", ";": ";", "|": "|", ",": ","}
_COMMA_ONLY = re.compile(r"[+-]?(?:\d{1,3}(?:\.\d{3})+|\d+),\d+", re.ASCII)
_POINT_ONLY = re.compile(r"[+-]?\d*\.\d+", re.ASCII)
_SAMPLE = 1 << 16
MAX_FIELDS = 16_384                 # columns a spreadsheet sheet holds (A to XFD)
_BATCH = 1024                       # records read between two width checks
_SEP_HINT = re.compile(r"sep=([^\r\n\"'\w])[ \t]*(?:\r\n|\n|\r|$)", re.IGNORECASE)


def _delimiter_option(value: str | None) -> str | None:
    if value is None or value == "":
        return None
    v = {"tab": "\t", "\\t": "\t", "comma": ",", "semicolon": ";", "pipe": "|"}.get(value.lower(), value)
    if len(v) != 1 or v in "\"'\r\n" or v.isalnum():
        raise JobError(f'CSV delimiter must be one character such as , ; | or tab, got "{value}"')
    return v


def _decimal_option(value: str | None) -> str | None:
    if value is None or value == "":
        return None
    v = {"comma": ",", "point": ".", "dot": "."}.get(value.lower(), value)
    if v not in (",", "."):
        raise JobError(f'CSV decimal mark must be "." or ",", got "{value}"')
    return v


def decode(raw: bytes, name: str) -> tuple[str, list[str]]:
    """Text of the file and warnings (not UTF-8; cut short in the middle of its last character)."""
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        return _decode_cut(raw, "utf-16", name)
    try:
        return _decode_cut(raw[3:] if raw.startswith(b"\xef\xbb\xbf") else raw, "utf-8", name)
    except UnicodeDecodeError:
        warning = f'"{name}" is not UTF-8 text; it was read as Windows-1252 (Western European)'
        return raw.decode("cp1252", errors="replace"), [warning]


def _decode_cut(raw: bytes, encoding: str, name: str) -> tuple[str, list[str]]:
    """Decode; a file that ends inside a character loses that partial character, with a warning.

    Other UTF-16 errors mean a damaged file (NotAWorkbookError). Other UTF-8 errors, and a partial
    last character after only ASCII text (then more likely a Windows-1252 letter), raise
    UnicodeDecodeError for the caller's Windows-1252 fallback."""
    try:
        return raw.decode(encoding), []
    except UnicodeDecodeError as exc:
        cut = exc.end == len(raw) and exc.start >= len(raw) - 3 and exc.reason in ("truncated data",
                                                                                   "unexpected end of data")
        if encoding == "utf-16" and not cut:
            raise damaged_error(name, f"its UTF-16 text has bytes at offset {exc.start:,} that are no "
                                      f"character") from None
        if not cut or (encoding != "utf-16" and raw[: exc.start].isascii()):
            raise
        warning = (f'"{name}" ends in the middle of a character (it was probably cut short): its last '
                   f'{len(raw) - exc.start} byte(s) were left out and its last line may be incomplete')
        return raw[: exc.start].decode(encoding), [warning]


def detect_delimiter(sample: str) -> str:
    best, best_key = ",", (-1.0, 0)
    for preference, d in enumerate(_CANDIDATES):
        counts = [len(r) for r in csv.reader(io.StringIO(sample, newline=""), delimiter=d) if any(f.strip() for f in r)]
        if not counts:
            continue
        width, hits = Counter(counts).most_common(1)[0]
        if width < 2:
            continue
        key = (hits / len(counts), -preference)
        if key > best_key:
            best, best_key = d, key
    return best


def detect_decimal(records: list[list[str]]) -> str | None:
    comma = point = 0
    for rec in records:
        for f in rec:
            t = f.strip()
            if _COMMA_ONLY.fullmatch(t) and not re.fullmatch(r"\d{1,3}(,\d{3})+", t):
                comma += 1
            elif _POINT_ONLY.fullmatch(t) and not re.fullmatch(r"\d{1,3}(\.\d{3})+", t):
                point += 1
    if comma and not point:
        return ","
    if point and not comma:
        return "."
    return None


def read_records(text: str, delimiter: str, name: str, first_line: int = 1) -> list[list[str]]:
    """The records of delimited text; a line wider than MAX_FIELDS or broken quoting → NotAWorkbookError.

    `first_line` is the file line the text starts on (2 after a sep= line), for the messages. Records
    are taken in batches whose widest is checked at C speed, so a too-wide line is refused before many
    more are read."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    rows: list[list[str]] = []
    try:
        while batch := list(islice(reader, _BATCH)):
            if max(map(len, batch)) > MAX_FIELDS:
                at = len(rows) + next(k for k, r in enumerate(batch) if len(r) > MAX_FIELDS)
                raise NotAWorkbookError(
                    f'"{name}" line {_line_of(text, delimiter, at) + first_line - 1:,} holds '
                    f'{len(batch[at - len(rows)]):,} fields, more than the {MAX_FIELDS:,} columns a sheet can '
                    f'hold; check that line and the delimiter ({_NAMES.get(delimiter, delimiter)}), or set it '
                    f'with --csv-delimiter')
            rows += batch
    except csv.Error as exc:
        raise NotAWorkbookError(f'"{name}" is not readable as CSV (line {reader.line_num + first_line - 1:,}: '
                                f'{exc}); check the quotes or set the delimiter') from None
    return rows


def _line_of(text: str, delimiter: str, index: int) -> int:
    """The line (from 1) where record `index` (from 0) of the text starts."""
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter)
    for _ in islice(reader, index):
        pass
    return reader.line_num + 1


class CsvBook(Book):
    """A delimited text file as a one-sheet book named after the file."""

    file_format = "csv"

    def __init__(self, path: Path, delimiter: str | None = None, decimal: str | None = None):
        self.path = Path(path)
        text, self._warnings = decode(self.path.read_bytes(), self.path.name)
        hint = _SEP_HINT.match(text)
        if hint:
            text = text[hint.end():]
        sample = text[:_SAMPLE]
        if len(text) > _SAMPLE and "\n" in sample:
            sample = sample[: sample.rfind("\n") + 1]
        chosen_delimiter = _delimiter_option(delimiter)
        self.delimiter = chosen_delimiter or (hint.group(1) if hint else detect_delimiter(sample))
        top = 2 if hint else 1
        rows = read_records(text, self.delimiter, self.path.name, top)
        del text
        chosen = _decimal_option(decimal)
        self.decimal = chosen or detect_decimal(rows[1:201])
        how = "set" if chosen else ("detected" if self.decimal else "not fixed: point first, then comma")
        source = "set" if chosen_delimiter else ("from the sep= line" if hint else "detected")
        self.reader = (f"Python csv module, delimiter {_NAMES.get(self.delimiter, self.delimiter)!s} "
                       f"({source}), decimal mark {self.decimal or '. or ,'} ({how})")
        self._grid = Grid(self.path.stem, rows, top=top, left=0)     # ragged: rows keep their own length

    def sheet_names(self) -> list[str]:
        return [self.path.stem]

    def grid(self, sheet: str) -> Grid:
        """The one sheet; handed over once so its rows can be freed after reading."""
        grid, self._grid = self._grid, None
        if grid is None:
            raise RuntimeError("a CSV book is read once")
        return grid

    def warnings(self) -> list[str]:
        return list(self._warnings)
