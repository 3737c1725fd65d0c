"""Categories as inputs: levels, indicator columns against a reference level, and what each group can estimate.

A category column (`levels(COL)`, or a text column given to --x) becomes one indicator per level but
the reference (the first level in sorted order unless the user names one), coded in the engine as
the level's position in the sorted levels (a float per row, NaN where blank). A product `A by COL` with
COL a category becomes A's extra slope at each level but the reference. Per group, a level the group
never shows has nothing to estimate (its slots are inactive, with a note); a group without the run's
reference level measures its levels against its own first level; a group with one level only has no
level effects. `level_slots` says which slots each group uses, for `model.patterns.fit_patterns`.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from ..errors import JobError
from ..terms import CATEGORY, INDICATOR, PRODUCT, Term


@dataclass(frozen=True)
class CategoryCoding:
    """The expanded terms, each category's levels (sorted) and reference, and its codes per row read."""

    terms: tuple[Term, ...]
    levels: dict[str, tuple[str, ...]]
    reference: dict[str, str]
    codes: dict[str, np.ndarray]         # column → (rows read,) float code, NaN where blank

    @property
    def columns(self) -> tuple[str, ...]:
        return tuple(self.levels)


def code_categories(terms: Sequence[Term], labels: Mapping[str, np.ndarray], chosen: Mapping[str, str]
                    ) -> CategoryCoding:
    """Levels, reference and codes of every category column (`labels`: column → text per row, '' blank) and the
    terms with each category expanded into its indicators and each product by a category into one per level."""
    levels: dict[str, tuple[str, ...]] = {}
    reference: dict[str, str] = {}
    codes: dict[str, np.ndarray] = {}
    for col, values in labels.items():
        text = np.asarray(values, dtype=object)
        found = tuple(sorted({str(v) for v in text if v != ""}))
        if not found:
            raise JobError(f'category column "{col}" has no level in any row; check the column')
        ref = chosen.get(col, found[0])
        if ref not in found:
            raise JobError(f'--reference {col}={ref}: "{ref}" is not a level of {col}; its levels are '
                           f'{", ".join(found[:12])}{"…" if len(found) > 12 else ""}')
        at = {lev: float(i) for i, lev in enumerate(found)}
        codes[col] = np.array([at.get(str(v), np.nan) if v != "" else np.nan for v in text], dtype=np.float64)
        levels[col], reference[col] = found, ref
    unknown = [c for c in chosen if c not in levels]
    if unknown:
        raise JobError(f'--reference names "{unknown[0]}", which is not a category input '
                       f'({", ".join(levels) or "none in this run"})')
    return CategoryCoding(_expanded(terms, levels, reference), levels, reference, codes)


def _expanded(terms: Sequence[Term], levels: Mapping[str, tuple[str, ...]], reference: Mapping[str, str]
              ) -> tuple[Term, ...]:
    out: list[Term] = []
    for t in terms:
        if t.kind == CATEGORY:
            ref = reference[t.column]
            out += [Term(f"{t.column}: {lev} vs {ref}", t.column, INDICATOR, level=lev, code=i)
                    for i, lev in enumerate(levels[t.column]) if lev != ref]
        elif t.kind == PRODUCT and t.by in levels:
            ref = reference[t.by]
            out += [dataclasses.replace(t, label=f"{t.column} by {t.by}: {lev} vs {ref}", level=lev, code=i)
                    for i, lev in enumerate(levels[t.by]) if lev != ref]
        else:
            out.append(t)
    return tuple(out)


def level_slots(terms: Sequence[Term], intercept: bool, codes: Mapping[str, np.ndarray], groups: np.ndarray,
                n_groups: int, reference: Mapping[str, str], levels: Mapping[str, tuple[str, ...]]
                ) -> tuple[np.ndarray, np.ndarray]:
    """(G, p) the slots each group uses and (G,) a note per group ('' when nothing is left out).

    `codes` holds each category column's codes on the engine rows, `groups` their group codes."""
    off = 1 if intercept else 0
    active = np.ones((n_groups, off + len(terms)), dtype=bool)
    notes: list[list[str]] = [[] for _ in range(n_groups)]
    for col, code in codes.items():
        K = len(levels[col])
        seen = np.zeros((n_groups, K), dtype=bool)
        ok = np.isfinite(code)
        seen[groups[ok], code[ok].astype(np.int64)] = True
        ref = levels[col].index(reference[col])
        own_ref = np.where(seen[:, ref], ref, np.argmax(seen, axis=1))
        several = seen.sum(axis=1) >= 2
        for j, t in enumerate(terms):
            if t.code >= 0 and (t.column if t.kind == INDICATOR else t.by) == col:
                active[:, off + j] = several & seen[:, t.code] & (own_ref != t.code)
        _note(notes, col, levels[col], seen, ref, own_ref, several)
    return active, np.array(["; ".join(n) for n in notes], dtype=object)


def _note(notes: list[list[str]], col: str, levels: tuple[str, ...], seen: np.ndarray, ref: int,
          own_ref: np.ndarray, several: np.ndarray) -> None:
    """Per group, in plain words, what its rows of a category leave out."""
    for g in range(seen.shape[0]):
        if not seen[g].any():
            continue
        if not several[g]:
            notes[g].append(f"{col}: only {levels[int(own_ref[g])]} in this group, so no level effects")
            continue
        if own_ref[g] != ref:
            notes[g].append(f"{col}: no rows at the reference {levels[ref]}, so its levels are measured "
                            f"against {levels[int(own_ref[g])]} (its {levels[int(own_ref[g])]} coefficients "
                            f"are left out)")
        absent = [levels[k] for k in np.flatnonzero(~seen[g]) if k != ref]
        if absent:
            shown = ", ".join(absent[:5]) + (f" and {len(absent) - 5} more" if len(absent) > 5 else "")
            notes[g].append(f"{col}: no rows at {shown}, so nothing is estimated for it")


def levels_seen(codes: Mapping[str, np.ndarray], groups: np.ndarray, n_groups: int,
                levels: Mapping[str, tuple[str, ...]]) -> np.ndarray:
    """(G,) per group the levels its rows show, as text 'COL=level|level; COL2=…' (the model store keeps it, so
    a prediction at a level its group never showed gets a reason instead of a number)."""
    parts: list[list[str]] = [[] for _ in range(n_groups)]
    for col, code in codes.items():
        ok = np.isfinite(code)
        seen = np.zeros((n_groups, len(levels[col])), dtype=bool)
        seen[groups[ok], code[ok].astype(np.int64)] = True
        for g in range(n_groups):
            parts[g].append(f"{col}=" + SEEN_SEPARATOR.join(levels[col][k] for k in np.flatnonzero(seen[g])))
    return np.array([PART_SEPARATOR.join(p) for p in parts], dtype=object)


SEEN_SEPARATOR, PART_SEPARATOR = "|", "; "
