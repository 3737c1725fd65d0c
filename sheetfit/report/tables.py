"""The table sheets: groups, coefficients, checks, observations.

Each is written row by row (constant_memory), with column formats, autofilter, a frozen header
and conditional-formatting rules from the shared palette. Long tables continue on further sheets.
Large tables hand their data rows to the bulk path (fastrows), which inserts the same cells after close.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import pandas as pd
from xlsxwriter.utility import xl_col_to_name

from ..read.tidy import REASON, SOURCE_FILE
from ..results.calibration import CALIBRATION_ROW_HEADERS, STANDARD_OFF
from ..results.change_points import SHAPE_NOTE
from ..results.headers import (CELL_LIMIT, COEFFICIENT_HEADERS, FLAGS, GROUP_HEADERS, INTERVAL_HIGH, INTERVAL_LOW,
    LOOK_HERE, NO, REASONS, ROW_FLAGS, STATUS, STD_ERROR, USED, WEIGHT_USED, rename_note,
    renamed)
from ..results.observations import OBSERVATION_HEAD, OBSERVATION_TAIL, day_count_headers
from ..terms import source_columns
from . import fastrows
from .book import WriteContext
from .columns import MAX_WIDTH, Column

MAX_DATA_ROWS = 1_048_575      # a sheet holds 1,048,576 rows, one of them the header
BLOCK_ROWS = 50_000            # rows converted to Python values at a time

GROUPS = GROUP_HEADERS
COEFFICIENTS = COEFFICIENT_HEADERS
COEFFICIENTS_OPTIONAL = ("VIF", "robust std error", "robust p-value", "HAC std error", "HAC p-value",
                         "HAC lag")
CHECKS = ("check", "statistic", "p-value", "adjusted p-value", "threshold", "verdict", "note")
OBS_HEAD = OBSERVATION_HEAD
OBS_TAIL = OBSERVATION_TAIL
PRINT_FIT_WIDTH = 400          # characters of column width that still print legibly on one page width
ROW_HEIGHT = 15                # points: one line of the default 11-point font
WIDE_TEXT = {REASONS: 60, "note": 60, REASON: 45, ROW_FLAGS: 30, SHAPE_NOTE: 60, STANDARD_OFF: 40}  # long texts: this width, wrapped
ONE_PAGE_WIDE = ("groups",)    # sheets printed one page wide however many columns they have


@dataclass(frozen=True)
class Rule:
    """A whole-row highlight: `test` is a formula on `{c}`, the column's cell in the row."""

    column: str
    test: str
    style: str


def ordered_columns(df: pd.DataFrame, keys: Sequence[str], required: Sequence[str],
                    optional: Sequence[str] = ()) -> list[str]:
    """Keys, then the contract's columns (required ones always), then any others in their given order."""
    order = [k for k in keys]
    order += [c for c in required if c not in order]
    order += [c for c in optional if c in df.columns and c not in order]
    order += [c for c in df.columns if c not in order]
    return order


def write_table(ctx: WriteContext, label: str, df: pd.DataFrame, order: Sequence[str],
                rules: Sequence[Rule] = (), freeze_columns: int = 0, head_note: str = "") -> list[str]:
    """Write `df[order]` as a filtered, frozen, highlighted table; returns the sheet names used."""
    n = len(df)
    columns = [Column(h, df[h] if h in df.columns else None, n) for h in order]
    same_formats(columns)
    _note_columns(ctx, label, columns)
    parts = max(1, -(-n // MAX_DATA_ROWS))
    names: list[str] = []
    for part in range(parts):
        ws = ctx.add_sheet(label if part == 0 else f"{label} ({part + 1})")
        names.append(ws.name)
        lo, hi = part * MAX_DATA_ROWS, min(n, (part + 1) * MAX_DATA_ROWS)
        if head_note:             # constant_memory: a comment goes in while its row is being written
            ws.write_comment(0, 0, head_note, {"x_scale": 2.2, "y_scale": 1.3})
        _write_part(ctx, ws, columns, lo, hi, rules, freeze_columns)
    if parts > 1:
        ctx.note(label, f"{n:,} rows: more than a sheet holds ({MAX_DATA_ROWS:,} data rows each), "
                        f"so the table continues on {', '.join(repr(s) for s in names[1:])}")
    return names


def _write_part(ctx: WriteContext, ws, columns: list[Column], lo: int, hi: int,
                rules: Sequence[Rule], freeze_columns: int) -> None:
    st = ctx.styles
    # a text column right after a number column starts one space in, so the two do not touch
    indent = [col.kind != "number" and j > 0 and columns[j - 1].kind == "number"
              for j, col in enumerate(columns)]
    widths, formats = [], []
    for j, col in enumerate(columns):
        wrap = col.kind == "text" and (col.header in WIDE_TEXT or col.widest > MAX_WIDTH)
        width = min(WIDE_TEXT.get(col.header, MAX_WIDTH), max(col.width, 8)) if wrap else col.width
        widths.append(width)
        if col.num_format:
            fmt = st.number(col.num_format)
        else:
            fmt = st.wrap_cell[indent[j]] if wrap else (st.text_cell if indent[j] else st.top)
        formats.append(fmt)
        ws.set_column(j, j, width, fmt)
        head = st.header_number if col.kind == "number" else (st.header_text if indent[j] else st.header)
        ws.write_string(0, j, col.header, head)
    chars = sum(c.chars * (hi - lo) // max(c.n_rows, 1) for c in columns)    # text in rows lo..hi, about
    if fastrows.use_fast(hi - lo, len(columns), chars):   # same cells, XML built in bulk after the workbook closes
        ctx.add_bulk(ws, 1, [(j, c.values(lo, hi), formats[j]) for j, c in enumerate(columns)])
    else:
        wrapped = [(j, widths[j]) for j, f in enumerate(formats) if f in st.wrap_cell.values()]
        write_row, set_row = ws.write_row, ws.set_row
        r = 1
        for start in range(lo, hi, BLOCK_ROWS):
            stop = min(hi, start + BLOCK_ROWS)
            for row in zip(*(c.block(start, stop) for c in columns)):
                lines = max((wrapped_lines(row[j], w) for j, w in wrapped), default=1)
                if lines > 1:            # applications do not grow a row for wrapped text on opening
                    set_row(r, ROW_HEIGHT * lines)
                write_row(r, 0, row)
                r += 1
    last_row, last_col = max(hi - lo, 0), len(columns) - 1
    ws.autofilter(0, 0, last_row, last_col)
    ws.freeze_panes(1, freeze_columns)
    ws.set_landscape()
    ws.repeat_rows(0)
    if sum(widths) <= PRINT_FIT_WIDTH or ws.name in ONE_PAGE_WIDE:   # printed: every column on the page width
        ws.fit_to_pages(1, 0)
    if hi > lo:
        highlight_rows(ws, st, [c.header for c in columns], rules, last_row)


def wrapped_lines(text: object, width: float) -> int:
    """Lines `text` takes when wrapped in a column `width` characters wide (about; words kept whole)."""
    if not isinstance(text, str) or len(text) <= width:
        return 1
    per_line = max(width * 1.1, 8)     # text runs about 1.2 characters a width unit
    lines, used = 1, 0
    for word in text.split(" "):
        if used and used + 1 + len(word) > per_line:
            lines, used = lines + 1, len(word)
        else:
            used += len(word) + (1 if used else 0)
        lines += int(used // per_line) if used > per_line else 0
        used = used % per_line if used > per_line else used
    return min(lines, 409 // 15)


def same_formats(columns: Sequence[Column]) -> None:
    """Neighbours read alike: both interval ends with the same decimals, robust and Newey–West std
    errors as the std error."""
    by = {c.header: c for c in columns if c.kind == "number" and c.num_format}
    ends = [by[h] for h in (INTERVAL_LOW, INTERVAL_HIGH) if h in by]
    if len(ends) == 2 and ends[0].num_format != ends[1].num_format:
        finer = max(ends, key=lambda c: _decimals(c.num_format))
        for c in ends:
            c.set_format(finer.num_format)
    if STD_ERROR in by:
        for c in by.values():
            if c.header != STD_ERROR and c.header.startswith(("robust std error", "HAC std error")):
                c.set_format(by[STD_ERROR].num_format)


def _decimals(num_format: str | None) -> int:
    """Decimals a fixed format shows; formats that are not fixed come first."""
    if not num_format or not num_format.startswith("0"):
        return 99
    return len(num_format.split(".", 1)[1]) if "." in num_format else 0


def highlight_rows(ws: Any, st: Any, headers: Sequence[str], rules: Sequence[Rule], last_row: int) -> None:
    """Whole-row highlights of rows 1..last_row, the first matching rule winning (columns absent are skipped)."""
    for rule in rules:
        if rule.column not in headers:
            continue
        cell = f"${xl_col_to_name(list(headers).index(rule.column))}2"
        ws.conditional_format(1, 0, last_row, len(headers) - 1, {
            "type": "formula", "criteria": "=" + rule.test.format(c=cell),
            "format": st.highlight[rule.style], "stop_if_true": True})


def _note_columns(ctx: WriteContext, label: str, columns: list[Column]) -> None:
    """Say on `about` which cells were left empty or cut, and why."""
    infinite = [(c.header, c.infinite) for c in columns if c.infinite]
    undefined = [(c.header, c.undefined) for c in columns if c.undefined]
    cut = [(c.header, c.cut) for c in columns if c.cut]
    if infinite:
        ctx.note(label, "infinite values left as empty cells (e.g. F of a perfect fit): "
                        + _counts(infinite))
    if undefined:
        ctx.note(label, "undefined values left as empty cells (the figure cannot be computed, e.g. a "
                        "group not fitted, a row not used, no degrees of freedom left): " + _counts(undefined))
    if cut:
        ctx.note(label, f"texts longer than a cell holds cut to {CELL_LIMIT:,} characters, ending in …: "
                        + _counts(cut))
    missing = [c.header for c in columns if c.kind == "empty"]
    if missing:
        ctx.note(label, "columns not computed in this run, left empty: " + ", ".join(missing))
    if any(c.timezone_dropped for c in columns):
        ctx.note(label, "date-times with a time zone are shown in UTC")


def _counts(pairs: list[tuple[str, int]]) -> str:
    return "; ".join(f"{h} {k:,}" for h, k in pairs)


def _freeze(keys: Sequence[str]) -> int:
    return len(keys) if 0 < len(keys) <= 3 else 0


# --- the four table sheets ---------------------------------------------------------------------

def _contract_sheet(ctx: WriteContext, label: str, df: pd.DataFrame, required: Sequence[str],
                    optional: Sequence[str] = (), rules: Sequence[Rule] = (), head_note: str = "") -> None:
    """A result table in contract column order, frozen on the group keys (its first columns); `head_note`
    becomes a comment on the first header."""
    keys = ctx.results.key_headers(df)
    _note_renamed(ctx, label, ctx.results.group_columns, keys)
    write_table(ctx, label, df, ordered_columns(df, keys, required, optional),
                freeze_columns=_freeze(keys), rules=rules, head_note=head_note)


def _note_renamed(ctx: WriteContext, label: str, user: Sequence[str], shown: Sequence[str]) -> None:
    """An `about` line when a user's column shows under another header on this sheet."""
    pairs = renamed(user, shown)
    if pairs:
        ctx.note(label, rename_note(pairs))


GROUP_ORDER = ("Groups are listed in the order they first appear in the input, fitted or not (not sorted); "
               "sort or filter on any column, e.g. flags, to bring the groups that need attention first.")


def groups_sheet(ctx: WriteContext) -> None:
    _contract_sheet(ctx, "groups", ctx.results.groups, GROUPS, rules=(
        Rule(STATUS, '{c}="not fitted"', "left_out"),
        Rule(FLAGS, "{c}>0", "check_failed"),
    ), head_note=GROUP_ORDER)
    ctx.note("groups", "order: " + GROUP_ORDER[0].lower() + GROUP_ORDER[1:])


def coefficients_sheet(ctx: WriteContext) -> None:
    _contract_sheet(ctx, "coefficients", ctx.results.coefficients, COEFFICIENTS, COEFFICIENTS_OPTIONAL)


def checks_sheet(ctx: WriteContext) -> None:
    _contract_sheet(ctx, "checks", ctx.results.checks, CHECKS, rules=(
        Rule("verdict", '{c}="fail"', "check_failed"),
    ))


def select_observations(obs: pd.DataFrame, mode: str) -> pd.DataFrame:
    """Rows to write: all; only unusable or row-flagged ones ('flagged'); or none."""
    if mode == "none":
        return obs.iloc[0:0]
    if mode == "flagged":
        keep = pd.Series(False, index=obs.index)
        if USED in obs.columns:
            keep |= obs[USED].astype(str).eq(NO)
        for col in (ROW_FLAGS, STANDARD_OFF):
            if col in obs.columns:
                keep |= obs[col].fillna("").astype(str).str.len().gt(0)
        return obs.loc[keep]
    return obs


def look_here_test(words: Sequence[str] = LOOK_HERE) -> str:
    """A rule's test: the row flags cell holds one of `words` (FIND: exact case, no wildcards)."""
    return "OR(" + ",".join(f'ISNUMBER(FIND("{w}",{{c}}))' for w in words) + ")"


def observation_columns(res: Any, obs: pd.DataFrame) -> list[str]:
    """Observations' columns in sheet order: keys, source, response and inputs, other columns of the
    user's (the order column), each date column followed by its day counts, then ours."""
    keys = res.key_headers(obs)
    user = [*res.group_columns, *res.number_columns]
    days = {res.observation_header(c): h for c, h in day_count_headers(user, res.info.date_columns).items()}
    data_cols = [res.observation_header(c) for c in (res.y, *source_columns(res.terms))]
    ours_after = [c for c in (WEIGHT_USED, *CALIBRATION_ROW_HEADERS) if c in obs.columns]
    head = [c for c in (SOURCE_FILE, *OBS_HEAD) if c in obs.columns]
    extra_data = [c for c in obs.columns
                  if c not in (*keys, *head, *data_cols, *OBS_TAIL, *days.values(), *ours_after)]
    user_cols: list[str] = []
    for c in (*data_cols, *extra_data):
        user_cols += [c, days[c]] if days.get(c) in obs.columns else [c]
    return ordered_columns(obs, keys, [*head, *user_cols, *OBS_TAIL, *ours_after])


def observations_sheet(ctx: WriteContext) -> None:
    res = ctx.results
    obs = res.observations
    keys = res.key_headers(obs)
    mode = res.job.observations
    user = [*res.group_columns, *res.number_columns]
    _note_renamed(ctx, "observations", user, [res.observation_header(c) for c in user])
    order = observation_columns(res, obs)
    rules = (Rule(USED, f'{{c}}="{NO}"', "left_out"), Rule(ROW_FLAGS, look_here_test(), "unusual_row"),
             Rule(STANDARD_OFF, 'LEN({c})>0', "unusual_row"))
    total = len(obs)
    if mode == "none":
        ws = ctx.add_sheet("observations")
        ws.set_column(0, 0, 110)
        ws.write_string(0, 0, f"Observation rows were left out of this workbook (observations = none); "
                              f"{total:,} rows were read. Run again with --observations all or flagged "
                              "to list them.", ctx.styles.note)
        ctx.note("observations", f"left out: all {total:,} rows (observations = none)")
        return
    chosen = select_observations(obs, mode)
    write_table(ctx, "observations", chosen, order, rules=rules, freeze_columns=_freeze(keys))
    if mode == "flagged":
        ctx.note("observations", f"written: {len(chosen):,} of {total:,} rows (observations = flagged: "
                                 f"unusable rows and rows with row flags); left out: {total - len(chosen):,} "
                                 "used rows without row flags")
    else:
        ctx.note("observations", f"written: all {total:,} rows")
