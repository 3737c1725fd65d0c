"""The table sheets and `about`, read back with openpyxl (an independent xlsx reader) as the oracle."""

from __future__ import annotations

import dataclasses
import math
import re
import zipfile

import numpy as np
import openpyxl
import pandas as pd
import pytest
from sample_results import HOSTILE, Y

from sheetfit.report import tables as T
from sheetfit.report import write_results
from sheetfit.report.book import SheetNames
from sheetfit.report.columns import P_VALUE_FORMAT

CORE = ["attention", "groups", "coefficients", "checks", "observations", "charts", "overview", "about", "chart data"]
GROUPS = ["site", "status", "flags", "reasons", "R²", "adjusted R²", "F", "F p-value", "residual std error", "RMSE",
          "CV(RMSE) %", "rows used", "rows not used", "number of coefficients", "AIC", "BIC"]
COEFS = ["site", "input", "coefficient", "interval low", "interval high", "std error", "t", "p-value"]
CHECKS = ["site", "check", "statistic", "p-value", "adjusted p-value", "threshold", "verdict", "note"]
OBS = ["site", "source sheet", "source row", Y, "CDD", "used in fit", "reason", "row flags", "fitted value", "residual",
       "studentized residual", "leverage", "Cook's distance"]


def header(ws) -> list:
    return [c.value for c in next(ws.iter_rows(min_row=1, max_row=1))]


def data_rows(ws) -> list[tuple]:
    return [r for r in ws.iter_rows(min_row=2, values_only=True) if any(v is not None for v in r)]


@pytest.fixture
def written(make_results, tmp_path):
    res = make_results(labels=["North", "South", "East", "West", *HOSTILE], not_fitted=["East"],
                       perfect=["West"])
    (tmp_path / "out").mkdir()
    path = write_results(res, tmp_path / "out" / "results.xlsx")
    return res, path, openpyxl.load_workbook(path)


def test_sheets_in_contract_order(written):
    _, _, wb = written
    assert wb.sheetnames[:8] == CORE[:8]
    assert "chart data" in wb.sheetnames[7:]       # add-on sheets may sit between about and the data


def test_headers_are_the_contract_words_and_extras_follow(written):
    _, _, wb = written
    assert header(wb["groups"]) == GROUPS + ["influential rows"]   # extra column after the contract ones
    assert header(wb["coefficients"]) == COEFS
    assert header(wb["checks"]) == CHECKS
    assert header(wb["observations"]) == OBS


def test_row_counts_match_the_tables(written):
    res, _, wb = written
    for name, df in (("groups", res.groups), ("coefficients", res.coefficients), ("checks", res.checks),
                     ("observations", res.observations)):
        assert len(data_rows(wb[name])) == len(df), name


def test_values_keep_full_precision(written):
    res, _, wb = written
    got = [r[GROUPS.index("R²")] for r in data_rows(wb["groups"])]
    want = res.groups["R²"].tolist()
    # xlsxwriter stores 16 significant digits (a spreadsheet computes with 15): the display format
    # rounds only what is shown, never the stored value
    for g, w in zip(got, want):
        assert (g is None and math.isnan(w)) or g == pytest.approx(w, rel=1e-15, abs=0)


def test_hostile_labels_are_text_on_every_sheet(written):
    _, path, wb = written
    for name in ("groups", "coefficients", "checks", "observations", "chart data"):
        found = {c.value: c.data_type for row in wb[name].iter_rows() for c in row if c.value in HOSTILE}
        assert set(found) == set(HOSTILE), name
        assert set(found.values()) == {"s"}, name
    # no formula on the core sheets (add-on sheets such as the explorer hold live formulas of their
    # own) and no hyperlink anywhere in the file
    assert not [c for name in CORE for row in wb[name].iter_rows() for c in row if c.data_type == "f"]
    with zipfile.ZipFile(path) as z:
        xml = [z.read(n).decode() for n in z.namelist() if n.startswith("xl/worksheets/")]
    # the only links are the attention sheet's internal links to rows on groups, never input text
    links = [h for x in xml for h in re.findall(r"<hyperlink [^>]*>", x)]
    assert all("location=\"'groups'!A" in h and "r:id" not in h for h in links), links
    assert not any("relationships/hyperlink" in x for x in xml)


def test_non_finite_numbers_become_empty_cells_with_a_note(written):
    res, _, wb = written
    rows = {r[0]: r for r in data_rows(wb["groups"])}
    assert rows["West"][GROUPS.index("F")] is None                  # F = inf for a perfect fit
    assert rows["East"][GROUPS.index("R²")] is None                 # not fitted: NaN
    notes = " ".join(str(c.value) for row in wb["about"].iter_rows() for c in row if c.value)
    assert "infinite values left as empty cells" in notes and "F 1" in notes
    assert "undefined values left as empty cells" in notes


def test_number_formats_show_sensible_digits(written):
    _, _, wb = written
    ws = wb["groups"]
    assert ws.cell(2, GROUPS.index("R²") + 1).number_format == "0.0000"
    assert ws.cell(2, GROUPS.index("F p-value") + 1).number_format == P_VALUE_FORMAT
    assert ws.cell(2, GROUPS.index("rows used") + 1).number_format == "0"
    ws = wb["observations"]
    assert ws.cell(2, OBS.index("leverage") + 1).number_format == "0.0000"


def test_autofilter_and_frozen_header_on_every_table(written):
    res, _, wb = written
    for name, n_cols, n_rows in (("groups", len(GROUPS) + 1, len(res.groups)),
                                 ("coefficients", len(COEFS), len(res.coefficients)),
                                 ("checks", len(CHECKS), len(res.checks)),
                                 ("observations", len(OBS), len(res.observations))):
        ws = wb[name]
        last = openpyxl.utils.get_column_letter(n_cols)
        assert ws.auto_filter.ref == f"A1:{last}{n_rows + 1}", name
        assert ws.freeze_panes == "B2", name        # header row and the group key column


def rules(ws) -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for cf in ws.conditional_formatting:
        out[str(cf.sqref)] = [f for rule in cf.rules for f in rule.formula]
    return out


def test_conditional_formats_cover_whole_rows_anchored_on_the_first_data_row(written):
    res, _, wb = written
    # groups: status in column B, flags in column C; the formulas pin the column, not the row
    n, last = len(res.groups) + 1, openpyxl.utils.get_column_letter(len(GROUPS) + 1)
    assert rules(wb["groups"]) == {f"A2:{last}{n}": ['$B2="not fitted"', "$C2>0"]}
    n = len(res.checks) + 1
    assert rules(wb["checks"]) == {f"A2:H{n}": ['$G2="fail"']}
    n = len(res.observations) + 1
    # shaded: the row flags name one of the strong words (README), found as exact text
    look_here = ('OR(ISNUMBER(FIND("leverage 1",$H2)),ISNUMBER(FIND("outlying",$H2)),'
                 'ISNUMBER(FIND("moves the fit",$H2)))')
    assert rules(wb["observations"]) == {f"A2:M{n}": ['$F2="no"', look_here]}


def test_highlight_colours_are_our_own_not_the_builtin_good_bad_neutral(written):
    _, path, _ = written
    with zipfile.ZipFile(path) as z:
        styles = z.read("xl/styles.xml").decode().upper()
    for builtin in ("FFC7CE", "C6EFCE", "FFEB9C", "9C0006", "006100", "9C5700"):   # the application's presets
        assert builtin not in styles


def test_observation_mode_flagged_keeps_unusable_and_flagged_rows(make_results, tmp_path):
    res = make_results(not_fitted=["East"], observations="flagged")
    path = write_results(res, tmp_path / "flagged.xlsx")
    wb = openpyxl.load_workbook(path)
    obs = res.observations
    keep = obs["used in fit"].eq("no") | obs["row flags"].ne("")
    rows = data_rows(wb["observations"])
    assert len(rows) == keep.sum() and 0 < keep.sum() < len(obs)
    assert sorted(r[OBS.index("source row")] for r in rows) == sorted(obs.loc[keep, "source row"])
    about = " ".join(str(c.value) for row in wb["about"].iter_rows() for c in row if c.value)
    assert f"left out: {len(obs) - keep.sum()}" in about


def test_observation_mode_none_writes_a_note_only(make_results, tmp_path):
    res = make_results(observations="none")
    wb = openpyxl.load_workbook(write_results(res, tmp_path / "none.xlsx"))
    ws = wb["observations"]
    assert ws.max_row == 1 and "left out" in ws["A1"].value
    about = " ".join(str(c.value) for row in wb["about"].iter_rows() for c in row if c.value)
    assert f"left out: all {len(res.observations)} rows" in about


def test_a_long_table_continues_on_a_second_sheet(make_results, tmp_path, monkeypatch):
    monkeypatch.setattr(T, "MAX_DATA_ROWS", 30)        # stands in for the 1,048,575-row sheet limit
    monkeypatch.setattr(T, "BLOCK_ROWS", 7)
    res = make_results(labels=["North", "South", "West"])
    wb = openpyxl.load_workbook(write_results(res, tmp_path / "split.xlsx"))
    parts = ["observations", "observations (2)", "observations (3)"]
    assert wb.sheetnames[4:7] == parts and wb.sheetnames[7] == "charts"
    got = [r for p in parts for r in data_rows(wb[p])]
    assert [header(wb[p]) for p in parts] == [OBS] * 3
    assert [r[OBS.index("source row")] for r in got] == res.observations["source row"].tolist()
    about = " ".join(str(c.value) for row in wb["about"].iter_rows() for c in row if c.value)
    assert "continues on 'observations (2)', 'observations (3)'" in about


def test_text_longer_than_a_cell_is_cut_with_a_note(make_results, tmp_path):
    res = make_results(labels=["North", "South"])
    g = res.groups.copy()
    g.loc[0, "reasons"] = "x" * 40_000
    res = dataclasses.replace(res, groups=g)
    wb = openpyxl.load_workbook(write_results(res, tmp_path / "long.xlsx"))
    assert len(wb["groups"]["D2"].value) == 32_767         # Excel's limit of characters in a cell
    assert wb["groups"]["D2"].value.endswith("x…")           # the cut shows
    about = " ".join(str(c.value) for row in wb["about"].iter_rows() for c in row if c.value)
    assert "cut to 32,767 characters, ending in …: reasons 1" in about


def test_about_holds_provenance_legend_definitions_and_cautions(written):
    res, _, wb = written
    cells = {r[0]: r[1] for r in wb["about"].iter_rows(values_only=True) if r[0]}
    assert cells["input file"] == "input.xlsx"
    assert cells["rows read"] == len(res.observations) and cells["groups"] == 10
    assert cells["a figure that is not finite"] is None
    for colour in ("pale teal", "slate", "soft violet"):
        assert colour in cells
    assert cells["RMSE"] == "√(RSS / n)" and cells["residual std error"] == "√(RSS / (n − p))"
    assert cells["CV(RMSE) %"] == "100 · residual std error / mean(y)"
    assert "Benjamini–Hochberg" in cells["many groups"]
    assert "not cause and effect" in cells["association"] and "extrapolate" in cells["range"]
    assert "licensed practice" in cells["regulated work"]


def test_multi_input_observations_carry_every_source_column(make_results, tmp_path):
    res = make_results(x=("CDD", "pallets", "CDD^2"))
    wb = openpyxl.load_workbook(write_results(res, tmp_path / "multi.xlsx"))
    assert header(wb["observations"])[3:6] == [Y, "CDD", "pallets"]


def test_mixed_and_odd_column_types_are_written_plainly(make_results, tmp_path):
    res = make_results(labels=["North", "South"])
    g = res.groups.copy()
    g["when"] = pd.to_datetime(["2024-01-02 03:04", None]).tz_localize("Europe/Paris")
    g["mixed"] = pd.Series([np.int64(3), "=A1"], dtype=object)
    g["ok"] = [True, False]
    res = dataclasses.replace(res, groups=g)
    wb = openpyxl.load_workbook(write_results(res, tmp_path / "odd.xlsx"))
    ws = wb["groups"]
    cols = header(ws)
    when, mixed, ok = (cols.index(c) + 1 for c in ("when", "mixed", "ok"))
    assert ws.cell(2, when).value.isoformat() == "2024-01-02T02:04:00"     # shown in UTC
    assert ws.cell(3, when).value is None
    assert ws.cell(2, mixed).value == 3 and ws.cell(3, mixed).data_type == "s"
    assert [ws.cell(2, ok).value, ws.cell(3, ok).value] == ["yes", "no"]


@pytest.mark.parametrize("label, want", [
    ("a/b:c*d?e[f]g\\h", "a_b_c_d_e_f_g_h"),
    ("'quoted'", "quoted"),
    ("", "sheet"),
    ("History", "History_"),
    ("x" * 40, "x" * 31),
])
def test_sheet_names_are_valid(label, want):
    assert SheetNames().add(label) == want


def test_sheet_names_are_unique_ignoring_case_and_stay_short():
    names = SheetNames()
    got = [names.add(s) for s in ("Data", "data", "DATA", "y" * 40, "y" * 31)]
    assert got[:3] == ["Data", "data (2)", "DATA (3)"]
    assert got[3] == "y" * 31 and got[4] == "y" * 27 + " (2)"
    assert len({g.lower() for g in got}) == len(got) and all(len(g) <= 31 for g in got)


def test_extra_sheets_plug_in_after_the_core_ones(make_results, tmp_path):
    def extra(ctx):
        ws = ctx.add_sheet("extra")
        data = ctx.reserve_data_sheet("extra data", lambda d: d.write_string(0, 0, "rows"), hidden=True)
        ws.write_string(0, 0, f"data on {data}")
        ctx.note("explorer", "one sheet added")

    res = make_results()
    wb = openpyxl.load_workbook(write_results(res, tmp_path / "ext.xlsx", extra_sheets=[extra]))
    names = wb.sheetnames
    mine = [n for n in names if n.startswith("extra")]
    assert names[:8] == CORE[:8] and names[-1] == mine[-1] and len(mine) == 2
    assert names.index(mine[0]) < names.index("chart data") < names.index(mine[1])
    assert wb[mine[1]].sheet_state == "hidden" and wb[mine[0]]["A1"].value == f"data on {mine[1]}"
    assert any(r[1] == "one sheet added" for r in wb["about"].iter_rows(values_only=True))


@pytest.mark.parametrize("stamps, shown", [
    (["2024-01-02", "2024-03-04"], "yyyy-mm-dd"),
    (["2024-01-02 03:04", "2024-03-04"], "yyyy-mm-dd hh:mm"),
    (["2024-01-02 03:04:05", "2024-03-04"], "yyyy-mm-dd hh:mm:ss"),
    (["1899-12-30 06:15", "1899-12-30 18:45"], "hh:mm"),            # times of day alone (day 0)
])
def test_dates_show_what_they_hold(make_results, tmp_path, stamps, shown):
    res = make_results(labels=["North", "South"])
    g = res.groups.copy()
    g["when"] = pd.to_datetime(stamps, format="ISO8601")
    wb = openpyxl.load_workbook(write_results(dataclasses.replace(res, groups=g), tmp_path / "dates.xlsx"))
    ws = wb["groups"]
    j = header(ws).index("when") + 1
    cells = [ws.cell(2, j), ws.cell(3, j)]
    assert {c.number_format for c in cells} == {shown}
    # oracle: the timestamps themselves, read back as dates (times of day alone as times) by openpyxl
    want = [t.to_pydatetime() for t in g["when"]]
    assert [c.value for c in cells] == ([w.time() for w in want] if shown.startswith("hh") else want)
