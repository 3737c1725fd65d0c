"""The charts, overview and chart-data sheets: counted in the xlsx archive, read back with openpyxl,
and rendered once by LibreOffice (an independent spreadsheet application)."""

from __future__ import annotations

import re
import shutil
import subprocess
import zipfile
from pathlib import Path

import openpyxl
import pytest
from sample_results import Y

import sheetfit.report as report
from sheetfit.report import write_results
from sheetfit.report.chartdata import MAX_POINTS, equation
from sheetfit.report.charts import nice_bounds

LABELS = [f"Site {i:02d}" for i in range(8)]


@pytest.fixture
def core_only(monkeypatch):
    """Leave add-on sheets out, so every chart part in the archive is one of ours."""
    monkeypatch.setattr(report, "_extra_sheets", lambda: [])


def chart_parts(path: Path) -> list[str]:
    with zipfile.ZipFile(path) as z:
        return sorted(n for n in z.namelist() if re.fullmatch(r"xl/charts/chart\d+\.xml", n))


def chart_xml(path: Path) -> list[str]:
    with zipfile.ZipFile(path) as z:
        return [z.read(n).decode() for n in chart_parts(path)]


def labels_on_charts_sheet(path: Path) -> list[str]:
    ws = openpyxl.load_workbook(path)["charts"]
    return [str(c.value) for c in ws["A"][3:] if c.value]


@pytest.mark.parametrize("cap, groups_charted", [(0, 0), (1, 1), (3, 3), (60, 7)])
def test_cap_counts_groups_three_charts_each_plus_the_overview(make_results, tmp_path, core_only, cap,
                                                               groups_charted):
    # 8 groups, one not fitted → 7 can be charted
    res = make_results(labels=LABELS, not_fitted=["Site 05"], flagged=["Site 06"], max_charts=cap)
    path = write_results(res, tmp_path / "c.xlsx")
    overview = 1 if cap else 0
    assert len(chart_parts(path)) == 3 * groups_charted + overview
    wb = openpyxl.load_workbook(path)
    top = wb["charts"]["A1"].value
    if cap:
        assert top.startswith(f"charts for {groups_charted} of 7 groups; flagged groups first")
        assert ("raise --max-charts" in top) == (groups_charted < 7)
    else:
        assert "--max-charts is 0" in top


def test_flagged_groups_come_first_and_not_fitted_groups_get_no_charts(make_results, tmp_path):
    res = make_results(labels=LABELS, not_fitted=["Site 01"], flagged=["Site 04", "Site 06"])
    path = write_results(res, tmp_path / "order.xlsx")
    names = [s.split("   ")[0] for s in labels_on_charts_sheet(path)]
    assert names == ["Site 04", "Site 06", "Site 00", "Site 02", "Site 03", "Site 05", "Site 07"]
    wb = openpyxl.load_workbook(path)
    assert len(wb["charts"]._charts) == 3 * 7 and len(wb["overview"]._charts) == 1


def test_one_input_fit_chart_has_points_line_band_and_equation(make_results, tmp_path, core_only):
    res = make_results(labels=["North"], flagged=[], max_charts=5)
    path = write_results(res, tmp_path / "one.xlsx")
    fit, resid, qq, overview = chart_xml(path)
    coef = res.coefficients.set_index("input")["coefficient"]
    eq = equation(Y, [("constant", coef["constant"]), ("CDD", coef["CDD"])])
    assert eq in fit and "R² = " in fit
    assert fit.count("<c:ser>") == 4                       # points, fitted line, two band lines
    assert fit.count('val="dash"') == 2                    # the band is dashed
    assert "'chart data'!$B$" in fit and "'chart data'!$F$" in fit      # list-form ranges, quoted
    assert "residuals against fitted" in resid and "normal quantile plot" in qq
    assert "R² by group" in overview and "<c:barChart>" in overview


def test_multi_input_models_plot_actual_against_fitted(make_results, tmp_path, core_only):
    res = make_results(labels=["North", "South"], x=("CDD", "pallets"), max_charts=5)
    path = write_results(res, tmp_path / "multi.xlsx")
    fits = [x for x in chart_xml(path) if "actual against fitted" in x]
    assert len(fits) == 2 and all(x.count("<c:ser>") == 2 for x in fits)   # points and y = x


def test_chart_data_rows_match_the_ranges(make_results, tmp_path):
    res = make_results(labels=["North", "South"], flagged=["South"])
    path = write_results(res, tmp_path / "data.xlsx")
    ws = openpyxl.load_workbook(path)["chart data"]
    rows = list(ws.iter_rows(values_only=True))
    # the flagged group's block comes first; its y values are the observed ones, in order
    head = next(i for i, r in enumerate(rows) if r[0] == "group" and r[1] == "x: CDD")
    block = [r for r in rows[head + 1:] if r[0] == "South"]
    want = res.observations.query("site == 'South'")[Y].tolist()
    assert [r[2] for r in block[:len(want)]] == pytest.approx(want, rel=1e-15)


def test_many_points_are_thinned_but_flagged_rows_stay(make_results, tmp_path, monkeypatch):
    import sheetfit.report.chartdata as cd
    monkeypatch.setattr(cd, "MAX_POINTS", 10)
    res = make_results(labels=["North", "South"], flagged=["South"], n=40)
    path = write_results(res, tmp_path / "thin.xlsx")
    label = labels_on_charts_sheet(path)[0]
    assert "plots show 10 of 40 rows" in label
    assert MAX_POINTS == 5_000


def test_overview_uses_points_when_there_are_many_groups(make_results, tmp_path, core_only):
    res = make_results(labels=[f"G{i}" for i in range(45)], n=6, flagged=["G3"], max_charts=1)
    path = write_results(res, tmp_path / "many.xlsx")
    overview = chart_xml(path)[-1]
    assert "<c:scatterChart>" in overview and overview.count("<c:ser>") == 2


def test_equation_text():
    # plain algebra: signs folded into the operators, four significant digits
    assert equation("y", [("constant", 3.2), ("x", 0.41)]) == "y = 3.2 + 0.41·x"
    assert equation("y", [("constant", -3.2), ("x", -0.000123456)]) == "y = −3.2 − 0.0001235·x"
    assert equation("kWh", [("x", 2.0), ("x^2", -1.5)]) == "kWh = 2·x − 1.5·x^2"


@pytest.mark.parametrize("values, symmetric", [([0.3, 9.7], False), ([-212.0, 388.0], True),
                                               ([1e-13, 4e-13], False), ([5.0, 5.0], False),
                                               ([1200.0, 2150.0], False)])
def test_axis_bounds_enclose_the_data_on_round_steps(values, symmetric):
    lo, hi, step, _ = nice_bounds(values, symmetric)
    assert lo <= min(values) and hi >= max(values) and lo < hi
    assert (hi - lo) / step == pytest.approx(round((hi - lo) / step)) and (hi - lo) / step <= 12
    if symmetric:
        assert lo == -hi


@pytest.mark.skipif(shutil.which("soffice") is None, reason="LibreOffice (soffice) is not installed")
def test_libreoffice_renders_the_charts(make_results, tmp_path):
    res = make_results(labels=["North", "South", "=1+2"], flagged=["South"], max_charts=2)
    path = write_results(res, tmp_path / "render.xlsx")
    profile = (tmp_path / "lo-profile").resolve().as_uri()
    subprocess.run(["soffice", f"-env:UserInstallation={profile}", "--headless", "--convert-to", "pdf",
                    "--outdir", str(tmp_path), str(path)], check=True, capture_output=True, timeout=240,
                   stdin=subprocess.DEVNULL)
    pdf = tmp_path / "render.pdf"
    assert pdf.stat().st_size > 0
    if shutil.which("pdftotext"):
        text = subprocess.run(["pdftotext", str(pdf), "-"], capture_output=True, text=True).stdout
        assert "charts for 2 of 3 groups; flagged groups first" in text
        assert "normal quantile plot of residuals" in text      # chart titles drawn, not just cells


def test_no_fitted_group_means_no_charts_and_no_chart_data(make_results, tmp_path, core_only):
    res = make_results(labels=["A", "B"], not_fitted=["A", "B"])
    path = write_results(res, tmp_path / "none.xlsx")
    wb = openpyxl.load_workbook(path)
    assert wb.sheetnames == ["attention", "groups", "coefficients", "checks", "observations", "charts", "about"]
    assert "no group could be fitted" in wb["charts"]["A1"].value and chart_parts(path) == []


def test_a_single_fit_without_group_columns_is_charted_as_all_rows(make_results, tmp_path, core_only):
    import dataclasses
    res = make_results(labels=["A"], flagged=["A"])
    drop = {name: getattr(res, name).drop(columns=["site"])
            for name in ("groups", "coefficients", "checks", "observations", "curves", "quantiles")}
    res = dataclasses.replace(res, group_columns=(), job=dataclasses.replace(res.job, group=()), **drop)
    path = write_results(res, tmp_path / "single.xlsx")
    assert labels_on_charts_sheet(path)[0].startswith("all rows")
    assert len(chart_parts(path)) == 4
    ws = openpyxl.load_workbook(path)["groups"]
    assert ws.freeze_panes == "A2" and ws["A1"].value == "status"
