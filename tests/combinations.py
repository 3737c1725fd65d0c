"""The combination matrix behind tests/test_combinations.py: its dimensions, a deterministic
all-pairs covering design over them, seeded data per case, the input files in every format, and
the per-group statsmodels reference fit (the oracle).

Data are invented (seeded numpy); only the reference values come from statsmodels and scipy.
`python -m tests.combinations` prints the cases of the design.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import itertools
import shutil
import subprocess
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import statsmodels.api as sm

from tests.corpus import writers

# ---------------------------------------------------------------- the dimensions
# One entry per dimension; a new level joins the matrix by being added to its list (and, for a new
# term kind, to TERMS and REFERENCE_COLUMNS below). The design below covers every pair of levels.
DIMENSIONS: dict[str, list] = {
    "term": ["plain", "power", "log", "sqrt", "date"],       # kind of the second input term (TERMS)
    "sizes": ["equal", "unequal", "tiny", "one"],            # group sizes (Case.group_sizes)
    "intercept": [True, False],                              # intercept= / --no-intercept
    "order": [False, True],                                  # order="Seq" / --order Seq, rows shuffled in the file
    "observations": ["all", "flagged", "none"],              # observations= / --observations
    "inference": ["classic", "robust"],                      # inference= / --inference
    "format": ["xlsx", "csv", "ods", "xls"],                 # input file format (write_input)
    "route": ["api", "cli"],                                 # fit_workbook + write_results, or the real CLI
}

# Columns of every input file. Site: group key; Seq: the sequence (time order) of the rows; Day: a date.
GROUP, SEQ, DAY, Y = "Site", "Seq", "Day", "kWh"
HEADER = [GROUP, SEQ, DAY, "CDD", "Pallets", Y]

TERMS: dict[str, list[str]] = {          # the --x terms of each term kind (two inputs: VIF applies)
    "plain": ["CDD", "Pallets"],
    "power": ["CDD", "CDD^2"],
    "log": ["CDD", "log(Pallets)"],
    "sqrt": ["CDD", "sqrt(Pallets)"],
    "date": ["CDD", DAY],
}

FIRST_DAY = dt.date(2023, 1, 2)


def _days_since_earliest(g: pd.DataFrame) -> np.ndarray:
    # README: dates used as inputs become days since the group's earliest date
    days = np.array([(d - FIRST_DAY).days for d in g[DAY]], dtype=float)
    return days - days.min()


# term → its column in the reference design, built by hand from the README's definitions
# (never with sheetfit.terms); `g` holds every row of one group as written in the file.
REFERENCE_COLUMNS = {
    "CDD": lambda g: g["CDD"].to_numpy(float),
    "Pallets": lambda g: g["Pallets"].to_numpy(float),
    "CDD^2": lambda g: g["CDD"].to_numpy(float) ** 2,
    "log(Pallets)": lambda g: np.log(g["Pallets"].to_numpy(float)),
    "sqrt(Pallets)": lambda g: np.sqrt(g["Pallets"].to_numpy(float)),
    DAY: _days_since_earliest,
}
BAD_VALUE = {"log": 0.0, "sqrt": -3.5}    # one row of the first group the term cannot use (README: left out)


# ---------------------------------------------------------------- the covering design

def all_pairs(dimensions: dict[str, list], seed: int = 2024, candidates: int = 60) -> list[dict]:
    """A deterministic all-pairs covering design (greedy, in the manner of AETG): every pair of levels
    of every two dimensions occurs in at least one row. Each new row is the best of `candidates`
    seeded tries, each started from a pair not yet covered and filled dimension by dimension with the
    level that covers most new pairs."""
    rng = np.random.default_rng(seed)
    names = list(dimensions)
    sizes = [len(dimensions[n]) for n in names]
    uncovered = {(i, a, j, b) for i, j in itertools.combinations(range(len(names)), 2)
                 for a in range(sizes[i]) for b in range(sizes[j])}

    def gain(row: dict[int, int], d: int, level: int) -> int:
        return sum(((min(d, e), level if d < e else lv, max(d, e), lv if d < e else level) in uncovered)
                   for e, lv in row.items())

    rows: list[list[int]] = []
    while uncovered:
        best, best_new = None, -1
        ordered = sorted(uncovered)
        for _ in range(candidates):
            i, a, j, b = ordered[int(rng.integers(len(ordered)))]
            row = {i: a, j: b}
            rest = [d for d in range(len(names)) if d not in row]
            rng.shuffle(rest)
            for d in rest:
                scores = [gain(row, d, lv) for lv in range(sizes[d])]
                top = max(scores)
                choices = [lv for lv, s in enumerate(scores) if s == top]
                row[d] = choices[int(rng.integers(len(choices)))]
            new = sum((p, row[p], q, row[q]) in uncovered for p, q in itertools.combinations(range(len(names)), 2))
            if new > best_new:
                best, best_new = row, new
        rows.append([best[d] for d in range(len(names))])
        uncovered -= {(p, best[p], q, best[q]) for p, q in itertools.combinations(range(len(names)), 2)}
    return [{n: dimensions[n][lv] for n, lv in zip(names, r)} for r in rows]


def pairs_missing(cases: list[dict], dimensions: dict[str, list]) -> list[tuple]:
    """Pairs of levels no case covers (empty for a covering design)."""
    names = list(dimensions)
    missing = []
    for p, q in itertools.combinations(names, 2):
        for a in dimensions[p]:
            for b in dimensions[q]:
                if not any(c[p] == a and c[q] == b for c in cases):
                    missing.append((p, a, q, b))
    return missing


# ---------------------------------------------------------------- one case

@dataclass(frozen=True)
class Case:
    term: str
    sizes: str
    intercept: bool
    order: bool
    observations: str
    inference: str
    format: str
    route: str

    @property
    def id(self) -> str:
        return "-".join([self.term, self.sizes, "icpt" if self.intercept else "noicpt",
                         "order" if self.order else "roworder", f"obs_{self.observations}", self.inference,
                         self.format, self.route])

    @property
    def seed(self) -> int:
        return zlib.crc32(self.id.encode())

    @property
    def terms(self) -> list[str]:
        return TERMS[self.term]

    @property
    def p(self) -> int:
        return len(self.terms) + self.intercept

    @property
    def group(self) -> list[str]:
        return [] if self.sizes == "one" else [GROUP]

    def group_sizes(self) -> list[int]:
        return {"equal": [30, 30, 30], "unequal": [12, 14, 25, 31, 40], "tiny": [self.p + 2] * 3,
                "one": [30]}[self.sizes]

    def settings(self) -> dict:
        """Keyword settings of fit_workbook."""
        return {"y": Y, "x": self.terms, "group": self.group, "intercept": self.intercept,
                "order": SEQ if self.order else None, "observations": self.observations,
                "inference": self.inference}

    def cli_args(self) -> list[str]:
        """The same settings as `sheetfit fit` options."""
        args = ["--y", Y]
        for t in self.terms:
            args += ["--x", t]
        for g in self.group:
            args += ["--group", g]
        if not self.intercept:
            args.append("--no-intercept")
        if self.order:
            args += ["--order", SEQ]
        return args + ["--observations", self.observations, "--inference", self.inference]


def cases() -> list[Case]:
    return [Case(**c) for c in all_pairs(DIMENSIONS)]


# ---------------------------------------------------------------- seeded data

def make_table(case: Case) -> pd.DataFrame:
    """The rows of the input file, in file order (seeded by the case id).

    Per group: inputs on different scales, errors that are heteroscedastic (group 1), AR(1) along the
    sequence (group 2) or plain (group 3), so robust std errors come into play where groups are big
    enough. Groups interleave in the file; with an order column the rows are shuffled and Seq gives
    the sequence, without one the file order is the sequence.
    """
    rng = np.random.default_rng(case.seed)
    parts = []
    for g, n in enumerate(case.group_sizes()):
        extra = 1 if (g == 0 and case.term in BAD_VALUE) else 0
        m = n + extra
        cdd = rng.uniform(1.0, 30.0, m)
        pallets = rng.uniform(5.0, 200.0, m)
        offsets = np.sort(rng.choice(4 * m, size=m, replace=False)) + 11 * g
        days = [FIRST_DAY + dt.timedelta(days=int(o)) for o in offsets]
        second = {"plain": pallets, "power": cdd**2, "log": np.log(pallets), "sqrt": np.sqrt(pallets),
                  "date": (offsets - offsets.min()).astype(float)}[case.term]
        slope2 = {"plain": 0.4, "power": -0.08, "log": 12.0, "sqrt": 2.5, "date": 0.3}[case.term]
        kind = g % 3
        if kind == 0:                                      # spread grows with CDD
            err = rng.normal(size=m) * 0.004 * cdd**2.5
        elif kind == 1:                                    # AR(1) along the sequence
            e = rng.normal(scale=2.0, size=m)
            err = np.empty(m)
            err[0] = e[0]
            for i in range(1, m):
                err[i] = 0.9 * err[i - 1] + e[i]
        else:
            err = rng.normal(scale=2.0, size=m)
        y = 40.0 * case.intercept + 3.0 * cdd + slope2 * second + err
        frame = pd.DataFrame({GROUP: f"S{g + 1:02d}", DAY: days, "CDD": cdd, "Pallets": pallets, Y: y})
        if extra:
            frame.loc[m // 2, "Pallets"] = BAD_VALUE[case.term]
        frame["_time"] = np.cumsum(rng.exponential(size=m))
        parts.append(frame)
    table = pd.concat(parts, ignore_index=True).sort_values("_time", kind="stable")
    table[SEQ] = np.arange(1, len(table) + 1)
    if case.order:
        table = table.iloc[rng.permutation(len(table))]
    return table[HEADER].reset_index(drop=True)


# ---------------------------------------------------------------- input files

def _rows(table: pd.DataFrame) -> list[list]:
    return [[r[GROUP], int(r[SEQ]), r[DAY], float(r["CDD"]), float(r["Pallets"]), float(r[Y])]
            for r in table.to_dict("records")]


def _csv(table: pd.DataFrame, path: Path) -> None:
    out = io.StringIO()
    w = csv.writer(out, lineterminator="\n")
    w.writerow(HEADER)
    for row in _rows(table):
        w.writerow([row[0], row[1], row[2].isoformat(), *map(repr, row[3:])])
    path.write_text(out.getvalue(), encoding="utf-8")


def _ods_cell(v) -> str:
    if isinstance(v, dt.date):
        return (f'<table:table-cell office:value-type="date" office:date-value="{v.isoformat()}">'
                f'<text:p>{v.isoformat()}</text:p></table:table-cell>')
    if isinstance(v, (int, float)):
        return (f'<table:table-cell office:value-type="float" office:value="{v!r}"><text:p>{v!r}</text:p>'
                f'</table:table-cell>')
    return f'<table:table-cell office:value-type="string"><text:p>{v}</text:p></table:table-cell>'


def _ods(table: pd.DataFrame, path: Path) -> None:
    xml = "".join("<table:table-row>" + "".join(_ods_cell(v) for v in row) + "</table:table-row>"
                  for row in [HEADER, *_rows(table)])
    writers.ods(xml)(path)


def write_input(case: Case, table: pd.DataFrame, path: Path) -> None:
    """The table as an input file of the case's format (.xls: see convert_to_xls)."""
    if case.format == "csv":
        _csv(table, path)
    elif case.format == "ods":
        _ods(table, path)
    elif case.format in ("xlsx", "xls"):     # .xls: this .xlsx, converted by LibreOffice in one batch
        writers.xlsx([HEADER, *_rows(table)], title="Data")(path)
    else:
        raise ValueError(case.format)


def soffice() -> str | None:
    return shutil.which("soffice") or shutil.which("libreoffice")


def convert_to_xls(sources: list[Path], outdir: Path) -> None:
    """Convert .xlsx files to legacy .xls with LibreOffice, all in one call (its start-up is slow)."""
    outdir.mkdir(parents=True, exist_ok=True)
    subprocess.run([soffice(), "--headless", f"-env:UserInstallation=file://{outdir}/profile", "--convert-to",
                    "xls", "--outdir", str(outdir), *map(str, sources)], check=True, capture_output=True,
                   timeout=300)


# ---------------------------------------------------------------- the oracle

@dataclass
class GroupReference:
    """One group's usable rows in sequence, its design and its statsmodels OLS fit."""

    key: str | None
    rows: pd.DataFrame          # usable rows in the order the fit sees them (file rows in `_file_row`)
    X: np.ndarray               # design as fitted (intercept column first when there is one)
    fit: object                 # statsmodels RegressionResults
    dropped: int                # rows of the group the model could not use


def reference_fits(case: Case, table: pd.DataFrame) -> list[GroupReference]:
    """statsmodels OLS (the reference implementation) of every group, in order of first appearance."""
    table = table.assign(_file_row=np.arange(2, len(table) + 2))
    keyed = table.groupby(GROUP, sort=False) if case.group else [(None, table)]
    out = []
    for key, g in keyed:
        with np.errstate(divide="ignore", invalid="ignore"):     # log(0) = −inf, sqrt(−3.5) = NaN
            cols = np.column_stack([REFERENCE_COLUMNS[t](g) for t in case.terms])
        ok = np.isfinite(cols).all(axis=1)
        rows = g.loc[ok].copy()
        X = cols[ok]
        seq = rows[SEQ].to_numpy() if case.order else rows["_file_row"].to_numpy()
        sort = np.argsort(seq, kind="stable")
        rows, X = rows.iloc[sort], X[sort]
        if case.intercept:
            X = sm.add_constant(X, has_constant="add")
        fit = sm.OLS(rows[Y].to_numpy(float), X).fit()
        out.append(GroupReference(key=key, rows=rows, X=X, fit=fit, dropped=int((~ok).sum())))
    return out


if __name__ == "__main__":
    design = cases()
    for c in design:
        print(c.id)
    print(f"{len(design)} cases; pairs left uncovered: {len(pairs_missing([vars(c) for c in design], DIMENSIONS))}")
