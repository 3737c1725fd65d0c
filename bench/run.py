#!/usr/bin/env python3
"""Benchmark sheetfit against the hand-written pandas + statsmodels way and the plain I/O floor.

Generates seeded workbooks, then times the three ways side by side in one run (median of
--repeat), each in its own process so peak memory is measured alike. See bench/README.md.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import re
import resource
import statistics
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path

SIZES = {"small": (10_000, 100), "medium": (100_000, 1_000), "large": (1_000_000, 10_000)}
SHEET = "data"
HEADER = ["g", "week", "x1", "x2", "x3", "y"]
MISSING_SHARE = 0.001          # share of rows whose response cell is left blank
TAG = "BENCH-JSON "
TIMINGS = re.compile(r"read ([\d.]+) s, fit\+checks ([\d.]+) s, write ([\d.]+) s")
HERE = Path(__file__).resolve()


# ── workbook generation ──

def make_workbook(path: Path, rows: int, groups: int, seed: int) -> None:
    """Seeded workbook: group key, within-group week, three inputs, a response; a few blank responses."""
    import numpy as np
    import xlsxwriter

    rng = np.random.default_rng(seed)
    floor = max(rows // groups // 2, 1)
    sizes = floor + rng.multinomial(rows - floor * groups, np.full(groups, 1.0 / groups))
    code = np.repeat(np.arange(groups), sizes)
    week = np.concatenate([np.arange(1, s + 1) for s in sizes])
    x1 = rng.uniform(0, 100, rows)
    x2 = rng.normal(50, 10, rows)
    x3 = rng.uniform(0, 1, rows)
    a, b1, b2, b3 = (rng.normal(m, s, groups)[code] for m, s in ((200, 50), (3, 1), (-1, 0.5), (20, 5)))
    sigma = rng.uniform(2, 10, groups)[code]
    hetero = (rng.uniform(size=groups) < 0.1)[code]          # a tenth of groups: spread grows with x1
    noise = rng.normal(0, 1, rows) * sigma * np.where(hetero, x1 / 50, 1.0)
    y = a + b1 * x1 + b2 * x2 + b3 * x3 + noise
    blank = rng.uniform(size=rows) < MISSING_SHARE
    labels = [f"G{i:05d}" for i in range(groups)]
    tmp = path.with_suffix(".part.xlsx")
    wb = xlsxwriter.Workbook(str(tmp), {"constant_memory": True})
    ws = wb.add_worksheet(SHEET)
    ws.write_row(0, 0, HEADER)
    cols = zip(code.tolist(), week.tolist(), x1.tolist(), x2.tolist(), x3.tolist(), y.tolist(), blank.tolist())
    for r, (c, w, v1, v2, v3, v, b) in enumerate(cols, start=1):
        ws.write_row(r, 0, (labels[c], w, v1, v2, v3) if b else (labels[c], w, v1, v2, v3, v))
    wb.close()
    tmp.replace(path)


def workbook_for(folder: Path, size: str, seed: int) -> Path:
    rows, groups = SIZES[size]
    path = folder / f"bench-{rows}r-{groups}g-s{seed}.xlsx"
    if not path.exists():
        t = time.perf_counter()
        make_workbook(path, rows, groups, seed)
        print(f"  generated {path.name} ({path.stat().st_size / 1e6:.1f} MB) in {time.perf_counter() - t:.1f} s",
              flush=True)
    return path


# ── workers (run in child processes: `run.py --worker KIND ARGS_JSON`) ──

def _emit(**result) -> None:
    result["peak_self_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(TAG + json.dumps(result), flush=True)


def _more_checks(res) -> tuple[dict, dict]:
    """The rest of sheetfit's checks, the statsmodels/scipy way: per-group and per-coefficient extras."""
    import numpy as np
    from scipy.stats import shapiro
    from statsmodels.stats.diagnostic import acorr_breusch_godfrey, het_white
    from statsmodels.stats.outliers_influence import variance_inflation_factor

    exog = res.model.exog
    sw, sw_p = shapiro(res.resid)
    w_lm, w_p, _, _ = het_white(res.resid, exog)
    with warnings.catch_warnings():   # statsmodels 0.15 announces a change of its return type
        warnings.simplefilter("ignore", FutureWarning)
        bg_lm, bg_p = acorr_breusch_godfrey(res, nlags=1)[:2]
    unit = exog / np.linalg.norm(exog, axis=0)
    lag = int(np.floor(4 * (res.nobs / 100) ** (2 / 9)))
    group = {"Shapiro–Wilk": sw, "SW p-value": sw_p, "White": w_lm, "White p-value": w_p,
             "Breusch–Godfrey": bg_lm, "BG p-value": bg_p, "condition number": np.linalg.cond(unit)}
    coef = {"VIF": [np.nan] + [variance_inflation_factor(exog, j) for j in range(1, exog.shape[1])],
            "HC3 std error": np.asarray(res.HC3_se),
            "HAC std error": res.get_robustcov_results(cov_type="HAC", maxlags=lag).bse}
    return group, coef


def _handwritten_loop(df, xs: list[str], keys: list[str] | None, closed_form: bool, all_checks: bool):
    """The per-group statsmodels loop an analyst would write; returns the three result tables."""
    import numpy as np
    import pandas as pd
    import statsmodels.api as sm
    from statsmodels.stats.diagnostic import het_breuschpagan, linear_reset
    from statsmodels.stats.multitest import multipletests
    from statsmodels.stats.outliers_influence import OLSInfluence
    from statsmodels.stats.stattools import durbin_watson, jarque_bera

    coef_rows, metric_rows, obs_parts = [], [], []
    table = df if keys is None else df[df["g"].isin(keys)]
    for key, sub in table.groupby("g", sort=False):
        sub = sub.dropna(subset=["y", *xs])
        X = sm.add_constant(sub[xs])
        res = sm.OLS(sub["y"], X).fit()
        bp_lm, bp_p, _, _ = het_breuschpagan(res.resid, res.model.exog)
        jb, jb_p, _, _ = jarque_bera(res.resid)
        dw = durbin_watson(res.resid)
        reset = linear_reset(res, power=3, use_f=True)
        infl = OLSInfluence(res)
        lev = infl.hat_matrix_diag
        cooks = infl.cooks_distance[0]
        if closed_form:   # textbook leave-one-out variance identity, no refits
            s2 = (res.ssr - res.resid**2 / (1 - lev)) / (res.df_resid - 1)
            stud = infl.get_resid_studentized_external(sigma=np.sqrt(s2))
        else:             # statsmodels' own attribute: refits the group once per row
            stud = infl.resid_studentized_external
        more_group, more_coef = _more_checks(res) if all_checks else ({}, {})
        ci = res.conf_int()
        coef_rows.append(pd.DataFrame({"g": key, "term": res.params.index, "estimate": res.params.values,
                                       "std error": res.bse.values, "t": res.tvalues.values,
                                       "p-value": res.pvalues.values, "CI low": ci[0].values,
                                       "CI high": ci[1].values, **more_coef}))
        metric_rows.append({"g": key, "n": int(res.nobs), "R²": res.rsquared, "adjusted R²": res.rsquared_adj,
                            "F": res.fvalue, "F p-value": res.f_pvalue, "AIC": res.aic, "BIC": res.bic,
                            "Breusch–Pagan": bp_lm, "BP p-value": bp_p, "Jarque–Bera": jb, "JB p-value": jb_p,
                            "Durbin–Watson": dw, "RESET F": float(reset.fvalue),
                            "RESET p-value": float(reset.pvalue), **more_group})
        part = sub.copy()
        part["fitted"] = res.fittedvalues
        part["residual"] = res.resid
        part["studentized residual"] = np.asarray(stud)
        part["leverage"] = lev
        part["Cook's distance"] = cooks
        obs_parts.append(part)
    metrics = pd.DataFrame(metric_rows)
    if all_checks:   # false-discovery-rate adjustment of each check's p-values across groups
        for c in [c for c in metrics.columns if c.endswith("p-value") and c != "F p-value"]:
            metrics[c.replace("p-value", "adjusted p-value")] = multipletests(metrics[c], method="fdr_bh")[1]
    return pd.concat(coef_rows, ignore_index=True), metrics, pd.concat(obs_parts)


def worker_handwritten(a: dict) -> None:
    """read_excel → statsmodels groupby loop → to_excel; then sheetfit's fit+checks on the same frame."""
    import numpy as np
    import pandas as pd
    import statsmodels.api  # noqa: F401  (imports stay outside the timed phases, as for sheetfit's phases)
    import statsmodels.stats.diagnostic  # noqa: F401
    import statsmodels.stats.outliers_influence  # noqa: F401

    xs = [f"x{i}" for i in range(1, a["inputs"] + 1)]
    t0 = time.perf_counter()
    df = pd.read_excel(a["file"], sheet_name=SHEET)
    t_read = time.perf_counter() - t0
    all_keys = df["g"].unique()
    keys = None
    if a["baseline_groups"] and a["baseline_groups"] < len(all_keys):
        rng = np.random.default_rng(a["seed"])
        keys = list(np.sort(rng.choice(all_keys, a["baseline_groups"], replace=False)))
    t0 = time.perf_counter()
    coef, metrics, obs = _handwritten_loop(df, xs, keys, a["closed_form"], a["all_checks"])
    t_fit = time.perf_counter() - t0
    t0 = time.perf_counter()
    with pd.ExcelWriter(a["out"]) as w:
        engine = w.engine
        coef.to_excel(w, sheet_name="coefficients", index=False)
        metrics.to_excel(w, sheet_name="metrics", index=False)
        obs.to_excel(w, sheet_name="observations", index=False)
    t_write = time.perf_counter() - t0
    cells = sum(t.shape[0] * t.shape[1] for t in (coef, metrics, obs))  # scaled below when sampled
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    # scale a sampled loop to all groups (and its write to all rows), labelled as extrapolated
    timed = len(all_keys) if keys is None else len(keys)
    scale_fit = len(all_keys) / timed
    scale_write = 1.0 if keys is None else len(df) / max(len(obs), 1)

    sf = _sheetfit_in_process(df, xs)
    diff = _compare(coef, sf.pop("coefficients"))
    sf["sf_total_warm"] = _sheetfit_in_process(df, xs)["sf_total"]   # second call: memory already touched
    _emit(read=t_read, fit=t_fit * scale_fit, write=t_write * scale_write, fit_measured=t_fit,
          write_measured=t_write, groups_timed=timed, groups=len(all_keys), cells=round(cells * scale_write),
          extrapolated=keys is not None, peak_handwritten_mb=peak, engine=engine,
          **diff, **sf)


def _sheetfit_in_process(df, xs: list[str]) -> dict:
    """sheetfit's fit+checks alone on an in-memory frame (frame → observations → fit_observations)."""
    from sheetfit.job import make_job
    from sheetfit.pipeline import fit_observations
    from sheetfit.read.frame import observations_from_frame

    job = make_job({"workbook": "(in memory)", "y": "y", "x": tuple(xs), "group": ("g",)})
    t0 = time.perf_counter()
    obs = observations_from_frame(df, y="y", x=xs, group=["g"])
    t1 = time.perf_counter()
    res = fit_observations(obs, job)
    t2 = time.perf_counter()
    return {"sf_frame": t1 - t0, "sf_fit": t2 - t1, "sf_total": t2 - t0, "coefficients": res.coefficients}


def _compare(hand, sf) -> dict:
    """Largest differences between the loop and sheetfit: std errors relative to themselves; estimates
    relative to max(|estimate|, std error), since an estimate near zero has no relative digits to match."""
    import numpy as np

    from sheetfit.results.headers import COEFFICIENT, INPUT
    from sheetfit.terms import INTERCEPT

    sf = sf.rename(columns={INPUT: "term", COEFFICIENT: "estimate"})
    sf = sf.assign(term=sf["term"].replace({INTERCEPT: "const"}))
    m = hand.merge(sf, on=["g", "term"], suffixes=("", " sf"))
    if len(m) != len(hand):
        return {"diff_estimate": float("nan"), "diff_se": float("nan")}
    est, est_sf = m["estimate"].to_numpy(float), m["estimate sf"].to_numpy(float)
    se, se_sf = m["std error"].to_numpy(float), m["std error sf"].to_numpy(float)
    return {"diff_estimate": float(np.max(np.abs(est - est_sf) / np.maximum(np.abs(est), se))),
            "diff_se": float(np.max(np.abs(se - se_sf) / se))}


def worker_floor(a: dict) -> None:
    """Plain calamine read of the input sheet + constant_memory xlsxwriter write of sheetfit's output cells."""
    import xlsxwriter
    from python_calamine import CalamineWorkbook

    t0 = time.perf_counter()
    data = CalamineWorkbook.from_path(a["file"]).get_sheet_by_name(SHEET).to_python()
    t_read = time.perf_counter() - t0
    del data
    if not Path(a["sheetfit_out"]).exists():
        sys.exit("no sheetfit results workbook to copy the cells of (the sheetfit run failed)")
    book = CalamineWorkbook.from_path(a["sheetfit_out"])
    sheets = [(n, book.get_sheet_by_name(n).to_python()) for n in book.sheet_names]
    cells = sum(1 for _, rows in sheets for row in rows for v in row if v != "")
    t0 = time.perf_counter()
    wb = xlsxwriter.Workbook(a["out"], {"constant_memory": True})
    for name, rows in sheets:
        ws = wb.add_worksheet(name)
        for r, row in enumerate(rows):
            ws.write_row(r, 0, row)
    wb.close()
    t_write = time.perf_counter() - t0
    _emit(read=t_read, write=t_write, cells=cells, sheets=len(sheets))


# ── the parent: run, collect, print ──

def timed_child(cmd: list[str], env: dict | None = None) -> dict:
    """Run a child process under /usr/bin/time -v when present; wall time, peak RSS, output."""
    gnu_time = Path("/usr/bin/time").exists()
    full = ["/usr/bin/time", "-v", *cmd] if gnu_time else cmd
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    t0 = time.perf_counter()
    p = subprocess.run(full, capture_output=True, text=True, env=env, stdin=subprocess.DEVNULL)
    wall = time.perf_counter() - t0
    cpu = sum(float(v) for v in re.findall(r"(?:User|System) time \(seconds\): ([\d.]+)", p.stderr))
    m = re.search(r"Maximum resident set size \(kbytes\): (\d+)", p.stderr)
    if m:
        peak = int(m.group(1)) / 1024
    else:  # RUSAGE_CHILDREN keeps the largest child so far: only meaningful when it grew
        after = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
        peak = after / 1024 if after > before else float("nan")
    return {"rc": p.returncode, "wall": wall, "cpu": cpu if gnu_time else float("nan"), "peak_mb": peak,
            "stdout": p.stdout, "stderr": p.stderr}


def run_worker(kind: str, args: dict) -> dict:
    r = timed_child([sys.executable, str(HERE), "--worker", kind, json.dumps(args)])
    line = next((s for s in r["stdout"].splitlines() if s.startswith(TAG)), None)
    if r["rc"] != 0 or line is None:
        return {"error": _last_line(r["stderr"]), "wall": r["wall"], "peak_mb": r["peak_mb"]}
    return {**json.loads(line[len(TAG):]), "wall": r["wall"], "cpu": r["cpu"], "peak_mb": r["peak_mb"]}


def run_sheetfit(file: Path, out: Path, inputs: int) -> dict:
    xs = [a for i in range(1, inputs + 1) for a in ("--x", f"x{i}")]
    cmd = [sys.executable, "-m", "sheetfit", "fit", str(file), "--sheet", SHEET, "--group", "g", "--y", "y", *xs,
           "--out", str(out), "--overwrite", "--quiet"]
    r = timed_child(cmd, env={**os.environ, "SHEETFIT_TIMINGS": "1"})
    res = {"wall": r["wall"], "cpu": r["cpu"], "peak_mb": r["peak_mb"], "command": " ".join(cmd[1:])}
    if r["rc"] != 0:
        return {**res, "error": _last_line(r["stderr"])}
    m = TIMINGS.search(r["stderr"])
    if m:
        res.update(read=float(m.group(1)), fit=float(m.group(2)), write=float(m.group(3)))
        res["other"] = r["wall"] - res["read"] - res["fit"] - res["write"]
    return res


def _last_line(text: str) -> str:
    lines = [s for s in text.strip().splitlines() if s.strip() and not s.startswith("\t")]
    return lines[-1][:300] if lines else "(no message)"


def median_of(runs: list[dict], key: str) -> float:
    vals = [r[key] for r in runs if isinstance(r.get(key), (int, float))]
    return statistics.median(vals) if vals else float("nan")


def bench_size(size: str, folder: Path, opts: argparse.Namespace) -> dict:
    rows, groups = SIZES[size]
    print(f"\n## {size}: {rows:,} rows, {groups:,} groups, {opts.inputs} input(s)", flush=True)
    file = workbook_for(folder, size, opts.seed)
    sf_out = folder / f"sheetfit-{size}.xlsx"
    base = {"file": str(file), "inputs": opts.inputs, "seed": opts.seed}
    hand_args = {**base, "out": str(folder / f"hand-{size}.xlsx"), "closed_form": not opts.loo_studentized,
                 "baseline_groups": opts.baseline_groups, "all_checks": opts.all_checks}
    runs: dict[str, list[dict]] = {"sheetfit": [], "floor": [], "hand": []}
    for i in range(opts.repeat):
        print(f"  repeat {i + 1}/{opts.repeat}:", end="", flush=True)
        for name, call in (("sheetfit", lambda: run_sheetfit(file, sf_out, opts.inputs)),
                           ("floor", lambda: run_worker("floor", {**base, "out": str(folder / f"floor-{size}.xlsx"),
                                                                  "sheetfit_out": str(sf_out)})),
                           ("hand", lambda: run_worker("handwritten", hand_args))):
            if name == "hand" and opts.skip_handwritten:
                continue
            r = call()
            runs[name].append(r)
            print(f" {name} {r['wall']:.1f} s" + (" (failed)" if "error" in r else ""), end="", flush=True)
        print(flush=True)
    return {"size": size, "rows": rows, "groups": groups, "inputs": opts.inputs, "file_mb": file.stat().st_size / 1e6,
            "all_checks": opts.all_checks, "runs": runs}


def summarise(res: dict) -> dict:
    """Medians per phase and the three ratios."""
    sf, fl, hd = res["runs"]["sheetfit"], res["runs"]["floor"], res["runs"]["hand"]
    ok = lambda rs: [r for r in rs if "error" not in r]  # noqa: E731
    s = {"errors": sorted({f"{k}: {r['error']}" for k, rs in res["runs"].items() for r in rs if "error" in r})}
    s["sheetfit"] = {k: median_of(ok(sf), k) for k in ("read", "fit", "write", "other", "wall", "cpu", "peak_mb")}
    s["floor"] = {k: median_of(ok(fl), k) for k in ("read", "write", "peak_mb", "cells", "cpu")}
    s["floor"]["total"] = median_of([{"t": r["read"] + r["write"]} for r in ok(fl)], "t")
    s["hand"] = {k: median_of(ok(hd), k) for k in ("read", "fit", "write", "peak_handwritten_mb", "sf_fit",
                                                   "sf_total", "sf_total_warm", "sf_frame", "diff_estimate", "diff_se", "cells", "cpu")}
    s["hand"]["total"] = median_of([{"t": r["read"] + r["fit"] + r["write"]} for r in ok(hd)], "t")
    s["hand"]["extrapolated"] = bool(ok(hd) and ok(hd)[0]["extrapolated"])
    s["hand"]["groups_timed"] = ok(hd)[0]["groups_timed"] if ok(hd) else 0
    s["command"] = sf[0].get("command", "") if sf else ""
    h, f, w = s["hand"], s["floor"], s["sheetfit"]["wall"]
    s["ratios"] = {"hand_over_sheetfit": h["total"] / w, "sheetfit_over_floor": w / f["total"],
                   "loop_over_sheetfit_fit": h["fit"] / h["sf_total"],
                   "loop_over_sheetfit_fit_warm": h["fit"] / h["sf_total_warm"]}
    return s


def fmt(v: float, digits: int = 2) -> str:
    return "–" if v != v else f"{v:,.{digits}f}"


def report(res: dict, s: dict) -> list[str]:
    h, sf, fl = s["hand"], s["sheetfit"], s["floor"]
    ex = f" (fit+checks extrapolated from {h['groups_timed']:,} of {res['groups']:,} groups)" if h["extrapolated"] else ""
    lines = [f"### {res['size']}: {res['rows']:,} rows × {len(HEADER)} columns, {res['groups']:,} groups, "
             f"{res['inputs']} input(s), {res['file_mb']:.1f} MB; median of {len(res['runs']['sheetfit'])}", "",
             "| way | read s | fit+checks s | write s | start-up, hashing s | end to end s | CPU s (whole process) "
             "| peak memory MB |",
             "|---|---:|---:|---:|---:|---:|---:|---:|",
             f"| hand-written (pandas + statsmodels{', all checks' if res['all_checks'] else ''}){'*' if ex else ''} | {fmt(h['read'])} | {fmt(h['fit'])} | "
             f"{fmt(h['write'])} | not counted | {fmt(h['total'])} | {fmt(h['cpu'])} | "
             f"{fmt(h['peak_handwritten_mb'], 0)} |",
             f"| sheetfit CLI | {fmt(sf['read'])} | {fmt(sf['fit'])} | {fmt(sf['write'])} | {fmt(sf['other'])} | "
             f"{fmt(sf['wall'])} | {fmt(sf['cpu'])} | {fmt(sf['peak_mb'], 0)} |",
             f"| I/O floor (calamine read + xlsxwriter write) | {fmt(fl['read'])} | – | {fmt(fl['write'])} | "
             f"not counted | {fmt(fl['total'])} | {fmt(fl['cpu'])} | {fmt(fl['peak_mb'], 0)} |", ""]
    if ex:
        lines += [f"\\* extrapolated: statsmodels loop timed on {h['groups_timed']:,} groups and scaled linearly "
                  f"to {res['groups']:,}; its write scaled by rows.", ""]
    r = s["ratios"]
    lines += [f"- fit+checks in process, same frame: statsmodels loop {fmt(h['fit'])} s{' (extrapolated)' if ex else ''}"
              f" vs sheetfit {fmt(h['sf_total'])} s on its first call in the process (frame → observations "
              f"{fmt(h['sf_frame'])} s, fit_observations {fmt(h['sf_fit'])} s), {fmt(h['sf_total_warm'])} s on a "
              f"second call",
              f"- loop vs sheetfit, largest difference: estimates {h['diff_estimate']:.1e} (relative to "
              f"max(|estimate|, std error)), std errors {h['diff_se']:.1e} (relative)",
              f"- I/O floor writes the {fmt(fl['cells'], 0)} non-empty cells of sheetfit's results workbook; "
              f"the hand-written way writes {fmt(h['cells'], 0)} cells",
              f"- **ratios**: hand-written / sheetfit end to end = **{fmt(r['hand_over_sheetfit'], 1)}×**; "
              f"sheetfit / I/O floor = **{fmt(r['sheetfit_over_floor'], 2)}×**; "
              f"statsmodels loop / sheetfit fit+checks = **{fmt(r['loop_over_sheetfit_fit'], 1)}×** "
              f"(second call: {fmt(r['loop_over_sheetfit_fit_warm'], 1)}×)"]
    if sf["read"] != sf["read"] and not any(e.startswith("sheetfit") for e in s["errors"]):
        lines.append("- sheetfit phase times not printed (SHEETFIT_TIMINGS=1 not supported yet): end to end only")
    lines += [f"- error: {e}" for e in s["errors"]]
    return lines + [""]


def machine() -> list[str]:
    from importlib.metadata import PackageNotFoundError, version

    cpu = next((ln.split(":", 1)[1].strip() for ln in Path("/proc/cpuinfo").read_text().splitlines()
                if ln.startswith("model name")), platform.processor()) if Path("/proc/cpuinfo").exists() else \
        platform.processor()
    ram = next((int(ln.split()[1]) / 1024**2 for ln in Path("/proc/meminfo").read_text().splitlines()
                if ln.startswith("MemTotal")), float("nan")) if Path("/proc/meminfo").exists() else float("nan")
    pkgs = []
    for p in ("sheetfit", "numpy", "pandas", "scipy", "statsmodels", "openpyxl", "xlsxwriter", "python-calamine"):
        try:
            pkgs.append(f"{p} {version(p)}")
        except PackageNotFoundError:
            pkgs.append(f"{p} (not installed)")
    return [f"- CPU: {cpu}, {os.cpu_count()} cores; RAM {ram:.1f} GB; {platform.platform()}",
            f"- Python {platform.python_version()}; " + ", ".join(pkgs),
            f"- load average at start: {', '.join(f'{v:.2f}' for v in os.getloadavg())}",
            f"- peak memory: {'/usr/bin/time -v' if Path('/usr/bin/time').exists() else 'getrusage'} "
            "(maximum resident set size of each child process)"]


def help_time(repeat: int) -> float:
    """Median wall time of `python -m sheetfit --help` (start-up of the command line)."""
    times = []
    for _ in range(max(repeat, 3)):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-m", "sheetfit", "--help"], capture_output=True, stdin=subprocess.DEVNULL)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def source_digest() -> str:
    """Short digest of sheetfit's source files, to tell which code a recorded run measured."""
    import hashlib

    import sheetfit

    h = hashlib.sha256()
    for f in sorted(Path(sheetfit.__file__).parent.rglob("*.py")):
        h.update(f.read_bytes())
    return h.hexdigest()[:12]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="small,medium,large", help="comma list of small, medium, large")
    ap.add_argument("--repeat", type=int, default=3, help="runs per way; the median is reported")
    ap.add_argument("--inputs", type=int, default=3, choices=(1, 2, 3), help="inputs in the model (x1…x3)")
    ap.add_argument("--seed", type=int, default=20240501)
    ap.add_argument("--dir", type=Path, help="folder for workbooks (kept and reused); default: a temp folder")
    ap.add_argument("--baseline-groups", type=int, default=0, metavar="N",
                    help="time the statsmodels loop on N sampled groups and scale linearly (labelled)")
    ap.add_argument("--loo-studentized", action="store_true",
                    help="hand-written way uses statsmodels' resid_studentized_external (refits each row)")
    ap.add_argument("--all-checks", action="store_true",
                    help="hand-written way also runs the rest of sheetfit's checks (Shapiro–Wilk, White, "
                         "Breusch–Godfrey, VIF, condition number, HC3 and HAC std errors, BH adjustment)")
    ap.add_argument("--skip-handwritten", action="store_true", help="time only sheetfit and the I/O floor")
    ap.add_argument("--smoke", action="store_true", help="smallest size, one run, loop on 20 groups (CI)")
    ap.add_argument("--json", type=Path, help="also write all measurements to this JSON file")
    ap.add_argument("--worker", help=argparse.SUPPRESS)
    ap.add_argument("worker_args", nargs="?", help=argparse.SUPPRESS)
    opts = ap.parse_args(argv)
    if opts.worker:
        {"handwritten": worker_handwritten, "floor": worker_floor}[opts.worker](json.loads(opts.worker_args))
        return 0
    if opts.smoke:
        opts.sizes, opts.repeat, opts.baseline_groups = "small", 1, opts.baseline_groups or 20
    sizes = [s.strip() for s in opts.sizes.split(",") if s.strip()]
    bad = [s for s in sizes if s not in SIZES]
    if bad or opts.repeat < 1:
        ap.error(f"--sizes takes {', '.join(SIZES)}; --repeat at least 1")
    tmp = None if opts.dir else tempfile.TemporaryDirectory(prefix="sheetfit-bench-")
    folder = opts.dir or Path(tmp.name)
    folder.mkdir(parents=True, exist_ok=True)
    digest = source_digest()
    print("# sheetfit benchmark\n\n" + "\n".join(machine()) + f"\n- sheetfit source digest: {digest}", flush=True)
    print(f"- command: python bench/run.py {' '.join(argv if argv is not None else sys.argv[1:])}", flush=True)
    print(f"- `python -m sheetfit --help`: {help_time(opts.repeat):.2f} s (median)", flush=True)
    failed = False
    all_results = []
    try:
        for size in sizes:
            res = bench_size(size, folder, opts)
            s = summarise(res)
            failed |= bool(s["errors"])
            print("\n" + "\n".join(report(res, s)), flush=True)
            all_results.append({**res, "summary": s})
    finally:
        if tmp:
            tmp.cleanup()
    if source_digest() != digest:
        print(f"- warning: sheetfit's source changed during the run (now {source_digest()})", flush=True)
    if opts.json:
        opts.json.write_text(json.dumps({"machine": machine(), "results": all_results}, indent=1, default=str))
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
