"""A whole column of cells → float64 values and a reason per unusable cell, in bulk.

The rules are those of `sheetfit.read.cells` (one cell → number or reason); this module only makes
them fast on a million cells: float cells at C speed, plain decimal text by one linear regular
expression and one conversion, dates by one ordinal pass, other text once per distinct value. Text
longer than `cells.MAX_NUMBER_TEXT` never takes a fast path, so every path gives what
`cells.cell_number` gives for the same cell.
"""

from __future__ import annotations

import datetime as dt

import numpy as np

from .cells import (
    EMPTY,
    EPOCH_ORDINAL,
    MAX_NUMBER_TEXT,
    PLAIN_COMMA,
    PLAIN_NUMBER,
    cell_number,
    day_fraction,
    parse_text,
)


class ParsedColumn:
    """A column as float64 values, per-row problems (None when usable) and whether it held dates."""

    __slots__ = ("values", "problems", "has_dates")

    def __init__(self, values: np.ndarray, problems: np.ndarray, has_dates: bool):
        self.values, self.problems, self.has_dates = values, problems, has_dates

    @property
    def blank(self) -> np.ndarray:
        return self.problems == EMPTY


def parse_column(cells: list, decimal: str | None = None) -> ParsedColumn:
    """Parse a column in bulk: numbers and dates at C speed, text once per distinct value, the rest one by one."""
    n = len(cells)
    problems = np.full(n, None, dtype=object)
    if n == 0:
        return ParsedColumn(np.empty(0), problems, False)
    kinds = set(map(type, cells))
    if kinds == {float}:
        values = np.array(cells, dtype=np.float64)
        bad = ~np.isfinite(values)
        problems[bad] = "not a finite number"
        values[bad] = np.nan
        return ParsedColumn(values, problems, False)
    values = np.full(n, np.nan)
    obj = np.array(cells, dtype=object) if not isinstance(cells, np.ndarray) else cells
    rest = np.arange(n)
    has_dates = False

    def take(kind: type) -> np.ndarray:
        """Positions (in `rest`) of cells of `kind`, removed from `rest`."""
        nonlocal rest
        if kinds == {kind}:
            hit, rest = rest, rest[:0]
            return hit
        mask = np.fromiter(map(kind.__instancecheck__, obj[rest]), dtype=bool, count=len(rest))
        hit, rest = rest[mask], rest[~mask]
        return hit

    if float in kinds:
        at = take(float)
        values[at] = obj[at].astype(np.float64)
        bad = at[~np.isfinite(values[at])]
        problems[bad], values[bad] = "not a finite number", np.nan
    if str in kinds:
        at = take(str)
        has_dates |= _parse_texts(obj[at], at, values, problems, decimal)
    if kinds & {dt.date, dt.datetime}:
        at = take(dt.date)
        days = np.fromiter(map(dt.date.toordinal, obj[at]), dtype=np.float64, count=len(at)) - EPOCH_ORDINAL
        timed = np.fromiter(map(dt.datetime.__instancecheck__, obj[at]), dtype=bool, count=len(at))
        if timed.any():
            days[timed] += np.fromiter(map(day_fraction, obj[at[timed]]), dtype=np.float64, count=int(timed.sum()))
        values[at] = days
        has_dates = True
    for i in rest.tolist():
        value, problem, is_date = cell_number(obj[i], decimal)
        values[i] = value
        if problem is not None:
            problems[i] = problem
        elif is_date:
            has_dates = True
    return ParsedColumn(values, problems, has_dates)


def _parse_texts(texts: np.ndarray, at: np.ndarray, values: np.ndarray, problems: np.ndarray,
                 decimal: str | None) -> bool:
    """Text cells: plain decimal numbers by one regex pass and one conversion, other text once per distinct
    value. Fills `values`/`problems` at positions `at`; True when some text was a date."""
    lengths = np.fromiter(map(len, texts), dtype=np.int64, count=len(texts))
    long = lengths > MAX_NUMBER_TEXT             # never numbers (parse_text says why), kept off the fast paths
    if long.any():
        _parse_each(texts[long], at[long], values, problems, decimal)
        texts, at = texts[~long], at[~long]
    if decimal != "," and len(texts) > 64:
        joined = "".join(texts.tolist())
        if joined.isascii() and "_" not in joined:   # then numpy reads exactly the plain decimal numbers
            try:
                converted = np.array(texts.tolist(), dtype=np.float64)
            except ValueError:
                pass
            else:
                finite = np.isfinite(converted)
                values[at[finite]] = converted[finite]
                texts, at = texts[~finite], at[~finite]
    plain = PLAIN_COMMA if decimal == "," else PLAIN_NUMBER
    hit = np.fromiter(map(bool, map(plain.fullmatch, texts)), dtype=bool, count=len(texts))
    if hit.any():
        text = texts[hit]
        if decimal == ",":
            text = np.array([t.replace(",", ".") for t in text], dtype=object)
        converted = np.array(text.tolist(), dtype=np.float64)
        finite = np.isfinite(converted)            # "1e999" overflows: left to the rules below
        values[at[hit][finite]] = converted[finite]
        hit[np.flatnonzero(hit)[~finite]] = False
        texts, at = texts[~hit], at[~hit]
    return _parse_each(texts, at, values, problems, decimal)


def _parse_each(texts: np.ndarray, at: np.ndarray, values: np.ndarray, problems: np.ndarray,
                decimal: str | None) -> bool:
    """parse_text once per distinct text; fills `values`/`problems` at `at`; True when some text was a date."""
    import pandas as pd

    if len(texts) == 0:
        return False
    codes, uniques = pd.factorize(texts)
    parsed = [parse_text(u, decimal) for u in uniques]
    values[at] = np.array([p[0] for p in parsed], dtype=np.float64)[codes]
    problems[at] = np.array([p[1] for p in parsed], dtype=object)[codes]
    return any(p[2] for p in parsed)
