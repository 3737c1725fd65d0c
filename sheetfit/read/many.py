"""Several workbooks read as one table: sites that send one workbook each are fitted in one run.

Each file is read by the single-file reader (`observations.read_observations`) under the same sheet,
header and column rules, then the tables are stacked with the file's name (stem and extension) as
the first group column (`file`, or `file name`… when a file has a column `file`) and as each row's
SOURCE_FILE beside its source sheet and row. Every file must give the same columns the same roles;
any file that cannot be read stops the run with its one-line error naming the file, before anything
is written.

Rules:
* A folder stands for every .xlsx, .xlsm, .xls, .ods and .csv file directly inside it, sorted by name.
  Left out: hidden files (a leading dot: sheetfit's own temporary files among them), `~$` lock files
  of an open workbook, and files named like sheetfit's results (`…-fit.xlsx`, `…-predicted.xlsx`, the
  default names of `fit` and `predict`), so a folder run again does not read its own results.
* Files given by name are read whatever they are called; a folder listed among them is expanded in place.
* The file name is the group key, so two inputs with one name (one file given twice, or the same name
  in two folders) are refused.
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from ..errors import InputFileError, JobError, SheetfitError
from ..job import FitJob
from .observations import read_observations
from .safety import check_path
from .tidy import SOURCE_FILE, SOURCE_ROW, Observations, ReadInfo

FILE_KEY = "file"
FOLDER_SUFFIXES = (".xlsx", ".xlsm", ".xls", ".ods", ".csv")
RESULTS_ENDINGS = ("-fit.xlsx", "-predicted.xlsx")      # sheetfit's default output names: not inputs


@dataclass(frozen=True)
class Inputs:
    """The files a run reads, in reading order, and what was left out of the folders given."""

    files: tuple[Path, ...]
    left_out: tuple[str, ...] = ()      # one line per folder: the results workbooks left out of it


def files_of(inputs: Sequence[Path]) -> tuple[Path, ...]:
    """Every file `inputs` names (folders listed by the folder rule), without checks: for guards that must
    not fail themselves, such as keeping the output off every input. A folder that cannot be listed adds none."""
    out: list[Path] = []
    for path in map(Path, inputs):
        try:
            out += _folder(path)[0] if path.is_dir() else [path]
        except OSError:
            continue
    return tuple(out)


def input_files(job: FitJob) -> Inputs:
    """The job's input files, each checked (exists, a regular readable file) before any is read.

    One file: the file itself. Several or a folder: the folder rule above; a folder without workbooks,
    or two inputs with one name, is an error naming them."""
    if not job.several_files:
        check_path(job.inputs[0])
        return Inputs(job.inputs)
    files: list[Path] = []
    left_out: list[str] = []
    for path in job.inputs:
        if not path.is_dir():
            files.append(path)
            continue
        try:
            found, skipped = _folder(path)
        except OSError as exc:
            raise InputFileError(f'folder "{path}" cannot be listed ({exc.strerror or exc}); check its '
                                 f'permissions') from None
        if not found:
            also = f" (left out as sheetfit results: {', '.join(skipped)})" if skipped else ""
            raise InputFileError(f'folder "{path}" holds no workbook or CSV file ({", ".join(FOLDER_SUFFIXES)}) '
                                 f'directly inside it{also}; check the folder or name the files')
        files += found
        if skipped:
            left_out.append(f'left out of folder "{path.name}" as sheetfit results (by their names): '
                            f'{", ".join(skipped)}')
    for path in files:
        check_path(path)
    _distinct_names(files)
    return Inputs(tuple(files), tuple(left_out))


def _folder(folder: Path) -> tuple[list[Path], list[str]]:
    """(the workbooks directly inside `folder` sorted by name, the names left out as sheetfit results)."""
    found, skipped = [], []
    with os.scandir(folder) as entries:
        for entry in entries:
            name = entry.name
            if name.startswith((".", "~$")) or not name.lower().endswith(FOLDER_SUFFIXES) or not entry.is_file():
                continue
            if name.lower().endswith(RESULTS_ENDINGS):
                skipped.append(name)
            else:
                found.append(Path(folder) / name)
    found.sort(key=lambda p: (p.name.casefold(), p.name))
    return found, sorted(skipped, key=lambda n: (n.casefold(), n))


def _distinct_names(files: Sequence[Path]) -> None:
    """The file name is the group key: the same file twice, or two files of one name, is refused."""
    seen: dict[str, Path] = {}
    for path in files:
        earlier = seen.setdefault(path.name, path)
        if earlier is path:
            continue
        if _same(earlier, path):
            raise JobError(f'input file "{path.name}" is given twice; give each file once')
        raise JobError(f'two input files are named "{path.name}" ("{earlier}" and "{path}"); the file name is the '
                       f'group key, so rename one of them')


def _same(a: Path, b: Path) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:
        return a.resolve() == b.resolve()


def read_inputs(job: FitJob) -> Observations:
    """The job's input as Observations: one file as `read_observations` reads it; several files (or a
    folder) read one by one and stacked, the file name the first group column (see the module rules)."""
    if not job.several_files:
        return read_observations(job)
    inputs = input_files(job)
    parts = [_read_one(job, path) for path in inputs.files]
    return stack([p.name for p in inputs.files], parts, inputs.left_out)


def _read_one(job: FitJob, path: Path) -> Observations:
    """One file under the job's rules; its one-line error, if any, names the file."""
    try:
        return read_observations(dataclasses.replace(job, workbook=path), own_keys=(FILE_KEY,))
    except SheetfitError as exc:
        text = str(exc)
        if f'{path.name}"' in text:            # the message names the file already ("x.xlsx" is damaged…)
            raise
        raise type(exc)(f'file "{path.name}": {text}') from exc


def file_key(columns: Sequence[str]) -> str:
    """The file key's name: `file`, or `file name` (`file name 2`…) when a file has a column of that name."""
    taken = set(columns)
    key, k = FILE_KEY, 1
    while key in taken:
        k += 1
        key = "file name" if k == 2 else f"file name {k - 1}"
    return key


def stack(names: Sequence[str], parts: Sequence[Observations], left_out: Sequence[str] = ()) -> Observations:
    """Files' observations (same layout) as one: SOURCE_FILE and the file key added, the key first among
    the group columns; each file's dates, warnings and provenance kept (ReadInfo.files)."""
    import numpy as np
    import pandas as pd

    first = parts[0]
    for name, part in zip(names[1:], parts[1:]):
        _same_layout(names[0], first, name, part)
    columns = list(dict.fromkeys(c for p in parts for c in p.info.columns))
    used = (*first.group_columns, *first.numeric_columns, *first.category_columns)
    if SOURCE_FILE in used:
        raise JobError(f'column "{SOURCE_FILE}" has a name sheetfit gives its own column when several files are '
                       f'read; rename it in the workbooks')
    key = file_key(columns)
    data = pd.concat([p.data for p in parts], ignore_index=True)
    file_of_row = pd.array(np.repeat(np.array(names, dtype=object), [len(p.data) for p in parts]), dtype="str")
    data.insert(0, SOURCE_FILE, file_of_row)
    data.insert(data.columns.get_loc(SOURCE_ROW) + 1, key, file_of_row)
    dates = pd.DataFrame({c: np.concatenate([p.dates[c].to_numpy() for p in parts])
                          for c in first.info.date_columns}, index=data.index)
    info = _combined_info(names, [p.info for p in parts], key, columns, left_out)
    return dataclasses.replace(first, data=data, group_columns=(key, *first.group_columns), info=info,
                               dates=dates)


def _same_layout(name_a: str, a: Observations, name_b: str, b: Observations) -> None:
    """Every file must give the same columns the same roles (the same headers, read the same way)."""
    roles = (("group columns", a.group_columns, b.group_columns), ("response", a.y, b.y),
             ("input terms", [_term_text(t) for t in a.terms], [_term_text(t) for t in b.terms]),
             ("number columns", a.numeric_columns, b.numeric_columns), ("order column", a.order, b.order),
             ("weights", a.weights, b.weights))
    shown = {"group_columns", "y", "terms", "numeric_columns", "order", "weights"}
    roles += tuple((f.name.replace("_", " "), getattr(a, f.name), getattr(b, f.name))     # any other field
                   for f in dataclasses.fields(a) if f.name not in shown | {"data", "info", "dates"})
    for role, one, other in roles:
        if one != other:
            raise JobError(f'"{name_b}" is laid out unlike "{name_a}": its {role} {_listed(other)}, those of '
                           f'"{name_a}" {_listed(one)}; give every file the same headers')
    dated_a, dated_b = set(a.info.date_columns), set(b.info.date_columns)
    if dated_a != dated_b:
        column = min(dated_a ^ dated_b)
        has, lacks = (name_a, name_b) if column in dated_a else (name_b, name_a)
        raise JobError(f'column "{column}" holds dates in "{has}" but plain numbers in "{lacks}"; write it the '
                       f'same way in every file')


def _term_text(term) -> str:
    """A term as a message shows it: its label, and its column when that is not the label itself."""
    return term.label if term.kind == "column" and term.column == term.label else f"{term.label} of {term.column}"


def _listed(value: object) -> str:
    """A role's columns for a message: 'are "a", "b"', 'is "y"', 'are (none)'."""
    if isinstance(value, (tuple, list)):
        return "are " + (", ".join(f'"{v}"' for v in value) or "(none)")
    label = getattr(value, "label", value)
    return f'is "{label}"' if label is not None else "is (none)"


def _combined_info(names: Sequence[str], infos: Sequence[ReadInfo], key: str, columns: Sequence[str],
                   left_out: Sequence[str]) -> ReadInfo:
    """One ReadInfo for the stacked table: totals and the union of names, each file's own in `files`."""
    def joined(values) -> str:
        return ", ".join(dict.fromkeys(values))

    warnings = [f'"{name}": {w}' for name, info in zip(names, infos) for w in info.warnings]
    return ReadInfo(
        file_name=", ".join(names), file_sha256="", file_format=joined(i.file_format for i in infos),
        reader=joined(i.reader for i in infos), sheets=tuple(dict.fromkeys(s for i in infos for s in i.sheets)),
        region=joined(i.region for i in infos), header_row=infos[0].header_row,
        rows_read=sum(i.rows_read for i in infos), hidden_rows=sum(i.hidden_rows for i in infos),
        hidden_columns=sum(i.hidden_columns for i in infos), date_columns=infos[0].date_columns,
        warnings=(*left_out, *warnings), columns=tuple(columns), files=tuple(infos), file_key=key)
