"""The formulas of the live prediction sheet's cells, as text: each term's value from its input cell, the check
of each input (a number, inside the term's domain, inside the group's observed range, a level the fit saw),
and the same checks' cached results. Kept apart from the sheet's layout (report.live_prediction).
"""

from __future__ import annotations

from typing import Any

from ..results.headers import cell_text
from ..results.store import ModelStore
from ..terms import HINGES

BELOW, ABOVE = "below the observed range", "above the observed range"
LITERAL_LABEL = 200    # characters of a term's label quoted inside a formula (text in a formula: ≤ 255)


def level_check(store: ModelStore, col: str, x: str, row: str) -> str:
    """The check formula of a category input: empty, or that the typed level is not one the fit saw."""
    names = ",".join(f'"{quoted(n)}"' for n in sorted(store.level_codes(col)))
    return f'=IF(ISNA({row}),"",IF(ISNA(MATCH({x},{{{names}}},0)),"not a level of the fit",""))'


def term_formula(term: Any, x: str, tau: str | None = None, other: str | None = None) -> str:
    """The term's value from input cell `x` (#N/A when the input cannot give one); a change-point term
    takes its τ from cell `tau` and is 0 when that cell holds no number (the group's shape does not use it);
    an indicator is 1 at its level; a product multiplies by cell `other` (or by 1 at its level of it)."""
    if term.kind == "indicator":
        return f'IF({x}="{quoted(term.level)}",1,0)'
    if term.kind == "product":
        factor = f'IF({other}="{quoted(term.level)}",1,0)' if term.code >= 0 else other
        return f"IF(ISNUMBER({x}),{x}*{factor},NA())"
    if term.kind in HINGES:
        gap = f"{tau}-{x}" if term.kind == "below" else f"{x}-{tau}"
        return f"IF(ISNUMBER({x}),IF(ISNUMBER({tau}),MAX(0,{gap}),0),NA())"
    if term.kind == "power":
        return f"IF(ISNUMBER({x}),{x}^{term.power},NA())"
    if term.kind == "log":
        return f"IF(AND(ISNUMBER({x}),{x}>0),LN({x}),NA())"
    if term.kind == "sqrt":
        return f"IF(AND(ISNUMBER({x}),{x}>=0),SQRT({x}),NA())"
    return f"IF(ISNUMBER({x}),{x},NA())"


def check_formula(store: ModelStore, j: int, x: str, lo: str, hi: str, row: str) -> str:
    """The check cell of input j: empty, "needs a number", a term's domain, or outside the observed range."""
    col = store.sources[j]
    inner = f'IF({x}<{lo},"{BELOW}",IF({x}>{hi},"{ABOVE}",""))'
    for t in store.terms:
        if t.column == col and t.kind == "log":
            inner = f'IF({x}<=0,"must be above 0 for {quoted(short(t.label))}",{inner})'
        elif t.column == col and t.kind == "sqrt":
            inner = f'IF({x}<0,"must be 0 or more for {quoted(short(t.label))}",{inner})'
    return f'=IF(ISNA({row}),"",IF(NOT(ISNUMBER({x})),"needs a number",{inner}))'


def quoted(text: str) -> str:
    """Text for inside a formula's string literal: double quotes are doubled."""
    return text.replace('"', '""')


def short(label: str) -> str:
    """A term's label as a formula's text may quote it (a text in a formula holds at most 255 characters)."""
    return cell_text(label, LITERAL_LABEL)


def check_text(store: ModelStore, g: int, j: int, x: float) -> str:
    """What the check formula of input j shows for value `x` in group g (its cached result)."""
    col = store.sources[j]
    for t in store.terms:
        if t.column == col and t.kind == "log" and x <= 0:
            return f"must be above 0 for {short(t.label)}"
        if t.column == col and t.kind == "sqrt" and x < 0:
            return f"must be 0 or more for {short(t.label)}"
    if x < store.lo[g, j]:
        return BELOW
    if x > store.hi[g, j]:
        return ABOVE
    return ""
