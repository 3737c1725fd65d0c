"""`Book`: the interface every per-format reader implements (one open input file → sheets as `Grid`s).

A reader lists its sheets, hands over one sheet at a time as a `Grid`, optionally resolves a table
or defined name to a `Region`, and reports warnings about what it read. `sheetfit.read.formats`
picks the reader; `sheetfit.read.observations` uses only this interface.
"""

from __future__ import annotations

from ..errors import TableNotFoundError
from .grid import Grid, Region


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
        raise TableNotFoundError(f'table or defined name "{name}" not found: {self.file_format} files are read '
                                 f'sheet by sheet; use --sheet (and --header-row), or save as .xlsx')

    def region_names(self) -> list[str]:
        return []

    def warnings(self) -> list[str]:
        return []

    def close(self) -> None:
        pass
