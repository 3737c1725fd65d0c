"""Category inputs as the reader sees them: which columns may hold levels, and their levels as text.

A column given as `levels(COL)` (or second in `A by levels(COL)`) is always read as levels. A plain
input column, or the second column of a product, is read as levels when it holds no number at all
but some text (`Shift` with day/night): the reader parses it as numbers first and, finding none,
takes its cells' labels instead, by the group-label rules. Every sheet read must agree.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ..errors import JobError, NoUsableDataError
from ..terms import PRODUCT, Term, category_columns


def maybe_levels(terms: Sequence[Term]) -> tuple[str, ...]:
    """Columns that become categories when they hold text: plain input columns and products' second columns."""
    named = set(category_columns(terms))
    cols = [t.column for t in terms if t.kind == "column"] + [t.by for t in terms if t.kind == PRODUCT]
    return tuple(c for c in dict.fromkeys(cols) if c not in named)


def merged_levels(parts: Sequence[dict[str, np.ndarray]], sheets: Sequence[str], named: Sequence[str],
                  candidates: Sequence[str]) -> dict[str, np.ndarray]:
    """The level labels of every category column over all parts (sheets) read, '' where blank: the named
    ones, and each candidate that held text in every sheet (text in one sheet, numbers in another: refused)."""
    out = {}
    for col in (*named, *candidates):
        found = [col in p for p in parts]
        if not any(found):
            continue
        if not all(found):
            text = sheets[found.index(True)]
            numbers = sheets[found.index(False)]
            raise JobError(f'column "{col}" holds text in sheet "{text}" but numbers in sheet "{numbers}"; an input '
                           f'is either numbers or a category: write it one way, or give it as levels({col})')
        text = np.concatenate([p[col] for p in parts])
        found = sorted({v for v in text.tolist() if v != ""})
        if col in candidates and len(found) < 2:
            raise NoUsableDataError(f'input column "{col}" holds no number, only the text "{found[0] if found else ""}"; '
                                    f'check the column (a category needs at least two levels)')
        out[col] = text
    return out


def levels_warning(columns: Sequence[str], levels: dict[str, np.ndarray]) -> list[str]:
    """One line per column read as a category because it held text: what its levels are."""
    lines = []
    for col in columns:
        if col in levels:
            found = sorted({v for v in levels[col].tolist() if v != ""})
            shown = ", ".join(found[:8]) + (f" and {len(found) - 8} more" if len(found) > 8 else "")
            lines.append(f'input column "{col}" holds text, so it is a category with the levels {shown}')
    return lines
