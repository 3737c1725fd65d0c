"""The one-line messages for input files that cannot be read, shared by the safety checks and every reader.

Library exceptions (zip, XML, calamine, xlrd) are long and multi-line; `short_text` cuts them to
one line for quoting, and the builders below give the same wording whichever reader failed.
"""

from __future__ import annotations

from ..errors import NotAWorkbookError


def short_text(exc: BaseException) -> str:
    """An exception's text on one line, at most 160 characters, for quoting in a message."""
    return " ".join(str(exc).split())[:160]


def encrypted_error(name: str) -> NotAWorkbookError:
    """The error for a password-protected workbook (the caller raises it)."""
    return NotAWorkbookError(f'"{name}" is password-protected (encrypted); remove the password in a '
                             f'spreadsheet application and save a copy to read')


def damaged_error(name: str, reason: str) -> NotAWorkbookError:
    """The error for a workbook whose parts cannot be unpacked or parsed (the caller raises it)."""
    return NotAWorkbookError(f'"{name}" is damaged and cannot be read ({reason}); open it in a '
                             f'spreadsheet application and save it again')
