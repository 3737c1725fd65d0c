"""`open_book`: the reader (`Book` subclass) for each format that `sheetfit.read.safety.sniff` names.

This is the only module that knows every format module; they never import it back. The format
modules are imported on first use so that importing `sheetfit.read` stays cheap.
"""

from __future__ import annotations

from pathlib import Path

from .book import Book


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
