"""Predictions from stored models: `sheetfit.predict` and `predict_workbook`.

Oracle: statsmodels OLS `get_prediction(exog).summary_frame(alpha)` fitted on the same rows
(mean, mean_se, mean_ci_lower/upper, obs_ci_lower/upper).
"""

from __future__ import annotations

import errno

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm

import sheetfit
from sheetfit.api import fit_frame
from sheetfit.errors import (
    ColumnNotFoundError,
    JobError,
    NoUsableDataError,
    OutputError,
    ResultsWorkbookError,
    SheetNotFoundError,
)
from sheetfit.pipeline import predict_workbook
from sheetfit.report import fastrows, predictions, write_results
from sheetfit.results.store import (
    RESULT_COLUMNS,
    store_from_results,
    store_layout,
)
from sheetfit.results.store_read import read_store
from tests.oracle import curved_groups

ORACLE = {"predicted value": "mean", "std error of the fitted mean": "mean_se", "range for the average, low": "mean_ci_lower",
          "range for the average, high": "mean_ci_upper", "range for one new row, low": "obs_ci_lower", "range for one new row, high": "obs_ci_upper"}
X_TERMS = ["x", "x^2", "log(z)"]


def frame(seed: int = 3) -> pd.DataFrame:
    """Three groups of different sizes; y curves in x and grows with log(z)."""
    return curved_groups((("A", 30, 1.0), ("B", 45, -0.5), ("C", 22, 2.0)), seed)


def oracle(data: pd.DataFrame, group: str, new: pd.DataFrame, level: float) -> pd.DataFrame:
    d = data[data["g"] == group]
    design = lambda f: np.column_stack([np.ones(len(f)), f["x"], f["x"] ** 2, np.log(f["z"])])  # noqa: E731
    fit = sm.OLS(d["y"].to_numpy(), design(d)).fit()
    return fit.get_prediction(design(new)).summary_frame(alpha=1 - level)


def assert_matches(pred: pd.DataFrame, expected: pd.DataFrame, rtol: float = 1e-9) -> None:
    for ours, theirs in ORACLE.items():
        np.testing.assert_allclose(pred[ours].to_numpy(np.float64), expected[theirs].to_numpy(), rtol=rtol,
                                   err_msg=ours)


@pytest.fixture(scope="module")
def data() -> pd.DataFrame:
    return frame()


@pytest.fixture(scope="module")
def results(data):
    return fit_frame(data, y="y", x=X_TERMS, group="g")


NEW = pd.DataFrame({"x": [1.5, 5.0, 9.9, 12.0, 0.2], "z": [0.7, 3.0, 19.0, 25.0, 1.0]})


@pytest.mark.parametrize("group", ["A", "B", "C"])
def test_predict_matches_statsmodels_get_prediction(results, data, group):
    new = NEW.assign(g=group)
    pred = sheetfit.predict(results, new)
    assert list(pred.columns) == ["g", "x", "z", *RESULT_COLUMNS]
    assert (pred["reason"] == "").all()
    assert_matches(pred, oracle(data, group, new, 0.95))


def test_level_follows_the_fit(data):
    res = fit_frame(data, y="y", x=X_TERMS, group="g", level=0.9)
    new = NEW.assign(g="B")
    assert_matches(sheetfit.predict(res, new), oracle(data, "B", new, 0.9))


@pytest.mark.parametrize("bulk", [False, True], ids=["row by row", "bulk writer"])
def test_model_store_round_trip_from_the_results_workbook(results, data, tmp_path, monkeypatch, bulk):
    # Large stores go through the bulk XML writer, which keeps every bit of each number.
    monkeypatch.setattr(fastrows, "THRESHOLD", 0 if bulk else None)
    path = write_results(results, tmp_path / "fit.xlsx")
    store = read_store(path)
    direct = store_from_results(results)
    assert store.labels == direct.labels == ("A", "B", "C")
    assert store.group_columns == ("g",) and store.y == "y" and store.intercept and store.level == 0.95
    assert [t.label for t in store.terms] == X_TERMS
    if bulk:
        np.testing.assert_array_equal(store.beta, direct.beta)
        np.testing.assert_array_equal(store.xtx_inv, direct.xtx_inv)
        np.testing.assert_array_equal(store.sigma2, direct.sigma2)
    np.testing.assert_allclose(store.beta, direct.beta, rtol=1e-14)
    np.testing.assert_allclose(store.xtx_inv, direct.xtx_inv, rtol=1e-14)
    np.testing.assert_array_equal(store.df, [30 - 4, 45 - 4, 22 - 4])
    new = pd.concat([NEW.assign(g=g) for g in "ABC"], ignore_index=True)
    from_file = sheetfit.predict(path, new)
    for g in "ABC":
        rows = from_file["g"] == g
        assert_matches(from_file[rows], oracle(data, g, new[rows], 0.95))


def test_store_cells_sit_where_the_shared_layout_says(tmp_path):
    # One layout places the store's numbers, points the live prediction sheet's formulas at them and reads them
    # back; two group columns and no intercept move every column from where the usual case puts it.
    rng = np.random.default_rng(5)
    data = pd.DataFrame({"a": rng.choice(["p", "q"], 90), "b": rng.choice([1, 2], 90),
                         "x": rng.uniform(1, 9, 90), "z": rng.uniform(0, 4, 90)})
    data["y"] = 1 + 0.5 * data["x"] + data["z"] ** 2 + rng.normal(size=90)
    res = fit_frame(data, y="y", x=["x", "z^2"], group=["a", "b"], intercept=False)
    path = write_results(res, tmp_path / "fit.xlsx")
    direct = store_from_results(res)
    lay = store_layout(direct)
    book = openpyxl.load_workbook(path)
    ws = book["model store"]

    def cell(r, c):
        return ws.cell(r + 1, c + 1).value

    assert (cell(lay.term_header, 0), cell(lay.group_header, 0)) == ("coefficient", "group")
    for g in range(len(direct)):
        r = lay.first + g
        assert cell(r, 0) == direct.labels[g]
        assert tuple(cell(r, lay.col_key(j)) for j in range(lay.k)) == direct.keys[g]
        assert cell(r, lay.col_n()) == direct.n[g]
        assert cell(r, lay.col_coef(1)) == pytest.approx(direct.beta[g, 1], rel=1e-15)
        assert cell(r, lay.col_inv(1, 0)) == pytest.approx(direct.xtx_inv[g, 1, 0], rel=1e-15)
        assert cell(r, lay.col_max(1)) == pytest.approx(direct.hi[g, 1], rel=1e-15)
    assert f",{lay.col_min(0) + 1})" in book["live prediction"]["C9"].value
    back = read_store(path)
    assert back.keys == direct.keys and not back.intercept and back.group_columns == ("a", "b")
    for name in ("n", "df", "sigma2", "beta", "xtx_inv", "lo", "hi"):
        np.testing.assert_allclose(getattr(back, name), getattr(direct, name), rtol=1e-14)


def test_extrapolation_names_the_input_outside_the_range(results, data):
    d = data[data["g"] == "A"]
    new = pd.DataFrame({"g": ["A", "A", "A"], "x": [d["x"].mean(), d["x"].max() + 1, d["x"].min() - 0.5],
                        "z": [d["z"].mean(), d["z"].mean(), d["z"].max() * 2]})
    ext = sheetfit.predict(results, new)["extrapolation"].tolist()
    assert ext[0] == "no"
    assert ext[1].startswith("yes: x above the observed range")
    assert "x below the observed range" in ext[2] and "z above the observed range" in ext[2]


def test_rows_that_cannot_be_predicted_keep_a_reason(results):
    new = pd.DataFrame({"g": ["A", "Q", "B", "C", "A", "B"],
                        "x": [2.0, 2.0, None, "abc", "3.5", 4.0],
                        "z": [1.0, 1.0, 1.0, 1.0, 2.0, -1.0]})
    pred = sheetfit.predict(results, new)
    why = pred["reason"].tolist()
    assert why[0] == "" and np.isfinite(pred["predicted value"][0])
    assert 'no fitted model for group "Q"' in why[1]
    assert why[2] == "x: empty cell"
    assert why[3] == 'x: text "abc" is not a number'
    assert why[4] == ""                              # numbers stored as text are read as numbers
    assert why[5] == "z is zero or negative, so log(z) is undefined"
    assert pred["predicted value"][1:4].isna().all() and pred["predicted value"][5:].isna().all()
    assert pred["extrapolation"][1:4].eq("").all()


def test_missing_columns_are_reasons_not_crashes(results):
    pred = sheetfit.predict(results, pd.DataFrame({"x": [2.0], "Z": [1.0]}))
    assert pred["reason"][0] == 'no group column "g" in the new rows; no input column "z" in the new rows'
    assert pred["predicted value"].isna().all()


def test_numeric_group_keys_match_their_text_labels():
    rng = np.random.default_rng(11)
    df = pd.DataFrame({"site": np.repeat([101, 202], 15), "x": rng.uniform(0, 5, 30)})
    df["y"] = 1 + 2 * df["x"] + rng.normal(0, 0.2, 30)
    res = fit_frame(df, y="y", x="x", group="site")
    pred = sheetfit.predict(res, pd.DataFrame({"site": [202, 202.0, "101"], "x": [1.0, 1.0, 1.0]}))
    assert (pred["reason"] == "").all()


def test_model_without_groups():
    rng = np.random.default_rng(5)
    df = pd.DataFrame({"x": rng.uniform(0, 5, 25)})
    df["y"] = 3 - df["x"] + rng.normal(0, 0.3, 25)
    res = fit_frame(df, y="y", x="x")
    new = pd.DataFrame({"x": [0.5, 2.0, 6.0]})
    pred = sheetfit.predict(res, new)
    fit = sm.OLS(df["y"], sm.add_constant(df["x"])).fit()
    expected = fit.get_prediction(sm.add_constant(new["x"], has_constant="add")).summary_frame(alpha=0.05)
    assert_matches(pred, expected)


def write_new_rows(path, rows: list[list], header=("g", "note", "x", "z")) -> None:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "new"
    ws.append(list(header))
    for r in rows:
        ws.append(r)
    wb.save(path)


def test_predict_workbook_end_to_end(results, data, tmp_path):
    fit_path = write_results(results, tmp_path / "fit.xlsx")
    new_path = tmp_path / "new.xlsx"
    write_new_rows(new_path, [["A", "first", 2.0, 5.0], ["B", "second", "7.5", 1.5], [None, None, None, None],
                              ["X", "unknown", 2.0, 5.0], ["C", "empty x", None, 3.0], ["C", "far", 15.0, 3.0]])
    out = predict_workbook(fit_path, new_path, "new", None, False)
    assert out == new_path.with_name("new-predicted.xlsx")
    wb = openpyxl.load_workbook(out, read_only=True)
    rows = list(wb["predictions"].iter_rows(values_only=True))
    head = list(rows[0])
    assert head == ["source row", "g", "note", "x", "z", *RESULT_COLUMNS]
    body = [dict(zip(head, r)) for r in rows[1:]]
    assert [b["source row"] for b in body] == [2, 3, 5, 6, 7]       # the blank row 4 is skipped
    assert [b["reason"] or "" for b in body][:2] == ["", ""]
    assert 'no fitted model for group "X"' in body[2]["reason"]
    assert body[3]["reason"] == "x: empty cell"
    assert body[4]["extrapolation"].startswith("yes: x above the observed range")
    for b, g, x, z in ((body[0], "A", 2.0, 5.0), (body[1], "B", 7.5, 1.5), (body[4], "C", 15.0, 3.0)):
        expected = oracle(data, g, pd.DataFrame({"x": [x], "z": [z]}), 0.95).iloc[0]
        for ours, theirs in ORACLE.items():
            assert b[ours] == pytest.approx(expected[theirs], rel=1e-9)
    wb.close()


def test_predict_workbook_refuses_what_it_should(results, tmp_path):
    fit_path = write_results(results, tmp_path / "fit.xlsx")
    new_path = tmp_path / "new.xlsx"
    write_new_rows(new_path, [["A", "", 2.0, 5.0]])
    out = predict_workbook(fit_path, new_path, None, tmp_path / "p.xlsx", False)
    with pytest.raises(sheetfit.errors.OutputError, match="already exists"):
        predict_workbook(fit_path, new_path, None, out, False)
    assert predict_workbook(fit_path, new_path, None, out, True) == out.resolve()
    with pytest.raises(SheetNotFoundError, match='sheet "nope" not found'):
        predict_workbook(fit_path, new_path, "nope", tmp_path / "q.xlsx", False)
    with pytest.raises(ResultsWorkbookError, match='no "model store" sheet'):
        predict_workbook(new_path, new_path, None, tmp_path / "r.xlsx", False)
    with pytest.raises(sheetfit.errors.OutputError, match="is the input"):
        predict_workbook(fit_path, new_path, None, new_path, True)
    with pytest.raises(sheetfit.errors.OutputError, match="is the results workbook"):
        predict_workbook(fit_path, new_path, None, fit_path, True)


def test_level_can_be_chosen_at_prediction_time(results, data):
    new = NEW.assign(g="C")
    assert_matches(sheetfit.predict(results, new, level=0.8), oracle(data, "C", new, 0.8))
    with pytest.raises(JobError, match='setting "level"'):
        sheetfit.predict(results, new, level=float("nan"))


def test_inputs_too_large_to_compute_get_a_reason(results):
    # x^2 of 1e200 (and of 1e160, -1e308) overflows; log(1e308) stays finite
    new = pd.DataFrame({"g": ["A", "A", "A", "A"], "x": [1e200, 2.0, 1e160, -1e308], "z": [1.0, 1e308, 1.0, 1.0]})
    pred = sheetfit.predict(results, new)
    why = pred["reason"].tolist()
    assert why[0].startswith("x^2 at these inputs is too large to compute")
    assert why[1] == "" and np.isfinite(pred["predicted value"][1])
    for r in (0, 2, 3):
        assert why[r], r
        assert pred.loc[r, list(ORACLE)].isna().all() and pred["extrapolation"][r] == ""
    finite = pred[pred["reason"] == ""][list(ORACLE)].to_numpy(np.float64)
    assert np.isfinite(finite).all()
    # a straight line: the term 1e308 is finite, its variance term x'(X'X)⁻¹x is not
    rng = np.random.default_rng(2)
    line = pd.DataFrame({"x": rng.uniform(0, 5, 20)})
    line["y"] = 1 + 2 * line["x"] + rng.normal(0, 0.1, 20)
    pred = sheetfit.predict(fit_frame(line, y="y", x="x"), pd.DataFrame({"x": [1e308, 1.0]}))
    assert pred["reason"][0].startswith("the prediction or its interval at these inputs is too large to compute")
    assert pred["predicted value"].isna().tolist() == [True, False]


def summary_of(*args, **kwargs):
    got = []
    path = predict_workbook(*args, summary=got.append, **kwargs)
    assert len(got) == 1 and got[0].path == path
    return got[0]


def test_summary_counts_rows_and_reasons(results, tmp_path):
    fit_path = write_results(results, tmp_path / "fit.xlsx")
    new_path = tmp_path / "new.xlsx"
    write_new_rows(new_path, [["A", "", 2.0, 5.0], ["Q", "", 2.0, 5.0], ["B", "", 3.0, 2.0]])
    done = summary_of(fit_path, new_path, None, None, False)
    assert (done.rows, done.predicted, done.sheets) == (3, 2, ("predictions",))
    assert done.lines() == ["3 rows: 2 predicted, 1 with a reason (see the reason column)"]


@pytest.mark.parametrize("header, missing, near", [
    (("g", "note", "x", "zz"), 'input column "z"', '"zz"'),
    (("G", "note", "x", "z"), 'group column "g"', '"G"'),           # letter case differs
])
def test_a_missing_column_is_an_error_naming_the_closest(results, tmp_path, header, missing, near):
    fit_path = write_results(results, tmp_path / "fit.xlsx")
    new_path = tmp_path / "new.xlsx"
    write_new_rows(new_path, [["A", "", 2.0, 5.0]], header=header)
    with pytest.raises(ColumnNotFoundError) as err:
        predict_workbook(fit_path, new_path, None, None, False)
    msg = str(err.value)
    assert f'{missing} not found in sheet "new" of "new.xlsx"' in msg and f"closest match: {near}" in msg
    assert not new_path.with_name("new-predicted.xlsx").exists()


def test_a_notes_sheet_first_points_at_the_other_sheets(results, tmp_path):
    fit_path = write_results(results, tmp_path / "fit.xlsx")
    new_path = tmp_path / "new.xlsx"
    wb = openpyxl.Workbook()
    wb.active.title = "Notes"
    wb.active.append(["Plan for next year, see sheet Plan"])
    plan = wb.create_sheet("Plan")
    plan.append(["g", "x", "z"])
    plan.append(["A", 2.0, 5.0])
    wb.save(new_path)
    with pytest.raises(ColumnNotFoundError, match='the first sheet is read unless --sheet names another: "Plan"'):
        predict_workbook(fit_path, new_path, None, None, False)
    assert summary_of(fit_path, new_path, "Plan", None, False).predicted == 1


def test_nothing_predicted_is_an_error_and_nothing_is_written(results, tmp_path):
    fit_path = write_results(results, tmp_path / "fit.xlsx")
    new_path = tmp_path / "new.xlsx"
    write_new_rows(new_path, [["Q", "", 2.0, 5.0], ["A", "", "abc", 5.0]])
    with pytest.raises(NoUsableDataError, match=r'none of the 2 new rows .* row 2: no fitted model for group "Q"'):
        predict_workbook(fit_path, new_path, None, None, False)
    write_new_rows(new_path, [])
    with pytest.raises(NoUsableDataError, match="has a header but no rows"):
        predict_workbook(fit_path, new_path, None, None, False)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fit.xlsx", "new.xlsx"]


def test_more_rows_than_a_sheet_holds_continue_on_more_sheets(results, tmp_path, monkeypatch):
    monkeypatch.setattr(predictions, "MAX_DATA_ROWS", 3)
    fit_path = write_results(results, tmp_path / "fit.xlsx")
    new_path = tmp_path / "new.xlsx"
    rows = [["ABC"[i % 3], f"row {i}", 1.0 + i, 2.0] for i in range(7)]
    write_new_rows(new_path, rows)
    done = summary_of(fit_path, new_path, None, None, False)
    assert done.sheets == ("predictions", "predictions (2)", "predictions (3)")
    assert (done.rows, done.predicted) == (7, 7)
    assert done.lines()[1] == ("more rows than one sheet holds: written on 3 sheets "
                               "(predictions, predictions (2), predictions (3))")
    wb = openpyxl.load_workbook(done.path, read_only=True)
    assert wb.sheetnames == ["predictions", "predictions (2)", "predictions (3)", "about"]
    seen = []
    for name in wb.sheetnames[:3]:
        table = list(wb[name].iter_rows(values_only=True))
        assert table[0][:3] == ("source row", "g", "note")      # every part has the header
        seen += [r[2] for r in table[1:]]
    assert seen == [r[1] for r in rows]
    about = dict(wb["about"].iter_rows(values_only=True))
    assert "continues on 'predictions (2)', 'predictions (3)'" in about["sheets"]
    wb.close()


def test_a_full_disk_or_a_too_long_name_is_one_line(results, tmp_path, monkeypatch):
    import xlsxwriter
    from xlsxwriter.exceptions import FileCreateError

    fit_path = write_results(results, tmp_path / "fit.xlsx")
    new_path = tmp_path / "new.xlsx"
    write_new_rows(new_path, [["A", "", 2.0, 5.0]])
    long_name = tmp_path / ("p" * 300 + ".xlsx")
    with pytest.raises(OutputError, match="the name is too long for the file system; choose a shorter name"):
        predict_workbook(fit_path, new_path, None, long_name, False)

    def full(self):
        raise FileCreateError(OSError(errno.ENOSPC, "No space left on device"))

    monkeypatch.setattr(xlsxwriter.Workbook, "close", full)
    with pytest.raises(OutputError) as err:
        predict_workbook(fit_path, new_path, None, tmp_path / "p.xlsx", False)
    assert str(err.value).startswith(f'no space left on the disk while writing "{tmp_path / "p.xlsx"}"')
    assert sorted(p.name for p in tmp_path.iterdir()) == ["fit.xlsx", "new.xlsx"]     # no temporary file


def test_a_column_named_like_one_of_ours_shows_as_input(tmp_path):
    # the user's columns and ours meet by name in sheetfit.predict and on the predictions sheet: a user
    # column named like one of ours is shown as `NAME (input)` (results.headers.shown_names), so each
    # name appears once and the highlight rules find our columns
    from openpyxl.utils import get_column_letter

    df = frame().rename(columns={"g": "predicted value"})
    res = fit_frame(df, group="predicted value", y="y", x=X_TERMS)
    got = sheetfit.predict(res, pd.DataFrame({"predicted value": ["A", "X"], "x": [2.0, 2.0], "z": [5.0, 5.0]}))
    assert list(got.columns) == ["predicted value (input)", "x", "z", *RESULT_COLUMNS]
    assert got["predicted value (input)"].tolist() == ["A", "X"]
    assert np.isfinite(got["predicted value"][0]) and got["reason"][1].startswith('no fitted model for group "X"')

    fit_path = write_results(res, tmp_path / "fit.xlsx")
    new_path = tmp_path / "new.xlsx"
    write_new_rows(new_path, [["A", "mine", 7, 2.0, 5.0], ["X", "mine too", 8, 2.0, 5.0]],
                   header=("predicted value", "reason", "source row", "x", "z"))
    out = predict_workbook(fit_path, new_path, "new", None, False)
    wb = openpyxl.load_workbook(out)
    ws = wb["predictions"]
    head = [c.value for c in ws[1]]
    assert head == ["source row", "predicted value (input)", "reason (input)", "source row (input)", "x", "z",
                    *RESULT_COLUMNS]
    body = [dict(zip(head, (c.value for c in row))) for row in ws.iter_rows(min_row=2)]
    assert [b["reason (input)"] for b in body] == ["mine", "mine too"]
    assert [b["source row"] for b in body] == [2, 3] and [b["source row (input)"] for b in body] == [7, 8]
    assert isinstance(body[0]["predicted value"], float) and body[1]["predicted value"] is None
    ours = get_column_letter(head.index("reason") + 1)
    rules = [r.formula[0] for cf in ws.conditional_formatting for r in cf.rules]
    assert any(f.startswith("LEN(") and f"${ours}2" in f for f in rules), rules
    about = dict(wb["about"].iter_rows(values_only=True))
    assert '"reason" as "reason (input)"' in about["renamed columns"]
    wb.close()


def test_results_written_with_the_old_intercept_label_are_still_read(results, data, tmp_path):
    # workbooks written before the intercept was labelled `constant` call it `(intercept)` on the store
    # sheet; the store finds the intercept by its kind, so they predict the same
    fit_path = write_results(results, tmp_path / "fit.xlsx")
    wb = openpyxl.load_workbook(fit_path)
    ws = wb["model store"]
    for row in ws.iter_rows():
        for cell in row:
            if isinstance(cell.value, str) and "constant" in cell.value:
                cell.value = cell.value.replace("constant", "(intercept)")
    old = tmp_path / "old-fit.xlsx"
    wb.save(old)
    store = read_store(old)
    assert store.intercept and store.term_labels[0] == "constant"
    new = pd.DataFrame({"g": ["A", "B"], "x": [2.0, 7.5], "z": [5.0, 1.5]})
    pd.testing.assert_frame_equal(sheetfit.predict(old, new), sheetfit.predict(results, new), rtol=1e-12)


def test_new_rows_find_their_group_whatever_the_unicode_form(tmp_path):
    """A group name typed with a decomposed accent finds the group stored in composed form (NFC)."""
    import unicodedata

    rng = np.random.default_rng(7)
    x = rng.uniform(0, 10, 30)
    frame = pd.DataFrame({"g": unicodedata.normalize("NFC", "Montréal"), "x": x, "y": 2 + 3 * x + rng.normal(size=30)})
    results = fit_frame(frame, y="y", x=["x"], group=["g"])
    new = pd.DataFrame({"g": [unicodedata.normalize("NFD", "Montréal")], "x": [5.0]})
    out = sheetfit.predict(results, new)
    assert out.filter(like="predicted").notna().all(axis=None)


def test_design_rows_for_new_rows_are_the_models_columns(results):
    # oracle: the design built by hand with numpy (constant, x, x², log z), as the statsmodels oracle above uses
    from sheetfit.prediction.compute import design_for_rows

    store = store_from_results(results)
    new = pd.DataFrame({"g": ["B", "A", "nowhere", "C"], "x": [1.5, 4.0, 2.0, 3.0], "z": [0.7, 2.0, 1.0, -1.0]})
    pos, D, reasons = design_for_rows(store, {c: new[c].tolist() for c in new.columns}, len(new))
    assert pos.tolist() == [1, 0, -1, 2]
    assert reasons[:2] == [[], []] and "nowhere" in reasons[2][0] and reasons[3] == ["z is zero or negative, so "
                                                                                     "log(z) is undefined"]
    by_hand = np.column_stack([np.ones(2), new["x"][:2], new["x"][:2] ** 2, np.log(new["z"][:2])])
    np.testing.assert_array_equal(D[:2], by_hand)
    assert np.isnan(D[2:]).all()
