"""One cell value → number or reason (sheetfit/cells.py).

Oracles: Python's own number formatting (`format(x, ',.2f')` writes thousands separators the way
the point rule reads them), `float()` for plain decimal text, and the reading rules stated in the
module docstring (each rule has a row in the tables below).
"""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from sheetfit.read.cells import (
    BLANK_LABEL,
    NO_RESULT,
    ErrorCell,
    cell_number,
    group_labels,
    header_name,
    label,
    parse_text,
)
from sheetfit.read.columns import parse_column

# (text, value with no decimal mark set) — one row per rule in the cells.py docstring
AUTO = [
    ("12", 12.0), (" 1,234.5 ", 1234.5), ("1,234", 1234.0), ("1,234,567", 1234567.0), ("1 234.5", 1234.5),
    ("1'234.5", 1234.5), ("1.234,5", 1234.5), ("12,5", 12.5), ("0,123", 0.123), ("1.234.567", 1234567.0),
    ("1.234", 1.234), ("12%", 0.12), ("12,5 %", 0.125), ("$1,200", 1200.0), ("1 200 €", 1200.0), ("€3,50", 3.5),
    ("£7", 7.0), ("¥1,000", 1000.0), ("-$5", -5.0), ("$-5", -5.0), ("\u22123.5", -3.5), ("(12.5)", -12.5),
    ("($12.5)", -12.5), ("\u00a042\u00a0", 42.0), ("\u202f7\u2009", 7.0), ("1.5e3", 1500.0), ("2E-3", 0.002),
    (".5", 0.5), ("5.", 5.0), ("+7", 7.0), ("true", 1.0), ("FALSE", 0.0), ("007", 7.0),
]
NOT_NUMBERS = ["abc", "1,23,4", "01/02/2024", "nan", "NaN", "inf", "-inf", "1_000", "--5", "-", ".", ",",
               "12 kg", "(-3)", "$12%", "$5€", "1,234.5.6", "1.234,5,6", "0x1F", "1e999", "12e", "١٢"]


@pytest.mark.parametrize("text,value", AUTO)
def test_text_numbers_follow_the_documented_rules(text, value):
    got, problem, is_date = parse_text(text)
    assert problem is None and not is_date
    assert got == pytest.approx(value, rel=1e-15)


@pytest.mark.parametrize("text", NOT_NUMBERS)
def test_other_text_is_not_a_number(text):
    got, problem, _ = parse_text(text)
    assert math.isnan(got)
    assert problem.startswith("text ") and problem.endswith("is not a number")


def test_decimal_mark_set_applies_only_that_rule():
    assert parse_text("1,234", ",")[0] == pytest.approx(1.234)
    assert parse_text("1.234", ",")[0] == 1234.0
    assert parse_text("1,234", ".")[0] == 1234.0
    assert parse_text("12,5", ".")[1] == 'text "12,5" is not a number with "." as decimal mark'
    assert parse_text("1.5", ",")[1] == 'text "1.5" is not a number with "," as decimal mark'


@pytest.mark.parametrize("code", ["#N/A", "#DIV/0!", "#VALUE!", "#REF!", "#NAME?", "#NUM!", "#NULL!"])
def test_error_values_as_text_and_as_cells(code):
    assert parse_text(code)[1] == f"error value {code}"
    assert cell_number(ErrorCell(code))[1] == f"error value {code}"


def test_cell_types():
    assert cell_number(True) == (1.0, None, False)
    assert cell_number(False) == (0.0, None, False)
    assert cell_number(3) == (3.0, None, False)
    assert cell_number("")[1] == "empty cell"
    assert cell_number("  \u00a0 ")[1] == "empty cell"
    assert cell_number(None)[1] == "empty cell"
    assert cell_number(NO_RESULT)[1] == "formula without a saved result"
    assert cell_number(float("inf"))[1] == "not a finite number"
    # 1900 date system: 1900-03-01 is serial day 61 in every spreadsheet application
    assert cell_number(dt.date(1900, 3, 1)) == (61.0, None, True)
    assert cell_number(dt.datetime(1900, 3, 1, 18)) == (61.75, None, True)
    assert cell_number(dt.time(6)) == (0.25, None, True)
    assert cell_number(dt.timedelta(hours=36)) == (1.5, None, False)
    assert parse_text("1900-03-01") == (61.0, None, True)
    assert parse_text("1900-03-01T12:00") == (61.5, None, True)
    assert parse_text("2024-02-30")[1] == 'text "2024-02-30" is not a valid date'


def test_messages_are_one_line_and_short():
    _, problem, _ = parse_text("line one\nline two " + "x" * 200)
    assert "\n" not in problem and len(problem) < 80


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=-1e12, max_value=1e12, allow_nan=False))
def test_python_thousands_format_reads_back(x):
    text = format(x, ",.2f")                      # Python's formatter as the oracle
    assert parse_text(text)[0] == float(format(x, ".2f"))
    euro = text.replace(",", "_").replace(".", ",").replace("_", ".")
    assert parse_text(euro)[0] == float(format(x, ".2f")) or abs(x) < 1000 and "," not in euro[:-3]
    assert parse_text(f"{format(x, '.2f')}%")[0] == pytest.approx(float(format(x, ".2f")) / 100, rel=1e-15)
    if x > 0:
        assert parse_text(f"({format(x, ',.2f')})")[0] == -float(format(x, ".2f"))


@settings(max_examples=200, deadline=None)
@given(st.floats(allow_nan=False, allow_infinity=False))
def test_plain_decimal_text_equals_float(x):
    assert parse_text(repr(x))[0] == x             # float() reads repr() back exactly


CELL = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True), st.integers(-10**6, 10**6), st.booleans(), st.none(),
    st.text(max_size=12), st.sampled_from(["1,5", "1.234,5", "12%", "#N/A", " 3 ", "", "abc", "2024-01-02", "1e999", "7", "-2.5e3"]),
    st.dates(min_value=dt.date(1950, 1, 1), max_value=dt.date(2100, 1, 1)), st.just(NO_RESULT),
    st.builds(ErrorCell, st.sampled_from(["#N/A", "#REF!"])))


@settings(max_examples=150, deadline=None)
@given(st.lists(CELL, min_size=0, max_size=300), st.sampled_from([None, ".", ","]))
def test_bulk_column_parse_equals_cell_by_cell(cells, decimal):
    parsed = parse_column(cells, decimal)
    for i, v in enumerate(cells):
        value, problem, _ = cell_number(v, decimal)
        assert parsed.problems[i] == problem
        assert (math.isnan(value) and math.isnan(parsed.values[i])) or parsed.values[i] == value


def test_bulk_paths_for_many_text_numbers_and_dates():
    texts = [f"{k / 7:.4f}" for k in range(500)] + ["1,5", "x", ""]
    parsed = parse_column(texts)
    assert np.array_equal(parsed.values[:500], [float(t) for t in texts[:500]])
    assert parsed.values[500] == 1.5 and parsed.problems[501] == 'text "x" is not a number'
    assert parsed.problems[502] == "empty cell"
    days = [dt.date(2024, 1, 1) + dt.timedelta(days=k) for k in range(100)] + [dt.datetime(2024, 1, 1, 6)]
    parsed = parse_column(days)
    assert parsed.has_dates
    assert parsed.values[5] - parsed.values[0] == 5.0 and parsed.values[100] - parsed.values[0] == 0.25


def test_group_labels_unify_numbers_and_text_that_look_alike():
    cells = [101, 101.0, "101", " 101 ", "0101", 102.5, "102.50", True, 1, 1.0, "", None, "  ", "North ",
             dt.date(2024, 5, 1), ErrorCell("#N/A")]
    got = list(group_labels(cells))
    assert got == ["101", "101", "101", "101", "0101", "102.5", "102.5", "TRUE", "1", "1", BLANK_LABEL,
                   BLANK_LABEL, BLANK_LABEL, "North", "2024-05-01", "#N/A"]
    assert [label(v) for v in cells] == got


def test_header_names():
    assert header_name("  Load kWh ") == "Load kWh"
    assert header_name(2024.0) == "2024"
    assert header_name(None) == "" and header_name("") == ""


@pytest.mark.parametrize("odd", ["1_000", "nan", "inf", "١٢", "1e999", " 7\x1c"])
def test_bulk_text_path_keeps_the_rules(odd):
    """A long column of plain numbers is converted in one go; odd entries still follow the text rules."""
    texts = [str(k) for k in range(100)] + [odd]
    parsed = parse_column(texts)
    assert np.array_equal(parsed.values[:100], np.arange(100.0))
    assert (parsed.values[100], parsed.problems[100]) == parse_text(odd)[:2] or (
        math.isnan(parsed.values[100]) and parsed.problems[100] == parse_text(odd)[1])
