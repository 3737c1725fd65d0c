"""How the demo's results workbook reads and prints: widths, wrapping, hidden helper sheets, print
settings, the `attention` sheet. Oracle: the workbook's own XML and openpyxl's reading of it."""

from __future__ import annotations

import re
import zipfile
from pathlib import Path

import openpyxl
import pytest

from sheetfit import demo
from sheetfit.report.attention import failed_checks, group_target
from sheetfit.report.book import header_text
from sheetfit.report.columns import shown_width
from sheetfit.report.tables import wrapped_lines
from sheetfit.results.headers import FLAGS, REASONS, STATUS

HELPER_SHEETS = ("chart data", "explorer data", "model store")
TABLES = ("groups", "coefficients", "checks", "observations")


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    _, results, out = demo.run_demo(folder)
    return results, out


@pytest.fixture(scope="module")
def book(demo_run):
    return openpyxl.load_workbook(demo_run[1])


def _sheet_xml(path: Path, name: str) -> str:
    with zipfile.ZipFile(path) as z:
        book = z.read("xl/workbook.xml").decode()
        names = re.findall(r'<sheet name="([^"]*)"', book)
        return z.read(f"xl/worksheets/sheet{names.index(name) + 1}.xml").decode()


def _columns(ws) -> dict[str, tuple[float, str]]:
    """Column letter → (width, number format), grouped column ranges expanded."""
    from openpyxl.utils import get_column_letter
    out = {}
    for dim in ws.column_dimensions.values():
        for i in range(dim.min, dim.max + 1):
            out[get_column_letter(i)] = (dim.width, dim.number_format)
    return out


def _shown(value, fmt: str) -> int:
    import numpy as np
    return shown_width(np.array([float(value)]), fmt)


def test_no_formatted_value_is_wider_than_its_column(book):
    for name in ("groups", "coefficients", "checks"):
        ws = book[name]
        cols = _columns(ws)
        widths = {k: w for k, (w, _) in cols.items()}
        for row in ws.iter_rows(min_row=2):
            for c in row:
                if isinstance(c.value, (int, float)) and not isinstance(c.value, bool):
                    fmt = cols[c.column_letter][1]
                    assert _shown(c.value, fmt) + 1 <= widths[c.column_letter], (name, c.coordinate, c.value)
        for c in ws[1]:                       # headers fit beside their filter buttons
            assert len(c.value) + 2 <= widths[c.column_letter], (name, c.value)


def test_reasons_wrap_and_their_rows_grow(book):
    ws = book["groups"]
    col = [c.value for c in ws[1]].index(REASONS) + 1
    letter = ws.cell(1, col).column_letter
    assert 40 <= ws.column_dimensions[letter].width <= 62
    long_rows = [c for c in ws.iter_cols(min_col=col, max_col=col, min_row=2).__next__() if c.value
                 and len(c.value) > 80]
    assert long_rows
    for c in long_rows:
        assert c.alignment.wrap_text
        assert ws.row_dimensions[c.row].height >= 15 * wrapped_lines(c.value, 60) - 1
    notes = book["checks"]
    col = [c.value for c in notes[1]].index("note") + 1
    assert notes.cell(2, col).alignment.wrap_text or notes.column_dimensions[
        notes.cell(1, col).column_letter].width <= 61


def test_neighbour_columns_share_a_number_format(book):
    ws = book["coefficients"]
    cols = _columns(ws)
    fmt = {c.value: cols[c.column_letter][1] for c in ws[1]}
    assert fmt["interval low"] == fmt["interval high"]
    for h, f in fmt.items():
        if "std error" in h:
            assert f == fmt["std error"], h
        if "p-value" in h:
            assert f == fmt["p-value"], h
        assert f != "General" or h in ("Site", "input"), h


def test_helper_sheets_are_hidden_and_never_first(book):
    for name in HELPER_SHEETS:
        assert book[name].sheet_state == "hidden"
    assert book.sheetnames[0] == "attention"
    assert book.active.title == "attention"
    assert book.active.sheet_state == "visible"


def test_readme_lists_every_sheet(book):
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    for name in book.sheetnames:
        assert f"| `{name}` |" in readme, name


def test_print_settings_are_in_the_sheet_xml(demo_run):
    path = demo_run[1]
    for name in TABLES:
        xml = _sheet_xml(path, name)
        assert 'orientation="landscape"' in xml, name
        assert "<oddHeader>&amp;L&amp;A&amp;R" in xml, name
        assert "cold-storage-sites.xlsx" in xml
    assert 'fitToHeight="0"' in _sheet_xml(path, "groups")
    with zipfile.ZipFile(path) as z:
        book = z.read("xl/workbook.xml").decode()
    assert "_xlnm.Print_Titles" in book and "groups!$1:$1" in book


def test_header_text_is_never_a_code():
    assert header_text("R&D &A &P &G &[Picture].xlsx") == "R&&D &&A &&P &&G &&[Picture].xlsx"
    assert len(header_text("x" * 500)) <= 120


def test_attention_counts_match_groups(demo_run, book):
    results, _ = demo_run
    ws = book["attention"]
    rows = {r[0].value: r for r in ws.iter_rows() if r[0].value}
    g = results.groups
    assert rows["fitted"][1].value == int((g[STATUS] == "fitted").sum())
    assert rows["flagged: at least one check failed"][1].value == int((g[FLAGS] > 0).sum())
    not_fitted = [k for k in rows if str(k).startswith("not fitted")][0]
    assert rows[not_fitted][1].value == int((g[STATUS] == "not fitted").sum())
    checks = results.checks
    for name, where in failed_checks(results):
        assert rows[name][1].value == checks[(checks["check"] == name) & (checks["verdict"] == "fail")].shape[0]
        assert len(where) == rows[name][1].value


def test_attention_links_point_at_the_groups_rows(demo_run, book):
    ws, groups = book["attention"], book["groups"]
    links = [c for row in ws.iter_rows() for c in row[2:] if c.hyperlink is not None]
    assert links
    for c in links:
        target = c.hyperlink.location
        sheet, cell = target.rsplit("!", 1)
        assert sheet == "'groups'"
        assert groups[cell].value == c.value


def test_group_target_quotes_and_continues():
    assert group_target(0) == "internal:'groups'!A2"
    assert group_target(1_048_575) == "internal:'groups (2)'!A2"


def test_empty_text_results_are_stored_as_text(demo_run):
    """A formula whose result is empty text keeps a text-typed cached value (`t="str"`), so a program
    reading stored values never sees 0 (xlsxwriter stores a plain "" untyped)."""
    for name in ("explorer", "live prediction"):
        cells = re.findall(r"<c [^>]*><f>[^<]*</f><v></v>", _sheet_xml(demo_run[1], name))
        assert cells, name
        assert all('t="str"' in c for c in cells), name


def test_explorer_row_headers_sit_over_their_numbers(book):
    ws = book["explorer"]
    heads = [c for row in ws.iter_rows() for c in row
             if c.font is not None and c.font.b and c.alignment.horizontal == "right"]
    assert len(heads) >= 4


def test_groups_say_their_order(book, demo_run):
    from sheetfit.report.tables import GROUP_ORDER
    assert book["groups"]["A1"].comment.text == GROUP_ORDER
    labels = [r[0].value for r in book["groups"].iter_rows(min_row=2)]
    first_seen = list(dict.fromkeys(demo_run[1].parent.joinpath("cold-storage-sites.xlsx").exists() and
                                    demo_run[0].observations.iloc[:, 0].tolist()))
    assert labels == first_seen
