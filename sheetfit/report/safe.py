"""Output safety: the results workbook appears complete or not at all, and never replaces the input.

The workbook is written to a temporary file in the output folder and renamed into place only
when complete; any failure (or Ctrl-C) removes the temporary file and leaves the folder as it was.
"""

from __future__ import annotations

import os
import secrets
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from ..errors import OutputError

TEMP_MARK = ".sheetfit-tmp"


def check_output_path(source: Path | None, out: Path, overwrite: bool) -> Path:
    """The absolute output path, after refusing the input itself, an existing file or a bad folder.

    Called before fitting (to fail early) and again by the writer.
    """
    target = Path(out).expanduser().resolve()
    if target.suffix.lower() != ".xlsx":
        raise OutputError(f'results workbook "{out}" must end in .xlsx; choose another --out')
    if source is not None and _same_file(target, Path(source)):
        raise OutputError(f'output "{out}" is the input workbook; sheetfit never writes its input — '
                          "choose another --out")
    if target.is_dir():
        raise OutputError(f'output "{out}" is a folder; give a file name ending in .xlsx with --out')
    folder = target.parent
    if not folder.is_dir():
        raise OutputError(f'output folder "{folder}" does not exist; create it or choose another --out')
    if target.exists() and not overwrite:
        raise OutputError(f'results workbook "{target.name}" already exists in "{folder}"; '
                          "pass --overwrite to replace it, or choose another --out")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise OutputError(f'output folder "{folder}" is not writable; choose another --out')
    return target


def _same_file(a: Path, b: Path) -> bool:
    try:
        b_res = b.expanduser().resolve()
    except OSError:
        return False
    if a == b_res:
        return True
    try:
        return a.exists() and b_res.exists() and os.path.samefile(a, b_res)
    except OSError:
        return False


def _make_temp(target: Path) -> Path:
    """Create an empty, uniquely named temporary file beside `target` (respects the umask)."""
    for _ in range(20):
        tmp = target.with_name(f".{target.stem[:60]}-{secrets.token_hex(4)}{TEMP_MARK}.xlsx")
        try:
            with open(tmp, "xb"):
                pass
            return tmp
        except FileExistsError:
            continue
        except OSError as exc:
            raise OutputError(f'cannot write in output folder "{target.parent}" ({exc.strerror}); '
                              "choose another --out") from None
    raise OutputError(f'cannot create a temporary file in "{target.parent}"; choose another --out')


def _remove(path: Path) -> None:
    try:
        path.unlink()
    except FileNotFoundError:
        pass


def _publish(tmp: Path, target: Path, overwrite: bool) -> None:
    """Move the finished file into place; without `overwrite`, never replace a file that appeared meanwhile."""
    with open(tmp, "rb+") as fh:
        os.fsync(fh.fileno())
    try:
        if overwrite:
            os.replace(tmp, target)
            return
        try:
            os.link(tmp, target)          # fails if the target exists: no race with another writer
        except FileExistsError:
            raise OutputError(f'results workbook "{target.name}" appeared while writing; '
                              "pass --overwrite to replace it, or choose another --out") from None
        except OSError:                   # file system without hard links
            if target.exists():
                raise OutputError(f'results workbook "{target.name}" already exists; '
                                  "pass --overwrite to replace it, or choose another --out") from None
            os.replace(tmp, target)
            return
        _remove(tmp)
    except PermissionError:
        raise OutputError(f'cannot replace "{target}" (is it open in a spreadsheet application?); '
                          "close it or choose another --out") from None


@contextmanager
def atomic_output(target: Path, overwrite: bool) -> Iterator[Path]:
    """Yield a temporary path to write; on success it becomes `target`, on any failure it is removed."""
    tmp = _make_temp(target)
    try:
        yield tmp
        _publish(tmp, target, overwrite)
    except BaseException:
        _remove(tmp)
        raise
