"""Seeded generator of the demo workbook: monthly electricity use of invented cold-storage sites.

Most sites follow a clean linear relation; a few are built to misbehave in exactly one way each,
and a few cells are messy, so every highlight of the results workbook has something to show.
Regenerated from the seed (not shipped as a file) so an installed package can run the demo.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import pandas as pd

SEED = 20240879  # chosen so every misbehaving site stands out and no well-behaved one does
SHEET = "Monthly"
FILE_NAME = "cold-storage-sites.xlsx"
RESULTS_NAME = "cold-storage-sites-fit.xlsx"
MONTHS = 36
FIRST_MONTH = dt.date(2022, 1, 1)
CREATED = dt.datetime(2025, 1, 1, 0, 0, 0)  # fixed creation time → reproducible bytes

SITE, REGION, MONTH, KWH, CDD, PALLETS = "Site", "Region", "Month", "kWh", "Cooling degree-days", "Pallets"
OUTDOOR = "Outdoor °C"
COLUMNS = (SITE, REGION, MONTH, KWH, CDD, PALLETS, OUTDOOR)
REPORTING_SHEET = "After upgrade"
REPORTING_MONTHS = 12     # January – December 2025, the reporting period

# The job the demo runs; workbooks/cold-storage-sites.toml holds the same settings.
DEMO_JOB: dict[str, Any] = {
    "sheets": (SHEET,),
    "group": (SITE,),
    "y": KWH,
    "x": (CDD, PALLETS),
    "order": MONTH,
}

# The energy-baseline job: a change-point shape per site on outdoor temperature, plus pallets;
# workbooks/cold-storage-baseline.toml holds the same settings.
BASELINE_JOB: dict[str, Any] = {**DEMO_JOB, "x": (OUTDOOR, PALLETS), "change_point": "auto",
                                 "rows_per_coefficient": 5}

# Region → (mean outdoor °C of the coldest month, of the warmest month).
REGION_TEMPERATURE = {
    "North Coast": (3.0, 18.0),
    "South Coast": (9.0, 26.0),
    "Inland Plains": (-2.0, 27.0),
    "Highlands": (-5.0, 15.0),
}
TEMPERATURE_SEED = SEED + 1   # its own stream: the other columns keep their values
REPORTING_SEED = SEED + 2

# Upgraded sites (new compressors and door curtains in January 2025) → fraction of use saved.
UPGRADES = {
    "Alderwick": 0.12,      # saves clearly
    "Glimmerford": 0.09,    # saves clearly
    "Orrinwick": 0.004,     # within the noise of its baseline
    "Saltmere": -0.06,      # uses more after the work (a setting left wrong)
}

# Region → (base cooling degree-days in the coolest month, extra at the peak of summer).
REGIONS = {
    "North Coast": (6.0, 150.0),
    "South Coast": (14.0, 260.0),
    "Inland Plains": (10.0, 330.0),
    "Highlands": (4.0, 110.0),
}

# (site, region, behaviour). "ok" sites are well-behaved; each other behaviour breaks one thing.
SITES: tuple[tuple[str, str, str], ...] = (
    ("Alderwick", "North Coast", "ok"),
    ("Brinmoor", "Inland Plains", "ok"),
    ("Caldervik", "South Coast", "ok"),
    ("Dunhollow", "Highlands", "short"),
    ("Elderquay", "North Coast", "ok"),
    ("Farrowmere", "Inland Plains", "constant pallets"),
    ("Glimmerford", "South Coast", "ok"),
    ("Hallowby", "Highlands", "ok"),
    ("Iverstrand", "Inland Plains", "curved"),
    ("Junipercross", "North Coast", "ok"),
    ("Kestrelholm", "South Coast", "growing spread"),
    ("Larkspur Reach", "Highlands", "ok"),
    ("Mossbeck", "North Coast", "ok"),
    ("Nettlefold", "Inland Plains", "wild point"),
    ("Orrinwick", "South Coast", "ok"),
    ("Pellmarsh", "Highlands", "ok"),
    ("Quillbrook", "North Coast", "high leverage"),
    ("Rookhaven", "Inland Plains", "ok"),
    ("Saltmere", "South Coast", "ok"),
    ("Thistlebay", "Highlands", "autocorrelated"),
    ("Umbervale", "North Coast", "ok"),
    ("Vessingham", "Inland Plains", "heavy tails"),
    ("Willowdene", "South Coast", "ok"),
    ("Yarrowgate", "Highlands", "ok"),
)

SHORT_MONTHS = 2          # "short": opened in the last two months
CONSTANT_PALLETS = 6000   # "constant pallets": a fixed contract volume reported every month
WILD_MONTH = 17           # "wild point": kWh keyed in with an extra digit (×10)
LEVERAGE_MONTH = 26       # "high leverage": pallets counted in cases (×4), kWh as usual
AR_RHO = 0.8              # "autocorrelated": AR(1) errors
TAIL_DF = 2               # "heavy tails": Student t errors with this many degrees of freedom


@dataclass(frozen=True)
class MessyCell:
    """A cell written as it might arrive from another system, not as a clean number."""

    site: str
    month: int       # 0-based month index
    column: str
    kind: str        # "text number" | "error" | "empty"


MESSY_CELLS = (
    MessyCell("Alderwick", 5, KWH, "text number"),   # "41,234.5" stored as text: still usable
    MessyCell("Brinmoor", 12, PALLETS, "error"),     # #N/A from a failed lookup: row unusable
    MessyCell("Caldervik", 20, KWH, "empty"),        # meter reading missing: row unusable
)


def month_dates() -> list[dt.date]:
    """First day of each of the MONTHS months."""
    return [dt.date(FIRST_MONTH.year + (FIRST_MONTH.month - 1 + i) // 12, (FIRST_MONTH.month - 1 + i) % 12 + 1, 1)
            for i in range(MONTHS)]


def _seasons(months: int) -> "Any":
    """0 in January, 1 in July, for each month from January on."""
    import numpy as np

    return 0.5 * (1.0 - np.cos(2.0 * np.pi * np.arange(months) / 12.0))


def _outdoor(region: str, season: "Any", rng: "Any") -> "Any":
    """Monthly mean outdoor temperature (°C, one decimal) of a site in `region`."""
    cold, warm = REGION_TEMPERATURE[region]
    return (cold + (warm - cold) * season + rng.normal(0.0, 0.8, len(season))).round(1)


def _baseline_sites(seed: int) -> dict[str, dict[str, Any]]:
    """Per site: its parameters and its 36 baseline months of cells (messy cells in place)."""
    import numpy as np

    rng = np.random.default_rng(seed)
    season = _seasons(MONTHS)
    region_cdd = {name: base + peak * season**1.5 for name, (base, peak) in REGIONS.items()}
    per_site: dict[str, dict[str, Any]] = {}
    for site, region, behaviour in SITES:
        cdd = np.maximum(region_cdd[region] + rng.normal(0.0, 6.0, MONTHS), 1.0).round(1)
        pallet_mean = rng.uniform(4000, 11000)
        pallets = np.round(pallet_mean * (1.0 + 0.15 * np.sin(2 * np.pi * (np.arange(MONTHS) - 8) / 12))
                           * rng.normal(1.0, 0.10, MONTHS)).astype(np.int64)
        params = {"base": rng.uniform(25_000, 70_000), "per_cdd": rng.uniform(60, 140),
                  "per_pallet": rng.uniform(1.2, 3.5), "pallet_mean": pallet_mean}
        clean = params["base"] + params["per_cdd"] * cdd + params["per_pallet"] * pallets
        params["sd"] = 0.02 * float(clean.mean())
        kwh, pallets = _misbehave(behaviour, rng, params, cdd, pallets, clean)
        months = range(MONTHS - SHORT_MONTHS, MONTHS) if behaviour == "short" else range(MONTHS)
        kwh_cells: list[Any] = [round(float(kwh[i]), 1) for i in range(MONTHS)]
        pallet_cells: list[Any] = [int(p) for p in pallets]
        _make_messy(site, kwh_cells, pallet_cells)
        per_site[site] = {"region": region, "months": list(months), "cdd": cdd.tolist(),
                          "kwh": kwh_cells, "pallets": pallet_cells, **params}
    t_rng = np.random.default_rng(TEMPERATURE_SEED)
    for site, region, _ in SITES:
        per_site[site]["outdoor"] = _outdoor(region, season, t_rng).tolist()
    return per_site


def _misbehave(behaviour: str, rng: "Any", params: dict[str, float], cdd: "Any", pallets: "Any",
               clean: "Any") -> tuple["Any", "Any"]:
    """kWh (and pallets) of a site, with its one way of misbehaving built in."""
    import numpy as np

    base, per_cdd, per_pallet, sd = params["base"], params["per_cdd"], params["per_pallet"], params["sd"]
    noise = rng.normal(0.0, sd, MONTHS)
    kwh = clean + noise
    if behaviour == "constant pallets":
        pallets = np.full(MONTHS, CONSTANT_PALLETS, dtype=np.int64)
        kwh = base + per_cdd * cdd + per_pallet * pallets + noise
    elif behaviour == "curved":  # use grows with the square of degree-days, not in a line
        kwh = base + per_pallet * pallets + per_cdd * cdd**2 / cdd.max() + noise
    elif behaviour == "growing spread":
        kwh = clean + rng.normal(0.0, 1.0, MONTHS) * 0.5 * per_cdd * cdd
    elif behaviour == "wild point":
        kwh[WILD_MONTH] *= 10.0
    elif behaviour == "high leverage":
        pallets[LEVERAGE_MONTH] *= 4
    elif behaviour == "autocorrelated":
        shocks = rng.normal(0.0, sd * np.sqrt(1.0 - AR_RHO**2), MONTHS)
        err = np.empty(MONTHS)
        err[0] = rng.normal(0.0, sd)
        for t in range(1, MONTHS):
            err[t] = AR_RHO * err[t - 1] + shocks[t]
        kwh = clean + err
    elif behaviour == "heavy tails":
        kwh = clean + 0.6 * sd * rng.standard_t(TAIL_DF, MONTHS)
    return kwh, pallets


def _make_messy(site: str, kwh_cells: list[Any], pallet_cells: list[Any]) -> None:
    """Put the site's messy cells in place."""
    for cell in MESSY_CELLS:
        if cell.site != site:
            continue
        cells = kwh_cells if cell.column == KWH else pallet_cells
        if cell.kind == "text number":
            cells[cell.month] = f"{cells[cell.month]:,.1f}"
        elif cell.kind == "error":
            cells[cell.month] = "#N/A"
        else:
            cells[cell.month] = None


def generate_demo(seed: int = SEED) -> "pd.DataFrame":
    """The demo rows (month by month, sites in a fixed order) with messy cells in place.

    kWh and Pallets are object columns: floats/ints, plus the text, error marker ("#N/A")
    or None of the messy cells.
    """
    import pandas as pd

    per_site = _baseline_sites(seed)
    dates = month_dates()
    rows = []
    for i in range(MONTHS):
        for site, region, _ in SITES:
            data = per_site[site]
            if i not in data["months"]:
                continue
            rows.append((site, region, pd.Timestamp(dates[i]), data["kwh"][i], data["cdd"][i],
                         data["pallets"][i], data["outdoor"][i]))
    frame = pd.DataFrame(rows, columns=list(COLUMNS))
    for col in (KWH, PALLETS):
        frame[col] = frame[col].astype(object)
    return frame


def generate_reporting(seed: int = SEED) -> "pd.DataFrame":
    """The reporting period (2025): every site that has a full baseline, its conditions and actual use.

    Sites in UPGRADES use that fraction less than their baseline relation predicts; the others
    carry on as before (their savings should be within noise).
    """
    import numpy as np
    import pandas as pd

    per_site = _baseline_sites(seed)
    rng = np.random.default_rng(REPORTING_SEED)
    season = _seasons(REPORTING_MONTHS)
    first = dt.date(FIRST_MONTH.year + MONTHS // 12, 1, 1)
    dates = [pd.Timestamp(dt.date(first.year, m + 1, 1)) for m in range(REPORTING_MONTHS)]
    rows = []
    for site, region, behaviour in SITES:
        if behaviour != "ok":
            continue
        p = per_site[site]
        base_cdd, peak = REGIONS[region]
        cdd = np.maximum(base_cdd + peak * season**1.5 + rng.normal(0.0, 6.0, REPORTING_MONTHS), 1.0).round(1)
        pallets = np.round(p["pallet_mean"] * (1.0 + 0.15 * np.sin(2 * np.pi * (np.arange(REPORTING_MONTHS) - 8) / 12))
                           * rng.normal(1.0, 0.10, REPORTING_MONTHS)).astype(np.int64)
        outdoor = _outdoor(region, season, rng)
        kwh = (p["base"] + p["per_cdd"] * cdd + p["per_pallet"] * pallets) * (1.0 - UPGRADES.get(site, 0.0))
        kwh = kwh + rng.normal(0.0, p["sd"], REPORTING_MONTHS)
        for i in range(REPORTING_MONTHS):
            rows.append((site, region, dates[i], round(float(kwh[i]), 1), float(cdd[i]), int(pallets[i]),
                         float(outdoor[i])))
    return pd.DataFrame(rows, columns=list(COLUMNS))


def write_demo_workbook(path: Path | str, seed: int = SEED) -> Path:
    """Write the demo workbook (the baseline sheet and the reporting period, dates formatted as dates)."""
    import xlsxwriter

    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    options = {"strings_to_numbers": False, "strings_to_formulas": False, "strings_to_urls": False}
    with xlsxwriter.Workbook(str(path), options) as book:
        book.set_properties({"title": "Cold-storage sites: monthly electricity use (invented demo data)",
                             "created": CREATED})
        _write_sheet(book, book.add_worksheet(SHEET), generate_demo(seed))
        _write_sheet(book, book.add_worksheet(REPORTING_SHEET), generate_reporting(seed))
    return path


def _write_sheet(book: Any, sheet: Any, frame: "pd.DataFrame") -> None:
    """One sheet of demo rows: a bold header, number formats, frozen header, a filter."""
    head = book.add_format({"bold": True, "bottom": 1})
    month_fmt = book.add_format({"num_format": "yyyy-mm"})
    fmts = {KWH: book.add_format({"num_format": "#,##0.0"}), CDD: book.add_format({"num_format": "0.0"}),
            PALLETS: book.add_format({"num_format": "#,##0"}), OUTDOOR: book.add_format({"num_format": "0.0"})}
    sheet.write_row(0, 0, COLUMNS, head)
    for r, row in enumerate(frame.itertuples(index=False), start=1):
        site, region, month, *numbers = row
        sheet.write_string(r, 0, site)
        sheet.write_string(r, 1, region)
        sheet.write_datetime(r, 2, month.to_pydatetime(), month_fmt)
        for c, (name, value) in enumerate(zip(COLUMNS[3:], numbers), start=3):
            if value is None:
                continue
            if value == "#N/A":
                sheet.write_formula(r, c, "=NA()", fmts[name], "#N/A")
            elif isinstance(value, str):
                sheet.write_string(r, c, value)
            else:
                sheet.write_number(r, c, value, fmts[name])
    sheet.set_column(0, 1, 15)
    sheet.set_column(2, 2, 9)
    sheet.set_column(3, len(COLUMNS) - 1, 14)
    sheet.freeze_panes(1, 0)
    sheet.autofilter(0, 0, len(frame), len(COLUMNS) - 1)
