"""What changed since an earlier run (--previous): results.changes and its sheet.

Oracles: statsmodels OLS fits of each period alone and of both periods pooled (the Chow F, from
their residual sums of squares, and scipy.stats.f for its p-value); numpy for the coefficient
changes' std errors from the pooled residual variance; statsmodels multipletests for the
Benjamini–Hochberg adjustment. Data are seeded and invented.
"""

from __future__ import annotations

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.multitest import multipletests
from typer.testing import CliRunner

import sheetfit
from sheetfit.cli import app
from sheetfit.errors import JobError, ResultsWorkbookError
from sheetfit.results.changes import (CHANGE, CHANGE_HIGH, CHANGE_LOW, CHANGE_STD_ERROR, CHANGED, CHOW_F,
    CHOW_P, CHOW_P_ADJUSTED, GONE_GROUP, NEW_GROUP, UNCHANGED, WHAT_CHANGED)
from sheetfit.results.store_read import read_store
from sheetfit.results.store_layout import STORE_SHEET

SLOPES = {"North": 2.0, "South": 2.0, "East": 1.0, "West": 3.0}


def period(seed: int, shift: dict[str, float] | None = None, sites=("North", "South", "East", "West"),
           n: int = 24) -> pd.DataFrame:
    """Invented weekly volume against price for a few sites; `shift` changes a site's slope."""
    rng = np.random.default_rng(seed)
    rows = []
    for site in sites:
        slope = SLOPES[site] + (shift or {}).get(site, 0.0)
        x = rng.uniform(5, 15, n)
        rows += [{"Site": site, "Price": xi, "Volume": 50 - slope * xi + rng.normal(0, 1.0)} for xi in x]
    return pd.DataFrame(rows)


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    folder = tmp_path_factory.mktemp("runs")
    before, after = period(1), period(2, shift={"West": 1.5})
    old = sheetfit.write_results(sheetfit.fit_frame(before, y="Volume", x=["Price"], group="Site"),
                                 folder / "before-fit.xlsx")
    now = sheetfit.fit_frame(after, y="Volume", x=["Price"], group="Site", previous=str(old))
    return before, after, old, now


def test_chow_matches_statsmodels_pooled_and_separate_fits(two_runs):
    before, after, _, now = two_runs
    table = now.changes.groups.set_index("Site")
    raw_p = []
    for site in SLOPES:
        a, b = before[before.Site == site], after[after.Site == site]
        fa = sm.OLS(a.Volume, sm.add_constant(a.Price)).fit()
        fb = sm.OLS(b.Volume, sm.add_constant(b.Price)).fit()
        both = pd.concat([a, b])
        fp = sm.OLS(both.Volume, sm.add_constant(both.Price)).fit()
        k, df2 = 2, len(a) + len(b) - 4
        F = ((fp.ssr - fa.ssr - fb.ssr) / k) / ((fa.ssr + fb.ssr) / df2)      # Chow (1960) from statsmodels fits
        assert table.loc[site, CHOW_F] == pytest.approx(F, rel=1e-9)
        assert table.loc[site, CHOW_P] == pytest.approx(stats.f.sf(F, k, df2), rel=1e-9, abs=1e-300)
        raw_p.append(stats.f.sf(F, k, df2))
        # coefficient changes: now − before, std error √(s²·[(A₁)⁻¹ + (A₂)⁻¹]_jj) with the pooled s² (numpy)
        s2 = (fa.ssr + fb.ssr) / df2
        V = np.linalg.inv(fa.model.exog.T @ fa.model.exog) + np.linalg.inv(fb.model.exog.T @ fb.model.exog)
        coef = now.changes.coefficients[now.changes.coefficients.Site == site]
        np.testing.assert_allclose(coef[CHANGE].to_numpy(float), fb.params - fa.params, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(coef[CHANGE_STD_ERROR].to_numpy(float), np.sqrt(s2 * np.diag(V)), rtol=1e-9)
        t = stats.t.ppf(0.975, df2)
        np.testing.assert_allclose(coef[CHANGE_LOW].to_numpy(float), fb.params - fa.params - t * np.sqrt(s2 * np.diag(V)),
                                   rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(coef[CHANGE_HIGH].to_numpy(float), fb.params - fa.params + t * np.sqrt(s2 * np.diag(V)),
                                   rtol=1e-9, atol=1e-12)
    # Benjamini–Hochberg across groups (statsmodels multipletests)
    np.testing.assert_allclose(table.loc[list(SLOPES), CHOW_P_ADJUSTED].to_numpy(float),
                               multipletests(raw_p, method="fdr_bh")[1], rtol=1e-12)
    assert table.loc["West", WHAT_CHANGED].startswith(CHANGED)
    assert table.loc["North", WHAT_CHANGED] == UNCHANGED


def test_store_sums_reproduce_the_coefficients(two_runs):
    _, _, old, _ = two_runs
    store = read_store(old)
    # X'X b = X'y solved with numpy gives the stored coefficients (to 1e-12)
    np.testing.assert_allclose(np.linalg.solve(store.xtx, store.xty[..., None])[..., 0], store.beta, rtol=1e-12)
    before = period(1)
    for i, site in enumerate(store.labels):
        g = before[before.Site == site]
        X = np.column_stack([np.ones(len(g)), g.Price])
        np.testing.assert_allclose(store.xtx[i], X.T @ X, rtol=1e-13)                  # numpy sums
        assert store.yty[i] == pytest.approx(float(g.Volume @ g.Volume), rel=1e-13)


def test_new_and_gone_groups(tmp_path):
    old = sheetfit.write_results(sheetfit.fit_frame(period(3, sites=("North", "East")), y="Volume", x=["Price"],
                                                    group="Site"), tmp_path / "old.xlsx")
    now = sheetfit.fit_frame(period(4, sites=("North", "West")), y="Volume", x=["Price"], group="Site",
                             previous=str(old))
    words = now.changes.groups.set_index("Site")[WHAT_CHANGED]
    assert words["West"] == NEW_GROUP and words["East"] == GONE_GROUP
    assert now.changes.counts[NEW_GROUP] == 1 and now.changes.counts[GONE_GROUP] == 1


def test_other_model_or_file_is_refused_in_one_line(two_runs, tmp_path):
    _, after, old, _ = two_runs
    with pytest.raises(JobError, match="used the terms"):
        sheetfit.fit_frame(after.assign(P2=after.Price**2), y="Volume", x=["Price", "P2"], group="Site",
                           previous=str(old))
    with pytest.raises(JobError, match="fitted the response"):
        sheetfit.fit_frame(after.assign(V2=after.Volume), y="V2", x=["Price"], group="Site", previous=str(old))
    plain = tmp_path / "plain.xlsx"
    after.to_excel(plain, index=False)
    with pytest.raises(ResultsWorkbookError, match="--previous: .*no \"model store\" sheet"):
        sheetfit.fit_workbook(plain, y="Volume", x=["Price"], group="Site", previous=str(plain))


def test_an_older_store_without_sums_gets_a_clear_message(two_runs, tmp_path):
    _, after, old, _ = two_runs
    wb = openpyxl.load_workbook(old)
    ws = wb[STORE_SHEET]
    for row in ws.iter_rows():
        if row[0].value == "store format":
            row[1].value = 2
    wb.save(tmp_path / "older.xlsx")
    with pytest.raises(JobError, match="earlier sheetfit .* keeps no sufficient statistics"):
        sheetfit.fit_frame(after, y="Volume", x=["Price"], group="Site", previous=str(tmp_path / "older.xlsx"))


def test_cli_previous_writes_the_sheets_and_says_what_changed(two_runs, tmp_path):
    _, after, old, _ = two_runs
    src = tmp_path / "after.xlsx"
    after.to_excel(src, index=False)
    out = tmp_path / "after-fit.xlsx"
    r = CliRunner().invoke(app, ["fit", str(src), "--y", "Volume", "--x", "Price", "--group", "Site",
                                 "--previous", str(old), "--out", str(out)])
    assert r.exit_code == 0, r.output
    assert f"compared with {old.name}: 1 relation changed" in r.output
    wb = openpyxl.load_workbook(out, read_only=True)
    assert "since previous run" in wb.sheetnames and "coefficient changes" in wb.sheetnames
    cells = [c for row in wb["since previous run"].iter_rows(values_only=True) for c in row if c is not None]
    assert "what changed" in cells and any(str(c).startswith(CHANGED) for c in cells)
    missing = CliRunner().invoke(app, ["fit", str(src), "--y", "Volume", "--x", "Price", "--previous",
                                       str(tmp_path / "nope.xlsx"), "--out", str(tmp_path / "other.xlsx")])
    assert missing.exit_code != 0 and "nope.xlsx" in missing.output and "Traceback" not in missing.output


def test_the_demo_second_period_finds_the_sites_built_to_change(tmp_path):
    """README's worked example: 2025 against 2022–2024 finds the three sites whose use was built to change
    (workbooks/README.md: Alderwick −12 %, Glimmerford −9 %, Saltmere +6 %; Orrinwick's 0.4 % is noise)."""
    from pathlib import Path

    book = Path(__file__).resolve().parents[1] / "workbooks" / "cold-storage-sites.xlsx"
    settings = dict(group=["Site"], y="kWh", x=["Cooling degree-days", "Pallets"], order="Month")
    old = sheetfit.write_results(sheetfit.fit_workbook(book, sheet="Monthly", **settings), tmp_path / "base.xlsx")
    now = sheetfit.fit_workbook(book, sheet="After upgrade", previous=str(old), rows_per_coefficient=4, **settings)
    words = now.changes.groups.set_index("Site")[WHAT_CHANGED]
    changed = sorted(words[words.str.startswith(CHANGED)].index)
    assert changed == ["Alderwick", "Glimmerford", "Saltmere"]
    assert now.changes.counts[GONE_GROUP] == 6
