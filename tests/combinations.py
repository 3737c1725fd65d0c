"""The combination matrix behind tests/test_combinations.py: its dimensions, a deterministic
all-pairs covering design over them (impossible pairs left out), seeded data per case and the input
files in every format. The per-group reference (the oracle) lives in tests/combination_oracle.py.

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

from tests.corpus import writers

# ---------------------------------------------------------------- the dimensions
# One entry per dimension; a new level joins the matrix by being added to its list (and, for a new
# term kind, to TERMS, REFERENCE_COLUMNS and SOURCE below; for a new --weights level, to WEIGHTS). The
# design below covers every possible pair of levels.
DIMENSIONS: dict[str, list] = {
    "term": ["plain", "power", "log", "sqrt", "date", "one"],  # kind of the input terms (TERMS)
    "sizes": ["equal", "unequal", "tiny", "one"],            # group sizes (Case.group_sizes)
    "intercept": [True, False],                              # intercept= / --no-intercept
    "order": [False, True],                                  # order="Seq" / --order Seq, rows shuffled in the file
    "observations": ["all", "flagged", "none"],              # observations= / --observations
    "inference": ["classic", "robust"],                      # inference= / --inference
    "format": ["xlsx", "csv", "ods", "xls"],                 # input file format (write_input)
    "route": ["api", "cli"],                                 # fit_workbook + write_results, or the real CLI
    "change_point": ["none", "heating", "two-slopes", "auto", "heating-cooling"],  # change_point= / --change-point
    "weights": ["none", "1/Pallets^2", "Weight"],            # weights= / --weights (WEIGHTS)
    "calibration": [False, True],                            # calibration= / --calibration
}
# Pairs of levels no run can have: neither required of the design nor generated. Each is refused with a
# JobError (README): --change-point needs the constant and takes no --weights; --calibration needs one
# plain --x column with the constant and no change point.
IMPOSSIBLE: list[tuple[str, object, str, object]] = [
    *(("intercept", False, "change_point", cp) for cp in DIMENSIONS["change_point"] if cp != "none"),
    *(("weights", w, "change_point", cp) for w in DIMENSIONS["weights"] if w != "none"
      for cp in DIMENSIONS["change_point"] if cp != "none"),
    ("calibration", True, "intercept", False),
    *(("calibration", True, "term", t) for t in DIMENSIONS["term"] if t != "one"),
    *(("calibration", True, "change_point", cp) for cp in DIMENSIONS["change_point"] if cp != "none"),
]
PREFER = {"route": "api"}     # where pairs allow: a CLI case starts a process (about 3 s more per case)
DESIGN_SEED = 2021            # of the seeds 2000–2059, the design with the fewest CLI cases (6: one per term kind)

# Columns of every input file. Site: group key; Seq: the sequence (time order) of the rows; Day: a date;
# Weight: positive row weights (some zero or negative where the case weights by it: WEIGHT_PROBLEMS).
GROUP, SEQ, DAY, WEIGHT, Y = "Site", "Seq", "Day", "Weight", "kWh"
HEADER = [GROUP, SEQ, DAY, "CDD", "Pallets", WEIGHT, Y]

TERMS: dict[str, list[str]] = {          # the --x terms of each term kind (two inputs: VIF applies, but to "one")
    "plain": ["CDD", "Pallets"],
    "power": ["CDD", "CDD^2"],
    "log": ["CDD", "log(Pallets)"],
    "sqrt": ["CDD", "sqrt(Pallets)"],
    "date": ["CDD", DAY],
    "one": ["CDD"],                      # a straight line in one input: what --calibration needs
}
# the input levels of a one-input line without change points: a calibration run's standards, a blank
# (0) among them, repeated so that groups of more than 7 rows have replicates (lack of fit runs)
STANDARDS = np.array([0.0, 1.0, 2.0, 5.0, 10.0, 20.0, 30.0])
# each --weights level: 1/Pallets^2 a function of an input (of a number column that is no input where the
# terms leave Pallets out), Weight a plain column
WEIGHTS = {"1/Pallets^2": ("Pallets", 2), "Weight": (WEIGHT, 0)}     # level → (column, inverse power)
# where the case weights by the Weight column: extra rows in S01 and S02 (group index 0, 1) whose weight is
# not positive (README: such a row is not used, with a reason); S03's weights are all equal (README: that
# group gets the ordinary fit)
WEIGHT_PROBLEMS = {0: [0.0, -1.5], 1: [0.0]}
EQUAL_WEIGHT_GROUP, EQUAL_WEIGHT = 2, 2.5

TEMPERATURE = "CDD"     # the first plain-column --x of every term kind: the change-point input by default (README)
# the temperature part of y for each shape of the data: README's shapes with change points at 16 (11 and 21)
TEMPERATURE_PART = {
    "line": lambda t: 3.0 * t,
    "heating": lambda t: 5.0 * np.maximum(0.0, 16.0 - t),
    "cooling": lambda t: 5.0 * np.maximum(0.0, t - 16.0),
    "two-slopes": lambda t: 5.0 * np.maximum(0.0, 16.0 - t) + 2.0 * np.maximum(0.0, t - 16.0),
    "heating-cooling": lambda t: 5.0 * np.maximum(0.0, 11.0 - t) + 5.0 * np.maximum(0.0, t - 21.0),
}
AUTO_DATA = ("heating", "two-slopes", "heating-cooling", "cooling")   # data shape of group g under auto: g mod 4
CHANGE_POINTS = {"none": 0, "heating": 1, "cooling": 1, "two-slopes": 1, "heating-cooling": 2, "auto": 2}

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
SOURCE = {"CDD": "CDD", "Pallets": "Pallets", "CDD^2": "CDD", "log(Pallets)": "Pallets",   # term → its input
          "sqrt(Pallets)": "Pallets", DAY: DAY}
BAD_VALUE = {"log": 0.0, "sqrt": -3.5}    # one row of the first group the term cannot use (README: left out)


# ---------------------------------------------------------------- the covering design

def _banned(dimensions: dict[str, list], impossible) -> set[tuple[int, int, int, int]]:
    """The impossible pairs as (dimension, level, dimension, level) indices, first dimension first."""
    names = list(dimensions)
    out = set()
    for p, a, q, b in impossible:
        i, j, la, lb = names.index(p), names.index(q), dimensions[p].index(a), dimensions[q].index(b)
        out.add((i, la, j, lb) if i < j else (j, lb, i, la))
    return out


def all_pairs(dimensions: dict[str, list], seed: int = 2024, candidates: int = 60,
              impossible=(), prefer: dict | None = None) -> list[dict]:
    """A deterministic all-pairs covering design (greedy, in the manner of AETG): every possible pair of
    levels of every two dimensions occurs in at least one row; no row holds a pair of `impossible`
    ((dimension, level, dimension, level) tuples). Each new row is the best of `candidates` seeded
    tries, each started from a pair not yet covered and filled dimension by dimension with the
    allowed level that covers most new pairs (on a tie the level `prefer` names for the dimension)."""
    rng = np.random.default_rng(seed)
    prefer = prefer or {}
    names = list(dimensions)
    sizes = [len(dimensions[n]) for n in names]
    banned = _banned(dimensions, impossible)
    uncovered = {(i, a, j, b) for i, j in itertools.combinations(range(len(names)), 2)
                 for a in range(sizes[i]) for b in range(sizes[j])} - banned

    def key(d: int, level: int, e: int, lv: int) -> tuple[int, int, int, int]:
        return (d, level, e, lv) if d < e else (e, lv, d, level)

    def gain(row: dict[int, int], d: int, level: int) -> int:
        if any(key(d, level, e, lv) in banned for e, lv in row.items()):
            return -1
        return sum(key(d, level, e, lv) in uncovered for e, lv in row.items())

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
                if top < 0:
                    raise ValueError(f"no level of {names[d]} goes with {row}: the impossible pairs conflict")
                choices = [lv for lv, s in enumerate(scores) if s == top]
                cheap = [lv for lv in choices if dimensions[names[d]][lv] == prefer.get(names[d])]
                row[d] = cheap[0] if cheap else choices[int(rng.integers(len(choices)))]
            new = sum((p, row[p], q, row[q]) in uncovered for p, q in itertools.combinations(range(len(names)), 2))
            if new > best_new:
                best, best_new = row, new
        rows.append([best[d] for d in range(len(names))])
        uncovered -= {(p, best[p], q, best[q]) for p, q in itertools.combinations(range(len(names)), 2)}
    return [{n: dimensions[n][lv] for n, lv in zip(names, r)} for r in rows]


def pairs_missing(cases: list[dict], dimensions: dict[str, list], impossible=()) -> list[tuple]:
    """Possible pairs of levels no case covers (empty for a covering design)."""
    names = list(dimensions)
    missing = []
    for p, q in itertools.combinations(names, 2):
        for a in dimensions[p]:
            for b in dimensions[q]:
                ruled_out = (p, a, q, b) in impossible or (q, b, p, a) in impossible
                if not ruled_out and not any(c[p] == a and c[q] == b for c in cases):
                    missing.append((p, a, q, b))
    return missing


def pairs_impossible(cases: list[dict], impossible) -> list[tuple]:
    """Impossible pairs some case holds (empty when the design respects them)."""
    return [(p, a, q, b) for p, a, q, b in impossible if any(c[p] == a and c[q] == b for c in cases)]


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
    change_point: str = "none"
    weights: str = "none"
    calibration: bool = False

    @property
    def id(self) -> str:
        weights = "unweighted" if self.weights == "none" else "w_" + self.weights.replace("1/", "inv_").replace("^", "")
        return "-".join([self.term, self.sizes, "icpt" if self.intercept else "noicpt",
                         "order" if self.order else "roworder", f"obs_{self.observations}", self.inference,
                         self.format, self.route, f"cp_{self.change_point}", weights,
                         "calib" if self.calibration else "nocalib"])

    @property
    def seed(self) -> int:
        return zlib.crc32(self.id.encode())

    @property
    def terms(self) -> list[str]:
        return TERMS[self.term]

    @property
    def p(self) -> int:
        """Parameters of the largest model the case can fit: its coefficients (one more where two hinge
        columns take the temperature's place) and change points (README)."""
        two = self.change_point in ("two-slopes", "heating-cooling", "auto")
        return len(self.terms) + self.intercept + two + CHANGE_POINTS[self.change_point]

    @property
    def group(self) -> list[str]:
        return [] if self.sizes == "one" else [GROUP]

    def group_sizes(self) -> list[int]:
        """Rows per group; tiny: 2 residual df in the largest model, and with a change point one group
        of 5 rows, too few for one (README: 3 rows on each side)."""
        tiny = [self.p + 2] * 3 if self.change_point == "none" else [self.p + 2] * 2 + [5]
        return {"equal": [30, 30, 30], "unequal": [12, 14, 25, 31, 40], "tiny": tiny, "one": [30]}[self.sizes]

    def settings(self) -> dict:
        """Keyword settings of fit_workbook."""
        return {"y": Y, "x": self.terms, "group": self.group, "intercept": self.intercept,
                "order": SEQ if self.order else None, "observations": self.observations,
                "inference": self.inference, "change_point": self.change_point,
                "weights": None if self.weights == "none" else self.weights, "calibration": self.calibration}

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
        if self.change_point != "none":
            args += ["--change-point", self.change_point]
        if self.weights != "none":
            args += ["--weights", self.weights]
        if self.calibration:
            args.append("--calibration")
        return args + ["--observations", self.observations, "--inference", self.inference]

    def data_shape(self, g: int) -> str:
        """The shape of the temperature part of group g's data (TEMPERATURE_PART)."""
        return {"none": "line", "auto": AUTO_DATA[g % len(AUTO_DATA)]}.get(self.change_point, self.change_point)

    @property
    def standards(self) -> bool:
        """Whether the temperature takes the STANDARDS' levels (a one-input line without change points)."""
        return self.term == "one" and self.change_point == "none"

    def weight_problems(self, g: int) -> list[float]:
        """The not-positive weights of group g's extra rows (only where the case weights by WEIGHT)."""
        return WEIGHT_PROBLEMS.get(g, []) if self.weights == WEIGHT else []


def cases() -> list[Case]:
    return [Case(**c) for c in all_pairs(DIMENSIONS, seed=DESIGN_SEED, impossible=IMPOSSIBLE, prefer=PREFER)]


# ---------------------------------------------------------------- seeded data

def make_table(case: Case) -> pd.DataFrame:
    """The rows of the input file, in file order (seeded by the case id).

    Per group: inputs on different scales, a temperature part of the case's shape (a clear bend in
    CDD for change-point cases; the STANDARDS' levels for a one-input line), errors that are
    heteroscedastic (group 1), AR(1) along the sequence (group 2) or plain (group 3), so robust std
    errors come into play where groups are big enough, and positive weights (all equal in group 3, a
    few extra rows with weights that are not positive where the case weights by them). Groups
    interleave in the file; with an order column the rows are shuffled and Seq gives the sequence,
    without one the file order is the sequence.
    """
    rng = np.random.default_rng(case.seed)
    parts = []
    for g, n in enumerate(case.group_sizes()):
        extra = 1 if (g == 0 and case.term in BAD_VALUE) else 0
        bad_weights = case.weight_problems(g)
        m = n + extra + len(bad_weights)
        cdd = rng.uniform(1.0, 30.0, m)
        if case.standards:
            cdd = rng.permutation(np.resize(STANDARDS, m))
        pallets = rng.uniform(5.0, 200.0, m)
        offsets = np.sort(rng.choice(4 * m, size=m, replace=False)) + 11 * g
        days = [FIRST_DAY + dt.timedelta(days=int(o)) for o in offsets]
        second = {"plain": pallets, "power": cdd**2, "log": np.log(pallets), "sqrt": np.sqrt(pallets),
                  "date": (offsets - offsets.min()).astype(float), "one": np.zeros(m)}[case.term]
        slope2 = {"plain": 0.4, "power": -0.08, "log": 12.0, "sqrt": 2.5, "date": 0.3, "one": 0.0}[case.term]
        y = 40.0 * case.intercept + TEMPERATURE_PART[case.data_shape(g)](cdd) + slope2 * second + _errors(rng, g, cdd)
        weight = np.full(m, EQUAL_WEIGHT) if g == EQUAL_WEIGHT_GROUP else rng.uniform(0.5, 4.0, m)
        weight[m - len(bad_weights):] = bad_weights           # extra rows at the end of the group's sequence
        frame = pd.DataFrame({GROUP: f"S{g + 1:02d}", DAY: days, "CDD": cdd, "Pallets": pallets, WEIGHT: weight, Y: y})
        if extra:
            frame.loc[m // 2, "Pallets"] = BAD_VALUE[case.term]
        frame["_time"] = np.cumsum(rng.exponential(size=m))
        parts.append(frame)
    table = pd.concat(parts, ignore_index=True).sort_values("_time", kind="stable")
    table[SEQ] = np.arange(1, len(table) + 1)
    if case.order:
        table = table.iloc[rng.permutation(len(table))]
    return table[HEADER].reset_index(drop=True)


def _errors(rng: np.random.Generator, g: int, cdd: np.ndarray) -> np.ndarray:
    """Group g's errors: spread growing with CDD (g mod 3 = 0), AR(1) along the sequence (1) or plain (2)."""
    m = len(cdd)
    kind = g % 3
    if kind == 0:
        return rng.normal(size=m) * 0.004 * cdd**2.5
    if kind == 1:
        e = rng.normal(scale=2.0, size=m)
        err = np.empty(m)
        err[0] = e[0]
        for i in range(1, m):
            err[i] = 0.9 * err[i - 1] + e[i]
        return err
    return rng.normal(scale=2.0, size=m)


# ---------------------------------------------------------------- input files

def _rows(table: pd.DataFrame) -> list[list]:
    return [[r[GROUP], int(r[SEQ]), r[DAY], float(r["CDD"]), float(r["Pallets"]), float(r[WEIGHT]), float(r[Y])]
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


if __name__ == "__main__":
    design = cases()
    for c in design:
        print(c.id)
    missing = pairs_missing([vars(c) for c in design], DIMENSIONS, IMPOSSIBLE)
    print(f"{len(design)} cases; possible pairs left uncovered: {len(missing)}")
