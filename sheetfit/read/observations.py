"""Workbook → tidy observations: one row per non-blank input row, with its source sheet and row
number, group labels, the numbers the model needs, and the reason whenever a row cannot be used.

Flow: `safety.sniff` names the format, `formats.open_book` opens the reader, each sheet comes back
as a `grid.Grid`, `headers` finds the column names, `columns` parses the columns (by the rules of
`cells`), and the parts of all sheets are joined into one table with a reason per unusable row. The
file's SHA-256 is computed in a second thread meanwhile.

Rules (see also `sheetfit.read.cells` for how one cell becomes a number):
* The header is found by `sheetfit.read.headers` (first non-empty row unless told; merged cells filled).
* A row whose cells are all blank is not data and is not counted; every other row appears once.
* Group labels are text: numbers and text that look alike are one label (101, 101.0, "101" →
  "101"), long digit strings stay as written (see `sheetfit.read.cells`); blank → "(blank)", an
  error under --strict. Group cells inside merged cells take the merged value. A label written
  with composed and with decomposed accents is one group, with a warning naming it.
* Rows may be ragged (CSV): each is padded only as far as the columns used, so one very wide line
  does not widen every other row.
* Dates and times become days; in each group the earliest one is day 0. The dates themselves are
  kept beside (`Observations.dates`) so the results can show them as the user wrote them.
"""

from __future__ import annotations

import gc
import re
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass, field
from operator import itemgetter
from pathlib import Path

from xlsxwriter.utility import xl_rowcol_to_cell

from ..errors import (
    ColumnNotFoundError,
    JobError,
    NotAWorkbookError,
    NoUsableDataError,
    SheetNotFoundError,
    UnusableRowsError,
    not_found_message,
)
from ..job import FitJob
from ..provenance import file_sha256
from ..terms import as_categories, category_columns, parse_terms, parse_weights, source_columns
from .book import Book
from .cells import BLANK_LABEL, category_labels, group_labels_and_forms, is_blank, shown
from .levels import levels_warning, maybe_levels, merged_levels
from .columns import parse_column
from .formats import open_book
from .grid import Grid, Region, pad_rows
from .headers import Header, find_header, no_duplicates
from .safety import sniff
from .tidy import REASON, SOURCE_ROW, SOURCE_SHEET, Observations, ReadInfo, days_from_group_start

SHEET_KEY = "sheet"
_SHOW = 5


@dataclass
class _Part:
    """What one sheet contributed."""

    sheet: str
    rows: object                         # np.ndarray of source row numbers
    labels: dict[str, object]            # group column → object array of labels
    numbers: dict[str, object]           # numeric column → ParsedColumn
    header_row: int
    hidden_rows: int = 0
    hidden_cols: int = 0
    no_result: list[str] = field(default_factory=list)
    merged_labels: list[str] = field(default_factory=list)
    levels: dict[str, object] = field(default_factory=dict)   # category column → its level per row ('' blank)
    label_forms: dict[str, dict[str, set[str]]] = field(default_factory=dict)   # column → label → forms


@contextmanager
def _gc_paused():
    """Millions of fresh cell objects make the cyclic collector rescan them again and again; pause it."""
    was = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was:
            gc.enable()


def read_observations(job: FitJob, own_keys: tuple[str, ...] = ()) -> Observations:
    """Read the job's workbook region into `Observations`; refuse unreadable input with one-line errors.

    `own_keys`: group names that are keys sheetfit adds itself (the file key of `read.many`) unless the
    sheet has a column of that name, as "sheet" is with several sheets."""
    path = Path(job.workbook)
    file_format = sniff(path, job.max_unpacked_bytes)
    with ThreadPoolExecutor(max_workers=1) as pool, _gc_paused():
        digest = pool.submit(file_sha256, path)
        book = open_book(path, file_format, csv_delimiter=job.csv_delimiter, csv_decimal=job.csv_decimal)
        try:
            return _read(book, job, path, digest.result, own_keys)
        finally:
            book.close()


def _read(book: Book, job: FitJob, path: Path, sha256, own_keys: tuple[str, ...] = ()) -> Observations:
    plan = _plan(book, job, path)
    multi = job.all_sheets or len(plan) > 1
    parts: list[_Part] = []
    skipped: list[str] = []
    names: dict[str, None] = {}          # every header name of the sheets read, in order
    spec = None
    for sheet, region in plan:
        grid = book.grid(sheet)
        try:
            header = find_header(grid, region, job)
        except NoUsableDataError:
            if job.all_sheets:
                skipped.append(f'"{sheet}" (empty)')
                continue
            raise
        if spec is None:
            try:
                spec = _spec(job, header, sheet, multi, own_keys)
            except ColumnNotFoundError:
                if job.all_sheets and sheet != plan[-1][0]:
                    skipped.append(f'"{sheet}" (lacks the columns)')
                    continue
                raise
        elif job.all_sheets and not all(c in header.names for c in spec.columns):
            skipped.append(f'"{sheet}" (lacks the columns)')
            continue
        parts.append(_read_part(grid, header, spec, book.decimal))
        names.update(dict.fromkeys(header.names))
        del grid                         # the cell objects are the bulk of the memory; free them per sheet
    if not parts:
        raise NoUsableDataError(f'no sheet of "{path.name}" holds the columns asked for; check --sheet and the names')
    warnings = list(book.warnings())
    if skipped:
        warnings.append(f"sheets skipped: {', '.join(skipped)}")
    data, dates = _frame(parts, spec)
    _check_usable(data, spec, parts)
    warnings += levels_warning(spec.maybe_levels, {c: data[c].to_numpy(dtype=object) for c in data.attrs["levels"]})
    no_result = [ref for p in parts for ref in p.no_result]
    if no_result:
        more = f" and {len(no_result) - _SHOW} more" if len(no_result) > _SHOW else ""
        warnings.append(f"{len(no_result)} formula cells have no saved result (the file was never recalculated): "
                        f"{', '.join(no_result[:_SHOW])}{more}; open and save the file in a spreadsheet "
                        f"application to store the results")
    merged = [ref for p in parts for ref in p.merged_labels]
    if merged:
        warnings.append(f"group labels in merged cells were given to every row they cover: "
                        f"{', '.join(merged[:_SHOW])}{' and more' if len(merged) > _SHOW else ''}")
    warnings += _two_forms(parts)
    if job.strict:
        _strict(data, spec)
    info = ReadInfo(
        file_name=path.name, file_sha256=sha256(), file_format=book.file_format, reader=book.reader,
        sheets=tuple(p.sheet for p in parts),
        region=plan[0][1].label if plan[0][1] is not None else "whole sheet",
        header_row=parts[0].header_row, rows_read=int(len(data)),
        hidden_rows=sum(p.hidden_rows for p in parts), hidden_columns=sum(p.hidden_cols for p in parts),
        date_columns=tuple(dates.columns), warnings=tuple(warnings), columns=tuple(names))
    text = tuple(data.attrs.get("levels", ()))
    return Observations(data=data, group_columns=tuple(spec.group_out), y=spec.y,
                        terms=as_categories(spec.terms, [c for c in text if c not in spec.named_levels]),
                        order=spec.order, numeric_columns=tuple(c for c in spec.numeric if c not in text),
                        info=info, dates=dates, weights=spec.weights, category_columns=text)


def _plan(book: Book, job: FitJob, path: Path) -> list[tuple[str, Region | None]]:
    names = book.sheet_names()
    if job.table:
        region = book.region(job.table)
        return [(region.sheet, region)]
    if not names:
        raise NotAWorkbookError(f'"{path.name}" has no worksheets')
    if job.all_sheets:
        return [(n, None) for n in names]
    if not job.sheets:
        return [(names[0], None)]
    out = []
    for want in job.sheets:
        hit = want if want in names else next((n for n in names if n.strip().lower() == want.strip().lower()), None)
        if hit is None:
            raise SheetNotFoundError(not_found_message("sheet", want, names))
        if hit not in [h for h, _ in out]:
            out.append((hit, None))
    return out


@dataclass
class _Spec:
    y: str
    terms: tuple
    order: str | None
    group_in: list[str]                  # group columns read from the sheet
    group_out: list[str]                 # group columns of the output (the sheet key first when added)
    numeric: list[str]
    sheet_key: str | None
    weights: object = None               # terms.WeightSpec of a weighted fit
    named_levels: tuple[str, ...] = ()   # columns read as categories (levels(COL))
    maybe_levels: tuple[str, ...] = ()   # number columns that become categories when they hold only text

    @property
    def columns(self) -> list[str]:
        return self.group_in + self.numeric + list(self.named_levels)


def _spec(job: FitJob, header: Header, sheet: str, multi: bool, own_keys: tuple[str, ...] = ()) -> _Spec:
    names = list(header.names)
    where = f' (header row {header.row} of sheet "{sheet}")'

    def find(name: str) -> str:
        for cand in (name, name.strip()):
            if cand in header.names:
                return cand
        raise ColumnNotFoundError(not_found_message("column", name.strip(), names) + where)

    try:
        terms = parse_terms(job.x, names)
        weights = parse_weights(job.weights, names) if job.weights else None
    except ColumnNotFoundError as exc:
        raise ColumnNotFoundError(f"{exc}{where}") from None
    y = find(job.y)
    order = find(job.order) if job.order else None
    sheet_key = None
    ours = (*own_keys, *((SHEET_KEY,) if multi else ()))      # keys sheetfit adds, unless a column has the name
    group_in = list(dict.fromkeys(find(g) for g in job.group if not (g in ours and g not in header.names)))
    if multi:
        sheet_key = SHEET_KEY
        k = 1
        while sheet_key in header.names:
            k += 1
            sheet_key = "sheet name" if k == 2 else f"sheet name {k - 1}"
    named = category_columns(terms)
    responses = [find(r) for r in job.all_responses]
    numeric = list(dict.fromkeys([*responses, *(c for c in source_columns(terms) if c not in named),
                                  *([order] if order else []), *([weights.column] if weights else [])]))
    for t in terms:
        if t.column == y:
            raise JobError(f'column "{y}" is both the response and an input ({t.label}); choose other --x terms')
    both = [g for g in group_in if g in numeric]
    if both:
        raise JobError(f'column "{both[0]}" is both a group column and a number column; use it once')
    reserved = [c for c in group_in + numeric if c in (SOURCE_SHEET, SOURCE_ROW, REASON)]
    if reserved:
        raise JobError(f'column "{reserved[0]}" has a name sheetfit gives its own columns '
                       f'({SOURCE_SHEET}, {SOURCE_ROW}, {REASON}); rename it in the workbook')
    no_duplicates(header, group_in + numeric)
    group_out = ([sheet_key] if sheet_key else []) + group_in
    return _Spec(y, terms, order, group_in, group_out, numeric, sheet_key, weights, named, maybe_levels(terms))


def _read_part(grid: Grid, header: Header, spec: _Spec, decimal: str | None) -> _Part:
    import numpy as np

    no_duplicates(header, spec.columns)
    first = max(header.last + 1, grid.top)
    bottom = header.bottom
    rows = grid.rows[first - grid.top: max(bottom - grid.top + 1, 0)]
    n = len(rows)
    col_of = {}
    for name in spec.columns:
        cols = header.names.get(name)
        if not cols:
            raise ColumnNotFoundError(not_found_message("column", name, list(header.names)) +
                                      f' (header row {header.row} of sheet "{grid.sheet}")')
        col_of[name] = cols[0]
    if not grid.rectangular:
        pad_rows(rows, max(col_of.values()) - grid.left + 1)
    getters = {name: itemgetter(c - grid.left) for name, c in col_of.items()}
    labels, numbers, merged_refs, forms = {}, {}, [], {}
    for name in spec.group_in:
        values = list(map(getters[name], rows)) if n else []
        merged_refs += _fill_merged(values, grid, col_of[name], first, bottom)
        labels[name], forms[name] = group_labels_and_forms(values)
    levels = {name: category_labels(list(map(getters[name], rows)) if n else [])[0] for name in spec.named_levels}
    for name in spec.numeric:
        cells = list(map(getters[name], rows)) if n else []
        numbers[name] = parse_column(cells, decimal)
        if name in spec.maybe_levels and n and not np.isfinite(numbers[name].values).any() \
                and not numbers[name].blank.all():
            levels[name] = category_labels(cells)[0]          # text, no number: a category
    blank = np.ones(n, dtype=bool)
    for lab in labels.values():
        blank &= lab == BLANK_LABEL
    for lab in levels.values():
        blank &= lab == ""
    for parsed in numbers.values():
        blank &= parsed.blank
    left, right = header.spans
    lo, hi = left - grid.left, right - grid.left + 1
    for i in np.flatnonzero(blank).tolist():
        if any(not is_blank(v) for v in rows[i][lo:hi]):
            blank[i] = False
    keep = ~blank
    row_numbers = np.arange(first, first + n, dtype=np.int64)[keep]
    labels = {k: v[keep] for k, v in labels.items()}
    levels = {k: v[keep] for k, v in levels.items()}
    for parsed in numbers.values():
        parsed.values, parsed.problems = parsed.values[keep], parsed.problems[keep]
    kept = set(row_numbers.tolist()) if grid.hidden_rows or grid.no_result else set()
    used_cols = set(col_of.values())
    no_result = [f"{grid.sheet}!{xl_rowcol_to_cell(r - 1, c)}"          # Grid rows are 1-based, xlsxwriter's 0-based
                 for r, c in grid.no_result if r in kept and c in used_cols]
    return _Part(grid.sheet, row_numbers, labels, numbers, header.row,
                 hidden_rows=len(kept & grid.hidden_rows),
                 hidden_cols=len(used_cols & grid.hidden_cols),
                 no_result=no_result, merged_labels=merged_refs, label_forms=forms, levels=levels)


def _two_forms(parts: list[_Part]) -> list[str]:
    """One warning naming the group labels written in two Unicode forms (read as one group each)."""
    forms: dict[tuple[str, str], set[str]] = {}
    for p in parts:
        for column, by_label in p.label_forms.items():
            for name, written in by_label.items():
                forms.setdefault((column, name), set()).update(written)
    twice = [f'"{shown(name)}" ({column})' for (column, name), written in forms.items() if len(written) > 1]
    if not twice:
        return []
    more = f" and {len(twice) - _SHOW} more" if len(twice) > _SHOW else ""
    return [(f"group labels written two ways (the same letters stored as composed and as decomposed accents) "
             f"were read as one group each: {', '.join(twice[:_SHOW])}{more}")]


def _fill_merged(values: list, grid: Grid, col: int, first: int, bottom: int) -> list[str]:
    refs = []
    for r1, c1, r2, c2 in grid.merged:
        if c1 <= col <= c2 and r2 >= first and r1 <= bottom and (r2 > r1 or c2 > c1):
            top_value = grid.get(r1, c1)
            for r in range(max(r1, first), min(r2, bottom) + 1):
                values[r - first] = top_value
            refs.append(f"{grid.sheet}!{xl_rowcol_to_cell(r1 - 1, c1)}:{xl_rowcol_to_cell(r2 - 1, c2)}")
    return refs


def _frame(parts: list[_Part], spec: _Spec):
    import numpy as np
    import pandas as pd

    rows = np.concatenate([p.rows for p in parts])
    sheets = np.concatenate([np.full(len(p.rows), p.sheet, dtype=object) for p in parts])
    data = {SOURCE_SHEET: pd.array(sheets, dtype="str"), SOURCE_ROW: rows}
    for name in spec.group_out:
        src = sheets if name == spec.sheet_key else np.concatenate([p.labels[name] for p in parts])
        data[name] = pd.array(src, dtype="str")
    problems = {}
    date_cols = set()
    levels = merged_levels([p.levels for p in parts], [p.sheet for p in parts], spec.named_levels, spec.maybe_levels)
    for name in spec.numeric:
        if name in levels:
            continue
        data[name] = np.concatenate([p.numbers[name].values for p in parts])
        problems[name] = np.concatenate([p.numbers[name].problems for p in parts])
        if any(p.numbers[name].has_dates for p in parts):
            date_cols.add(name)
    for name, text in levels.items():
        data[name] = text
        problems[name] = np.where(text == "", "empty cell", None)
    reason = np.full(len(rows), "", dtype=object)
    bad = np.zeros(len(rows), dtype=bool)
    for prob in problems.values():
        bad |= np.not_equal(prob, None)
    for i in np.flatnonzero(bad).tolist():
        reason[i] = "; ".join(f"{name}: {prob[i]}" for name, prob in problems.items() if prob[i] is not None)
    data[REASON] = pd.array(reason, dtype="str")
    frame = pd.DataFrame(data)
    frame.attrs["levels"] = tuple(levels)
    dated = [name for name in spec.numeric if name in date_cols]
    days, dates = days_from_group_start(frame, dated, spec.group_out)
    for name in dated:
        frame[name] = days[name]
    return frame, dates


def _check_usable(data, spec: _Spec, parts: list[_Part]) -> None:
    import numpy as np

    if len(data) == 0:
        p = parts[0]
        raise NoUsableDataError(f'no data rows under the header (row {p.header_row}) of sheet "{p.sheet}"; '
                                f'check --sheet and --header-row')
    roles = {name: "response" for name in spec.numeric if name == spec.y}
    for t in spec.terms:
        roles.setdefault(t.column, "input")
    if spec.order:
        roles.setdefault(spec.order, "order")
    if spec.weights:
        roles.setdefault(spec.weights.column, "weight")
    for name in spec.numeric:
        if name in data.attrs.get("levels", ()) or np.isfinite(data[name].to_numpy()).any():
            continue
        mine = data[REASON].str.extract(f"(?:^|; ){re.escape(name)}: ([^;]*)")[0]
        common = mine.value_counts()
        what = f" (most often: {common.index[0]}, {int(common.iloc[0])} rows)" if len(common) else ""
        raise NoUsableDataError(f'{roles.get(name, "response")} column "{name}" has no usable numbers in its '
                                f'{len(data)} rows'
                                f'{what}; check the column and --header-row')


def _strict(data, spec: _Spec) -> None:
    import numpy as np

    problems = data[REASON].to_numpy(dtype=object).copy()
    for g in spec.group_out:
        blank = (data[g] == BLANK_LABEL).to_numpy()
        for i in np.flatnonzero(blank).tolist():
            problems[i] = "; ".join(x for x in (problems[i], f"{g}: blank group label") if x)
    bad = np.flatnonzero(problems != "")
    if len(bad) == 0:
        return
    sheets, rows = data[SOURCE_SHEET].to_numpy(dtype=object), data[SOURCE_ROW].to_numpy()
    shown = "; ".join(f"{sheets[i]}!row {rows[i]} ({_cut(problems[i])})" for i in bad[:_SHOW].tolist())
    more = f" and {len(bad) - _SHOW} more" if len(bad) > _SHOW else ""
    raise UnusableRowsError(f"--strict: {len(bad)} rows cannot be used: {shown}{more}; "
                            f"fix those cells or run without --strict")


def _cut(text: str, limit: int = 90) -> str:
    return text if len(text) <= limit else text[: limit - 1] + "…"
