"""Output safety: the results workbook appears complete or not at all, and never replaces the input.

The workbook is written to a temporary file in the output folder and renamed into place only
when complete; any failure (or Ctrl-C) removes the temporary file and leaves the folder as it was.
An operating-system failure (no space left, a name too long for the file system…) becomes one
OutputError naming the file and the fix.

A run killed outright (SIGKILL, power loss) cannot clean up, so what it leaves is recognisable:
the temporary file is `.<name>.sheetfit-tmp-<host>-<pid>-<random>.xlsx` beside the output, and
the scratch folder (xlsxwriter's row files) is `sheetfit-scratch-<host>-<pid>-<random>` in the
system temp folder. The next run into the same folder (or with the same temp folder) removes such
leftovers whose process no longer runs on this machine; it touches nothing else (another name, a
live process, another machine or user, a link, a folder where a file is expected).
"""

from __future__ import annotations

import errno
import hashlib
import os
import re
import secrets
import shutil
import socket
import stat
import tempfile
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path

from ..errors import OutputError

TEMP_MARK = ".sheetfit-tmp"
SCRATCH_PREFIX = "sheetfit-scratch"
_TEMP_NAME = re.compile(r"^\..*\.sheetfit-tmp-(?P<host>[0-9a-f]{8})-(?P<pid>\d+)-[0-9a-f]{8}\.xlsx$", re.DOTALL)
_SCRATCH_NAME = re.compile(r"^sheetfit-scratch-(?P<host>[0-9a-f]{8})-(?P<pid>\d+)-[A-Za-z0-9_]+$")


def host_tag() -> str:
    """A short tag of this machine, so leftovers are judged only by the machine that made them."""
    return hashlib.sha256(socket.gethostname().encode("utf-8", "surrogatepass")).hexdigest()[:8]


def output_error(target: Path | str, exc: BaseException) -> OutputError:
    """The one-line error for an operating-system failure writing `target` (xlsxwriter wraps the OSError)."""
    cause = exc if isinstance(exc, OSError) else next((a for a in exc.args if isinstance(a, OSError)), None)
    code = getattr(cause, "errno", None)
    if code == errno.ENAMETOOLONG:
        return OutputError(f'output "{target}": the name is too long for the file system; choose a shorter '
                           f'name with --out')
    if code in (errno.ENOSPC, errno.EDQUOT):
        return OutputError(f'no space left on the disk while writing "{target}"; free some space or choose '
                           f'another --out on another disk (nothing was written)')
    why = getattr(cause, "strerror", None) or " ".join(str(cause or exc).split())[:160]
    return OutputError(f'could not write "{target}" ({why}); choose another --out')


def check_output_path(source: Path | Sequence[Path] | None, out: Path, overwrite: bool) -> Path:
    """The absolute output path, after refusing the input (any of several inputs), an existing file or a
    bad folder.

    Called before fitting (to fail early) and again by the writer. A name the file system refuses
    (too long) is an OutputError too.
    """
    try:
        return _checked(source, out, overwrite)
    except OSError as exc:
        raise output_error(out, exc) from None


def _checked(source: Path | Sequence[Path] | None, out: Path, overwrite: bool) -> Path:
    target = Path(out).expanduser().resolve()
    if target.suffix.lower() != ".xlsx":
        raise OutputError(f'results workbook "{out}" must end in .xlsx; choose another --out')
    sources = [] if source is None else [source] if isinstance(source, (str, os.PathLike)) else list(source)
    for one in sources:
        if not _same_file(target, Path(one)):
            continue
        if len(sources) == 1:
            raise OutputError(f'output "{out}" is the input workbook; sheetfit never writes its input — '
                              "choose another --out")
        raise OutputError(f'output "{out}" is one of the input files ("{Path(one).name}"); sheetfit never '
                          "writes its inputs — choose another --out")
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


# --- leftovers of killed runs -----------------------------------------------------------------------

def _alive(pid: int) -> bool:
    """Whether process `pid` runs on this machine (True when unsure: then nothing is removed)."""
    if os.name != "posix":            # no safe way to ask without side effects: keep everything
        return True
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:                   # e.g. another user's process
        return True
    return True


def _leftover(entry: os.DirEntry, pattern: re.Pattern, is_dir: bool) -> bool:
    """`entry` is ours (name, machine, owner, kind) and its process is gone."""
    m = pattern.match(entry.name)
    if m is None or m["host"] != host_tag():
        return False
    try:
        info = entry.stat(follow_symlinks=False)
    except OSError:
        return False
    kind_ok = stat.S_ISDIR(info.st_mode) if is_dir else stat.S_ISREG(info.st_mode)
    mine = not hasattr(os, "getuid") or info.st_uid == os.getuid()
    return kind_ok and mine and not _alive(int(m["pid"]))


def remove_leftovers(folder: Path) -> list[Path]:
    """Remove temporary results files of dead sheetfit runs of this machine from `folder`; returns them."""
    return _sweep(Path(folder), _TEMP_NAME, is_dir=False)


def remove_scratch_leftovers(folder: Path | None = None) -> list[Path]:
    """Remove scratch folders of dead sheetfit runs of this machine from the temp folder; returns them."""
    return _sweep(Path(folder or tempfile.gettempdir()), _SCRATCH_NAME, is_dir=True)


def _sweep(folder: Path, pattern: re.Pattern, is_dir: bool) -> list[Path]:
    gone = []
    try:
        with os.scandir(folder) as entries:
            found = [Path(e.path) for e in entries if _leftover(e, pattern, is_dir)]
    except OSError:
        return gone
    for path in found:
        try:
            shutil.rmtree(path) if is_dir else path.unlink()
            gone.append(path)
        except OSError:
            pass                       # in use or not ours to remove after all: leave it
    return gone


@contextmanager
def scratch_folder() -> Iterator[Path]:
    """A private scratch folder in the system temp folder, removed afterwards (leftovers of killed runs first)."""
    remove_scratch_leftovers()
    try:
        path = Path(tempfile.mkdtemp(prefix=f"{SCRATCH_PREFIX}-{host_tag()}-{os.getpid()}-"))
    except OSError as exc:
        raise OutputError(f'cannot create a scratch folder in "{tempfile.gettempdir()}" '
                          f"({exc.strerror or exc}); set TMPDIR to a folder with free space") from None
    try:
        yield path
    finally:
        shutil.rmtree(path, ignore_errors=True)


# --- the temporary file and its publication ---------------------------------------------------------

def temp_name(target: Path) -> str:
    """The name of a temporary file for `target`: hidden, marked, with this machine and process."""
    return f".{target.stem[:60]}{TEMP_MARK}-{host_tag()}-{os.getpid()}-{secrets.token_hex(4)}.xlsx"


def _make_temp(target: Path) -> Path:
    """Create an empty, uniquely named temporary file beside `target` (respects the umask)."""
    for _ in range(20):
        tmp = target.with_name(temp_name(target))
        try:
            with open(tmp, "xb"):
                pass
            return tmp
        except FileExistsError:
            continue
        except OSError as exc:
            if exc.errno in (errno.ENOSPC, errno.EDQUOT, errno.ENAMETOOLONG):
                raise output_error(target, exc) from None
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
        except OSError as exc:            # file system without hard links
            if exc.errno in (errno.ENAMETOOLONG, errno.ENOSPC, errno.EDQUOT):
                raise
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
    """Yield a temporary path to write; on success it becomes `target`, on any failure it is removed.

    Leftover temporary files of killed runs in the folder are removed first (`remove_leftovers`);
    an operating-system failure while writing or publishing is raised as an OutputError.
    """
    remove_leftovers(target.parent)
    tmp = _make_temp(target)
    try:
        yield tmp
        _publish(tmp, target, overwrite)
    except OSError as exc:
        _remove(tmp)
        raise output_error(target, exc) from None
    except BaseException:
        _remove(tmp)
        raise
