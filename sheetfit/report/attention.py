"""The first sheet, `attention`: what needs the reader's attention, with links to the groups' rows.

How many groups were fitted, flagged and not fitted; every check that failed somewhere with its
number of groups. Each group named here links to its row on `groups`. Link targets are built
here from sheet names and row numbers only; text from the input is only ever a link's shown text.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import pandas as pd

from ..results.headers import FLAGS, STATUS, cell_text
from .book import WriteContext

SHEET = "attention"
GROUPS_SHEET = "groups"
MAX_DATA_ROWS = 1_048_575     # data rows per sheet (tables.py continues a longer table on `groups (2)`…)
MAX_LINKS = 25                # links on one line; more groups are counted in the last cell
LINK_WIDTH = 16               # characters per link column
HEADER_SPAN = 4               # link columns the links' header spans (its text is about 60 characters)
NOT_FITTED = "not fitted"
CHECK, VERDICT, FAIL = "check", "verdict", "fail"


def group_target(position: int) -> str:
    """The internal link to the row of the group at `position` (0-based) of the groups table."""
    part, row = divmod(position, MAX_DATA_ROWS)
    sheet = GROUPS_SHEET if part == 0 else f"{GROUPS_SHEET} ({part + 1})"
    quoted = "'" + sheet.replace("'", "''") + "'"
    return f"internal:{quoted}!A{row + 2}"


def group_labels(groups: pd.DataFrame, keys: Sequence[str]) -> list[str]:
    """Each group's name as shown: its key values joined by ' / '."""
    if not keys:
        return ["(all rows)"] * len(groups)
    parts = [groups[k].astype(object).where(groups[k].notna(), "").map(str) for k in keys]
    joined = parts[0]
    for p in parts[1:]:
        joined = joined + " / " + p
    return [cell_text(s) for s in joined.tolist()]


def failed_checks(res: Any) -> list[tuple[str, list[int]]]:
    """(check, positions on groups of the groups where it failed), checks in sheet order."""
    checks, groups = res.checks, res.groups
    if checks.empty or VERDICT not in checks.columns or CHECK not in checks.columns:
        return []
    g_keys, c_keys = res.key_headers(groups), res.key_headers(checks)
    position = {k: i for i, k in enumerate(_key_tuples(groups, g_keys))}
    failed = checks[checks[VERDICT].astype(str).eq(FAIL)]
    where = [position.get(k) for k in _key_tuples(failed, c_keys)]
    out: dict[str, list[int]] = {}
    for name in checks[CHECK].astype(str).drop_duplicates().tolist():
        out[name] = []
    for name, pos in zip(failed[CHECK].astype(str).tolist(), where):
        if pos is not None and pos not in out[name]:
            out[name].append(pos)
    return [(name, sorted(pos)) for name, pos in out.items() if pos]


def _key_tuples(df: pd.DataFrame, keys: Sequence[str]) -> list[tuple]:
    if not keys:
        return [()] * len(df)
    return list(zip(*(df[k].astype(object).where(df[k].notna(), None).tolist() for k in keys)))


def attention_sheet(ctx: WriteContext) -> None:
    """Write the `attention` sheet; make it the sheet a reader sees first."""
    res, st = ctx.results, ctx.styles
    groups = res.groups
    ws = ctx.add_sheet(SHEET)
    ws.activate()
    ws.set_column(0, 0, 44)
    ws.set_column(1, 1, 11)
    ws.set_column(2, 2 + MAX_LINKS, LINK_WIDTH)
    ws.set_landscape()
    ws.fit_to_pages(1, 0)
    labels = group_labels(groups, res.key_headers(groups))
    status = groups[STATUS].astype(str) if STATUS in groups.columns else pd.Series("", index=groups.index)
    flags = (pd.to_numeric(groups[FLAGS], errors="coerce").fillna(0) if FLAGS in groups.columns
             else pd.Series(0, index=groups.index))
    not_fitted = [i for i, s in enumerate(status.tolist()) if s == NOT_FITTED]
    flagged = [i for i, f in enumerate(flags.tolist()) if f > 0]
    ws.write_string(0, 0, "What needs your attention", st.title)
    ws.write_string(1, 0, "Click a group's name to go to its row on the groups sheet (reasons in plain words "
                          "there). Read a flag as \"look here\", not as proof.", st.note)
    _headers(ws, st, 3, ("groups", "number", "groups (click to go to the row on groups)"))
    rows = [("fitted", len(groups) - len(not_fitted), []),
            ("flagged: at least one check failed", len(flagged), flagged),
            ("not fitted (why: reasons on groups)", len(not_fitted), not_fitted)]
    r = 4
    for text, count, where in rows:
        _link_row(ws, st, r, text, count, where, labels)
        r += 1
    r += 1
    _headers(ws, st, r, ("failed check", "groups", "groups where it failed (click to go to the row on groups)"))
    r += 1
    failures = failed_checks(res)
    if not failures:
        ws.write_string(r, 0, "no check failed in any group", st.note)
    for name, where in failures:
        _link_row(ws, st, r, name, len(where), where, labels)
        r += 1
    ctx.note(SHEET, "the first sheet: counts of groups fitted, flagged and not fitted, and groups per "
                    "failed check, each group linked to its row on groups")


def _headers(ws: Any, st: Any, r: int, texts: tuple[str, str, str]) -> None:
    """A block's header line: its title, the count's header (centred over centred counts), and the links'
    header spread over several link columns and set one space in, so no two headers touch on screen or
    on paper."""
    ws.write_string(r, 0, texts[0], st.section)
    ws.write_string(r, 1, texts[1], st.header_centre)
    ws.merge_range(r, 2, r, 1 + HEADER_SPAN, texts[2], st.header_text)


def _link_row(ws: Any, st: Any, r: int, text: str, count: int, where: Sequence[int],
              labels: Sequence[str]) -> None:
    """One line: a label, a count, then links to up to MAX_LINKS groups' rows (the rest counted)."""
    ws.write_string(r, 0, text)
    ws.write_number(r, 1, count, st.count_centre)
    for j, pos in enumerate(where[:MAX_LINKS]):
        ws.write_url(r, 2 + j, group_target(pos), st.link, string=labels[pos] or "(blank)")
    if len(where) > MAX_LINKS:
        ws.write_string(r, 2 + MAX_LINKS, f"and {len(where) - MAX_LINKS:,} more", st.note)
