"""The combination matrix behind tests/test_combinations.py: its dimensions, a deterministic all-pairs
covering design over them (impossible pairs left out), what a case is (its settings and options) and the
README's definitions the oracle builds by hand (term columns, levels, weights). Seeded data, input files
and the run of a case live in tests/combination_cases.py; the per-group reference (the oracle) in
tests/combination_oracle.py.

`python -m tests.combinations` prints the cases of the design.
"""

from __future__ import annotations

import datetime as dt
import itertools
import zlib
from dataclasses import dataclass

import numpy as np
import pandas as pd

# ---------------------------------------------------------------- the dimensions
# One entry per dimension; a new level joins the matrix by being added to its list (and, for a new
# term kind, to TERMS, REFERENCE_COLUMNS / CATEGORY_TERMS / SLOPES_BY_LEVEL, SOURCE and its data in
# combination_cases._second_part; for a new --weights level, to WEIGHTS). The design below covers every
# possible pair of levels.
DIMENSIONS: dict[str, list] = {
    "term": ["plain", "power", "log", "sqrt", "date", "one",       # kind of the input terms (TERMS)
             "category", "levels", "product", "slope by level"],
    "sizes": ["equal", "unequal", "tiny", "one"],            # group sizes (Case.group_sizes)
    "intercept": [True, False],                              # intercept= / --no-intercept
    "order": [False, True],                                  # order="Seq" / --order Seq, rows shuffled in the file
    "observations": ["all", "flagged", "none"],              # observations= / --observations
    "inference": ["classic", "robust"],                      # inference= / --inference
    "format": ["xlsx", "csv", "ods", "xls"],                 # input file format (combination_cases.write_input)
    "route": ["api", "cli"],                                 # fit_workbook + write_results, or the real CLI
    "change_point": ["none", "heating", "two-slopes", "auto", "heating-cooling"],  # change_point= / --change-point
    "weights": ["none", "1/Pallets^2", "Weight", "1/Gas"],   # weights= / --weights (WEIGHTS)
    "calibration": [False, True],                            # calibration= / --calibration
    "responses": [1, 2],                                     # y="kWh" or y=["kWh", "Gas"] / --y repeated
    "files": [1, 2],                                         # one input file, or the table split in two by group
    "previous": [False, True],                               # previous= / --previous: an earlier run's results
}
CATEGORY_KINDS = ("category", "levels", "slope by level")    # term kinds holding a category input
# Pairs of levels no run can have: neither required of the design nor generated. Each is refused with a
# JobError (README): --change-point needs the constant, takes no --weights and no category input;
# --calibration needs one plain --x column with the constant and no change point; --weights may not name a
# response's own column when several responses are fitted.
IMPOSSIBLE: list[tuple[str, object, str, object]] = [
    *(("intercept", False, "change_point", cp) for cp in DIMENSIONS["change_point"] if cp != "none"),
    *(("weights", w, "change_point", cp) for w in DIMENSIONS["weights"] if w != "none"
      for cp in DIMENSIONS["change_point"] if cp != "none"),
    *(("change_point", cp, "term", t) for cp in DIMENSIONS["change_point"] if cp != "none" for t in CATEGORY_KINDS),
    ("calibration", True, "intercept", False),
    *(("calibration", True, "term", t) for t in DIMENSIONS["term"] if t != "one"),
    *(("calibration", True, "change_point", cp) for cp in DIMENSIONS["change_point"] if cp != "none"),
    ("responses", 2, "weights", "1/Gas"),
]
# where pairs allow: a CLI case starts a process (about 3 s more per case); one file and one response are cheaper, and
# a case without --previous fits once
PREFER = {"route": "api", "files": 1, "responses": 1, "previous": False}
DESIGN_SEED = 2007            # of the seeds 2000–2059, a design with the fewest cases (64; 11 by the CLI)

# Columns of every input file. Site: group key; Seq: the sequence (time order) of the rows; Day: a date;
# Shift: text levels; Crew: whole numbers used as levels; Weight: positive row weights (some zero or negative
# where the case weights by it: WEIGHT_PROBLEMS); kWh and Gas: the responses (Gas has one blank cell).
GROUP, SEQ, DAY, SHIFT, CREW, WEIGHT, Y, GAS = "Site", "Seq", "Day", "Shift", "Crew", "Weight", "kWh", "Gas"
HEADER = [GROUP, SEQ, DAY, "CDD", "Pallets", SHIFT, CREW, WEIGHT, Y, GAS]
RESPONSE_KEY, FILE_KEY, RESPONSE_VALUE = "response", "file", "response value"   # README: sheetfit's own keys
FILE_NAMES = {1: ("usage",), 2: ("north", "south")}     # input file stems; with two, group g goes to file g mod 2

TERMS: dict[str, list[str]] = {          # the --x terms of each term kind (two inputs: VIF applies, but to "one")
    "plain": ["CDD", "Pallets"],
    "power": ["CDD", "CDD^2"],
    "log": ["CDD", "log(Pallets)"],
    "sqrt": ["CDD", "sqrt(Pallets)"],
    "date": ["CDD", DAY],
    "one": ["CDD"],                      # a straight line in one input: what --calibration needs
    "category": ["CDD", SHIFT],          # a text column: a category, reference the first level in sorted order
    "levels": ["CDD", f"levels({CREW})"],                # numbers as levels, reference chosen (REFERENCE)
    "product": ["CDD", "Pallets", "CDD by Pallets"],     # the product of two number columns
    "slope by level": ["CDD", SHIFT, f"CDD by {SHIFT}"],  # CDD's extra slope at each level but the reference
}
REFERENCE = {"levels": f"{CREW}=3"}      # reference= / --reference of a term kind (README: COL=LEVEL)
# the levels of each category column as written, and the reference each one's data are laid out around
LEVELS = {SHIFT: ("day", "evening", "night"), CREW: (2, 3, 4)}
DATA_REFERENCE = {SHIFT: "day", CREW: 3}
# which levels group g's rows show (g beyond: every level): README's cases of a group lacking a level, lacking
# the reference (measured against its own first level) and holding one level only (no level effects)
LEVEL_PATTERN = {1: "no other", 2: "no reference", 3: "one level"}
LEVEL_EFFECT = {SHIFT: {"day": 0.0, "evening": -4.0, "night": 6.0}, CREW: {2: -3.0, 3: 0.0, 4: 4.0}}
LEVEL_SLOPE = {"day": 0.0, "evening": 0.5, "night": -0.8}      # CDD's extra slope per Shift level
# the input levels of a one-input line without change points: a calibration run's standards, a blank
# (0) among them, repeated so that groups of more than 7 rows have replicates (lack of fit runs)
STANDARDS = np.array([0.0, 1.0, 2.0, 5.0, 10.0, 20.0, 30.0])
# each --weights level: 1/Pallets^2 a function of an input (of a number column that is no input where the
# terms leave Pallets out), Weight a plain column, 1/Gas a function of the second response's column
WEIGHTS = {"1/Pallets^2": ("Pallets", 2), "Weight": (WEIGHT, 0), "1/Gas": (GAS, 1)}   # level → (column, inverse power)
# where the case weights by the Weight column: extra rows in S01 and S02 (group index 0, 1) whose weight is
# not positive (README: such a row is not used, with a reason); S03's weights are all equal (README: that
# group gets the ordinary fit)
WEIGHT_PROBLEMS = {0: [0.0, -1.5], 1: [0.0]}
EQUAL_WEIGHT_GROUP, EQUAL_WEIGHT = 2, 2.5
GAS_BLANK_GROUP = 1      # one row of this group has no Gas reading (README: unusable for Gas only)

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


def numbers(g: pd.DataFrame, column: str) -> np.ndarray:
    """A column as float64; NaN where a cell is blank or not a number."""
    return pd.to_numeric(g[column], errors="coerce").to_numpy(float)


# number term → its column in the reference design, built by hand from the README's definitions
# (never with sheetfit.terms); `g` holds every row of one group as written in the file.
REFERENCE_COLUMNS = {
    "CDD": lambda g: numbers(g, "CDD"),
    "Pallets": lambda g: numbers(g, "Pallets"),
    "CDD^2": lambda g: numbers(g, "CDD") ** 2,
    "log(Pallets)": lambda g: np.log(numbers(g, "Pallets")),
    "sqrt(Pallets)": lambda g: np.sqrt(numbers(g, "Pallets")),
    DAY: _days_since_earliest,
    "CDD by Pallets": lambda g: numbers(g, "CDD") * numbers(g, "Pallets"),     # README: the product column A·B
}
CATEGORY_TERMS = {SHIFT: SHIFT, f"levels({CREW})": CREW}      # category term → its column
SLOPES_BY_LEVEL = {f"CDD by {SHIFT}": ("CDD", SHIFT)}         # `A by CAT` → (A, CAT): A·(CAT = L) per level L
# term → the input whose family it joins for the GVIF (sheetfit/checks/collinearity.py: a term's first column)
SOURCE = {"CDD": "CDD", "Pallets": "Pallets", "CDD^2": "CDD", "log(Pallets)": "Pallets", "sqrt(Pallets)": "Pallets",
          DAY: DAY, "CDD by Pallets": "CDD", SHIFT: SHIFT, f"levels({CREW})": CREW, f"CDD by {SHIFT}": "CDD"}
# term → the columns it reads (an input point for lack of fit is a row's values in all of them)
INPUTS = {t: (s,) for t, s in SOURCE.items()} | {"CDD by Pallets": ("CDD", "Pallets"),
                                                 f"CDD by {SHIFT}": ("CDD", SHIFT)}
COLUMNS_OF_TERM = {SHIFT: 2, f"levels({CREW})": 2, f"CDD by {SHIFT}": 2}   # design columns of a term at most (else 1)
# one row of the first group the term kind cannot use (README: left out with a reason): a value outside the
# term's domain, or a blank category cell
BAD_CELL = {"log": ("Pallets", 0.0), "sqrt": ("Pallets", -3.5), "category": (SHIFT, None), "levels": (CREW, None),
            "slope by level": (SHIFT, None)}


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
    responses: int = 1
    files: int = 1
    previous: bool = False       # fitted twice: an earlier run (combination_previous.earlier_table), then this one

    @property
    def id(self) -> str:
        weights = "unweighted" if self.weights == "none" else "w_" + self.weights.replace("1/", "inv_").replace("^", "")
        return "-".join([self.term.replace(" ", "_"), self.sizes, "icpt" if self.intercept else "noicpt",
                         "order" if self.order else "roworder", f"obs_{self.observations}", self.inference,
                         self.format, self.route, f"cp_{self.change_point}", weights,
                         "calib" if self.calibration else "nocalib", f"{self.responses}y", f"{self.files}files",
                         "prev" if self.previous else "noprev"])

    @property
    def seed(self) -> int:
        return zlib.crc32(self.id.encode())

    @property
    def terms(self) -> list[str]:
        return TERMS[self.term]

    @property
    def ys(self) -> list[str]:
        """The response columns, in the order given."""
        return [Y, GAS][: self.responses]

    @property
    def categories(self) -> dict[str, str]:
        """Category column → its reference level as text (README: the first in sorted order unless chosen)."""
        chosen = dict([REFERENCE[self.term].split("=", 1)]) if self.term in REFERENCE else {}
        cols = [CATEGORY_TERMS[t] for t in self.terms if t in CATEGORY_TERMS]
        return {c: chosen.get(c, sorted(str(v) for v in LEVELS[c])[0]) for c in cols}

    @property
    def p(self) -> int:
        """Parameters of the largest model the case can fit: its coefficients (one more where two hinge
        columns take the temperature's place; a category's indicators) and change points (README)."""
        two = self.change_point in ("two-slopes", "heating-cooling", "auto")
        columns = sum(COLUMNS_OF_TERM.get(t, 1) for t in self.terms)
        return columns + self.intercept + two + CHANGE_POINTS[self.change_point]

    @property
    def group(self) -> list[str]:
        return [] if self.sizes == "one" else [GROUP]

    @property
    def keys(self) -> list[str]:
        """The group columns of every results table, in order (README: response, then file, then --group)."""
        return [RESPONSE_KEY] * (self.responses > 1) + [FILE_KEY] * (self.files > 1) + self.group

    def file_names(self) -> list[str]:
        return [f"{stem}.{self.format}" for stem in FILE_NAMES[self.files]]

    def group_sizes(self) -> list[int]:
        """Rows per group; tiny: 2 residual df in the largest model, and with a change point one group
        of 5 rows, too few for one (README: 3 rows on each side)."""
        tiny = [self.p + 2] * 3 if self.change_point == "none" else [self.p + 2] * 2 + [5]
        return {"equal": [30, 30, 30], "unequal": [12, 14, 25, 31, 40], "tiny": tiny, "one": [30]}[self.sizes]

    def settings(self) -> dict:
        """Keyword settings of fit_workbook."""
        out = {"y": self.ys[0] if self.responses == 1 else self.ys, "x": self.terms, "group": self.group,
               "intercept": self.intercept, "order": SEQ if self.order else None, "observations": self.observations,
               "inference": self.inference, "change_point": self.change_point,
               "weights": None if self.weights == "none" else self.weights, "calibration": self.calibration}
        return out | ({"reference": [REFERENCE[self.term]]} if self.term in REFERENCE else {})

    def cli_args(self) -> list[str]:
        """The same settings as `sheetfit fit` options."""
        args = [a for y in self.ys for a in ("--y", y)]
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
        if self.term in REFERENCE:
            args += ["--reference", REFERENCE[self.term]]
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


# ---------------------------------------------------------------- the README's definitions, by hand

def level_label(value) -> str:
    """A category cell as its level's text (README: 2, 2.0 and "2" are one level); '' for a blank cell."""
    if value is None or (isinstance(value, float) and np.isnan(value)) or value == "":
        return ""
    return str(int(value)) if isinstance(value, (int, float, np.integer)) and float(value).is_integer() else str(value)


def run_levels(case: Case, table: pd.DataFrame) -> dict[str, tuple[tuple[str, ...], str]]:
    """Each category column's levels over every row read, sorted as text, and the run's reference (README)."""
    return {col: (tuple(sorted({level_label(v) for v in table[col]} - {""})), ref)
            for col, ref in case.categories.items()}


def reference_weights(case: Case, frame: pd.DataFrame) -> np.ndarray:
    """Each row's weight by hand (README: the column W, 1/COL or 1/COL^2; inf where COL is 0); ones unweighted."""
    if case.weights == "none":
        return np.ones(len(frame))
    column, power = WEIGHTS[case.weights]
    values = numbers(frame, column)
    with np.errstate(divide="ignore"):
        return values if power == 0 else 1.0 / values**power


def cases(seed: int = DESIGN_SEED) -> list[Case]:
    return [Case(**c) for c in all_pairs(DIMENSIONS, seed=seed, impossible=IMPOSSIBLE, prefer=PREFER)]


if __name__ == "__main__":
    design = cases()
    for c in design:
        print(c.id)
    missing = pairs_missing([vars(c) for c in design], DIMENSIONS, IMPOSSIBLE)
    print(f"{len(design)} cases ({sum(c.route == 'cli' for c in design)} by the CLI); possible pairs left "
          f"uncovered: {len(missing)}")
