"""Our own exception types.

Every error a user can cause carries where it happened (file, line, column)
so the CLI can print one clear line instead of a traceback.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

#: Characters that steer a terminal or reorder text: C0/C1 controls (ESC, NUL, BEL,
#: newlines...), bidirectional overrides and the Unicode line and paragraph separators.
_UNPRINTABLE = re.compile("[\x00-\x1f\x7f-\x9f\u061c\u200e\u200f\u202a-\u202e"
                          "\u2066-\u2069\u2028\u2029]")


def printable(text: str) -> str:
    """``text`` safe to print on a terminal: every control character escaped.

    A file name or a value can hold an escape sequence that clears the screen,
    retitles the window or hides text; printed raw, the file is in charge of the
    user's terminal. Tabs and line breaks are escaped too, so one value stays
    on one line.
    """
    if not _UNPRINTABLE.search(text):
        return text
    return _UNPRINTABLE.sub(_escape, text)


def _escape(found: re.Match[str]) -> str:
    code = ord(found.group(0))
    if code < 0x100:
        return f"\\x{code:02x}"
    return f"\\u{code:04x}"


def excerpt(value: object, limit: int = 40) -> str:
    """A short, escaped quotation of a value from a data file, for an error message.

    Messages are stored in the lineage, which every query user can read, so a
    message names the file, line and column and quotes at most ``limit``
    characters of what was found there, never a whole line.
    """
    text = printable(str(value))
    if len(text) > limit:
        text = text[: limit - 1] + "…"
    return f"'{text}'"


def first_line(error: BaseException) -> str:
    """The first line of a library's error message, without terminal colour codes: DuckDB
    and sqlglot add context lines and markers that do not belong in a one-line error."""
    text = str(error).strip().splitlines()
    return re.sub(r"\x1b\[[0-9;]*m", "", text[0]) if text else type(error).__name__


@dataclass
class TrendledgerError(Exception):
    """Base error: a message plus the place it refers to, where known."""

    message: str
    file: str | None = None
    line: int | None = None
    column: str | int | None = None
    hint: str | None = None

    #: exit code the CLI uses for this kind of error
    exit_code = 2

    def __post_init__(self) -> None:
        super().__init__(self.message)

    def __str__(self) -> str:
        where = ""
        if self.file is not None:
            where = str(self.file)
            if self.line is not None:
                where += f":{self.line}"
            where += ": "
        return where + self.detail()

    def detail(self) -> str:
        """The message with line and column but without the file name (lineage keeps it)."""
        if self.file is None:
            # No file (a query, a --where): the message leads, the position follows.
            text = self.message
            if self.line is not None:
                text += f" (at line {self.line}"
                text += f", column {self.column})" if self.column is not None else ")"
        else:
            text = self.message
            if self.column is not None:
                text = f"column {self.column}: {text}"
        if self.hint:
            text += f" ({self.hint})"
        return text


class SpecError(TrendledgerError):
    """The spec file is malformed or inconsistent."""


class InputError(TrendledgerError):
    """A data file cannot be loaded as declared (the whole batch is refused)."""

    exit_code = 3


class StoreError(TrendledgerError):
    """The store is missing, of the wrong kind, or would be overwritten."""


class BusyError(StoreError):
    """Another process holds the store for writing."""

    exit_code = 4


class QueryRefused(TrendledgerError):
    """A query was refused before it ran, because it is not a pure read."""

    exit_code = 5


class TemplateError(TrendledgerError):
    """A SQL template under sql/ is malformed (a bug in the tool, not in user input)."""
