"""Seeded demo workbooks and the demo run: invented cold-storage sites (cold_storage.py, the default)
and invented lab instruments' calibration runs (calibration.py).

Each scenario's workbook is regenerated from its seed (not shipped as a file) so an installed
package can run the demo; `run_demo` writes one and fits it with the scenario's job.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import calibration
from .calibration import (
    CALIBRATION_JOB,
    generate_calibration,
    write_calibration_workbook,
)
from .cold_storage import (
    AR_RHO,
    BASELINE_JOB,
    CDD,
    COLUMNS,
    CONSTANT_PALLETS,
    CREATED,
    DEMO_JOB,
    FILE_NAME,
    FIRST_MONTH,
    KWH,
    LEVERAGE_MONTH,
    MESSY_CELLS,
    MONTH,
    MONTHS,
    OUTDOOR,
    PALLETS,
    REGION,
    REGION_TEMPERATURE,
    REGIONS,
    REPORTING_MONTHS,
    REPORTING_SEED,
    REPORTING_SHEET,
    RESULTS_NAME,
    SEED,
    SHEET,
    SHORT_MONTHS,
    SITE,
    SITES,
    TAIL_DF,
    TEMPERATURE_SEED,
    UPGRADES,
    WILD_MONTH,
    MessyCell,
    generate_demo,
    generate_reporting,
    month_dates,
    write_demo_workbook,
)

__all__ = [
    "AR_RHO",
    "BASELINE_JOB",
    "CALIBRATION_JOB",
    "CDD",
    "COLUMNS",
    "CONSTANT_PALLETS",
    "CREATED",
    "DEMO_JOB",
    "FILE_NAME",
    "FIRST_MONTH",
    "KWH",
    "LEVERAGE_MONTH",
    "MESSY_CELLS",
    "MONTH",
    "MONTHS",
    "OUTDOOR",
    "PALLETS",
    "REGION",
    "REGIONS",
    "REGION_TEMPERATURE",
    "REPORTING_MONTHS",
    "REPORTING_SEED",
    "REPORTING_SHEET",
    "RESULTS_NAME",
    "SCENARIOS",
    "SEED",
    "SHEET",
    "SHORT_MONTHS",
    "SITE",
    "SITES",
    "TAIL_DF",
    "TEMPERATURE_SEED",
    "UPGRADES",
    "WILD_MONTH",
    "MessyCell",
    "Scenario",
    "calibration",
    "find_scenario",
    "generate_calibration",
    "generate_demo",
    "generate_reporting",
    "month_dates",
    "run_demo",
    "write_calibration_workbook",
    "write_demo_workbook",
]

COLD_STORAGE, CALIBRATION = "cold-storage", "calibration"
SCENARIOS = (COLD_STORAGE, CALIBRATION)   # the first is the default


@dataclass(frozen=True)
class Scenario:
    """One demo: its workbook's and results' file names, its seed, its writer and the job it runs."""

    name: str
    file_name: str
    results_name: str
    seed: int
    write: Callable[[Path | str, int], Path]
    job: dict[str, Any]


def find_scenario(name: str = COLD_STORAGE) -> Scenario:
    """The demo scenario called `name` (one of SCENARIOS); JobError naming the choices otherwise."""
    if name == COLD_STORAGE:
        return Scenario(COLD_STORAGE, FILE_NAME, RESULTS_NAME, SEED, write_demo_workbook, DEMO_JOB)
    if name == CALIBRATION:
        return Scenario(CALIBRATION, calibration.FILE_NAME, calibration.RESULTS_NAME, calibration.SEED,
                        write_calibration_workbook, CALIBRATION_JOB)
    from ..errors import JobError, not_found_message

    raise JobError(not_found_message("demo scenario", name, SCENARIOS))


def run_demo(folder: Path, progress: Callable[[str], None] | None = None,
             scenario: str = COLD_STORAGE) -> tuple[Path, Any, Path]:
    """Write the scenario's demo workbook into `folder`, fit it, return (workbook, results, results path)."""
    from ..job import make_job
    from ..pipeline import run_job

    chosen = find_scenario(scenario)
    folder = Path(folder)
    workbook = chosen.write(folder / chosen.file_name, chosen.seed)
    job = make_job({**chosen.job, "workbook": workbook, "out": folder / chosen.results_name, "overwrite": True})
    results, out = run_job(job, progress=progress)
    return workbook, results, out
