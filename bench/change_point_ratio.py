"""Change-point fits against straight-line fits on the same data, in process, side by side.

10,000 groups × 36 monthly rows (energy use against outdoor temperature, seeded: a mix of heating,
cooling, heating-and-cooling and straight-line sites). Times `fit_observations` (search, fit and
every check) with --change-point auto and with no change point, interleaved, and reports the
ratio. Run from the project root: python -m bench.change_point_ratio [--groups 10000] [--repeat 3]
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
    """Monthly use per site against outdoor temperature: each site one of four shapes, plus noise."""
    rng = np.random.default_rng(seed)
    g = np.repeat(np.arange(groups), rows)
    month = np.tile(np.arange(rows), groups)
    season = 0.5 * (1.0 - np.cos(2.0 * np.pi * month / 12.0))
    cold, warm = rng.uniform(-8, 8, groups)[g], rng.uniform(18, 30, groups)[g]
    temp = cold + (warm - cold) * season + rng.normal(0.0, 1.5, len(g))
    kind = rng.integers(0, 4, groups)[g]
    low, high = rng.uniform(8, 14, groups)[g], rng.uniform(16, 21, groups)[g]
    heat, cool = rng.uniform(20, 80, groups)[g], rng.uniform(20, 80, groups)[g]
    use = 2000.0 + np.where(kind % 2 == 0, heat * np.maximum(0.0, low - temp), 0.0)
    use += np.where(kind >= 2, cool * np.maximum(0.0, temp - high), 0.0)
    use += np.where(kind == 1, 15.0 * temp, 0.0) + rng.normal(0.0, 40.0, len(g))
    return pd.DataFrame({"site": [f"S{i:05d}" for i in g], "month": month.astype(float),
                         "temp": temp, "use": use})


def _time(df: pd.DataFrame, change_point: str) -> float:
    job = make_job({"workbook": "(bench)", "y": "use", "x": ("temp",), "group": ("site",),
                    "order": "month", "change_point": change_point})
    obs = observations_from_frame(df, y="use", x=("temp",), group=("site",), order="month")
    t0 = time.perf_counter()
    fit_observations(obs, job)
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--groups", type=int, default=10_000)
    ap.add_argument("--repeat", type=int, default=3)
    opts = ap.parse_args()
    df = frame(opts.groups)
    line, auto = [], []
    for _ in range(opts.repeat):
        line.append(_time(df, "none"))
        auto.append(_time(df, "auto"))
    s, a = statistics.median(line), statistics.median(auto)
    print(f"{opts.groups:,} groups × 36 rows, one temperature input; fit + every check, median of {opts.repeat}")
    print(f"straight line:        {s:.2f} s")
    print(f"--change-point auto:  {a:.2f} s")
    print(f"ratio: {a / s:.1f}× (target: at most 10×)")


if __name__ == "__main__":
    main()
