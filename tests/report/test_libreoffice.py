"""The live sheets recalculated by a real spreadsheet application (LibreOffice Calc, headless).

Small results workbooks are written with the explorer and predict input cells preset and with no
cached formula results, converted by soffice with a profile that recalculates on load, and read
back. Oracles: statsmodels OLS get_prediction (and sheetfit.predict) for the live prediction cells; the
observations table for the explorer block. A probe formula with a deliberately wrong cached value
proves the recalculation happened.
"""

from __future__ import annotations

import dataclasses
import functools
import re
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm

import sheetfit
import sheetfit.report as report
from sheetfit.api import fit_frame
from sheetfit.pipeline import predict_workbook
from sheetfit.report import write_results
from sheetfit.report.explorer import explorer_sheet
from sheetfit.report.live_prediction import live_prediction_sheet
from tests.lo import SKIP_REASON, SOFFICE, convert, make_profile
from tests.oracle import curved_groups

pytestmark = pytest.mark.skipif(SOFFICE is None, reason=SKIP_REASON)

X_TERMS = ["x", "x^2", "log(z)"]
# Group keys that trip naive lookups: "A*" is a wildcard pattern matching "A", and spreadsheet
# lookups ignore case, so "a" is listed as "a (2)".
# "a?" and "x~y" would match "ab" and "xy" as patterns ("?" any one character, "~" the escape).
GROUPS = (("A", 18, 1.0), ("A*", 26, -0.4), ("a", 12, 2.2), ("ab", 14, 0.6), ("a?", 16, 1.4),
          ("xy", 13, -0.8), ("x~y", 15, 0.3))
LABELS = {"A": "A", "A*": "A*", "a": "a (2)", "ab": "ab", "a?": "a?", "xy": "xy", "x~y": "x~y"}
# (group key, inputs, confidence level): inside the range; above/below it at 90 %; near the edges at 99 %.
CASES = [("A*", {"x": 4.0, "z": 6.0}, 0.95),
         ("a", {"x": 11.5, "z": 0.8}, 0.90),
         ("A", {"x": 1.9, "z": 18.9}, 0.99),
         ("a?", {"x": 3.0, "z": 4.0}, 0.95),
         ("x~y", {"x": 2.5, "z": 5.0}, 0.95)]
RESULTS = {"predicted value": "mean", "std error of the fitted mean": "mean_se", "range for the average, low": "mean_ci_lower",
           "range for the average, high": "mean_ci_upper", "range for one new row, low": "obs_ci_lower", "range for one new row, high": "obs_ci_upper"}
TIMES: dict[str, float] = {}


def frame(seed: int = 21) -> pd.DataFrame:
    return curved_groups(GROUPS, seed)


def probe(ctx) -> None:
    """A formula whose cached result is deliberately wrong: only a recalculation makes it 2."""
    ws = ctx.add_sheet("probe")
    ws.write_formula(0, 0, "=1+1", None, 999)


@pytest.fixture(scope="module")
def data() -> pd.DataFrame:
    return frame()


@pytest.fixture(scope="module")
def results(data):
    return fit_frame(data, y="y", x=X_TERMS, group="g")


@pytest.fixture(scope="module")
def converted(results, tmp_path_factory) -> list[openpyxl.Workbook]:
    folder = tmp_path_factory.mktemp("lo")
    paths = []
    for i, (group, inputs, level) in enumerate(CASES):
        label = LABELS[group]
        builders = [functools.partial(explorer_sheet, group=label, cache=False),
                    functools.partial(live_prediction_sheet, group=label, inputs=inputs, level=level, cache=False), probe]
        with pytest.MonkeyPatch.context() as mp:
            mp.setattr(report, "_extra_sheets", lambda b=builders: b)
            paths.append(write_results(results, folder / f"case{i}.xlsx"))
    profile = make_profile(folder / "profile")
    outs, TIMES["recalculate the case workbooks to xlsx"] = convert(paths, "xlsx", folder / "out", profile)
    return [openpyxl.load_workbook(p, data_only=True) for p in outs]


@pytest.fixture(scope="module")
def pdf(results, tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("pdf")
    path = write_results(results, folder / "render.xlsx")
    outs, TIMES["render 1 workbook to pdf"] = convert([path], "pdf", folder / "out", make_profile(folder / "profile"))
    return outs[0]


@pytest.fixture(scope="module")
def predicted_file(results, tmp_path_factory) -> dict[str, float]:
    """`sheetfit predict`'s library side on the first case (the fit's own level), read back."""
    folder = tmp_path_factory.mktemp("predict")
    fit_path = write_results(results, folder / "fit.xlsx")
    group, inputs, _ = CASES[0]
    wb = openpyxl.Workbook()
    wb.active.append(["g", *inputs])
    wb.active.append([group, *inputs.values()])
    wb.save(folder / "new.xlsx")
    out = predict_workbook(fit_path, folder / "new.xlsx", None, None, False)
    head, row = openpyxl.load_workbook(out, read_only=True).active.iter_rows(values_only=True)
    return dict(zip(head, row))


def label_rows(ws) -> dict[str, int]:
    out: dict[str, int] = {}
    for row in ws.iter_rows(min_col=1, max_col=1):
        if isinstance(row[0].value, str):
            out.setdefault(row[0].value, row[0].row)
    return out


def oracle(data: pd.DataFrame, group: str, inputs: dict, level: float) -> pd.Series:
    d = data[data["g"] == group]
    design = lambda f: np.column_stack([np.ones(len(f)), f["x"], f["x"] ** 2, np.log(f["z"])])  # noqa: E731
    fit = sm.OLS(d["y"].to_numpy(), design(d)).fit()
    new = pd.DataFrame({k: [v] for k, v in inputs.items()})
    return fit.get_prediction(design(new)).summary_frame(alpha=1 - level).iloc[0]


def test_recalculation_happened(converted):
    for wb in converted:
        assert wb["probe"]["A1"].value == 2


@pytest.mark.parametrize("case", range(len(CASES)))
def test_live_prediction_cells_equal_predict_and_statsmodels(converted, results, data, predicted_file, case):
    group, inputs, level = CASES[case]
    ws = converted[case]["live prediction"]
    rows = label_rows(ws)
    assert ws["B4"].value == LABELS[group] and ws["B5"].value == level
    expected = oracle(data, group, inputs, level)
    at_level = dataclasses.replace(results, job=dataclasses.replace(results.job, level=level))
    ours = sheetfit.predict(at_level, pd.DataFrame({"g": [group], **{k: [v] for k, v in inputs.items()}}))
    for label, col in RESULTS.items():
        cell = ws.cell(rows[label], 2).value
        assert cell == pytest.approx(expected[col], rel=1e-9), label
        assert cell == pytest.approx(ours[label][0], rel=1e-9), label
        if case == 0:                # predicted_file: `sheetfit predict` on the first case
            assert cell == pytest.approx(predicted_file[label], rel=1e-9), label
    d = data[data["g"] == group]
    assert ws.cell(rows["residual degrees of freedom"], 2).value == len(d) - 4
    warning = ws.cell(rows["range check"], 2).value
    if case == 1:
        assert warning == "caution, extrapolation: x above the observed range; z below the observed range"
        assert ours["extrapolation"][0].startswith("yes: x above")
    else:
        assert warning == "all inputs lie within the group's observed range"
        assert ours["extrapolation"][0] == "no"


@pytest.mark.parametrize("case", range(len(CASES)))
def test_explorer_block_follows_the_chosen_group(converted, results, case):
    group = CASES[case][0]
    ws = converted[case]["explorer"]
    obs = results.observations
    mine = obs[(obs["g"] == group) & (obs["used in fit"] == "yes")].sort_values(["x", "source row"])
    top = next(r[0].row for r in ws.iter_rows() if "source row" in [c.value for c in r])
    head = [c.value for c in ws[top] if c.value is not None]
    rows = [[c.value for c in ws[r]][:len(head)] for r in range(top + 1, top + 1 + 26)]
    n = len(mine)
    assert ws["B4"].value == LABELS[group] and ws["B5"].value == n
    assert [r[head.index("source row")] for r in rows[:n]] == mine["source row"].tolist()
    for col in ("x", "z", "y", "fitted value", "residual"):
        # LibreOffice saves results with 15 significant digits
        np.testing.assert_allclose([r[head.index(col)] for r in rows[:n]], mine[col], rtol=1e-14)
    assert all(r[head.index("y")] == "#N/A" and r[head.index("source row")] in ("", None) for r in rows[n:])
    coef = results.coefficients
    est = coef[(coef["g"] == group) & (coef["input"] == "x^2")]["coefficient"].iloc[0]
    labels = label_rows(ws)
    assert ws.cell(labels["x^2"], 2).value == pytest.approx(est, rel=1e-14)


def test_pdf_has_pages(pdf):
    raw = pdf.read_bytes()
    assert raw.startswith(b"%PDF")
    assert len(re.findall(rb"/Type\s*/Page[^s]", raw)) >= 5


def test_report_durations(converted, pdf, capsys):
    """Not a timing assertion: prints how long the LibreOffice steps took, for the CI log."""
    assert set(TIMES) == {"recalculate the case workbooks to xlsx", "render 1 workbook to pdf"}
    with capsys.disabled():
        print("\nLibreOffice: " + "; ".join(f"{k}: {v:.1f} s" for k, v in TIMES.items()))
