"""Where everything sits on the `model store` sheet: its names, header rows and column positions.

One layout for both directions: the report places the store's cells at these positions (and the
live prediction sheet's formulas point at them), and `sheetfit.results.store_read.read_store` reads them back
from the same positions. All rows and columns are 0-based.

Format 1 (every run before change points, and every run without them) ends each group row with the
observed min and max of every input. Format 2 (a change-point run) adds, after those, the group's
shape, its two change points, the response mean and the residuals' lag-1 autocorrelation; every
format-1 position stays where it was, so formulas pointing at them keep working. Format 3 adds the
setting `weights` (the weights of a weighted fit, empty otherwise) and, after the format-2 columns,
each group's weight mean, its number of flags and its sufficient statistics X'X, X'y and y'y (of
√w·X and √w·y in a weighted fit): enough to compare a later run's fit of the same group with this one.
"""

from __future__ import annotations

from dataclasses import dataclass

STORE_SHEET = "model store"
STORE_TITLE = "sheetfit model store"
STORE_FORMAT = 3                # the newest format this sheetfit writes and reads
FORMATS_READ = (1, 2, 3)
STORE_NOTE = ("The fitted models, one row per group: the live prediction sheet and `sheetfit predict` read "
              "them from here. Do not edit, sort, insert or delete cells.")
INACTIVE_NOTE = ("A group uses only the change-point terms of its shape: a term it does not use has "
                 "coefficient 0 and a row and column of 0 in (X'X)⁻¹, and an empty change point.")
SETTING_HEADER = ("setting", "value")
TERM_HEADER = "coefficient"
TERM_COLUMNS = (TERM_HEADER, "source column", "kind", "power", "second column", "level", "level code")
GROUP_HEADER = "group"
SETTING_NAMES = ("store format", "response", "intercept", "confidence level", "group columns",
                 "source columns", "date/time inputs", "fitted groups", "weights", "reference levels", "responses")
# the format-2 columns after the observed ranges, in order
SHAPE_HEADER = "shape"
BELOW_HEADER = "change point of the 'below' term"
ABOVE_HEADER = "change point of the 'above' term"
MEAN_HEADER = "response mean"
LAG1_HEADER = "residual lag-1 autocorrelation"
EXTRA_HEADERS = (SHAPE_HEADER, BELOW_HEADER, ABOVE_HEADER, MEAN_HEADER, LAG1_HEADER)
WEIGHT_MEAN_HEADER = "weight mean"     # format 3, then the group's flags and the sums
FLAGS_HEADER = "flags"
LEVELS_SEEN_HEADER = "levels seen"

TITLE_ROW = 0
NOTE_ROW = 1
INACTIVE_NOTE_ROW = 2           # format 2 only
SETTING_HEADER_ROW = 3


@dataclass(frozen=True)
class StoreLayout:
    """Rows and columns of the store sheet for k group columns, p coefficients and m inputs.

    Rows: title, note, the settings table, the terms table (one row per coefficient), then the
    group table: one row per fitted group holding its label, key values, n, residual df, residual
    variance, coefficients, (X'X)⁻¹ row by row, the observed min and max of every input and, in
    format 2 (`extras`), the columns of EXTRA_HEADERS.
    """

    k: int
    p: int
    m: int
    groups: int = 0
    extras: bool = False
    sums: bool = False             # format 3: weight mean and sufficient statistics after the extras

    @property
    def first_setting(self) -> int:
        return SETTING_HEADER_ROW + 1

    @property
    def term_header(self) -> int:
        return self.first_setting + len(SETTING_NAMES) + 1

    @property
    def group_header(self) -> int:
        return self.term_header + self.p + 2

    @property
    def first(self) -> int:
        """The first group row."""
        return self.group_header + 1

    @property
    def last(self) -> int:
        """The last group row (the first one when there is no group)."""
        return self.group_header + max(self.groups, 1)

    @property
    def width(self) -> int:
        return (1 + self.k + 3 + self.p + self.p * self.p + 2 * self.m + (len(EXTRA_HEADERS) if self.extras else 0)
                + (3 + self.p * self.p + self.p + 1 if self.sums else 0))

    def col_key(self, j: int) -> int: return 1 + j
    def col_n(self) -> int: return 1 + self.k
    def col_df(self) -> int: return 2 + self.k
    def col_s2(self) -> int: return 3 + self.k
    def col_coef(self, j: int) -> int: return 4 + self.k + j
    def col_inv(self, i: int, j: int) -> int: return 4 + self.k + self.p + i * self.p + j
    def col_min(self, j: int) -> int: return 4 + self.k + self.p + self.p * self.p + 2 * j
    def col_max(self, j: int) -> int: return self.col_min(j) + 1

    def col_extra(self, header: str) -> int:
        """The column of one of EXTRA_HEADERS (format 2 only)."""
        if not self.extras:
            raise KeyError(f"a format-1 store has no column {header!r}")
        return self.col_min(self.m) + EXTRA_HEADERS.index(header)

    def col_weight_mean(self) -> int:
        """The group's weight mean (format 3)."""
        if not self.sums:
            raise KeyError("a store before format 3 has no sufficient statistics")
        return self.col_min(self.m) + len(EXTRA_HEADERS)

    def col_flags(self) -> int: return self.col_weight_mean() + 1
    def col_levels_seen(self) -> int: return self.col_weight_mean() + 2
    def col_xtx(self, i: int, j: int) -> int: return self.col_weight_mean() + 3 + i * self.p + j
    def col_xty(self, j: int) -> int: return self.col_weight_mean() + 3 + self.p * self.p + j
    def col_yty(self) -> int: return self.col_weight_mean() + 3 + self.p * self.p + self.p

    def col_change_point(self, i: int) -> int:
        """The change point of the 'below' (i = 0) or the 'above' (i = 1) term."""
        return self.col_extra((BELOW_HEADER, ABOVE_HEADER)[i])

    def coef_columns(self) -> list[int]:
        """The columns of the coefficients, in term order."""
        return [self.col_coef(j) for j in range(self.p)]

    def inv_columns(self) -> list[int]:
        """The columns of (X'X)⁻¹, row by row."""
        return [self.col_inv(i, j) for i in range(self.p) for j in range(self.p)]
