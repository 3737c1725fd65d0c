"""One exception class per kind of user problem; the CLI prints any of them as one line."""

from __future__ import annotations

import difflib
from collections.abc import Iterable


class SheetfitError(Exception):
    """Base class: a problem the user can fix; its message is one line naming the problem and the fix."""


class InputFileError(SheetfitError):
    """The input path is missing, a folder, or not readable."""


class NotAWorkbookError(SheetfitError):
    """The file is not a workbook sheetfit can read (wrong format, damaged, encrypted, hostile)."""


class SheetNotFoundError(SheetfitError):
    """A named sheet does not exist in the workbook."""


class TableNotFoundError(SheetfitError):
    """A named table or defined range does not exist in the workbook."""


class ColumnNotFoundError(SheetfitError):
    """A group, response, input or order column does not exist in the header row."""


class DuplicateHeaderError(SheetfitError):
    """Two or more columns share one header name."""


class TermSyntaxError(SheetfitError):
    """An input term cannot be parsed."""


class JobError(SheetfitError):
    """A setting is out of range or the job file is wrong."""


class NoUsableDataError(SheetfitError):
    """A column has no usable numbers, or no group has enough rows to fit."""


class UnusableRowsError(SheetfitError):
    """Under --strict: some rows cannot be used."""


class OutputError(SheetfitError):
    """The output path is the input, already exists, or cannot be written."""


class ResultsWorkbookError(SheetfitError):
    """A results workbook given to `predict` lacks the stored models."""


def closest(name: str, choices: Iterable[str]) -> str | None:
    """The choice most similar to `name` (case-insensitive), or None when nothing is close."""
    choices = [str(c) for c in choices]
    lowered = {c.lower(): c for c in choices}
    hit = difflib.get_close_matches(str(name).lower(), list(lowered), n=1, cutoff=0.5)
    return lowered[hit[0]] if hit else None


def not_found_message(kind: str, name: str, choices: Iterable[str], limit: int = 20) -> str:
    """'<kind> "<name>" not found; ... are: a, b, c; closest match: "b"' in one line."""
    choices = [str(c) for c in choices]
    shown = ", ".join(f'"{c}"' for c in choices[:limit])
    more = f" and {len(choices) - limit} more" if len(choices) > limit else ""
    msg = f'{kind} "{name}" not found; the {kind}s that exist are: {shown or "(none)"}{more}'
    near = closest(name, choices)
    if near is not None:
        msg += f'; closest match: "{near}"'
    return msg
