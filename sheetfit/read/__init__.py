"""Read: a workbook or CSV file → tidy observations, each with its source row and a reason when it cannot be used.

Other stages use this package through the names below and the modules `tidy` (the data handed on),
`frame` (observations from an in-memory table), `cells` (one cell → number or reason) and
`observations` (read_observations).

Modules, in the order a file passes through them (each imports only modules listed before it):
* `file_errors`  one-line messages for unreadable files (damaged, encrypted), shared by all below.
* `safety`       check_path and sniff: the file's format from its bytes; zip-bomb, DOCTYPE and
                 encryption checks before any reader opens it.
* `grid`         Grid (one sheet's cells), Region (a table or defined name), A1 reference parsing.
* `cells`        one cell value → number, date or the reason it is neither; group labels, headers.
* `columns`      a whole column of cells → numbers and reasons in bulk, by the rules of `cells`.
* `book`         Book, the interface every format reader implements.
* `calamine`     what the python-calamine readers share: opening, error wrapping, SheetMarks → Grid.
* `xlsxscan`     the .xlsx sheet-XML scan for error cells, formulas without results, hidden rows/columns.
* `xlsx`, `ods`, `xls`, `csvfile`   one reader (Book subclass) per format.
* `formats`      open_book: the reader for a sniffed format (the only module importing the readers).
* `headers`      which row holds the column names, and where each name sits.
* `tidy`         Observations and ReadInfo, what reading hands on.
* `observations` read_observations: job → Observations (sheets, header, parsing, reasons, checks).
* `frame`        observations_from_frame: the same from an in-memory table.
"""

from __future__ import annotations

from .formats import open_book
from .safety import check_path, sniff

__all__ = ["check_path", "open_book", "sniff"]
