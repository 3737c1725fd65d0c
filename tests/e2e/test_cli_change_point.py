"""End to end: `sheetfit fit --change-point` and `sheetfit predict --actual` through the real CLI on
workbook files, read back with openpyxl.

Oracles: a brute-force search over τ written here with numpy (the least-squares optimum), statsmodels
OLS on hinge columns built by hand at the τ found (coefficients; std errors after the stated
degrees-of-freedom correction: the change point counts, so variances scale by (n − k)/(n − k − 1)),
and statsmodels get_prediction for the reporting-period total. Data are invented and seeded.
"""

from __future__ import annotations

import numpy as np
import openpyxl
import pandas as pd
import statsmodels.api as sm
import xlsxwriter

from tests.conftest import run_cli as run

TAU = {"Ashfield": 14.0, "Bramble": 11.0, "Corrie": 16.0}


def _sites(rng: np.random.Generator, months: int = 36, shift: float = 0.0) -> pd.DataFrame:
    rows = []
    for site, tau in TAU.items():
        temp = rng.uniform(-5.0, 28.0, months)
        use = 900.0 + 40.0 * np.maximum(0.0, tau - temp) + rng.normal(0.0, 15.0, months)
        use *= 1.0 - (shift if site == "Ashfield" else 0.0)
        rows += [(site, m + 1, float(t), float(u)) for m, (t, u) in enumerate(zip(temp, use))]
    return pd.DataFrame(rows, columns=["Site", "Month", "Outdoor", "Use"])


def _book(path, sheets: dict[str, pd.DataFrame]):
    with xlsxwriter.Workbook(str(path)) as wb:
        for name, frame in sheets.items():
            ws = wb.add_worksheet(name)
            ws.write_row(0, 0, list(frame.columns))
            for i, r in enumerate(frame.itertuples(index=False), start=1):
                ws.write_row(i, 0, list(r))
    return path


def _table(path, sheet: str, header_row: int = 0) -> pd.DataFrame:
    rows = list(openpyxl.load_workbook(path, read_only=True)[sheet].values)
    return pd.DataFrame(rows[header_row + 1:], columns=rows[header_row])


def _rss(t: np.ndarray, y: np.ndarray, tau: float) -> float:
    X = np.column_stack([np.ones_like(t), np.maximum(0.0, tau - t)])
    return float(np.sum((y - X @ np.linalg.lstsq(X, y, rcond=None)[0]) ** 2))


def test_heating_baseline_then_savings(tmp_path):
    rng = np.random.default_rng(20261204)
    base, after = _sites(rng), _sites(rng, months=12, shift=0.15)
    book = _book(tmp_path / "sites.xlsx", {"Baseline": base, "After": after})
    fit = run("fit", book, "--sheet", "Baseline", "--group", "Site", "--y", "Use", "--x", "Outdoor",
              "--order", "Month", "--change-point", "heating", "--rows-per-coefficient", "5", cwd=tmp_path)
    assert fit.returncode == 0, fit.stderr
    results = tmp_path / "sites-fit.xlsx"
    groups = _table(results, "groups").set_index("Site")
    coef = _table(results, "coefficients")
    for site in TAU:
        g = base[base["Site"] == site]
        t, y = g["Outdoor"].to_numpy(), g["Use"].to_numpy()
        row = groups.loc[site]
        assert row["shape"] == "heating" and row["change points"] == 1
        tau = float(row["change point"])
        lo, hi = np.sort(t)[2], np.sort(t)[-3]            # README: at least 3 rows on each side
        grid = np.union1d(np.linspace(lo, hi, 4001), t[(t >= lo) & (t <= hi)])
        assert _rss(t, y, tau) <= min(_rss(t, y, v) for v in grid) * (1 + 1e-9)     # brute force (numpy)
        assert float(row["change point low"]) <= tau <= float(row["change point high"])
        X = sm.add_constant(np.maximum(0.0, tau - t))
        ref = sm.OLS(y, X).fit()                                                    # statsmodels
        mine = coef[coef["Site"] == site].set_index("input")
        assert list(mine.index) == ["constant", "Outdoor below change point"]
        np.testing.assert_allclose(mine["coefficient"].astype(float), ref.params, rtol=1e-9)
        n, k = len(y), 2
        np.testing.assert_allclose(mine["std error"].astype(float), ref.bse * np.sqrt((n - k) / (n - k - 1)),
                                   rtol=1e-9)
        assert int(row["number of coefficients"]) == 3            # two coefficients and the change point

    pred = run("predict", results, book, "--sheet", "After", "--actual", "Use", "--out",
               tmp_path / "savings.xlsx", cwd=tmp_path)
    assert pred.returncode == 0, pred.stderr
    assert "savings in 3 groups: 1 saving, 2 within the noise of the baseline" in pred.stdout
    sheet = openpyxl.load_workbook(tmp_path / "savings.xlsx", read_only=True).sheetnames
    assert sheet[0] == "savings by group"
    rows = list(openpyxl.load_workbook(tmp_path / "savings.xlsx", read_only=True)["savings by group"].values)
    at = next(i for i, r in enumerate(rows) if r and r[0] == "Site")
    per_group = pd.DataFrame(rows[at + 1:], columns=rows[at]).set_index("Site")
    for site in TAU:
        g, r = base[base["Site"] == site], after[after["Site"] == site]
        tau = float(groups.loc[site, "change point"])
        t = g["Outdoor"].to_numpy()
        n, k, m = len(t), 2, len(r)
        ref = sm.OLS(g["Use"].to_numpy(), sm.add_constant(np.maximum(0.0, tau - t))).fit()     # statsmodels
        Xr = sm.add_constant(np.maximum(0.0, tau - r["Outdoor"].to_numpy()), has_constant="add")
        d = Xr.sum(axis=0)[None, :]
        avoided = ref.predict(Xr).sum() - r["Use"].sum()
        var = (m * ref.scale + ref.get_prediction(d).se_mean[0] ** 2) * (n - k) / (n - k - 1)
        np.testing.assert_allclose(float(per_group.loc[site, "avoided energy use"]), avoided, rtol=1e-9)
        np.testing.assert_allclose(float(per_group.loc[site, "std error of avoided use"]) ** 2, var, rtol=1e-9)
    assert per_group.loc["Ashfield", "compared with the baseline"] == "less use than the baseline: saving"


def test_change_point_refusals_are_one_line(tmp_path):
    rng = np.random.default_rng(3)
    book = _book(tmp_path / "sites.xlsx", {"Baseline": _sites(rng)})
    common = ("fit", book, "--group", "Site", "--y", "Use", "--x", "Outdoor")
    r = run(*common, "--change-point", "heating", "--no-intercept", cwd=tmp_path)
    assert r.returncode == 1 and r.stderr.count("\n") == 1 and "--no-intercept" in r.stderr
    r = run(*common, "--change-point", "cooling", "--change-point-input", "Month", cwd=tmp_path)
    assert r.returncode == 1 and r.stderr.count("\n") == 1
    assert '--change-point-input "Month" is not one of the plain-column inputs (Outdoor)' in r.stderr
    r = run(*common, "--change-point", "sideways", cwd=tmp_path)
    assert r.returncode == 2
    assert not (tmp_path / "sites-fit.xlsx").exists()


def test_actual_column_missing_is_one_line_and_nothing_is_written(tmp_path):
    rng = np.random.default_rng(5)
    book = _book(tmp_path / "sites.xlsx", {"Baseline": _sites(rng), "After": _sites(rng, 12).drop(columns="Use")})
    assert run("fit", book, "--sheet", "Baseline", "--group", "Site", "--y", "Use", "--x", "Outdoor",
               "--change-point", "auto", cwd=tmp_path).returncode == 0
    r = run("predict", tmp_path / "sites-fit.xlsx", book, "--sheet", "After", "--actual", "Use", cwd=tmp_path)
    assert r.returncode == 1 and r.stderr.count("\n") == 1 and "Use" in r.stderr
    assert not (tmp_path / "sites-predicted.xlsx").exists()
