"""NIST StRD linear regression datasets: digits of agreement with the certified values.

Data and certified values: NIST Statistical Reference Datasets (public domain), kept in the
project at tests/data/nist (source and certification: tests/data/nist/README.md).
LRE = −log10(|estimate − certified| / |certified|); where NIST certifies 0 the absolute error is
used instead.

`python -m tests.test_nist` prints the digits-of-agreement table (as in the README).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import sheetfit

NIST = Path(__file__).resolve().parent / "data" / "nist"
REQUIRED = {"wampler5": 7.5}   # every other dataset: at least 9 digits on every value
DATASETS = ["norris", "pontius", "noint1", "noint2", "filip", "longley",
            "wampler1", "wampler2", "wampler3", "wampler4", "wampler5"]


def lre(estimate, certified) -> np.ndarray:
    estimate = np.asarray(estimate, dtype=float)
    certified = np.asarray(certified, dtype=float)
    err = np.abs(estimate - certified)
    with np.errstate(divide="ignore"):
        digits = np.where(certified != 0, -np.log10(err / np.abs(np.where(certified != 0, certified, 1))),
                          -np.log10(err))
    return np.minimum(digits, 15.0)


def fit_dataset(name: str):
    cert = json.loads((NIST / "certified.json").read_text())["datasets"][name]
    frame = pd.read_csv(NIST / cert["csv"], dtype=str).astype(float)   # NIST's text, parsed by float()
    terms = [t for t in cert["model_terms"] if t != "1"]
    res = sheetfit.fit_frame(frame, y="y", x=terms, intercept=cert["intercept"])
    return res, cert


@pytest.mark.parametrize("name", DATASETS)
def test_nist_certified_values(name):
    res, cert = fit_dataset(name)
    row = res.groups.iloc[0]
    digits = {
        "coefficients": lre(res.coefficients["coefficient"], cert["coefficients"]).min(),
        "std errors": lre(res.coefficients["std error"], cert["coefficient_sds"]).min(),
        "residual sd": lre(row["residual std error"], cert["residual_sd"]).min(),
        "R²": lre(row["R²"], cert["r_squared"]).min(),
    }
    need = REQUIRED.get(name, 9.0)
    assert min(digits.values()) >= need, f"{name}: digits of agreement {digits}"


def digits_table() -> list[tuple[str, float, float, float, float]]:
    """Digits of agreement per dataset: (NIST name, coefficients, std errors, residual sd, R²), each the
    minimum LRE over the values certified."""
    out = []
    for name in DATASETS:
        res, cert = fit_dataset(name)
        row = res.groups.iloc[0]
        out.append((cert["name"], float(lre(res.coefficients["coefficient"], cert["coefficients"]).min()),
                    float(lre(res.coefficients["std error"], cert["coefficient_sds"]).min()),
                    float(lre(row["residual std error"], cert["residual_sd"])),
                    float(lre(row["R²"], cert["r_squared"]))))
    return out


def format_digits_table(rows) -> str:
    """The table as the README shows it (Markdown)."""
    lines = ["| dataset | coefficients | std errors | residual std dev | R² |", "|---|---|---|---|---|"]
    lines += [f"| {r[0]} | {r[1]:.1f} | {r[2]:.1f} | {r[3]:.1f} | {r[4]:.1f} |" for r in rows]
    return "\n".join(lines)


def test_digits_table_covers_every_dataset():
    rows = digits_table()
    assert [r[0].lower() for r in rows] == DATASETS
    assert all(np.isfinite(r[1:]).all() for r in rows)
    assert format_digits_table(rows).count("\n") == len(DATASETS) + 1


@pytest.mark.parametrize("name", ["filip", "longley", "noint1", "wampler4"])
def test_nist_through_the_workbook_reader(name, tmp_path):
    # The same certified digits when the data come through the CSV and .xlsx readers.
    import xlsxwriter

    cert = json.loads((NIST / "certified.json").read_text())["datasets"][name]
    terms = [t for t in cert["model_terms"] if t != "1"]
    frame = pd.read_csv(NIST / cert["csv"], dtype=str).astype(float)
    book = tmp_path / f"{name}.xlsx"
    with xlsxwriter.Workbook(str(book)) as wb:
        ws = wb.add_worksheet("data")
        ws.write_row(0, 0, list(frame.columns))
        for i, row in enumerate(frame.itertuples(index=False), start=1):
            ws.write_row(i, 0, list(row))
    for source in (NIST / cert["csv"], book):
        res = sheetfit.fit_workbook(source, y="y", x=terms, intercept=cert["intercept"])
        assert lre(res.coefficients["coefficient"], cert["coefficients"]).min() >= REQUIRED.get(name, 9.0)
        assert lre(res.coefficients["std error"], cert["coefficient_sds"]).min() >= 9.0


if __name__ == "__main__":
    print("Digits of agreement with the NIST StRD certified values (LRE; 15 = every certified digit)")
    print(format_digits_table(digits_table()))
