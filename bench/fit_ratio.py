"""Fit + checks alone, in process: sheetfit's engine vs the per-group statsmodels loop running the
same checks (bench/run.py's loop with all_checks=True). 10,000 groups × 100 rows × 3 inputs, seeded.

The loop is timed on a seeded sample of groups and scaled linearly (stated in the output);
sheetfit runs on all groups. Run from the project root: python -m bench.fit_ratio [--sample 1000] [--repeat 3]
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
import pandas as pd

from bench import run as bench_run


def frame(groups: int = 10_000, rows: int = 100, seed: int = 20240501) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = groups * rows
    X = rng.normal(size=(n, 3)) * [1.0, 10.0, 100.0]
    beta = rng.normal(size=(groups, 3))
    g = np.repeat(np.arange(groups), rows)
    y = 5.0 + (X * beta[g]).sum(axis=1) + rng.normal(size=n)
    return pd.DataFrame({"g": [f"G{i:05d}" for i in g], "x1": X[:, 0], "x2": X[:, 1], "x3": X[:, 2], "y": y})


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sample", type=int, default=1000)
    ap.add_argument("--repeat", type=int, default=3)
    opts = ap.parse_args()
    df = frame()
    xs = ["x1", "x2", "x3"]
    groups = df["g"].unique()
    keys = list(np.random.default_rng(1).choice(groups, size=opts.sample, replace=False))
    sf, loop = [], []
    for _ in range(opts.repeat):
        sf.append(bench_run._sheetfit_in_process(df, xs)["sf_total"])
        t0 = time.perf_counter()
        bench_run._handwritten_loop(df, xs, keys, closed_form=True, all_checks=True)
        loop.append((time.perf_counter() - t0) * len(groups) / opts.sample)
    s, h = statistics.median(sf), statistics.median(loop)
    print(f"{len(groups):,} groups × 100 rows, 3 inputs; median of {opts.repeat}")
    print(f"sheetfit fit + all checks (all groups): {s:.2f} s")
    print(f"statsmodels loop, same checks: {h:.1f} s (timed on {opts.sample:,} groups, scaled ×{len(groups) / opts.sample:g})")
    print(f"ratio: {h / s:.1f}×")


if __name__ == "__main__":
    main()
