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
* Anything else (including "nan", "inf", "1_000", "01/02/2024") is not a number, and so is any text
  longer than MAX_NUMBER_TEXT (100) characters once the spaces around it are stripped.

Every pattern applied to cell text runs in time linear in the text's length: no two neighbouring
quantifiers can match the same characters, so a failed match never retries the ways of splitting a
run of spaces or digits between them (a cell of "1", 1,600 spaces and "2" once took 50 s); the
signs, currency and percent around a number are taken off by plain string steps (`_affixes`).

Group labels are text as written: a number stored as text keeps its digits (no round trip through
a float, so IDs such as "9007199254740993" and "9007199254740992" stay two groups) and only loses
a "+" sign, trailing zeros of its decimal part and the spaces around it, so "101", " 101 " and
"101.0" are the label "101" as the number cell 101 is. A number cell's label is the shortest text
that reads back as the same number, whole numbers without ".0" or exponent (below 1e21).
Labels are put in Unicode normal form NFC, so one name typed with composed and with decomposed
accents is one group (`group_labels_and_forms` says which labels were written both ways).
"""

from __future__ import annotations

import datetime as dt
import math
import re
import unicodedata
from decimal import Decimal
from functools import lru_cache

import numpy as np

ERROR_CODES = frozenset({"#N/A", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#NULL!",
                         "#GETTING_DATA", "#SPILL!", "#CALC!", "#FIELD!", "#BLOCKED!", "#BUSY!",
                         "#CONNECT!", "#UNKNOWN!"})
EMPTY = "empty cell"
NO_RESULT_REASON = "formula without a saved result"
BLANK_LABEL = "(blank)"
EPOCH = dt.datetime(1899, 12, 30)          # spreadsheet day 0; only differences matter here
EPOCH_ORDINAL = EPOCH.toordinal()


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
MAX_NUMBER_TEXT = 100                          # longer text (stripped) is never a number
_THOU_DOT = r"[,'\u2019 \u00a0\u202f\u2009]"   # thousands marks allowed with a decimal point
_THOU_COMMA = r"[. \u00a0\u202f\u2009]"        # thousands marks allowed with a decimal comma
# Linear: `int` and `grp` are each tried once from the start; every run of digits ends at a required
# literal (a thousands mark, ".", ",", "e"), so no run can be split between two quantifiers.
_POINT = re.compile(rf"(?:(?P<int>\d+)|(?P<grp>[1-9]\d{{0,2}}(?P<s>{_THOU_DOT})\d{{3}}(?:(?P=s)\d{{3}})*))?"
                    r"(?:\.(?P<frac>\d*))?(?P<exp>[eE][+-]?\d+)?", re.ASCII)
_COMMA = re.compile(rf"(?:(?P<int>\d+)|(?P<grp>[1-9]\d{{0,2}}(?P<s>{_THOU_COMMA})\d{{3}}(?:(?P=s)\d{{3}})*))?"
                    r"(?:,(?P<frac>\d*))?(?P<exp>)", re.ASCII)
_SPACES = " \u00a0"                           # spaces allowed between a sign, a currency sign and the number
_SIGNS = "+-"
_CURRENCY = "$€£¥"
_ISO_DATE = re.compile(r"\d{4}-\d{2}-\d{2}(?:[ T]\d{2}:\d{2}(?::\d{2}(?:\.\d{1,6})?)?)?", re.ASCII)
# Linear: the digits before the point and after it are separated by a required "." (the old
# `\d+\.?\d*` let two runs share the same digits and took quadratic time on "1111…x").
PLAIN_NUMBER = re.compile(r"\s*[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?\s*", re.ASCII)
PLAIN_COMMA = re.compile(r"[+-]?\d+(?:,\d+)?", re.ASCII)
_LABEL_NUMBER = re.compile(r"[+-]?(?:0|[1-9]\d*)(?:\.\d+)?", re.ASCII)
_EXACT_DIGITS = 15                             # decimal digits every float keeps exactly


def _strip(text: str) -> str:
    """Text without surrounding whitespace of any kind (incl. non-breaking and zero-width spaces)."""
    return text.strip().strip(_ZERO_WIDTH).strip()


def shown(text: str, limit: int = 40) -> str:
    """Text safe to quote in a one-line message: control characters replaced, long text cut."""
    t = str(text).strip()
    head = "".join(ch if ch.isprintable() else " " for ch in t[: limit + 1]).strip()   # only what is shown
    return head if len(t) <= limit else head[: limit - 1] + "…"


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


def parse_text(text: str, decimal: str | None = None) -> tuple[float, str | None, bool]:
    """(value, problem, is_date) for text; problem is None when the text is a number or date."""
    t = _strip(text)
    if len(t) > MAX_NUMBER_TEXT:     # not cached: long text would keep its memory alive in the cache
        return math.nan, f'text "{shown(t, 30)}" ({len(t):,} characters) is not a number', False
    return _parse_short(t, decimal)


@lru_cache(maxsize=65536)
def _parse_short(t: str, decimal: str | None) -> tuple[float, str | None, bool]:
    """parse_text for stripped text of at most MAX_NUMBER_TEXT characters."""
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


def _affixes(t: str) -> tuple[str, str, str, str, str, str]:
    """(sign, currency, sign, body, currency, percent) around a number, each '' when absent.

    The same split as the pattern `([+-]?) *([$€£¥]?) *([+-]?) *(.*?) *([$€£¥]?) *(%?)` matched
    whole (spaces: ' ' or no-break), taken by index steps so it is linear in the text's length.
    """
    n, i = len(t), 0

    def take(chars: str) -> str:
        nonlocal i
        if i < n and t[i] in chars:
            i += 1
            return t[i - 1]
        return ""

    def skip() -> None:
        nonlocal i
        while i < n and t[i] in _SPACES:
            i += 1

    s1 = take(_SIGNS)
    skip()
    c1 = take(_CURRENCY)
    skip()
    s2 = take(_SIGNS)
    skip()
    j = n
    pct = "%" if j > i and t[j - 1] == "%" else ""
    j -= len(pct)
    while j > i and t[j - 1] in _SPACES:
        j -= 1
    c2 = t[j - 1] if j > i and t[j - 1] in _CURRENCY else ""
    j -= len(c2)
    while j > i and t[j - 1] in _SPACES:
        j -= 1
    return s1, c1, s2, t[i:j], c2, pct


def _number(t: str, decimal: str | None) -> float | None:
    negative = False
    if t.startswith("(") and t.endswith(")"):
        negative, t = True, _strip(t[1:-1])
    s1, c1, s2, body, c2, pct = _affixes(t)
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


def day_fraction(t: dt.datetime | dt.time) -> float:
    """The time of day as a fraction of a day."""
    return (t.hour * 3600 + t.minute * 60 + t.second + t.microsecond / 1e6) / 86400.0


def datetime_days(stamp: dt.datetime) -> float:
    """Days since the spreadsheet epoch, with the time of day as a fraction."""
    return float(stamp.toordinal() - EPOCH_ORDINAL) + day_fraction(stamp)


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
        return float(v.toordinal() - EPOCH_ORDINAL), None, True
    if isinstance(v, dt.time):
        return day_fraction(v), None, True
    if isinstance(v, dt.timedelta):
        return v.total_seconds() / 86400.0, None, False
    if isinstance(v, ErrorCell):
        return math.nan, f"error value {v.code}", False
    if v is NO_RESULT:
        return math.nan, NO_RESULT_REASON, False
    if v is None:
        return math.nan, EMPTY, False
    return math.nan, f"unsupported value {shown(repr(v))}", False


def number_label(value: float) -> str:
    """Label of a number: the shortest text that reads back as the same float; whole numbers below 1e21
    without ".0" or exponent (101.0 → "101", 1.2345678901234568e16 → "12345678901234568")."""
    value = float(value)
    if value == 0:
        return "0"
    text = repr(value)
    if text.endswith(".0"):
        return text[:-2]
    if "e" in text and math.isfinite(value) and value == int(value) and abs(value) < 1e21:
        return format(Decimal(text), "f")
    return text


def _text_number_label(t: str) -> str:
    """Label of text shaped like a plain decimal number (`_LABEL_NUMBER`), as written.

    Up to 15 significant digits (which a float keeps exactly) it is the label of the same number in a
    number cell, as before; longer digit strings stay as written, without a "+" sign and trailing zeros
    of the decimal part, so IDs that one float cannot tell apart stay apart.
    """
    whole, _, frac = t.lstrip("+-").partition(".")
    if len((whole + frac).strip("0")) <= _EXACT_DIGITS:
        return number_label(float(t))
    frac = frac.rstrip("0")
    return ("-" if t.startswith("-") else "") + whole + ("." + frac if frac else "")


def label(v: object) -> str:
    """Text label of one group cell; numbers and text that look alike give the same label."""
    if isinstance(v, str):
        t = _strip(v)
        if not t:
            return BLANK_LABEL
        if _LABEL_NUMBER.fullmatch(t):
            return _text_number_label(t)
        return t
    if isinstance(v, bool):
        return "TRUE" if v else "FALSE"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return number_label(v) if math.isfinite(v) else str(v)
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


def key_label(v: object) -> str:
    """The group label one cell gets when read (`label` in Unicode form NFC), for matching new rows to groups."""
    text = label(v)
    return text if text.isascii() else unicodedata.normalize("NFC", text)


def group_labels(cells: list) -> np.ndarray:
    """Labels for a whole column (object array of str), computed once per distinct value."""
    return group_labels_and_forms(cells)[0]


def group_labels_and_forms(cells: list) -> tuple[np.ndarray, dict[str, set[str]]]:
    """Labels for a whole column (in NFC), and for each label that is not plain ASCII the forms it was
    written in (more than one: the same name typed with composed and with decomposed accents)."""
    import pandas as pd

    n = len(cells)
    if n == 0:
        return np.empty(0, dtype=object), {}
    obj = np.array(cells, dtype=object) if not isinstance(cells, np.ndarray) else cells.copy()
    is_bool = np.fromiter(map(bool.__instancecheck__, obj), dtype=bool, count=n)
    if is_bool.any():              # True == 1 in Python: label booleans before hashing
        obj[is_bool] = ["TRUE" if b else "FALSE" for b in obj[is_bool]]
    codes, uniques = pd.factorize(obj)
    written = [label(u) for u in uniques]
    forms: dict[str, set[str]] = {}
    for i, text in enumerate(written):
        if not text.isascii():
            written[i] = unicodedata.normalize("NFC", text)
            forms.setdefault(written[i], set()).add(text)
    labels = np.array(written + [BLANK_LABEL], dtype=object)
    return labels[codes], forms


def header_name(v: object) -> str:
    """Header text of one cell; '' when the cell is empty."""
    name = label(v)
    return "" if name == BLANK_LABEL and not (isinstance(v, str) and _strip(v) == BLANK_LABEL) else name


def is_blank(v: object) -> bool:
    """True for an empty cell or one holding only spaces."""
    return v is None or (isinstance(v, str) and not _strip(v))


def category_labels(cells: list) -> tuple[np.ndarray, np.ndarray]:
    """A category column's level per cell (the group-label rules: 2, 2.0 and "2" are one level) and which
    cells are blank (their level is '')."""
    labels = group_labels(list(cells)).astype(object)
    blank = np.array([is_blank(v) or (isinstance(v, float) and v != v) for v in cells], dtype=bool)
    labels[blank] = ""
    return labels, blank
