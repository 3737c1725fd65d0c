"""Weighted fits against ordinary fits on the same data, in process, side by side.

10,000 groups × 36 rows of an invented calibration-like relation whose spread grows with the input,
fitted with weights 1/x² and without. Times `fit_observations` (fit and every check), interleaved, and
reports the ratio. Run from the project root: python -m bench.weights_ratio [--groups 10000] [--repeat 3]
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
import pandas as pd

from sheetfit.job import make_job
from sheetfit.pipeline import fit_observations
from sheetfit.read.frame import observations_from_frame


def frame(groups: int = 10_000, rows: int = 36, seed: int = 20261204) -> pd.DataFrame:
    """Per group a line in x on [1, 30] whose scatter is proportional to x."""
    rng = np.random.default_rng(seed)
    g = np.repeat(np.arange(groups), rows)
    x = rng.uniform(1.0, 30.0, len(g))
    y = rng.uniform(0, 5, groups)[g] + rng.uniform(1, 3, groups)[g] * x + rng.normal(0.0, 0.05, len(g)) * x
    return pd.DataFrame({"unit": [f"U{i:05d}" for i in g], "x": x, "y": y})


def _time(df: pd.DataFrame, weights: str | None) -> float:
    settings = {"workbook": "(bench)", "y": "y", "x": ("x",), "group": ("unit",), "weights": weights}
    job = make_job(settings)
    obs = observations_from_frame(df, y="y", x=("x",), group=("unit",), weights=weights)
    t0 = time.perf_counter()
    fit_observations(obs, job)
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--groups", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=3)
    opts = ap.parse_args()
    df = frame(opts.groups)
    plain, weighted = [], []
    for _ in range(opts.repeat):
        plain.append(_time(df, None))
        weighted.append(_time(df, "1/x^2"))
    p, w = statistics.median(plain), statistics.median(weighted)
    print(f"{opts.groups:,} groups × 36 rows, one input; fit + every check, median of {opts.repeat}")
    print(f"ordinary:           {p:.2f} s")
    print(f"--weights 1/x^2:    {w:.2f} s")
    print(f"ratio: {w / p:.2f}×")


if __name__ == "__main__":
    main()
