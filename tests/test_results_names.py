"""The user's column names never collide with ours, on any sheet, in the model store or its read-back.

Every header of our tables (groups, coefficients, checks, observations, the model store and the
tables behind charts and formulas) is used as a group column, as the response and as an input.
The run must succeed; each sheet must hold the user's values under the user's column (shown as
`NAME (input)` where it meets one of ours) and our values under ours; `sheetfit.predict` on the
results (object and workbook) must give the same finite predictions.
Oracle: the input frame itself (user values) and the FitResults tables (our values).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

import sheetfit
from sheetfit.read.tidy import REASON, SOURCE_ROW, SOURCE_SHEET
from sheetfit.report.tables import CHECKS, COEFFICIENTS, COEFFICIENTS_OPTIONAL, GROUPS, OBS_HEAD, OBS_TAIL
from sheetfit.results.headers import (AVERAGE_HIGH, AVERAGE_LOW, FITTED, GROUP_EXTRA_HEADERS, NEW_ROW_STD_ERROR,
                                      PREDICTED, PREDICTION_HEADERS, shown_names)
from sheetfit.results.store import STORE_NUMBERS
from sheetfit.results.store_read import read_store
from sheetfit.terms import INTERCEPT
from sheetfit.results.store_layout import GROUP_HEADER, SETTING_HEADER, TERM_COLUMNS

# every header sheetfit gives its own columns
OURS = sorted(set(GROUPS) | set(GROUP_EXTRA_HEADERS)
              | set(COEFFICIENTS) | set(COEFFICIENTS_OPTIONAL) | {"robust std error (HC3)", "robust p-value (HC3)"}
              | set(CHECKS) | set(OBS_HEAD) | set(OBS_TAIL)
              | {GROUP_HEADER, *STORE_NUMBERS, *SETTING_HEADER, *TERM_COLUMNS}
              | {"x", FITTED, AVERAGE_LOW, AVERAGE_HIGH, "normal quantile", "standardized residual", "row term",
                 "column term", "value", "column", "min", "max", "first row", "rows", INTERCEPT}
              | set(PREDICTION_HEADERS) | {NEW_ROW_STD_ERROR})
# the reader keeps these three in the same table as the user's columns (sheetfit/read/tidy.py): a file
# naming them is refused there, and a data frame's column is overwritten; not this stage's to fix
READER_NAMES = {SOURCE_SHEET, SOURCE_ROW, REASON}
NAMES = [n for n in OURS if n not in READER_NAMES]
ROWS = 30


def frame(group: str, y: str, x: str, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    xs = rng.uniform(0, 10, 3 * ROWS)
    return pd.DataFrame({group: np.repeat(["north", "south", "east"], ROWS), x: xs,
                         y: 5 + 2 * xs + rng.normal(0, 1, 3 * ROWS)})


def sheet_table(wb, name: str) -> tuple[list[str], list[tuple]]:
    rows = list(wb[name].iter_rows(values_only=True))
    return [str(h) for h in rows[0]], rows[1:]


def column(header: list[str], rows: list[tuple], name: str) -> list:
    assert header.count(name) == 1, f"{name!r} appears {header.count(name)} times in {header}"
    j = header.index(name)
    return [r[j] for r in rows]


def check_workbook(path: Path, res, df: pd.DataFrame, group: str, y: str, x: str) -> None:
    """Each sheet has the user's values under the user's header and ours under ours."""
    wb = openpyxl.load_workbook(path, read_only=True)
    key_groups = res.key_headers(res.groups)[0]
    head, rows = sheet_table(wb, "groups")
    assert column(head, rows, key_groups) == ["north", "south", "east"]
    assert column(head, rows, "status") == ["fitted"] * 3
    assert column(head, rows, "rows used") == [ROWS] * 3
    head, rows = sheet_table(wb, "coefficients")
    assert column(head, rows, res.key_headers(res.coefficients)[0]) == list(np.repeat(["north", "south", "east"], 2))
    assert column(head, rows, "input") == list(res.term_labels) * 3
    assert res.term_labels[0] == (INTERCEPT if x != INTERCEPT else f"{INTERCEPT} (model)")
    head, rows = sheet_table(wb, "checks")
    assert set(column(head, rows, res.key_headers(res.checks)[0])) == {"north", "south", "east"}
    assert "model F-test" in column(head, rows, "check")
    head, rows = sheet_table(wb, "observations")
    assert column(head, rows, res.observation_header(group)) == df[group].tolist()
    assert np.allclose(column(head, rows, res.observation_header(y)), df[y], rtol=1e-15, atol=0)
    assert np.allclose(column(head, rows, res.observation_header(x)), df[x], rtol=1e-15, atol=0)
    assert np.allclose(column(head, rows, "fitted value"), res.observations["fitted value"], rtol=1e-15)
    assert column(head, rows, "used in fit") == ["yes"] * len(df)
    store = read_store(path)                                   # the model store read back
    assert store.group_columns == (group,) and store.y == y and store.sources == (x,)
    assert store.keys == (("north",), ("south",), ("east",))
    assert store.labels == ("north", "south", "east")
    about = " ".join(str(v) for r in wb["about"].iter_rows(values_only=True) for v in r if v)
    renamed = [n for n in (group, y, x) if res.observation_header(n) != n]
    for n in renamed:
        assert f'"{n}" as "{n} (input)"' in about
    wb.close()


def check_predictions(path: Path, res, df: pd.DataFrame) -> None:
    """sheetfit.predict on the results object and on the workbook: the same finite predictions."""
    new = df.head(4).reset_index(drop=True)
    direct = sheetfit.predict(res, new)
    back = sheetfit.predict(path, new)
    for got in (direct, back):
        assert len(set(got.columns)) == len(got.columns)            # a given column never takes our name
        assert list(got.columns[-len(PREDICTION_HEADERS):]) == list(PREDICTION_HEADERS)
        assert np.isfinite(got[PREDICTED].to_numpy(dtype=float)).all()
    assert np.allclose(direct[PREDICTED].to_numpy(dtype=float), back[PREDICTED].to_numpy(dtype=float), rtol=1e-12)


@pytest.mark.parametrize("i", range(len(NAMES)), ids=NAMES)
def test_each_of_our_names_as_response_input_and_group(i, tmp_path):
    # one run per name as the response; the next names in the list are the input and the group
    # column, so every name also serves once as a single input and once as the only group column
    y, x, group = NAMES[i], NAMES[(i + 1) % len(NAMES)], NAMES[(i + 2) % len(NAMES)]
    df = frame(group, y, x, seed=i)
    res = sheetfit.fit_frame(df, y=y, x=[x], group=group)
    assert list(res.groups["status"]) == ["fitted"] * 3                 # ours, by our name
    keys = res.key_headers(res.groups)
    assert keys == shown_names([group], res.groups.columns[1:])
    assert res.groups[keys[0]].tolist() == ["north", "south", "east"]
    obs = res.observations
    assert np.array_equal(obs[res.observation_header(y)].to_numpy(), df[y].to_numpy())
    assert not np.allclose(obs["fitted value"].to_numpy(), df[y].to_numpy())  # ours are the fitted values
    path = sheetfit.write_results(res, tmp_path / "results.xlsx")
    check_workbook(path, res, df, group, y, x)
    check_predictions(path, res, df)


def test_all_our_names_as_group_columns_at_once(tmp_path):
    rng = np.random.default_rng(4)
    n = 2 * ROWS
    data = {name: np.repeat([f"{j}a", f"{j}b"], ROWS) for j, name in enumerate(NAMES)}
    xs = rng.uniform(0, 10, n)
    df = pd.DataFrame({**data, "load": xs, "use": 3 - xs + rng.normal(0, 1, n)})
    res = sheetfit.fit_frame(df, y="use", x=["load"], group=NAMES)
    assert len(res.groups) == 2 and (res.groups["status"] == "fitted").all()
    for table in (res.groups, res.coefficients, res.checks, res.observations, res.curves, res.quantiles,
                  res.xtx_inverse, res.input_ranges):
        keys = res.key_headers(table)
        assert len(set(table.columns)) == len(table.columns)           # no header twice
        assert [str(v)[-1] for v in table[keys[0]].unique()] == ["a", "b"][:table[keys[0]].nunique()]
        for j, name in enumerate(NAMES):                              # each key column keeps its values
            assert set(table[keys[j]].astype(str).str[:-1]) <= {str(j)}
    path = sheetfit.write_results(res, tmp_path / "results.xlsx")
    store = read_store(path)
    assert store.group_columns == tuple(NAMES) and len(store) == 2
    check_predictions(path, res, df)


def test_all_our_names_as_inputs_at_once(tmp_path):
    rng = np.random.default_rng(5)
    inputs = [n for n in NAMES if n not in ("fitted value",)][:12]
    n = 60
    X = rng.uniform(0, 10, (2 * n, len(inputs)))
    df = pd.DataFrame(X, columns=inputs)
    df["site"] = np.repeat(["a", "b"], n)
    df["fitted value"] = X @ np.arange(1.0, len(inputs) + 1) + rng.normal(0, 1, 2 * n)     # the response
    res = sheetfit.fit_frame(df, y="fitted value", x=inputs, group="site")
    assert (res.groups["status"] == "fitted").all()
    obs = res.observations
    for name in [*inputs, "fitted value"]:
        assert np.array_equal(obs[res.observation_header(name)].to_numpy(), df[name].to_numpy())
    path = sheetfit.write_results(res, tmp_path / "results.xlsx")
    wb = openpyxl.load_workbook(path, read_only=True)
    head, rows = sheet_table(wb, "observations")
    assert len(set(head)) == len(head)
    assert np.allclose(column(head, rows, "fitted value (input)"), df["fitted value"], rtol=1e-15, atol=0)
    wb.close()
    assert read_store(path).sources == tuple(inputs)
    check_predictions(path, res, df)


def test_rename_rule_keeps_names_apart_even_from_a_renamed_twin():
    assert shown_names(["status", "status (input)", "site"], ["status", "flags"]) == [
        "status (input 2)", "status (input)", "site"]
    assert shown_names(["a", "b"], ["c"]) == ["a", "b"]


def test_the_cli_on_a_workbook_whose_headers_are_ours(tmp_path, cli):
    # group columns `status` and `term`, response `fitted`, input `leverage`, on a real .xlsx
    rng = np.random.default_rng(9)
    book = tmp_path / "ours.xlsx"
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Data"
    ws.append(["status", "input", "leverage", "fitted value"])
    for g in ("open", "closed"):
        for _ in range(ROWS):
            x = float(rng.uniform(0, 10))
            ws.append([g, "t1", x, 4 + 1.5 * x + float(rng.normal())])
    wb.save(book)
    done = cli("fit", book, "--sheet", "Data", "--group", "status", "--group", "input", "--y", "fitted value",
               "--x", "leverage")
    assert done.returncode == 0, done.stderr
    out = tmp_path / "ours-fit.xlsx"
    res = openpyxl.load_workbook(out, read_only=True)
    head, rows = sheet_table(res, "groups")
    assert column(head, rows, "status (input)") == ["open", "closed"]
    assert column(head, rows, "status") == ["fitted", "fitted"]
    head, rows = sheet_table(res, "coefficients")
    assert column(head, rows, "input (input)") == ["t1"] * 4
    assert column(head, rows, "input") == ["constant", "leverage"] * 2
    head, rows = sheet_table(res, "observations")
    assert math.isclose(column(head, rows, "fitted value (input)")[0], ws.cell(row=2, column=4).value, rel_tol=1e-15)
    assert all(math.isfinite(v) for v in column(head, rows, "fitted value"))
    assert math.isclose(column(head, rows, "leverage (input)")[0], ws.cell(row=2, column=3).value, rel_tol=1e-15)
    res.close()
    new = tmp_path / "new.xlsx"
    nb = openpyxl.Workbook()
    nb.active.append(["status", "input", "leverage"])
    nb.active.append(["open", "t1", 5.0])
    nb.active.append(["closed", "t1", 2.5])
    nb.save(new)
    done = cli("predict", out, new)
    assert done.returncode == 0, done.stderr
    pred = openpyxl.load_workbook(tmp_path / "new-predicted.xlsx", read_only=True)
    head, rows = sheet_table(pred, "predictions")
    assert all(isinstance(v, float) and math.isfinite(v) for v in column(head, rows, "predicted value"))
    pred.close()
