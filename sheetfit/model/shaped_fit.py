"""A change-point run: find each group's shape and change points, then fit every group exactly there.

The search (change_point.py) picks per group a straight line or a change-point shape and its
change point(s) τ. The accurate fit is then the ordinary batched engine on the hinge columns
max(0, τ − T) and max(0, T − τ) built with each group's τ, each group using only the coefficient
slots of its shape (terms.with_change_point_terms), with its change points counted as parameters.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from ..terms import HINGES, Term, term_values, with_change_point_terms
from .change_point import ChangePoints, find_change_points, hinge_columns
from .engine import EngineFit
from .patterns import fit_patterns

# which of (below, above, plain temperature) each shape uses
SHAPE_SLOTS: dict[str, tuple[bool, bool, bool]] = {
    "line": (False, False, True), "heating": (True, False, False), "cooling": (False, True, False),
    "two-slopes": (True, True, False), "heating-cooling": (True, True, False), "": (False, False, True),
}


@dataclass(frozen=True)
class ShapedFit:
    """The fit of a change-point run and what it rests on."""

    terms: tuple[Term, ...]          # the run's terms: the temperature as below, above and plain slots
    fit: EngineFit
    points: ChangePoints
    active: np.ndarray               # (G, p) slots each group uses

    @property
    def change_points(self) -> np.ndarray:
        """(G, 2): τ of the 'below' and of the 'above' slot per group (NaN where none)."""
        return np.column_stack([self.points.below, self.points.above])


def _hidden_column(term: Term) -> str:
    """The engine's name of a hinge column: never equal to a header (it holds a unit separator)."""
    return f"{term.column}\x1f{term.kind}"


def active_slots(terms: Sequence[Term], temperature: Term, shape: np.ndarray, intercept: bool) -> np.ndarray:
    """(G, p) which coefficient slots each group's shape uses (every other input always)."""
    G = len(shape)
    cols = []
    for t in terms:
        if t.column == temperature.column and (t.kind in HINGES or t == temperature):
            k = HINGES.index(t.kind) if t.kind in HINGES else 2
            cols.append(np.array([SHAPE_SLOTS[str(s)][k] for s in shape], dtype=bool))
        else:
            cols.append(np.ones(G, dtype=bool))
    head = [np.ones(G, dtype=bool)] if intercept else []
    return np.column_stack(head + cols) if G else np.zeros((0, len(cols) + len(head)), dtype=bool)


def fit_shapes(y: np.ndarray, columns: Mapping[str, np.ndarray], codes: np.ndarray, n_groups: int,
               terms: Sequence[Term], temperature: Term, shape: str, *, alpha: float, level: float,
               intercept: bool = True) -> ShapedFit:
    """Search every group's shape and change points, then fit all groups at once at them."""
    t = columns[temperature.column]
    others = [c for c in terms if c != temperature]
    Z = (np.column_stack([term_values(o, columns) for o in others]) if others
         else np.zeros((len(y), 0)))
    points = find_change_points(y, t, Z, codes, n_groups, shape, alpha=alpha, level=level)
    below, above = hinge_columns(t, codes, points)
    run_terms = with_change_point_terms(terms, temperature)
    engine_terms = tuple(Term(x.label, _hidden_column(x), "column") if x.kind in HINGES else x
                         for x in run_terms)
    hinge_values = {"below": below, "above": above}
    cols = {**columns, **{_hidden_column(x): hinge_values[x.kind] for x in run_terms if x.kind in HINGES}}
    active = active_slots(run_terms, temperature, points.shape, intercept)
    fit = fit_patterns(y, cols, codes, n_groups, engine_terms, intercept, active,
                       points.count.astype(np.int64))
    return ShapedFit(terms=run_terms, fit=fit, points=points, active=active)
