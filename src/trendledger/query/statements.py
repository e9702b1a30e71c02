"""Layer 1 of the guard: the statement as words, before any tree is built.

Splits the text into statements with sqlglot's DuckDB tokenizer (so a ';' in a
string, a quoted name or a comment is not a separator), refuses more than one
statement, and refuses a statement whose first word is not a read, naming it.
Then parses with sqlglot, turning its ``Command`` fallback (text it does not
understand) into a refusal, except ``SHOW <table>``, which becomes DESCRIBE.

What it stops that the locked read-only connection alone does not (measured by
``bench/guard_layers.py``: 12 of the corpus, plus one refused by ``guard`` itself
once parsed, a PIVOT without IN): a second statement after a harmless first one,
``CREATE TEMP TABLE``/``VIEW`` (temporary objects are allowed on a read-only
store), ``PRAGMA``, ``CALL``, ``CHECKPOINT``, ``VACUUM``, ``ANALYZE``, ``BEGIN``
and ``EXPLAIN ANALYZE``, and ``SHOW DATABASES`` (lists attached files).
Everything else it refuses the connection would refuse too, but with a less
helpful message.
"""

from __future__ import annotations

import logging
import re
from collections.abc import Iterator
from contextlib import contextmanager

import sqlglot
from sqlglot import exp
from sqlglot.tokens import Token, TokenType

from trendledger.errors import QueryRefused, first_line
from trendledger.query.positions import error_position, token_column

DIALECT = "duckdb"

#: longest query text we look at; longer input is refused rather than parsed
MAX_QUERY_CHARS = 100_000

# First words that may start a read statement.
_READ_STARTERS = frozenset(
    {
        "SELECT",
        "WITH",
        "VALUES",
        "FROM",
        "TABLE",
        "DESCRIBE",
        "DESC",
        "SHOW",
        "SUMMARIZE",
        "PIVOT",
        "UNPIVOT",
    }
)

# First words of statements that are never reads, with the reason given to the user.
_STATEMENT_REASONS: dict[str, str] = {
    "INSERT": "change the store",
    "UPDATE": "change the store",
    "DELETE": "change the store",
    "MERGE": "change the store",
    "UPSERT": "change the store",
    "REPLACE": "change the store",
    "TRUNCATE": "change the store",
    "DROP": "change the store",
    "ALTER": "change the store",
    "COMMENT": "change the store",
    "CREATE": "create objects in the store or the session",
    "PRAGMA": "read or change connection settings",
    "SET": "change connection settings",
    "RESET": "change connection settings",
    "ATTACH": "open other databases",
    "DETACH": "detach databases",
    "USE": "switch to another database",
    "COPY": "read or write files",
    "EXPORT": "write files",
    "IMPORT": "read files into the store",
    "INSTALL": "install extensions",
    "LOAD": "load extensions",
    "FORCE": "install extensions or write the store",
    "CALL": "run table functions as procedures",
    "CHECKPOINT": "write the store to disk",
    "BEGIN": "control transactions",
    "START": "control transactions",
    "COMMIT": "control transactions",
    "END": "control transactions",
    "ROLLBACK": "control transactions",
    "ABORT": "control transactions",
    "VACUUM": "rewrite the store",
    "ANALYZE": "rewrite statistics in the store",
    "EXPLAIN": "are not supported (EXPLAIN ANALYZE runs the query)",
    "PREPARE": "are not supported",
    "EXECUTE": "are not supported",
    "DEALLOCATE": "are not supported",
    "GRANT": "change permissions",
    "REVOKE": "change permissions",
}

# Words that may follow the first one in a statement label ("CREATE OR REPLACE TEMP VIEW").
_LABEL_MODIFIERS = frozenset({"OR", "REPLACE", "TEMP", "TEMPORARY", "PERSISTENT", "UNIQUE"})
_LABEL_KINDS = frozenset(
    {
        "TABLE",
        "VIEW",
        "MACRO",
        "FUNCTION",
        "SECRET",
        "SEQUENCE",
        "SCHEMA",
        "TYPE",
        "INDEX",
        "DATABASE",
        "EXTENSIONS",
        "CHECKPOINT",
        "INSTALL",
        "TRANSACTION",
        "INTO",
        "FROM",
        "ON",
    }
)


_SHOW_SPECIAL_WORDS = frozenset(
    {
        "DATABASES",
        "SCHEMAS",
        "VARIABLES",
        "FUNCTIONS",
        "SETTINGS",
        "EXTENSIONS",
        "SECRETS",
        "TABLES",
        "ALL",
    }
)


# --------------------------------------------------------------------------- tokens


def tokenize(text: str, what: str) -> list[Token]:
    """sqlglot's DuckDB tokens for ``text``; anything it cannot tokenise is refused."""
    try:
        return list(sqlglot.Dialect.get_or_raise(DIALECT).tokenize(text))
    except Exception as error:  # unterminated strings, comments and the like
        raise QueryRefused(f"refused: cannot read {what}: {first_line(error)}") from None


def split_statements(tokens: list[Token]) -> list[list[Token]]:
    """Group tokens into statements at each ';', dropping empty ones (a trailing ';')."""
    statements: list[list[Token]] = []
    current: list[Token] = []
    for token in tokens:
        if token.token_type == TokenType.SEMICOLON:
            if current:
                statements.append(current)
            current = []
        else:
            current.append(token)
    if current:
        statements.append(current)
    return statements



def _token_word(token: Token) -> str | None:
    """The upper-case word a token spells, or None for quoted names, strings and symbols."""
    if token.token_type in (TokenType.IDENTIFIER, TokenType.STRING):
        return None
    text = token.text
    return text.upper() if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", text) else None


def statement_label(tokens: list[Token]) -> str:
    """A short name for a statement from its first words, such as ``CREATE TEMP TABLE``."""
    words: list[str] = []
    for token in tokens[:6]:
        word = _token_word(token)
        if word is None:
            break
        words.append(word)
    if not words:
        return ""
    label = [words[0]]
    for word in words[1:]:
        if word in _LABEL_MODIFIERS:
            label.append(word)
            continue
        if word in _LABEL_KINDS:
            label.append(word)
        break
    return " ".join(label)


def check_first_word(tokens: list[Token]) -> None:
    """Refuse a statement whose first word shows it is not a read, naming that word."""
    first = tokens[0]
    if first.token_type == TokenType.L_PAREN:
        return
    word = _token_word(first)
    if word in _READ_STARTERS:
        return
    label = statement_label(tokens)
    line, column = first.line, token_column(first)
    if word is not None and word in _STATEMENT_REASONS:
        reason = _STATEMENT_REASONS[word]
        if label == "UPDATE EXTENSIONS":
            reason = "update installed extensions"
        raise QueryRefused(
            f"refused: {label} statements {reason}; only reads are allowed",
            hint="allowed: SELECT, WITH, VALUES, DESCRIBE, SHOW, SUMMARIZE",
            line=line,
            column=column,
        )
    shown = word if word is not None else first.text
    raise QueryRefused(
        f"refused: a statement beginning with {shown!r} is not a read",
        hint="start with SELECT, WITH, FROM, VALUES, DESCRIBE, SHOW or SUMMARIZE",
        line=line,
        column=column,
    )


# --------------------------------------------------------------------------- parsing


class _DropFallbackWarnings(logging.Filter):
    """Hide sqlglot's 'falling back to Command' warning; we refuse those ourselves."""

    def filter(self, record: logging.LogRecord) -> bool:
        return "Falling back to parsing as a 'Command'" not in record.getMessage()


_FALLBACK_FILTER = _DropFallbackWarnings()


@contextmanager
def quiet_sqlglot() -> Iterator[None]:
    logger = logging.getLogger("sqlglot")
    logger.addFilter(_FALLBACK_FILTER)
    try:
        yield
    finally:
        logger.removeFilter(_FALLBACK_FILTER)


def parse_one_statement(sql: str) -> exp.Expression:
    """Parse with sqlglot; a parse failure of any kind is a refusal."""
    try:
        with quiet_sqlglot():
            parsed = [tree for tree in sqlglot.parse(sql, read=DIALECT) if tree is not None]
    except Exception as error:  # ParseError, but also any sqlglot bug: fail closed
        line, column = error_position(error)
        raise QueryRefused(
            f"refused: cannot parse the query: {first_line(error)}",
            line=line,
            column=column,
        ) from None
    if len(parsed) != 1:
        raise QueryRefused(f"refused: {len(parsed)} statements; pass exactly one")
    tree = parsed[0]
    if not isinstance(tree, exp.Expression):
        raise QueryRefused("refused: the query did not parse into a statement")
    return tree


def command_as_read(command: exp.Command, tokens: list[Token]) -> exp.Expression:
    """Turn the one read that sqlglot leaves as a Command, ``SHOW <table>``, into DESCRIBE.

    Every other Command is refused: it is sqlglot saying it does not know
    what the statement does.
    """
    keyword = str(command.this).upper()
    rest = command.expression
    rest_text = rest.name if isinstance(rest, exp.Expression) else str(rest or "")
    line, column = tokens[0].line, token_column(tokens[0])
    if keyword != "SHOW":
        raise QueryRefused(
            f"refused: {keyword} statements are not understood here", line=line, column=column
        )
    target = rest_text.strip()
    if target.upper() in _SHOW_SPECIAL_WORDS or target.upper().startswith("ALL "):
        raise QueryRefused(
            f"refused: SHOW {target} is not supported",
            hint="use SHOW TABLES, SHOW <table> or DESCRIBE <table>",
            line=line,
            column=column,
        )
    table = _plain_table_name(target)
    if table is None:
        raise QueryRefused(
            f"refused: SHOW {target} is not supported; SHOW takes a table or view name",
            hint="use DESCRIBE for anything else",
            line=line,
            column=column,
        )
    return exp.Describe(this=table)


def _plain_table_name(text: str) -> exp.Table | None:
    """``text`` as a table reference if it is only a (qualified) name, else None."""
    try:
        with quiet_sqlglot():
            table = sqlglot.parse_one(text, read=DIALECT, into=exp.Table)
    except Exception:
        return None
    if not isinstance(table, exp.Table) or not isinstance(table.this, exp.Identifier):
        return None
    for key, value in table.args.items():
        if value is None:
            continue
        if key not in ("this", "db", "catalog") or not isinstance(value, exp.Identifier):
            return None
    return table
