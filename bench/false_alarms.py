"""Share of clean groups flagged (false alarms) under each multiple-testing adjustment.

200 seeded groups per run (n = 30, y = 5 + 2x + normal error, constant spread), 10 runs.
Run: python bench/false_alarms.py
"""

from __future__ import annotations

import numpy as np
import pandas as pd

import sheetfit


def clean_frame(seed: int, groups: int = 200, n: int = 30) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, size=(groups, n))
    y = 5 + 2 * x + rng.normal(size=(groups, n))
    return pd.DataFrame({"g": np.repeat([f"g{i:03d}" for i in range(groups)], n),
                         "x": x.ravel(), "y": y.ravel()})


def main(runs: int = 10) -> None:
    shares: dict[str, list[float]] = {"bh": [], "holm": [], "none": []}
    by_check: dict[str, float] = {}
    for seed in range(runs):
        frame = clean_frame(seed)
        for method in shares:
            res = sheetfit.fit_frame(frame, y="y", x=["x"], group="g", adjust=method)
            shares[method].append(float((res.groups["flags"] > 0).mean()))
            if method == "none":
                fails = res.checks[res.checks["verdict"] == "fail"]["check"].value_counts()
                for k, v in fails.items():
                    by_check[k] = by_check.get(k, 0.0) + v / (200 * runs)
    print(f"{runs} runs × 200 clean groups (n = 30, one input)")
    for method, s in shares.items():
        print(f"  --adjust {method:4s}: mean share of groups flagged {np.mean(s):6.1%} (max {np.max(s):6.1%})")
    print("  per check without adjustment (share of groups failing):")
    for k, v in sorted(by_check.items(), key=lambda kv: -kv[1]):
        print(f"    {k:42s} {v:6.1%}")


if __name__ == "__main__":
    main()
