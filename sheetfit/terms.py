"""Input-term syntax → design-matrix columns.

Syntax: a column name; `COL^k` (k = 2…12); `log(COL)` (natural log); `sqrt(COL)`; `levels(COL)` (the
column's values as categories, whatever they look like: one indicator per level but the reference);
`A by B` (the product of two inputs; when B is a category, A's extra slope at each level of B but the
reference). A text column given as a plain term is a category too (the reader decides from its cells).
A string that equals an existing column name exactly is always that column.
A change-point run adds two term kinds of its own on the temperature column T, each with a
change point τ per group: 'below' = max(0, τ − T) and 'above' = max(0, T − τ).
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from .errors import ColumnNotFoundError, TermSyntaxError, not_found_message

INTERCEPT = "constant"      # the label of the intercept wherever results show it (see intercept_label)

_POWER = re.compile(r"^(?P<col>.+?)\s*\^\s*(?P<k>[0-9]+)$")
_FUNC = re.compile(r"^(?P<fn>log|sqrt)\s*\(\s*(?P<col>.+?)\s*\)$", re.IGNORECASE)
_LEVELS = re.compile(r"^levels\s*\(\s*(?P<col>.+?)\s*\)$", re.IGNORECASE)
_BY = re.compile(r"^(?P<a>.+?)\s+by\s+(?P<b>.+)$", re.IGNORECASE)
CATEGORY = "category"       # a category before its levels are known (model.categories expands it)
INDICATOR = "indicator"     # 1 where the category column holds the term's level, else 0
PRODUCT = "product"         # column × by (× only the rows at a level of `by` when `by` is a category)
MAX_POWER = 12
HINGES = ("below", "above")  # the change-point term kinds


@dataclass(frozen=True)
class Term:
    """One design column: `kind` is 'column', 'power', 'log', 'sqrt', 'below' or 'above' of source column
    `column`; 'category' (before expansion) or 'indicator' (level `level`, coded `code` in the source column);
    'product' of `column` and `by` (only at level `level`/`code` of `by` when `by` is a category, code ≥ 0)."""

    label: str
    column: str
    kind: str = "column"
    power: int = 1
    by: str = ""
    level: str = ""
    code: int = -1

    def values(self, x: np.ndarray, change_point: np.ndarray | float | None = None) -> np.ndarray:
        """The term's values from the source column (float64); invalid domain gives NaN.

        'below' and 'above' need each row's change point τ; where τ is NaN (the group's shape has
        no such change point) the value is 0.
        """
        x = np.asarray(x, dtype=np.float64)
        if self.kind == INDICATOR:
            return np.where(np.isnan(x), np.nan, (x == self.code).astype(np.float64))
        if self.kind in HINGES:
            tau = np.asarray(np.nan if change_point is None else change_point, dtype=np.float64)
            gap = tau - x if self.kind == "below" else x - tau
            return np.where(np.isnan(tau), 0.0, np.maximum(gap, 0.0))
        with np.errstate(invalid="ignore", divide="ignore"):
            if self.kind == "column":
                return x.copy()
            if self.kind == "power":
                return x**self.power
            if self.kind == "log":
                return np.where(x > 0, np.log(np.where(x > 0, x, 1.0)), np.nan)
            if self.kind == "sqrt":
                return np.where(x >= 0, np.sqrt(np.where(x >= 0, x, 0.0)), np.nan)
        raise AssertionError(self.kind)

    def domain_problem(self, x: np.ndarray) -> np.ndarray:
        """Boolean mask of rows whose source value is outside the term's domain."""
        x = np.asarray(x, dtype=np.float64)
        with np.errstate(invalid="ignore"):
            if self.kind == "log":
                return np.isfinite(x) & (x <= 0)
            if self.kind == "sqrt":
                return np.isfinite(x) & (x < 0)
        return np.zeros(x.shape, dtype=bool)

    def domain_reason(self) -> str:
        if self.kind == "log":
            return f"{self.column} is zero or negative, so log({self.column}) is undefined"
        if self.kind == "sqrt":
            return f"{self.column} is negative, so sqrt({self.column}) is undefined"
        return ""


def parse_term(spec: str, columns: Sequence[str]) -> Term:
    """Parse one term against the header names; exact column names win over syntax."""
    spec_s = str(spec).strip()
    names = [str(c) for c in columns]
    if str(spec) in names:
        return Term(label=str(spec), column=str(spec))
    if spec_s in names:
        return Term(label=spec_s, column=spec_s)
    m = _FUNC.match(spec_s)
    if m:
        col = _column(m.group("col"), names, spec_s)
        fn = m.group("fn").lower()
        return Term(label=f"{fn}({col})", column=col, kind=fn)
    m = _LEVELS.match(spec_s)
    if m:
        col = _column(m.group("col"), names, spec_s)
        return Term(label=col, column=col, kind=CATEGORY)
    m = _BY.match(spec_s)
    if m:
        a, b = m.group("a").strip(), m.group("b").strip()
        levels = _LEVELS.match(b)
        col_a = _column(a, names, spec_s)
        col_b = _column(levels.group("col") if levels else b, names, spec_s)
        if col_a == col_b:
            raise TermSyntaxError(f'term "{spec_s}": a product needs two different columns; for a square write '
                                  f'"{col_a}^2"')
        return Term(label=f"{col_a} by {col_b}", column=col_a, kind=PRODUCT, by=col_b, level="*" if levels else "")
    m = _POWER.match(spec_s)
    if m:
        k = int(m.group("k"))
        col = _column(m.group("col"), names, spec_s)
        if k == 1:
            return Term(label=col, column=col)
        if not 2 <= k <= MAX_POWER:
            raise TermSyntaxError(f'term "{spec_s}": the power must be between 2 and {MAX_POWER}; '
                                  f'write for example "{col}^2"')
        return Term(label=f"{col}^{k}", column=col, kind="power", power=k)
    if any(ch in spec_s for ch in "~+*():"):
        raise TermSyntaxError(f'term "{spec_s}" is not understood; give one term per --x: a column name, '
                              f'COL^k (k = 2…{MAX_POWER}), log(COL), sqrt(COL), levels(COL) or A by B')
    raise ColumnNotFoundError(not_found_message("column", spec_s, names))


def _column(name: str, names: list[str], spec: str) -> str:
    if name in names:
        return name
    stripped = name.strip()
    if stripped in names:
        return stripped
    raise ColumnNotFoundError(not_found_message("column", stripped, names) + f' (in term "{spec}")')


def parse_terms(specs: Sequence[str], columns: Sequence[str]) -> tuple[Term, ...]:
    """Parse every term; a repeated term is an error (it would make the design collinear)."""
    terms = tuple(parse_term(s, columns) for s in specs)
    seen: dict[str, str] = {}
    for spec, term in zip(specs, terms):
        if term.label in seen:
            raise TermSyntaxError(f'term "{spec}" repeats "{seen[term.label]}"; give each term once')
        seen[term.label] = spec
    return terms


def source_columns(terms: Sequence[Term]) -> tuple[str, ...]:
    """The distinct source columns the terms need, in first-use order (a product's second column after its first)."""
    out: list[str] = []
    for t in terms:
        for c in (t.column, t.by):
            if c and c not in out:
                out.append(c)
    return tuple(out)


def term_values(term: Term, cols: Mapping[str, np.ndarray], change_point: np.ndarray | float | None = None
                ) -> np.ndarray:
    """The term's values from the source columns it needs (a product needs two; see Term.values)."""
    x = term.values(cols[term.column], change_point) if term.kind != PRODUCT else np.asarray(cols[term.column],
                                                                                             dtype=np.float64)
    if term.kind != PRODUCT:
        return x
    other = np.asarray(cols[term.by], dtype=np.float64)
    if term.code >= 0:
        other = np.where(np.isnan(other), np.nan, (other == term.code).astype(np.float64))
    return x * other


def polynomial_family(terms: Sequence[Term], column: str) -> list[int] | None:
    """Powers of `column` used as plain/power terms, when they form 1…K with K ≥ 2; else None.

    Such a family can be fitted on powers of the input scaled to [−1, 1] and converted back,
    which keeps high-order polynomials accurate.
    """
    powers = sorted(t.power for t in terms if t.column == column and t.kind in ("column", "power"))
    if len(powers) >= 2 and powers == list(range(1, len(powers) + 1)):
        return powers
    return None


def intercept_label(terms: Sequence[Term]) -> str:
    """INTERCEPT, or `constant (model)`, `constant (model 2)`… when an input term already has that label."""
    taken = {t.label for t in terms}
    label, k = INTERCEPT, 1
    while label in taken:
        label = f"{INTERCEPT} (model)" if k == 1 else f"{INTERCEPT} (model {k})"
        k += 1
    return label


def coefficient_labels(terms: Sequence[Term], intercept: bool) -> tuple[str, ...]:
    """Coefficient labels in design order, the intercept first when the model has one."""
    return ((intercept_label(terms),) if intercept else ()) + tuple(t.label for t in terms)


def change_point_input(terms: Sequence[Term], chosen: str | None) -> Term:
    """The plain-column term whose change point is searched: `chosen`, else the first plain column."""
    plain = [t for t in terms if t.kind == "column"]
    if chosen is None:
        if not plain:
            raise TermSyntaxError("--change-point needs a temperature input given as a plain column to --x "
                                  "(not a power, log or sqrt); add one or name it with --change-point-input")
        return plain[0]
    for t in plain:
        if t.column == chosen or t.column == str(chosen).strip():
            return t
    raise TermSyntaxError(f'--change-point-input "{chosen}" is not one of the plain-column inputs '
                          f'({", ".join(t.column for t in plain) or "none"}); add --x "{chosen}" or name one of them')


def hinge_label(column: str, kind: str) -> str:
    """The coefficient label of a change-point term: 'T below change point' or 'T above change point'."""
    return f"{column} {kind} change point"


def with_change_point_terms(terms: Sequence[Term], temperature: Term) -> tuple[Term, ...]:
    """The terms of a change-point run: the temperature term becomes (below, above, itself), in place.

    A group uses the slots its shape needs: heating → below; cooling → above; two-slopes and
    heating-cooling → both; a straight line → the plain temperature term.
    """
    out: list[Term] = []
    for t in terms:
        if t == temperature:
            out += [Term(hinge_label(t.column, k), t.column, k) for k in HINGES]
        out.append(t)
    return tuple(out)


def design_matrix(terms: Sequence[Term], intercept: bool, source: Mapping[str, np.ndarray],
                  change_points: Mapping[str, np.ndarray] | None = None) -> np.ndarray:
    """Raw design rows (k, p) for values of the source columns; `change_points` maps 'below'/'above' to
    each row's τ (NaN where the row's group has none). Used for curves and predictions."""
    first = np.atleast_1d(next(iter(source.values())))
    k = len(first)
    cps = change_points or {}
    parts = [np.ones(k)] if intercept else []
    cols = {c: np.atleast_1d(v) for c, v in source.items()}
    parts += [term_values(term, cols, cps.get(term.kind)) for term in terms]
    return np.column_stack(parts) if parts else np.zeros((k, 0))


_INVERSE = re.compile(r"^1\s*/\s*(?P<col>.+?)(\s*\^\s*(?P<k>2))?$")


@dataclass(frozen=True)
class WeightSpec:
    """Row weights of a weighted fit: the column itself (inverse_power 0), 1/COL (1) or 1/COL^2 (2)."""

    column: str
    inverse_power: int = 0

    @property
    def label(self) -> str:
        return {0: self.column, 1: f"1/{self.column}", 2: f"1/{self.column}^2"}[self.inverse_power]

    def values(self, x: np.ndarray) -> np.ndarray:
        """Each row's weight from its source value (inf or NaN where COL is 0 in 1/COL)."""
        x = np.asarray(x, dtype=np.float64)
        if self.inverse_power == 0:
            return x.copy()
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            return 1.0 / x**self.inverse_power

    def row_problem(self, x: np.ndarray) -> np.ndarray:
        """Per row: '' when the weight is a positive finite number, else the reason in plain words."""
        w = self.values(x)
        out = np.full(w.shape, "", dtype=object)
        with np.errstate(invalid="ignore"):
            out[np.isfinite(x) & ~(np.isfinite(w) & (w > 0))] = (
                f"weight {self.label} is zero, negative or infinite here, so the row cannot be weighted")
        return out


def parse_weights(spec: str, columns: Sequence[str]) -> WeightSpec:
    """`COL`, `1/COL` or `1/COL^2` against the header names (an exact column name always wins)."""
    names = [str(c) for c in columns]
    text = str(spec).strip()
    if text in names:
        return WeightSpec(text)
    m = _INVERSE.match(text)
    if m:
        return WeightSpec(_column(m.group("col"), names, text), 2 if m.group("k") else 1)
    if text.startswith("1/") or "^" in text or any(ch in text for ch in "~*()"):
        raise TermSyntaxError(f'weights "{text}" are not understood; give a column, 1/COL or 1/COL^2')
    raise ColumnNotFoundError(not_found_message("column", text, names) + " (in --weights)")


def weights_from_label(label: str) -> WeightSpec:
    """The WeightSpec a stored label (WeightSpec.label) stands for."""
    m = _INVERSE.match(str(label))
    if m:
        return WeightSpec(m.group("col"), 2 if m.group("k") else 1)
    return WeightSpec(str(label))


def category_columns(terms: Sequence[Term]) -> tuple[str, ...]:
    """The columns the terms use as categories: `levels(COL)` terms and the second column of `A by levels(COL)`."""
    cols = [t.column for t in terms if t.kind == CATEGORY] + [t.by for t in terms if t.kind == PRODUCT and t.level == "*"]
    return tuple(dict.fromkeys(cols))


def as_categories(terms: Sequence[Term], text_columns: Sequence[str]) -> tuple[Term, ...]:
    """The terms with every text column taken as a category: a plain term becomes `levels(COL)`, a product's
    second column its levels; a text column anywhere else (a power, log or sqrt, or a product's first column)
    is refused in one line."""
    text = set(text_columns)
    out = []
    for t in terms:
        if t.kind == "column" and t.column in text:
            t = Term(t.label, t.column, CATEGORY)
        elif t.kind == PRODUCT and t.by in text and t.level != "*":
            t = Term(t.label, t.column, PRODUCT, by=t.by, level="*")
        if t.kind not in (CATEGORY,) and t.column in text:
            raise TermSyntaxError(f'term "{t.label}": {t.column} holds text, so it can only be a category; give it '
                                  f'as --x "{t.column}" (or put it second in a product: "X by {t.column}")')
        out.append(t)
    return tuple(out)
