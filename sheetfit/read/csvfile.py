""".csv and other delimited text: Python's csv module, with the delimiter and the decimal mark detected
from a sample of the file unless the job sets them.

Delimiter: among tab ; | and , the one that splits the sampled records into the same number
(at least 2) of fields most often; ties go to tab, then ; then | then ,.
Decimal mark: "," when sampled fields such as "12,5" can only be read with a decimal comma and
none such as "12.5" can only be read with a decimal point; "." in the opposite case; otherwise
not fixed, so each text follows the two-rule order of `sheetfit.read.cells`.
The source row of a record is its position in the file counting from 1, as a spreadsheet shows it.
"""

from __future__ import annotations

import csv
import io
import re
from collections import Counter
from pathlib import Path

from ..errors import JobError, NotAWorkbookError
from .book import Book
from .grid import Grid

_CANDIDATES = ("\t", ";", "|", ",")
_NAMES = {"\t": "tab", ";": ";", "|": "|", ",": ","}
_COMMA_ONLY = re.compile(r"[+-]?(?:\d{1,3}(?:\.\d{3})+|\d+),\d+", re.ASCII)
_POINT_ONLY = re.compile(r"[+-]?\d*\.\d+", re.ASCII)
_SAMPLE = 1 << 16


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


def decode(raw: bytes, name: str) -> tuple[str, str | None]:
    """Text of the file and a warning when it was not UTF-8."""
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        return raw.decode("utf-16"), None
    try:
        return raw.decode("utf-8-sig"), None
    except UnicodeDecodeError:
        return raw.decode("cp1252", errors="replace"), (f'"{name}" is not UTF-8 text; it was read as '
                                                        f'Windows-1252 (Western European)')


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


class CsvBook(Book):
    """A delimited text file as a one-sheet book named after the file."""

    file_format = "csv"

    def __init__(self, path: Path, delimiter: str | None = None, decimal: str | None = None):
        self.path = Path(path)
        text, warning = decode(self.path.read_bytes(), self.path.name)
        self._warnings = [warning] if warning else []
        sample = text[:_SAMPLE]
        if len(text) > _SAMPLE and "\n" in sample:
            sample = sample[: sample.rfind("\n") + 1]
        self.delimiter = _delimiter_option(delimiter) or detect_delimiter(sample)
        try:
            rows = list(csv.reader(io.StringIO(text, newline=""), delimiter=self.delimiter))
            del text
        except csv.Error as exc:
            raise NotAWorkbookError(f'"{self.path.name}" is not readable as CSV ({exc}); check the quotes or '
                                    f'set the delimiter') from None
        chosen = _decimal_option(decimal)
        self.decimal = chosen or detect_decimal(rows[1:201])
        how = "set" if chosen else ("detected" if self.decimal else "not fixed: point first, then comma")
        self.reader = (f"Python csv module, delimiter {_NAMES.get(self.delimiter, self.delimiter)!s} "
                       f"({'set' if delimiter else 'detected'}), decimal mark "
                       f"{self.decimal or '. or ,'} ({how})")
        self._grid = Grid(self.path.stem, rows, top=1, left=0, rectangular=len(set(map(len, rows))) <= 1)
        self._grid.square()

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
