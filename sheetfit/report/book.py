"""The shared state of one results-workbook write: workbook, formats, sheet names, notes.

Sheet builders (core and add-on) receive a WriteContext; see `sheetfit.report.write_results`.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from .styles import Styles

if TYPE_CHECKING:
    from ..results.types import FitResults

MAX_SHEET_NAME = 31
_BAD_SHEET_CHARS = re.compile(r"[\[\]:*?/\\\x00-\x1f]")
_RESERVED = {"history"}  # Excel keeps this name for itself

WORKBOOK_OPTIONS: dict[str, Any] = {
    "strings_to_formulas": False,
    "strings_to_urls": False,
    "strings_to_numbers": False,
    "constant_memory": True,
    "nan_inf_to_errors": False,
    "use_future_functions": True,
}


class SheetNames:
    """Turns labels into valid, unique sheet names (case-insensitive), at most 31 characters."""

    def __init__(self) -> None:
        self._taken: set[str] = set()

    def add(self, label: str) -> str:
        base = _BAD_SHEET_CHARS.sub("_", str(label)).strip()
        base = base.strip("'").strip() or "sheet"
        if base.lower() in _RESERVED:
            base += "_"
        base = base[:MAX_SHEET_NAME].rstrip("'").rstrip() or "sheet"
        name, k = base, 1
        while name.lower() in self._taken:
            k += 1
            suffix = f" ({k})"
            name = base[:MAX_SHEET_NAME - len(suffix)].rstrip("'") + suffix
        self._taken.add(name.lower())
        return name


MAX_TITLE_NAME = 120   # characters of the input file name in a page header (the header holds 255)


def header_text(text: str) -> str:
    """`text` as literal page-header text: every `&` doubled, so no part of it is a header code."""
    text = str(text)
    if len(text) > MAX_TITLE_NAME:
        text = text[:MAX_TITLE_NAME - 1] + "…"
    return text.replace("&", "&&")


def print_title(ws: Any, input_name: str) -> None:
    """A printed page's header: the sheet's name (`&A`) left, the input file's name right.

    Set on the worksheet directly: xlsxwriter's `set_header` counts `&G` in the text as image
    placeholders and drops a header whose (escaped, literal) file name contains `&G` or `&[Picture]`.
    """
    ws.header = "&L&A" + ("&R" + header_text(input_name) if input_name else "")
    ws.margin_header = 0.3
    ws.header_footer_changed = True


SheetBuilder = Callable[["WriteContext"], None]


def literal_names(chart: Any) -> Any:
    """Make every text name given to `chart` (title, axis titles, series names) literal text.

    xlsxwriter reads a name that looks like `Sheet!A1` (`Sales!Q4 total`, `=cmd|' /C calc'!A0`) as a
    cell reference and has no option to say "this is text"; names built from input column names and
    labels must never become references, so string names bypass that guess. (A list
    `[sheet, row, col]` still names a cell, as documented.)
    """
    guess = chart._process_names

    def names(name: Any, name_formula: Any) -> tuple[Any, Any]:
        if isinstance(name, str):
            return name, None
        return guess(name, name_formula)

    chart._process_names = names
    return chart


@dataclass
class WriteContext:
    """What every sheet builder shares while one results workbook is written.

    Sheets appear in the order they are created. `add_sheet` creates one now;
    `reserve_data_sheet` names a data sheet that is created and filled after every builder ran,
    so data sheets sit last; `at_end` runs a callback after that (the `about` sheet uses it to
    list the notes gathered from all builders). The workbook uses constant_memory: write each
    sheet strictly row by row.
    """

    workbook: Any
    results: "FitResults"
    styles: Styles
    names: SheetNames = field(default_factory=SheetNames)
    notes: list[tuple[str, str]] = field(default_factory=list)
    sheets: dict[str, Any] = field(default_factory=dict)
    bulk: list[Any] = field(default_factory=list)    # fastrows.BulkRows spliced in after close
    _data_sheets: list[tuple[str, Callable[[Any], None], bool]] = field(default_factory=list)
    _at_end: list[Callable[[], None]] = field(default_factory=list)

    def add_sheet(self, label: str) -> Any:
        """Create a worksheet now, named from `label` (sanitised, unique)."""
        name = self.names.add(label)
        ws = self.workbook.add_worksheet(name)
        self.sheets[name] = ws
        print_title(ws, self.input_name())
        return ws

    def input_name(self) -> str:
        """The input file's name, for page headers ('' when there is none)."""
        job = getattr(self.results, "job", None)
        workbook = getattr(job, "workbook", None)
        return getattr(workbook, "name", "") or ""

    def add_chart(self, options: dict[str, Any]) -> Any:
        """A new chart whose title, axis titles and series names are always literal text (`literal_names`)."""
        chart = self.workbook.add_chart(options)
        literal_names(chart)
        return chart

    def reserve_data_sheet(self, label: str, fill: Callable[[Any], None], hidden: bool = True) -> str:
        """Name a data sheet now; it is created after all builders and `fill(worksheet)` writes it.

        Data sheets are hidden by default: charts, formulas and `sheetfit predict` read them, a
        reader need not (they stay listed under the spreadsheet's "unhide sheets")."""
        name = self.names.add(label)
        self._data_sheets.append((name, fill, hidden))
        return name

    def add_bulk(self, ws: Any, first_row: int, columns: list[tuple[int, Any, Any]]) -> None:
        """Rows from `first_row` of `ws` written in bulk after close (see fastrows.bulk_rows); write no
        other cell in those rows."""
        from .fastrows import bulk_rows
        self.bulk.append(bulk_rows(ws.name, first_row, columns))

    def at_end(self, callback: Callable[[], None]) -> None:
        self._at_end.append(callback)

    def note(self, item: str, text: str) -> None:
        """A line on `about` saying what sheet `item` holds, left out, blanked or cut."""
        self.notes.append((item, text))

    def finish(self) -> None:
        """Create and fill the reserved data sheets, then run the end callbacks."""
        for name, fill, hidden in self._data_sheets:
            ws = self.workbook.add_worksheet(name)
            self.sheets[name] = ws
            print_title(ws, self.input_name())
            fill(ws)
            if hidden:
                ws.hide()
        for callback in self._at_end:
            callback()
