"""`n` and `rows dropped` on `groups` agree with `used` on `observations`, for every group.

Oracle: the observations table itself (count of used = yes / no per group), and the README's
definition: n = rows used in the group's fit.
"""

from __future__ import annotations

import numpy as np
import openpyxl
import pandas as pd

import sheetfit


def agree(res) -> None:
    keys = res.key_headers(res.observations)
    key = keys[0]
    counts = res.observations.groupby(key, sort=False)["used in fit"].value_counts().unstack(fill_value=0)
    g = res.groups.set_index(res.key_headers(res.groups)[0])
    for label, row in g.iterrows():
        used = int(counts.loc[label].get("yes", 0))
        unused = int(counts.loc[label].get("no", 0))
        assert (row["rows used"], row["rows not used"]) == (used, unused), label


def test_a_group_whose_responses_are_all_text(tmp_path, cli):
    rng = np.random.default_rng(3)
    book = tmp_path / "in.xlsx"
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Data"
    ws.append(["site", "x", "y"])
    for site in ("a", "b", "c"):
        for _ in range(36):
            x = float(rng.uniform(0, 10))
            ws.append([site, x, "pending" if site == "b" else 1 + 2 * x + float(rng.normal())])
    wb.save(book)
    res = sheetfit.fit_workbook(book, sheet="Data", group="site", y="y", x="x")
    g = res.groups.set_index("site")
    assert g.loc["b", "status"] == "not fitted"
    assert (g.loc["b", "rows used"], g.loc["b", "rows not used"]) == (0, 36)
    assert (g.loc["a", "rows used"], g.loc["a", "rows not used"]) == (36, 0)
    agree(res)
    done = cli("fit", book, "--sheet", "Data", "--group", "site", "--y", "y", "--x", "x")
    assert done.returncode == 0, done.stderr
    sheet = list(openpyxl.load_workbook(tmp_path / "in-fit.xlsx", read_only=True)["groups"].iter_rows(values_only=True))
    head = list(sheet[0])
    b = next(r for r in sheet[1:] if r[0] == "b")
    assert (b[head.index("rows used")], b[head.index("rows not used")]) == (0, 36)


def test_groups_not_fitted_for_other_reasons_use_none_of_their_rows():
    rng = np.random.default_rng(4)
    xs = rng.uniform(0, 10, 36 * 3 + 2)
    xs[36:72] = 5.0                                   # one input value only: not fitted
    ys = 1 + 2 * xs + rng.normal(0, 1, len(xs))
    ys[80] = np.nan                                   # one unusable row in a fitted group
    df = pd.DataFrame({"site": ["a"] * 36 + ["flat"] * 36 + ["c"] * 36 + ["tiny"] * 2, "x": xs, "y": ys})
    res = sheetfit.fit_frame(df, y="y", x="x", group="site")
    g = res.groups.set_index("site")
    assert list(g["status"]) == ["fitted", "not fitted", "fitted", "not fitted"]
    assert g.loc["flat", "rows used"] == 0 and g.loc["flat", "rows not used"] == 36
    assert g.loc["tiny", "rows used"] == 0 and g.loc["tiny", "rows not used"] == 2
    assert g.loc["c", "rows used"] == 35 and g.loc["c", "rows not used"] == 1
    assert (g["rows used"] + g["rows not used"]).tolist() == [36, 36, 36, 2]
    agree(res)
