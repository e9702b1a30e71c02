"""Where in the user's text something was refused: line and column for one-line errors.

Shared by every check of :mod:`trendledger.query.guard`; it decides nothing.
"""

from __future__ import annotations

import re

from sqlglot import exp
from sqlglot.tokens import Token

#: DuckDB's serialised tree marks an unknown position with the largest unsigned integer
_UNKNOWN_LOCATION = 2**64 - 1


def error_position(error: BaseException) -> tuple[int | None, int | None]:
    """Line and column from a sqlglot ParseError, when it has them."""
    details = getattr(error, "errors", None)
    if isinstance(details, list) and details and isinstance(details[0], dict):
        line, column = details[0].get("line"), details[0].get("col")
        if isinstance(line, int) and isinstance(column, int):
            return line, column
    return None, None


def node_position(
    node: exp.Expr | None, sql: str | None = None, needle: str | None = None
) -> tuple[int | None, int | None]:
    """Best-effort line and column of a node: from sqlglot's metadata, else by searching."""
    if node is not None:
        for candidate in node.walk():
            meta = getattr(candidate, "_meta", None) or {}
            line, column = meta.get("line"), meta.get("col")
            if isinstance(line, int) and isinstance(column, int):
                start = column - len(candidate.name) + 1 if candidate.name else column
                return line, max(1, start)
    if sql and needle:
        found = re.search(re.escape(needle), sql, flags=re.IGNORECASE)
        if found:
            return offset_position(sql, found.start())
    return None, None


def offset_position(sql: str, offset: object) -> tuple[int | None, int | None]:
    """Turn a 0-based character offset into a 1-based line and column."""
    if not isinstance(offset, int) or offset < 0 or offset >= _UNKNOWN_LOCATION:
        return None, None
    if offset > len(sql):
        return None, None
    before = sql[:offset]
    line = before.count("\n") + 1
    column = offset - (before.rfind("\n") + 1) + 1
    return line, column

def token_column(token: Token) -> int:
    """1-based column where ``token`` starts (sqlglot records where it ends)."""
    return max(1, token.col - len(token.text) + 1)
