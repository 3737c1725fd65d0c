"""The cell grid every reader returns, the rectangle a table or defined name names, and A1 references.

Conventions used across `sheetfit.read`: rows are 1-based (as a spreadsheet shows them), columns
are 0-based (column A is 0). Turning a column index back into letters is left to
`xlsxwriter.utility.xl_col_to_name`; this module only reads references ("B2", "$B$2:$D$10", "A:D").
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field


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


def pad_rows(rows: list[list], width: int) -> None:
    """Give each row shorter than `width` empty cells up to it; longer rows stay as they are."""
    for r in rows:
        if len(r) < width:
            r.extend([""] * (width - len(r)))


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


def column_index(letters: str) -> int:
    """Spreadsheet column letters → 0-based column index (A → 0, AA → 26); any letter case."""
    col = 0
    for ch in letters.upper():
        col = col * 26 + ord(ch) - 64
    return col - 1


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
        col = column_index(m.group(1)) if m.group(1) else None
        bounds.append((int(m.group(2)) if m.group(2) else None, col))
    (r1, c1), (r2, c2) = bounds[0], bounds[-1]
    top, bottom = (r1 or 1), (r2 or (1_048_576 if r1 is None else r1))
    left, right = (c1 if c1 is not None else 0), (c2 if c2 is not None else (16_383 if c1 is None else c1))
    return min(top, bottom), min(left, right), max(top, bottom), max(left, right)
