"""The demo generators: deterministic, the committed workbooks are their output, and each site or
instrument is built the way workbooks/README.md says.

Cold-storage sites are checked on the data, by construction. The calibration instruments are
checked when fitted: lack-of-fit F against statsmodels (OLS of one mean per standard level compared
with the straight line), Breusch–Pagan against statsmodels' het_breuschpagan (Koenker form), and
back-calculated standards and limits from lines fitted by numpy.polyfit."""

from __future__ import annotations

import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from sheetfit import demo
from sheetfit.demo import CDD, KWH, MONTH, PALLETS, REGION, SITE
from sheetfit.demo import calibration as cal
from sheetfit.errors import JobError
from sheetfit.job import load_job_file

ROOT = Path(__file__).resolve().parents[1]
COMMITTED = ROOT / "workbooks" / demo.FILE_NAME
JOB_FILE = ROOT / "workbooks" / "cold-storage-sites.toml"
CAL_JOB_FILE = ROOT / "workbooks" / "lab-calibration.toml"
CAL_WEIGHTED_JOB_FILE = ROOT / "workbooks" / "lab-calibration-weighted.toml"
BEHAVIOUR = {site: how for site, _, how in demo.SITES}
SITE_OF = {how: site for site, _, how in demo.SITES if how != "ok"}


@pytest.fixture(scope="module")
def frame() -> pd.DataFrame:
    return demo.generate_demo()


def numbers(values: pd.Series) -> pd.Series:
    return pd.to_numeric(values.where(values.map(lambda v: isinstance(v, (int, float)))), errors="coerce")


def cell_values(path: Path) -> dict[str, list[tuple]]:
    book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    try:
        return {ws.title: list(ws.iter_rows(values_only=True)) for ws in book.worksheets}
    finally:
        book.close()


def test_same_seed_same_frame(frame):
    pd.testing.assert_frame_equal(frame, demo.generate_demo(demo.SEED))
    assert not frame[KWH].equals(demo.generate_demo(demo.SEED + 1)[KWH])


def test_bytes_are_reproducible(tmp_path):
    a = demo.write_demo_workbook(tmp_path / "a.xlsx")
    b = demo.write_demo_workbook(tmp_path / "b.xlsx")
    assert a.read_bytes() == b.read_bytes()


def test_committed_workbook_is_a_fresh_generation(tmp_path):
    fresh = demo.write_demo_workbook(tmp_path / demo.FILE_NAME)
    assert cell_values(COMMITTED) == cell_values(fresh)


def test_workbook_holds_the_frame(frame):
    rows = cell_values(COMMITTED)[demo.SHEET]
    assert rows[0] == demo.COLUMNS
    assert len(rows) - 1 == len(frame)
    for written, (_, expected) in zip(rows[1:], frame.iterrows()):
        want = tuple(None if isinstance(v, float) and pd.isna(v) else v for v in expected)
        assert written[:2] == want[:2]
        assert written[2] == want[2].to_pydatetime()
        assert written[3:] == want[3:]


def test_month_cells_are_dates_with_a_date_format():
    book = openpyxl.load_workbook(COMMITTED)
    try:
        sheet = book[demo.SHEET]
        cells = [row[2] for row in sheet.iter_rows(min_row=2)]
        assert all(c.is_date for c in cells)
        assert {c.number_format for c in cells} == {"yyyy-mm"}
    finally:
        book.close()


def test_layout(frame):
    assert len(demo.SITES) == 24 and frame[SITE].nunique() == 24
    assert set(frame[REGION]) == set(demo.REGIONS)
    months = sorted(frame[MONTH].unique())
    assert len(months) == 36 and months[0] == pd.Timestamp("2022-01-01") and months[-1] == pd.Timestamp("2024-12-01")
    sizes = frame.groupby(SITE).size()
    assert sizes.drop(SITE_OF["short"]).eq(36).all()
    assert not frame.duplicated([SITE, MONTH]).any()
    assert (frame[CDD] > 0).all()
    assert sorted(frame[MONTH]) == list(frame[MONTH])          # month by month, as README says


def test_short_site_has_two_rows(frame):
    rows = frame[frame[SITE] == SITE_OF["short"]]
    assert len(rows) == demo.SHORT_MONTHS == 2
    assert set(rows[MONTH]) == {pd.Timestamp("2024-11-01"), pd.Timestamp("2024-12-01")}


def test_constant_input_site_has_one_pallets_value(frame):
    rows = frame[frame[SITE] == SITE_OF["constant pallets"]]
    assert set(rows[PALLETS]) == {demo.CONSTANT_PALLETS}
    assert rows[CDD].nunique() > 10


def site_series(frame, how, column):
    rows = frame[frame[SITE] == SITE_OF[how]].sort_values(MONTH)
    return numbers(rows[column]).reset_index(drop=True)


def test_wild_point_is_ten_times_its_neighbours(frame):
    kwh = site_series(frame, "wild point", KWH)
    others = kwh.drop(demo.WILD_MONTH)
    assert kwh[demo.WILD_MONTH] > 5 * others.max()
    assert others.max() < 2 * others.min()


def test_high_leverage_point_is_far_out_in_pallets_only(frame):
    pallets = site_series(frame, "high leverage", PALLETS)
    kwh = site_series(frame, "high leverage", KWH)
    others = pallets.drop(demo.LEVERAGE_MONTH)
    assert pallets[demo.LEVERAGE_MONTH] > 2.5 * others.max()
    assert kwh.drop(demo.LEVERAGE_MONTH).min() <= kwh[demo.LEVERAGE_MONTH] <= kwh.drop(demo.LEVERAGE_MONTH).max()


def test_messy_cells_are_where_the_readme_says(frame):
    readme = (ROOT / "workbooks" / "README.md").read_text(encoding="utf-8")
    rows = cell_values(COMMITTED)[demo.SHEET]
    for cell in demo.MESSY_CELLS:
        month = pd.Timestamp(demo.month_dates()[cell.month])
        index = frame.index[(frame[SITE] == cell.site) & (frame[MONTH] == month)][0]
        sheet_row = index + 2                                   # 1-based, under the header
        value = rows[sheet_row - 1][demo.COLUMNS.index(cell.column)]
        assert BEHAVIOUR[cell.site] == "ok"
        assert f"| {sheet_row} | {cell.site}, {month:%Y-%m} |" in readme
        if cell.kind == "text number":
            assert isinstance(value, str) and float(value.replace(",", "")) > 0
            assert f"`{value}`" in readme
        elif cell.kind == "error":
            assert value == "#N/A"
        else:
            assert value is None


def test_readme_names_every_misbehaving_site():
    readme = (ROOT / "workbooks" / "README.md").read_text(encoding="utf-8")
    for site in SITE_OF.values():
        assert f"| {site} |" in readme


@pytest.mark.parametrize("job_file, file_name, job", [(JOB_FILE, demo.FILE_NAME, demo.DEMO_JOB),
                                                       (CAL_JOB_FILE, cal.FILE_NAME, cal.CALIBRATION_JOB)])
def test_job_file_matches_the_demo_job(job_file, file_name, job):
    settings = load_job_file(job_file)
    assert settings.pop("workbook") == file_name
    assert {k: tuple(v) if isinstance(v, list) else v for k, v in settings.items()} == job
    assert tomllib.loads(job_file.read_text(encoding="utf-8"))  # plain TOML


def test_cli_writes_to_its_folder(tmp_path, cli):
    folder = tmp_path / "out"
    proc = cli("demo", "--dir", folder)
    assert proc.returncode == 0, proc.stderr
    lines = proc.stdout.splitlines()
    assert f"demo workbook: {folder / demo.FILE_NAME}" in lines
    assert f"results: {folder / demo.RESULTS_NAME}" in lines
    assert cell_values(folder / demo.FILE_NAME) == cell_values(COMMITTED)
    groups = cell_values(folder / demo.RESULTS_NAME)["groups"]
    header, body = groups[0], groups[1:]
    status = {row[header.index(SITE)]: row[header.index("status")] for row in body}
    assert status[SITE_OF["short"]] == status[SITE_OF["constant pallets"]] == "not fitted"
    assert sum(s == "fitted" for s in status.values()) == 22
    again = cli("demo", "--dir", folder, "--quiet")               # rerun replaces its own files
    assert again.returncode == 0, again.stderr
    assert len(again.stdout.splitlines()) == 2


def test_demo_flags_the_sites_built_to_misbehave(tmp_path):
    """Sites built to break one assumption are flagged; well-behaved ones are not (by construction)."""
    import sheetfit

    workbook = demo.write_demo_workbook(tmp_path / demo.FILE_NAME)
    job = demo.DEMO_JOB
    results = sheetfit.fit_workbook(workbook, sheet=job["sheets"], group=job["group"], y=job["y"], x=job["x"],
                                    order=job["order"])
    groups = results.groups.set_index(SITE)
    flagged = set(groups.index[groups["flags"] > 0])
    built = {site for how, site in SITE_OF.items() if how not in ("short", "constant pallets")}
    assert built <= flagged
    assert flagged - built == set()


# ── the demo package and its scenarios ──

def test_scenarios_name_their_files_and_jobs(tmp_path):
    """The default scenario is the cold-storage demo with the constants it had before the package."""
    default = demo.find_scenario()
    assert (default.name, default.file_name, default.results_name, default.seed, default.job) == (
        "cold-storage", demo.FILE_NAME, demo.RESULTS_NAME, demo.SEED, demo.DEMO_JOB)
    chosen = demo.find_scenario("calibration")
    assert (chosen.file_name, chosen.results_name, chosen.job) == (cal.FILE_NAME, cal.RESULTS_NAME,
                                                                   cal.CALIBRATION_JOB)
    with pytest.raises(JobError, match='demo scenario "calibrate" not found.*closest match: "calibration"'):
        demo.run_demo(tmp_path, scenario="calibrate")


@pytest.mark.parametrize("scenario, committed", [("cold-storage", COMMITTED), ("calibration", None)])
def test_module_entry_writes_the_scenarios_workbook(tmp_path, scenario, committed):
    """`python -m sheetfit.demo --write PATH [--scenario NAME]` writes what the generator writes."""
    out = tmp_path / "written.xlsx"
    proc = subprocess.run([sys.executable, "-m", "sheetfit.demo", "--write", str(out), "--scenario", scenario],
                          capture_output=True, text=True, timeout=120, stdin=subprocess.DEVNULL, check=False)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == str(out)
    chosen = demo.find_scenario(scenario)
    assert out.read_bytes() == chosen.write(tmp_path / "direct.xlsx", chosen.seed).read_bytes()
    if committed is not None:
        assert out.read_bytes() == committed.read_bytes()


# ── the calibration demo: invented lab instruments ──

CAL_COMMITTED = ROOT / "workbooks" / cal.FILE_NAME
HOW = {name: how for name, _, how in cal.INSTRUMENTS}
INSTRUMENT_OF = {how: name for name, how in HOW.items() if how != "ok"}
ORDINARY = [name for name, how in HOW.items() if how == "ok"]
LOF = "lack of fit (replicates)"


@pytest.fixture(scope="module")
def runs() -> cal.CalibrationRuns:
    return cal.generate_calibration()


@pytest.fixture(scope="module")
def calibration_fit(tmp_path_factory):
    """The calibration demo fitted through the public API, without the calibration extras."""
    import sheetfit

    workbook = cal.write_calibration_workbook(tmp_path_factory.mktemp("calibration") / cal.FILE_NAME)
    job = cal.CALIBRATION_JOB
    return sheetfit.fit_workbook(workbook, sheet=job["sheets"], group=job["group"], y=job["y"], x=job["x"])


def lines_by_numpy(standards: pd.DataFrame) -> dict[str, tuple[float, float, float]]:
    """Per instrument: (constant, slope, residual std error) of its straight line, by numpy.polyfit."""
    out = {}
    for name, rows in standards.groupby(cal.INSTRUMENT, sort=False):
        x, y = rows[cal.CONCENTRATION].to_numpy(float), rows[cal.SIGNAL].to_numpy(float)
        slope, constant = np.polyfit(x, y, 1)                                  # numpy least squares
        resid = y - (constant + slope * x)
        out[name] = (constant, slope, float(np.sqrt(resid @ resid / (len(x) - 2))))
    return out


def test_calibration_same_seed_same_frames(runs):
    again = cal.generate_calibration(cal.SEED)
    pd.testing.assert_frame_equal(runs.standards, again.standards)
    pd.testing.assert_frame_equal(runs.unknowns, again.unknowns)
    assert not runs.standards[cal.SIGNAL].equals(cal.generate_calibration(cal.SEED + 1).standards[cal.SIGNAL])


def test_calibration_workbook_regenerates_byte_for_byte(tmp_path):
    a = cal.write_calibration_workbook(tmp_path / "a.xlsx")
    b = cal.write_calibration_workbook(tmp_path / "b.xlsx")
    assert a.read_bytes() == b.read_bytes() == CAL_COMMITTED.read_bytes()


def test_calibration_workbook_holds_the_frames(runs):
    sheets = cell_values(CAL_COMMITTED)
    assert list(sheets) == [cal.SHEET, cal.UNKNOWNS_SHEET]
    standards, unknowns = sheets[cal.SHEET], sheets[cal.UNKNOWNS_SHEET]
    assert standards[0] == cal.COLUMNS and unknowns[0] == cal.UNKNOWN_COLUMNS
    want = [(n, d.to_pydatetime(), c, r, s) for n, d, c, r, s, _ in runs.standards.itertuples(index=False)]
    assert [row[:-1] for row in standards[1:]] == want
    assert [row[:-1] for row in unknowns[1:]] == list(runs.unknowns.iloc[:, :-1].itertuples(index=False, name=None))
    for rows, frame in ((standards, runs.standards), (unknowns, runs.unknowns)):   # xlsxwriter writes numbers
        np.testing.assert_allclose([row[-1] for row in rows[1:]], frame[cal.WEIGHT], rtol=1e-15)  # to 16 digits


def test_calibration_layout(runs):
    """Twelve instruments, 6–8 levels (three for the few-levels one) with a blank, each in triplicate."""
    frame = runs.standards
    assert list(frame[cal.INSTRUMENT].unique()) == list(HOW) and len(HOW) == 12
    for name, levels, how in cal.INSTRUMENTS:
        rows = frame[frame[cal.INSTRUMENT] == name]
        assert tuple(rows[cal.CONCENTRATION].unique()) == levels and levels[0] == 0.0
        assert (len(levels) == 3) if how == "few levels" else (6 <= len(levels) <= 8)
        assert rows.groupby(cal.CONCENTRATION)[cal.REPLICATE].apply(list).eq([[1, 2, 3]] * len(levels)).all()
        assert rows[cal.RUN_DATE].nunique() == 1 and rows[cal.RUN_DATE].iloc[0].weekday() < 5
    assert frame[cal.RUN_DATE].is_monotonic_increasing and frame[cal.RUN_DATE].nunique() == 12
    unknowns = runs.unknowns
    assert unknowns[cal.MEASUREMENTS].between(1, 3).all() and unknowns[cal.SAMPLE].is_unique
    per = unknowns.groupby(cal.INSTRUMENT).size()
    assert per.drop(cal.UNKNOWN_INSTRUMENT).between(2, 5).all() and set(per.index) - set(HOW) == {cal.UNKNOWN_INSTRUMENT}


def test_calibration_fit_shows_what_each_instrument_was_built_for(calibration_fit, runs):
    """Verdicts at the 5 % level after the Benjamini–Hochberg adjustment, on the shipped seed; the
    statistics that drive them checked against statsmodels."""
    import statsmodels.api as sm
    from statsmodels.stats.diagnostic import het_breuschpagan

    checks = calibration_fit.checks
    failed = {name: set(checks.loc[(checks[cal.INSTRUMENT] == name) & (checks["verdict"] == "fail"), "check"])
              for name in HOW}
    assert LOF in failed[INSTRUMENT_OF["curved"]]
    assert LOF in failed[INSTRUMENT_OF["drifting standard"]]
    assert failed[INSTRUMENT_OF["growing spread"]] & {"constant variance (Breusch–Pagan)", "constant variance (White)"}
    assert failed[INSTRUMENT_OF["few levels"]] == {"enough data"}
    assert all(not failed[name] for name in ORDINARY), {name: failed[name] for name in ORDINARY}
    lof = checks[checks["check"] == LOF].set_index(cal.INSTRUMENT)
    assert (lof.loc[ORDINARY + [INSTRUMENT_OF["few levels"]], "verdict"] == "pass").all()
    for name, rows in runs.standards.groupby(cal.INSTRUMENT, sort=False):
        x, y = rows[cal.CONCENTRATION].to_numpy(float), rows[cal.SIGNAL].to_numpy(float)
        line = sm.OLS(y, sm.add_constant(x)).fit()
        means = sm.OLS(y, pd.get_dummies(x).to_numpy(float)).fit()          # one mean per standard level
        f, p, _ = means.compare_f_test(line)                                 # statsmodels: lack-of-fit F
        np.testing.assert_allclose(lof.loc[name, ["statistic", "p-value"]].to_numpy(float), [f, p], rtol=1e-8)
    spread = runs.standards[runs.standards[cal.INSTRUMENT] == INSTRUMENT_OF["growing spread"]]
    x = sm.add_constant(spread[cal.CONCENTRATION].to_numpy(float))
    lm, lm_p, _, _ = het_breuschpagan(sm.OLS(spread[cal.SIGNAL].to_numpy(float), x).fit().resid, x)  # statsmodels
    bp = checks[(checks[cal.INSTRUMENT] == INSTRUMENT_OF["growing spread"])
                & (checks["check"] == "constant variance (Breusch–Pagan)")].iloc[0]
    np.testing.assert_allclose([bp["statistic"], bp["p-value"]], [lm, lm_p], rtol=1e-8)


def test_drifting_standard_reads_back_off_and_the_others_do_not(runs):
    """Each standard read back through its instrument's line, (signal − constant)/slope, by numpy; the
    limits ±15 %, ±20 % at the lowest non-zero standard, are common practice in method validation."""
    lines = lines_by_numpy(runs.standards)
    frame = runs.standards.assign(back=lambda f: [
        (s - lines[n][0]) / lines[n][1] for n, s in zip(f[cal.INSTRUMENT], f[cal.SIGNAL])])
    frame = frame[frame[cal.CONCENTRATION] > 0]
    deviation = 100.0 * (frame["back"] - frame[cal.CONCENTRATION]) / frame[cal.CONCENTRATION]
    lowest = frame.groupby(cal.INSTRUMENT)[cal.CONCENTRATION].transform("min")
    off = deviation.abs() > np.where(frame[cal.CONCENTRATION] == lowest, 20.0, 15.0)
    drifting = frame[cal.INSTRUMENT] == INSTRUMENT_OF["drifting standard"]
    at_level = drifting & (frame[cal.CONCENTRATION] == cal.DRIFT_LEVEL)
    assert off[at_level].all() and (deviation[at_level] < 0).all()          # built to read low
    assert not off[~at_level].any(), frame[off & ~at_level]
    sheet_rows = [i + 2 for i in frame.index[at_level]]                      # 1-based, under the header
    readme = (ROOT / "workbooks" / "README.md").read_text(encoding="utf-8")
    assert f"(sheet rows {sheet_rows[0]}–{sheet_rows[-1]})" in readme and sheet_rows == list(
        range(sheet_rows[0], sheet_rows[-1] + 1))


def test_unknowns_hold_the_three_built_cases(runs):
    """One response above the calibrated range, one read-back below the limit of quantification
    (10·s/slope: the ICH Q2 approach based on the calibration line) and one unknown instrument,
    each named in workbooks/README.md; lines by numpy.polyfit."""
    lines = lines_by_numpy(runs.standards)
    top = {name: max(levels) for name, levels, _ in cal.INSTRUMENTS}
    known = runs.unknowns[runs.unknowns[cal.INSTRUMENT].isin(list(HOW))]
    b0 = known[cal.INSTRUMENT].map(lambda n: lines[n][0])
    b1 = known[cal.INSTRUMENT].map(lambda n: lines[n][1])
    loq = known[cal.INSTRUMENT].map(lambda n: 10.0 * lines[n][2] / lines[n][1])
    back = (known[cal.SIGNAL] - b0) / b1
    above = known[known[cal.SIGNAL] > b0 + b1 * known[cal.INSTRUMENT].map(top)]
    below = known[back < loq]
    stranger = runs.unknowns[~runs.unknowns[cal.INSTRUMENT].isin(list(HOW))]
    assert len(above) == len(below) == len(stranger) == 1
    readme = (ROOT / "workbooks" / "README.md").read_text(encoding="utf-8")
    for case in (above, below, stranger):
        sample, name = case[cal.SAMPLE].iloc[0], case[cal.INSTRUMENT].iloc[0]
        assert f"| {sample} | {name} |" in readme


def test_readme_names_every_instrument(runs):
    readme = (ROOT / "workbooks" / "README.md").read_text(encoding="utf-8")
    assert f"## Sheet `{cal.SHEET}`: one row per instrument, standard and replicate ({len(runs.standards)} rows" in readme
    assert f"## Sheet `{cal.UNKNOWNS_SHEET}`: the samples to read back ({len(runs.unknowns)} rows)" in readme
    for name, levels, _ in cal.INSTRUMENTS:
        assert f"| {name} | {len(levels)} levels" in readme
    assert "python -m sheetfit.demo --scenario calibration --write workbooks/lab-calibration.xlsx" in readme


def test_run_demo_writes_and_fits_the_calibration_scenario(tmp_path):
    """The calibration scenario through run_demo: its workbook as committed, its results with the
    limits on groups (LOD 3.3·s/slope, LOQ 10·s/slope: the ICH Q2 approach; lines by numpy.polyfit)."""
    folder = tmp_path / "demo"
    workbook, results, out = demo.run_demo(folder, scenario="calibration")
    assert (workbook, out) == (folder / cal.FILE_NAME, folder / cal.RESULTS_NAME) and out.is_file()
    assert workbook.read_bytes() == CAL_COMMITTED.read_bytes()
    groups = results.groups.set_index(cal.INSTRUMENT)
    assert list(groups.index) == list(HOW) and (groups["status"] == "fitted").all()
    lines = lines_by_numpy(cal.generate_calibration().standards)
    s_over_b = np.array([lines[n][2] / abs(lines[n][1]) for n in HOW])
    np.testing.assert_allclose(groups["limit of detection"].to_numpy(float), 3.3 * s_over_b, rtol=1e-9)
    np.testing.assert_allclose(groups["limit of quantification"].to_numpy(float), 10.0 * s_over_b, rtol=1e-9)
    assert set(groups.index[groups["flags"] > 0]) == set(INSTRUMENT_OF.values())


def test_demo_command_writes_the_calibration_scenario(tmp_path):
    from sheetfit.demo import calibration as cal
    from tests.conftest import run_cli

    r = run_cli("demo", "--dir", tmp_path, "--scenario", "calibration", "--quiet", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert f"demo workbook: {tmp_path / cal.FILE_NAME}" in r.stdout
    assert f"results: {tmp_path / cal.RESULTS_NAME}" in r.stdout
    assert run_cli("demo", "--dir", tmp_path, "--scenario", "nowhere", cwd=tmp_path).returncode == 2


# ── the calibration demo fitted with the method's weights ──

SPREAD = INSTRUMENT_OF["growing spread"]
VARIANCE = ("constant variance (Breusch–Pagan)", "constant variance (White)")


@pytest.fixture(scope="module")
def weighted_fit(tmp_path_factory):
    """The calibration demo fitted through the public API with the sheet's Weight column."""
    import sheetfit

    workbook = cal.write_calibration_workbook(tmp_path_factory.mktemp("weighted") / cal.FILE_NAME)
    job = cal.WEIGHTED_JOB
    return sheetfit.fit_workbook(workbook, sheet=job["sheets"], group=job["group"], y=job["y"], x=job["x"],
                                 weights=job["weights"])


def test_weighted_job_file_is_the_demo_job_with_weights():
    settings = load_job_file(CAL_WEIGHTED_JOB_FILE)
    assert settings.pop("workbook") == cal.FILE_NAME
    assert settings.pop("out") == cal.WEIGHTED_RESULTS_NAME
    assert {k: tuple(v) if isinstance(v, list) else v for k, v in settings.items()} == cal.WEIGHTED_JOB
    assert cal.WEIGHTED_JOB == {**cal.CALIBRATION_JOB, "weights": cal.WEIGHT}


def test_weight_columns_follow_the_method(runs):
    """Standards: 1/(1 + 0.5·c)² on the growing-spread instrument, 1 elsewhere. Unknowns: the same at the
    provisional read-back value (unweighted line by numpy.polyfit, rounded to 0.01 mg/L, at least 0)."""
    std = runs.standards
    spread = (std[cal.INSTRUMENT] == SPREAD).to_numpy()
    conc = std[cal.CONCENTRATION].to_numpy(float)
    np.testing.assert_array_equal(std[cal.WEIGHT].to_numpy(float),
                                  np.where(spread, 1.0 / (1.0 + cal.SPREAD_GROWTH * conc) ** 2, 1.0))
    lines = lines_by_numpy(std)
    unknowns = runs.unknowns
    mine = unknowns[unknowns[cal.INSTRUMENT] == SPREAD]
    b0, b1, _ = lines[SPREAD]
    provisional = np.maximum(np.round((mine[cal.SIGNAL].to_numpy(float) - b0) / b1, 2), 0.0)
    np.testing.assert_allclose(mine[cal.WEIGHT].to_numpy(float),
                               1.0 / (1.0 + cal.SPREAD_GROWTH * provisional) ** 2, rtol=1e-12)
    assert (unknowns.loc[unknowns[cal.INSTRUMENT] != SPREAD, cal.WEIGHT] == 1.0).all()
    assert provisional.min() < 2.0 and provisional.max() > 10.0          # one low and one high sample


def test_weighting_settles_the_growing_spread_and_leaves_the_rest(calibration_fit, weighted_fit, runs):
    """Unweighted, Breusch–Pagan and White fail on the growing-spread instrument; weighted they pass, their
    statistics those of statsmodels' het_breuschpagan and het_white on √w·e (WLS by statsmodels, weights
    w/mean(w)). Every other instrument's weights are all 1, so its coefficients keep every bit."""
    import statsmodels.api as sm
    from statsmodels.stats.diagnostic import het_breuschpagan, het_white

    def verdicts(fit):
        c = fit.checks[(fit.checks[cal.INSTRUMENT] == SPREAD) & fit.checks["check"].isin(VARIANCE)]
        return c.set_index("check")
    assert (verdicts(calibration_fit)["verdict"] == "fail").all()
    weighted = verdicts(weighted_fit)
    assert (weighted["verdict"] == "pass").all()
    rows = runs.standards[runs.standards[cal.INSTRUMENT] == SPREAD]
    X = sm.add_constant(rows[cal.CONCENTRATION].to_numpy(float))
    w = rows[cal.WEIGHT].to_numpy(float) / rows[cal.WEIGHT].mean()
    wls = sm.WLS(rows[cal.SIGNAL].to_numpy(float), X, weights=w).fit()                # statsmodels WLS
    e = np.sqrt(w) * wls.resid
    for check, (stat, p, _, _) in zip(VARIANCE, (het_breuschpagan(e, X), het_white(e, X))):   # statsmodels
        np.testing.assert_allclose(weighted.loc[check, ["statistic", "p-value"]].to_numpy(float), [stat, p],
                                   rtol=1e-8)
    coef = weighted_fit.coefficients
    mine = coef[coef[cal.INSTRUMENT] == SPREAD]
    np.testing.assert_allclose(mine["coefficient"].to_numpy(float), wls.params, rtol=1e-9)
    np.testing.assert_allclose(mine["std error"].to_numpy(float), wls.bse, rtol=1e-9)
    group = weighted_fit.groups.set_index(cal.INSTRUMENT).loc[SPREAD]
    np.testing.assert_allclose(group["residual std error"], np.sqrt(wls.scale), rtol=1e-9)

    def others(table):
        return table[table[cal.INSTRUMENT] != SPREAD].reset_index(drop=True)
    pd.testing.assert_frame_equal(others(weighted_fit.coefficients), others(calibration_fit.coefficients),
                                  check_exact=True)
    same = [c for c in calibration_fit.groups.columns if c != "reasons"]   # reasons quote p-values adjusted
    pd.testing.assert_frame_equal(others(weighted_fit.groups)[same], others(calibration_fit.groups)[same],
                                  check_exact=True)                        # across instruments


def weighted_read_back(rows: pd.DataFrame, y0: float, m: float, w0_raw: float, level: float = 0.95
                       ) -> tuple[float, float]:
    """(x̂0, half-width) by the classical weighted inverse-prediction formula with weights scaled to
    average 1: s_x0 = (s/|b1|)·√(1/(m·w0) + 1/Σw + (y0 − ȳw)²/(b1²·Σw(x − x̄w)²)) (Miller & Miller,
    Statistics and Chemometrics for Analytical Chemistry, weighted regression), b0, b1, s from statsmodels WLS."""
    import statsmodels.api as sm
    from scipy import stats

    x, y = rows[cal.CONCENTRATION].to_numpy(float), rows[cal.SIGNAL].to_numpy(float)
    raw = rows[cal.WEIGHT].to_numpy(float)
    w = raw / raw.mean()
    fit = sm.WLS(y, sm.add_constant(x), weights=w).fit()
    b0, b1 = fit.params
    x_bar = (w * x).sum() / w.sum()
    y_bar = (w * y).sum() / w.sum()
    s_x0 = np.sqrt(fit.scale) / abs(b1) * np.sqrt(1.0 / (m * w0_raw / raw.mean()) + 1.0 / w.sum()
                                                  + (y0 - y_bar) ** 2 / (b1**2 * (w * (x - x_bar) ** 2).sum()))
    return (y0 - b0) / b1, float(stats.t.ppf(0.5 + level / 2.0, len(x) - 2) * s_x0)


def test_weighted_job_file_runs_and_reads_unknowns_back(tmp_path, runs):
    """The weighted job file through the real CLI, then `predict --inverse` on the Unknowns sheet: the
    growing-spread instrument's samples match the weighted formula; its low sample's interval is narrower
    and its high sample's wider than unweighted (built in: scatter grows with concentration), and
    workbooks/README.md quotes both intervals."""
    import sheetfit
    from tests.conftest import run_cli

    out = tmp_path / cal.WEIGHTED_RESULTS_NAME
    fit = run_cli("fit", "--job", CAL_WEIGHTED_JOB_FILE, "--out", out, cwd=tmp_path)
    assert fit.returncode == 0, fit.stderr
    predicted = tmp_path / "weighted-read-back.xlsx"
    back = run_cli("predict", out, CAL_COMMITTED, "--sheet", cal.UNKNOWNS_SHEET, "--inverse", "--replicates",
                   cal.MEASUREMENTS, "--out", predicted, cwd=tmp_path)
    assert back.returncode == 0, back.stderr
    sheet = cell_values(predicted)["predictions"]
    table = pd.DataFrame(sheet[1:], columns=sheet[0])
    table = table[table[cal.INSTRUMENT] == SPREAD].set_index(cal.SAMPLE)
    assert len(table) >= 2
    rows = runs.standards[runs.standards[cal.INSTRUMENT] == SPREAD]
    plain = rows.assign(**{cal.WEIGHT: 1.0})
    unweighted = sheetfit.read_back(sheetfit.fit_workbook(CAL_COMMITTED, sheet=cal.SHEET, group=cal.INSTRUMENT,
                                                          y=cal.SIGNAL, x=cal.CONCENTRATION),
                                    runs.unknowns, replicates=cal.MEASUREMENTS).set_axis(runs.unknowns[cal.SAMPLE])
    readme = (ROOT / "workbooks" / "README.md").read_text(encoding="utf-8")
    low, high = table[cal.SIGNAL].idxmin(), table[cal.SIGNAL].idxmax()
    for sample, row in table.iterrows():
        x0, half = weighted_read_back(rows, row[cal.SIGNAL], row[cal.MEASUREMENTS], row[cal.WEIGHT])
        np.testing.assert_allclose([row["read-back input value"], row["read-back high"] - row["read-back input value"]],
                                   [x0, half], rtol=1e-9)
        x0_plain, half_plain = weighted_read_back(plain, row[cal.SIGNAL], row[cal.MEASUREMENTS], 1.0)
        np.testing.assert_allclose(unweighted.loc[sample, ["read-back input value", "read-back high"]].to_numpy(float),
                                   [x0_plain, x0_plain + half_plain], rtol=1e-9)   # the same formula, w = 1
        if sample in (low, high):
            assert (half < half_plain) == (sample == low)
            for value, width in ((x0, half), (x0_plain, half_plain)):
                assert f"{value - width:.3f}–{value + width:.3f}" in readme, (sample, value, width)
