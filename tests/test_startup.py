"""Fast start (issue 5): help and usage errors must not load the numeric stack.

Each case runs in a fresh interpreter and lists which heavy modules ended up in sys.modules.
No timing is asserted here; the budget (under 0.5 s) is measured by hand and in bench/.
"""

from __future__ import annotations

import json
import subprocess
import sys
from importlib.metadata import PackageNotFoundError, entry_points

import pytest

HEAVY = ("numpy", "pandas", "scipy", "statsmodels")

PROBE = """
import json, runpy, sys
sys.argv = ["sheetfit", *json.loads(sys.argv[1])]
code = None
try:
    runpy.run_module("sheetfit", run_name="__main__", alter_sys=True)
except SystemExit as exc:
    code = exc.code
heavy = sorted({m.split(".")[0] for m in sys.modules} & {"numpy", "pandas", "scipy", "statsmodels"})
sys.stderr.write("\\nPROBE " + json.dumps({"code": code, "heavy": heavy}) + "\\n")
"""


def probe(*args: str) -> tuple[dict, str]:
    """Run `python -m sheetfit ARGS` in a fresh interpreter; return (exit code + heavy modules, output)."""
    proc = subprocess.run([sys.executable, "-c", PROBE, json.dumps(list(args))], capture_output=True,
                          text=True, timeout=120, stdin=subprocess.DEVNULL)
    line = [ln for ln in proc.stderr.splitlines() if ln.startswith("PROBE ")][-1]
    text = proc.stdout + "".join(ln + "\n" for ln in proc.stderr.splitlines() if not ln.startswith("PROBE "))
    return json.loads(line[len("PROBE "):]), text


def test_importing_the_cli_is_light():
    code = "import sys; from sheetfit.cli import app; import sheetfit; print(sorted(sys.modules))"
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    loaded = {m.split(".")[0] for m in eval(proc.stdout)}
    assert not loaded & set(HEAVY)


@pytest.mark.parametrize("args", [(), ("--help",), ("fit", "--help"), ("demo", "--help"), ("--version",)])
def test_help_is_light(args):
    result, out = probe(*args)
    assert result["code"] in ((0, None) if args else (0, 2))   # bare `sheetfit` shows help as a usage error
    assert result["heavy"] == []
    assert out.strip()


@pytest.mark.parametrize("args", [("fit", "book.xlsx", "--x", "a"), ("fit", "book.xlsx", "--y", "a", "--x", "b",
                                                                     "--adjust", "maybe"), ("nonsense",)])
def test_usage_errors_are_light(args):
    result, _ = probe(*args)
    assert result["code"] == 2
    assert result["heavy"] == []


def test_fit_help_shows_a_worked_example():
    _, out = probe("fit", "--help")
    assert "sheetfit fit usage.xlsx --sheet Monthly --group Site --y kWh" in out
    assert "Usage: sheetfit fit" in out
    for option in ("--job", "--overwrite", "--observations", "--adjust", "--no-intercept"):
        assert option in out


def test_console_script_points_at_the_cli():
    try:
        scripts = entry_points(group="console_scripts", name="sheetfit")
    except PackageNotFoundError:  # pragma: no cover - running from a bare checkout
        pytest.skip("sheetfit is not installed, so it has no console script")
    if not scripts:
        pytest.skip("sheetfit is not installed, so it has no console script")
    assert [ep.value for ep in scripts] == ["sheetfit.cli:main"]
