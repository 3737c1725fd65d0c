"""NIST StRD linear regression datasets: digits of agreement with the certified values.

Data and certified values: NIST Statistical Reference Datasets (public domain), read from
../shared/reference/nist-strd. LRE = −log10(|estimate − certified| / |certified|); where NIST
certifies 0 the absolute error is used instead.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import sheetfit

NIST = Path(__file__).resolve().parents[1].parent / "shared" / "reference" / "nist-strd"
pytestmark = pytest.mark.skipif(not (NIST / "certified.json").exists(),
                                reason=f"NIST StRD folder not found at {NIST}")
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
        "coefficients": lre(res.coefficients["estimate"], cert["coefficients"]).min(),
        "std errors": lre(res.coefficients["std error"], cert["coefficient_sds"]).min(),
        "residual sd": lre(row["residual std error"], cert["residual_sd"]).min(),
        "R²": lre(row["R²"], cert["r_squared"]).min(),
    }
    need = REQUIRED.get(name, 9.0)
    assert min(digits.values()) >= need, f"{name}: digits of agreement {digits}"


def digits_table() -> list[tuple[str, float, float, float, float]]:
    """Digits of agreement per dataset (for the closing note and README)."""
    out = []
    for name in DATASETS:
        res, cert = fit_dataset(name)
        row = res.groups.iloc[0]
        out.append((name, lre(res.coefficients["estimate"], cert["coefficients"]).min(),
                    lre(res.coefficients["std error"], cert["coefficient_sds"]).min(),
                    float(lre(row["residual std error"], cert["residual_sd"])),
                    float(lre(row["R²"], cert["r_squared"]))))
    return out


if __name__ == "__main__":
    for r in digits_table():
        print(f"{r[0]:9s} coefficients {r[1]:5.1f}  std errors {r[2]:5.1f}  residual sd {r[3]:5.1f}  R² {r[4]:5.1f}")


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
        assert lre(res.coefficients["estimate"], cert["coefficients"]).min() >= REQUIRED.get(name, 9.0)
        assert lre(res.coefficients["std error"], cert["coefficient_sds"]).min() >= 9.0
