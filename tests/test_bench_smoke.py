"""The benchmark script runs end to end at its smallest size (a smoke test; no timing is asserted)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

BENCH = Path(__file__).resolve().parents[1] / "bench" / "run.py"


def test_bench_smoke_prints_phase_table(tmp_path: Path) -> None:
    p = subprocess.run([sys.executable, str(BENCH), "--smoke", "--dir", str(tmp_path)],
                       capture_output=True, text=True, timeout=240, stdin=subprocess.DEVNULL)
    assert p.returncode == 0, p.stdout[-2000:] + p.stderr[-2000:]
    out = p.stdout
    assert "| way | read s | fit+checks s | write s |" in out
    for row in ("| hand-written (pandas + statsmodels)", "| sheetfit CLI |", "| I/O floor"):
        assert row in out
    assert "hand-written / sheetfit end to end" in out and "statsmodels loop / sheetfit fit+checks" in out
    assert "- error:" not in out
    # statsmodels is the oracle: the batched engine's estimates and std errors match its per-group OLS
    line = out.split("loop vs sheetfit, largest difference: ")[1].splitlines()[0]
    est = float(line.split("estimates ")[1].split()[0])
    se = float(line.split("std errors ")[1].split()[0])
    assert est < 1e-9 and se < 1e-9, line


def test_change_point_bench_runs_at_a_small_size() -> None:
    p = subprocess.run([sys.executable, "-m", "bench.change_point_ratio", "--groups", "200", "--repeat", "1"],
                       capture_output=True, text=True, timeout=240, stdin=subprocess.DEVNULL,
                       cwd=Path(__file__).resolve().parents[1])
    assert p.returncode == 0, p.stdout[-2000:] + p.stderr[-2000:]
    assert "straight line:" in p.stdout and "--change-point auto:" in p.stdout and "ratio: " in p.stdout


def test_weights_bench_runs_at_a_small_size() -> None:
    p = subprocess.run([sys.executable, "-m", "bench.weights_ratio", "--groups", "200", "--repeat", "1"],
                       capture_output=True, text=True, timeout=240, stdin=subprocess.DEVNULL,
                       cwd=Path(__file__).resolve().parents[1])
    assert p.returncode == 0, p.stdout[-2000:] + p.stderr[-2000:]
    assert "ordinary:" in p.stdout and "--weights 1/x^2:" in p.stdout and "ratio: " in p.stdout
