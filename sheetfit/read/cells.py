"""One cell value → a number or the plain-words reason it cannot be one; group labels and headers.

Readers hand over Python values: float/int/bool/str/date/datetime/time/timedelta, '' for an
empty cell, `ErrorCell` for an error value and `NO_RESULT` for a formula with no saved result.

Numbers stored as text (rule, in this order):
* spaces (incl. non-breaking and thin ones) around the text are ignored; U+2212 "−" is a minus;
  "(12.5)" is −12.5; one currency sign ($ € £ ¥) before or after; a trailing "%" divides by 100.
* decimal point rule: "." is the decimal mark; "," space or apostrophe group thousands in
  threes ("1,234.5", "1 234", "1,234" → 1234); a plain exponent is allowed ("1.5e3").
* decimal comma rule: "," is the decimal mark; "." or space group thousands in threes
  ("1.234,5", "12,5", "0,123").
* With no decimal mark set, the point rule is tried first and the comma rule second, so
  "1,234" is 1234 and "12,5" is 12.5; with a mark set (CSV `decimal`), only that rule applies.
* ISO dates "2024-01-31" and date-times "2024-01-31 08:30" are dates; "true"/"false" are 1/0.
* Anything else (including "nan", "inf", "1_000", "01/02/2024") is not a number.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from functools import lru_cache

import numpy as np

ERROR_CODES = frozenset({"#N/A", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#NULL!",
                         "#GETTING_DATA", "#SPILL!", "#CALC!", "#FIELD!", "#BLOCKED!", "#BUSY!",
                         "#CONNECT!", "#UNKNOWN!"})
EMPTY = "empty cell"
NO_RESULT_REASON = "formula without a saved result"
BLANK_LABEL = "(blank)"
EPOCH = dt.datetime(1899, 12, 30)          # spreadsheet day 0; only differences matter here
_EPOCH_ORDINAL = EPOCH.toordinal()


class ErrorCell:
    """An error value such as #N/A, as stored in the workbook."""

    __slots__ = ("code",)

    def __init__(self, code: str):
        self.code = str(code).strip() or "#VALUE!"

    def __repr__(self) -> str:
        return f"ErrorCell({self.code!r})"

    def __eq__(self, other: object) -> bool:
        return isinstance(other, ErrorCell) and other.code == self.code

    def __hash__(self) -> int:
        return hash(("ErrorCell", self.code))


class _NoResult:
    """A formula cell whose result was never saved (the file was not recalculated)."""

    __slots__ = ()

    def __repr__(self) -> str:
        return "NO_RESULT"


NO_RESULT = _NoResult()

_ZERO_WIDTH = "\u200b\ufeff"
_THOU_DOT = r"[,'\u2019 \u00a0\u202f\u2009]"   # thousands marks allowed with a decimal point
_THOU_COMMA = r"[. \u00a0\u202f\u2009]"        # thousands marks allowed with a decimal comma
_POINT = re.compile(rf"(?:(?P<int>\d+)|(?P<grp>[1-9]\d{{0,2}}(?P<s>{_THOU_DOT})\d{{3}}(?:(?P=s)\d{{3}})*))?"
                    r"(?:\.(?P<frac>\d*))?(?P<exp>[eE][+-]?\d+)?", re.ASCII)
_COMMA = re.compile(rf"(?:(?P<int>\d+)|(?P<grp>[1-9]\d{{0,2}}(?P<s>{_THOU_COMMA})\d{{3}}(?:(?P=s)\d{{3}})*))?"
                    r"(?:,(?P<frac>\d*))?(?P<exp>)", re.ASCII)
_AFFIX = re.compile(r"(?P<s1>[+-]?)[ \u00a0]*(?P<c1>[$€£¥]?)[ \u00a0]*(?P<s2>[+-]?)[ \u00a0]*(?P<body>.*?)"
                    r"[ \u00a0]*(?P<c2>[$€£¥]?)[ \u00a0]*(?P<pct>%?)", re.DOTALL)
_ISO_DATE = re.compile(r"\d{4}-\d{2}-\d{2}(?:[ T]\d{2}:\d{2}(?::\d{2}(?:\.\d{1,6})?)?)?", re.ASCII)
PLAIN_NUMBER = re.compile(r"\s*[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?\s*", re.ASCII)
_PLAIN_COMMA = re.compile(r"[+-]?\d+(?:,\d+)?", re.ASCII)
_LABEL_NUMBER = re.compile(r"[+-]?(?:0|[1-9]\d*)(?:\.\d+)?", re.ASCII)


def _strip(text: str) -> str:
    """Text without surrounding whitespace of any kind (incl. non-breaking and zero-width spaces)."""
    return text.strip().strip(_ZERO_WIDTH).strip()


def shown(text: str, limit: int = 40) -> str:
    """Text safe to quote in a one-line message: control characters replaced, long text cut."""
    t = "".join(ch if ch.isprintable() else " " for ch in str(text)).strip()
    return t if len(t) <= limit else t[: limit - 1] + "…"


def _body(body: str, rule: re.Pattern[str]) -> float | None:
    m = rule.fullmatch(body)
    if m is None:
        return None
    whole = m.group("int") or (re.sub(r"\D", "", m.group("grp")) if m.group("grp") else "")
    frac = m.group("frac")
    if not whole and not frac:
        return None
    if m.group("exp") and m.group("grp"):
        return None
    value = float(f"{whole or '0'}.{frac or '0'}{m.group('exp') or ''}")
    return value if math.isfinite(value) else None


@lru_cache(maxsize=65536)
def parse_text(text: str, decimal: str | None = None) -> tuple[float, str | None, bool]:
    """(value, problem, is_date) for text; problem is None when the text is a number or date."""
    t = _strip(text)
    if not t:
        return math.nan, EMPTY, False
    if t.upper() in ERROR_CODES:
        return math.nan, f"error value {t.upper()}", False
    low = t.lower()
    if low in ("true", "false"):
        return (1.0 if low == "true" else 0.0), None, False
    if _ISO_DATE.fullmatch(t):
        try:
            stamp = dt.datetime.fromisoformat(t)
        except ValueError:
            return math.nan, f'text "{shown(t)}" is not a valid date', False
        return datetime_days(stamp), None, True
    value = _number(t.replace("\u2212", "-"), decimal)
    if value is None:
        if decimal and _number(t.replace("\u2212", "-"), None) is not None:
            return math.nan, f'text "{shown(t)}" is not a number with "{decimal}" as decimal mark', False
        return math.nan, f'text "{shown(t)}" is not a number', False
    return value, None, False


def _number(t: str, decimal: str | None) -> float | None:
    negative = False
    if t.startswith("(") and t.endswith(")"):
        negative, t = True, _strip(t[1:-1])
    m = _AFFIX.fullmatch(t)
    if m is None:
        return None
    s1, c1, s2, body, c2, pct = m.group("s1", "c1", "s2", "body", "c2", "pct")
    if (s1 and s2) or (c1 and c2) or (pct and (c1 or c2)) or (negative and (s1 or s2)):
        return None
    if s2 and not c1:              # "-+12" style: two signs with nothing between
        return None
    rules = {".": (_POINT,), ",": (_COMMA,)}.get(decimal or "", (_POINT, _COMMA))
    value = None
    for rule in rules:
        value = _body(body, rule)
        if value is not None:
            break
    if value is None:
        return None
    if "-" in (s1, s2) or negative:
        value = -value
    return value / 100.0 if pct else value


def _day_fraction(t: dt.datetime | dt.time) -> float:
    return (t.hour * 3600 + t.minute * 60 + t.second + t.microsecond / 1e6) / 86400.0


def datetime_days(stamp: dt.datetime) -> float:
    """Days since the spreadsheet epoch, with the time of day as a fraction."""
    return float(stamp.toordinal() - _EPOCH_ORDINAL) + _day_fraction(stamp)


def cell_number(v: object, decimal: str | None = None) -> tuple[float, str | None, bool]:
    """(value, problem, is_date) for one cell value of any reader type."""
    if isinstance(v, str):
        return parse_text(v, decimal)
    if isinstance(v, bool):
        return (1.0 if v else 0.0), None, False
    if isinstance(v, (int, float)):
        f = float(v)
        return (f, None, False) if math.isfinite(f) else (math.nan, "not a finite number", False)
    if isinstance(v, dt.datetime):
        return datetime_days(v.replace(tzinfo=None)), None, True
    if isinstance(v, dt.date):
        return float(v.toordinal() - _EPOCH_ORDINAL), None, True
    if isinstance(v, dt.time):
        return _day_fraction(v), None, True
    if isinstance(v, dt.timedelta):
        return v.total_seconds() / 86400.0, None, False
    if isinstance(v, ErrorCell):
        return math.nan, f"error value {v.code}", False
    if v is NO_RESULT:
        return math.nan, NO_RESULT_REASON, False
    if v is None:
        return math.nan, EMPTY, False
    return math.nan, f"unsupported value {shown(repr(v))}", False


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
        days = np.fromiter(map(dt.date.toordinal, obj[at]), dtype=np.float64, count=len(at)) - _EPOCH_ORDINAL
        timed = np.fromiter(map(dt.datetime.__instancecheck__, obj[at]), dtype=bool, count=len(at))
        if timed.any():
            days[timed] += np.fromiter(map(_day_fraction, obj[at[timed]]), dtype=np.float64, count=int(timed.sum()))
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
    import pandas as pd

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
    plain = _PLAIN_COMMA if decimal == "," else PLAIN_NUMBER
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
    if len(texts) == 0:
        return False
    codes, uniques = pd.factorize(texts)
    parsed = [parse_text(u, decimal) for u in uniques]
    values[at] = np.array([p[0] for p in parsed], dtype=np.float64)[codes]
    problems[at] = np.array([p[1] for p in parsed], dtype=object)[codes]
    return any(p[2] for p in parsed)


def number_label(value: float) -> str:
    """Label of a number: integral values without a decimal part, others in shortest form."""
    if math.isfinite(value) and value == int(value) and abs(value) < 1e15:
        return str(int(value))
    return repr(float(value))


def label(v: object) -> str:
    """Text label of one group cell; numbers and text that look alike give the same label."""
    if isinstance(v, str):
        t = _strip(v)
        if not t:
            return BLANK_LABEL
        if _LABEL_NUMBER.fullmatch(t):
            return number_label(float(t))
        return t
    if isinstance(v, bool):
        return "TRUE" if v else "FALSE"
    if isinstance(v, (int, float)):
        return number_label(float(v)) if math.isfinite(float(v)) else str(v)
    if isinstance(v, dt.datetime):
        return v.isoformat(sep=" ")
    if isinstance(v, (dt.date, dt.time)):
        return v.isoformat()
    if isinstance(v, ErrorCell):
        return v.code
    if v is NO_RESULT:
        return "(formula without a saved result)"
    if v is None:
        return BLANK_LABEL
    return shown(str(v), 200)


def group_labels(cells: list) -> np.ndarray:
    """Labels for a whole column (object array of str), computed once per distinct value."""
    import pandas as pd

    n = len(cells)
    if n == 0:
        return np.empty(0, dtype=object)
    obj = np.array(cells, dtype=object) if not isinstance(cells, np.ndarray) else cells.copy()
    is_bool = np.fromiter(map(bool.__instancecheck__, obj), dtype=bool, count=n)
    if is_bool.any():              # True == 1 in Python: label booleans before hashing
        obj[is_bool] = ["TRUE" if b else "FALSE" for b in obj[is_bool]]
    codes, uniques = pd.factorize(obj)
    labels = np.array([label(u) for u in uniques] + [BLANK_LABEL], dtype=object)
    return labels[codes]


def header_name(v: object) -> str:
    """Header text of one cell; '' when the cell is empty."""
    name = label(v)
    return "" if name == BLANK_LABEL and not (isinstance(v, str) and _strip(v) == BLANK_LABEL) else name


def is_blank(v: object) -> bool:
    """True for an empty cell or one holding only spaces."""
    return v is None or (isinstance(v, str) and not _strip(v))
