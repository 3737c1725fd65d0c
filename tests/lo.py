"""Run LibreOffice headless with a throwaway profile that recalculates every formula on load.

Without that profile setting LibreOffice keeps the cached results stored in the file (xlsxwriter
writes 0 or the given `value=`), so a conversion would prove nothing about the formulas.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import time
from pathlib import Path

SOFFICE = shutil.which("soffice") or shutil.which("libreoffice")
SKIP_REASON = "LibreOffice (soffice) is not installed; .ci/run installs it so CI runs these tests"

# org.openoffice.Office.Calc/Formula/Load: 0 = always recalculate, 1 = never, 2 = ask.
RECALC_ALWAYS = """<?xml version="1.0" encoding="UTF-8"?>
<oor:items xmlns:oor="http://openoffice.org/2001/registry" xmlns:xs="http://www.w3.org/2001/XMLSchema"
           xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance">
<item oor:path="/org.openoffice.Office.Calc/Formula/Load"><prop oor:name="OOXMLRecalcMode" oor:op="fuse"><value>0</value></prop></item>
<item oor:path="/org.openoffice.Office.Calc/Formula/Load"><prop oor:name="ODFRecalcMode" oor:op="fuse"><value>0</value></prop></item>
</oor:items>
"""


def make_profile(folder: Path) -> Path:
    """A fresh LibreOffice user profile under `folder` that always recalculates on load."""
    user = Path(folder) / "user"
    user.mkdir(parents=True, exist_ok=True)
    (user / "registrymodifications.xcu").write_text(RECALC_ALWAYS, encoding="utf-8")
    return Path(folder)


def convert(files: list[Path], fmt: str, out_dir: Path, profile: Path,
            timeout: float = 240) -> tuple[list[Path], float]:
    """Convert `files` with `soffice --headless --convert-to fmt`; returns the outputs and the seconds taken."""
    if SOFFICE is None:
        raise RuntimeError(SKIP_REASON)
    out_dir.mkdir(parents=True, exist_ok=True)
    env = {**os.environ, "SAL_USE_VCLPLUGIN": "svp", "HOME": str(profile)}
    cmd = [SOFFICE, f"-env:UserInstallation={Path(profile).resolve().as_uri()}", "--headless",
           "--norestore", "--nolockcheck", "--convert-to", fmt, "--outdir", str(out_dir), *map(str, files)]
    t0 = time.perf_counter()
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, env=env, stdin=subprocess.DEVNULL)
    seconds = time.perf_counter() - t0
    ext = fmt.split(":")[0]
    outs = [out_dir / f"{Path(f).stem}.{ext}" for f in files]
    missing = [o for o in outs if not o.exists()]
    if done.returncode != 0 or missing:
        raise RuntimeError(f"soffice failed (exit {done.returncode}); missing {missing}; "
                           f"stdout: {done.stdout[-500:]} stderr: {done.stderr[-500:]}")
    return outs, seconds
