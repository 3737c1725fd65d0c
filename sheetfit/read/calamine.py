"""What the python-calamine readers (.xlsx/.xlsm and .ods) share: opening the file, reading one
sheet's values, turning calamine's errors into one-line messages, and adding what calamine leaves
out (`SheetMarks`: error cells, formulas without results, hidden rows/columns) to the grid.

calamine gives '' for error cells and for formulas without a saved result and says nothing of
hidden rows and columns; each format module finds those in the file's XML and hands them here.
"""

from __future__ import annotations

import zipfile
from dataclasses import dataclass, field
from pathlib import Path

from ..errors import NotAWorkbookError
from .book import Book
from .cells import NO_RESULT, ErrorCell
from .file_errors import damaged_error, encrypted_error, short_text
from .grid import Grid


@dataclass
class SheetMarks:
    """What the XML says beyond calamine's values (1-based rows, 0-based columns)."""

    errors: dict[tuple[int, int], str] = field(default_factory=dict)
    no_result: list[tuple[int, int]] = field(default_factory=list)
    hidden_rows: set[int] = field(default_factory=set)
    hidden_cols: set[int] = field(default_factory=set)
    repeated_row: int | None = None       # a row number two rows of the sheet XML claim (.xlsx)


def calamine_call(fn, name: str):
    """Run a calamine call; its errors become one-line NotAWorkbookError messages."""
    import python_calamine as pc

    try:
        return fn()
    except pc.PasswordError:
        raise encrypted_error(name) from None
    except (pc.ZipError, pc.XmlError) as exc:
        raise damaged_error(name, short_text(exc)) from None
    except pc.WorksheetNotFound:
        raise
    except pc.CalamineError as exc:
        raise NotAWorkbookError(f'"{name}" cannot be read ({short_text(exc)}); save it again as .xlsx') from None


class CalamineZipBook(Book):
    """A zipped workbook (.xlsx, .ods) whose values python-calamine reads and whose XML sheetfit scans."""

    def __init__(self, path: Path):
        import python_calamine as pc

        self.path = Path(path)
        self._pc = pc
        self._wb = calamine_call(lambda: pc.CalamineWorkbook.from_path(str(self.path)), self.path.name)
        self._zip = zipfile.ZipFile(self.path)

    def calamine_sheet(self, sheet: str):
        """(calamine sheet object, its rows as Python values, its (row, col) start, 0-based) of one sheet."""
        ws = calamine_call(lambda: self._wb.get_sheet_by_name(sheet), self.path.name)
        rows = calamine_call(ws.to_python, self.path.name)
        return ws, rows, ws.start or (0, 0)

    def close(self) -> None:
        self._zip.close()
        try:
            self._wb.close()
        except Exception:
            pass


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
