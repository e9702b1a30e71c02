"""Decide whether a piece of user SQL may run against the store.

The ``query`` command lets people type their own SQL, and ``fits --where`` lets
them type a condition. Both reach a real DuckDB connection, and DuckDB is a
very capable engine: one statement can read any file on disk or on the web
(``FROM 'x.csv'``, ``read_csv(...)``), run another SQL string (``query(...)``),
change settings, attach other databases or write files. The connection is
opened read-only elsewhere; this module is the layer in front of it that says
*no* before anything runs, and says what it refused.

The rules fail closed:

* Exactly one statement, and it must be one of a small set of read shapes
  (SELECT, WITH ... SELECT, set operations, VALUES, DESCRIBE, SHOW, SUMMARIZE,
  UNPIVOT/PIVOT). Anything sqlglot cannot parse, or parses into its generic
  ``Command`` fallback, is refused.
* Every node of the tree is visited, so a write or a file read hidden in a CTE,
  a subquery, a scalar position or a lateral join is found too.
* Table functions come from an allow-list; scalar functions that reach files,
  the network, settings or other SQL are refused by name.
* A second opinion comes from DuckDB's own parser (``extract_statements`` and
  ``json_serialize_sql``; both only parse, nothing runs). It must agree that
  there is one SELECT-like statement, and its own tree is checked with the same
  function and table rules. This catches any place where sqlglot and DuckDB
  read the same text differently.

``check_where`` is much stricter: a condition may only combine column names,
literals, comparisons, boolean logic and arithmetic.
"""

from __future__ import annotations

import difflib
import json
import logging
import re
import threading
from collections.abc import Collection, Iterator, Mapping
from contextlib import contextmanager
from typing import Any

import duckdb
import sqlglot
from sqlglot import exp
from sqlglot.tokens import Token, TokenType

from trendledger.errors import QueryRefused, first_line

DIALECT = "duckdb"

#: longest query text we look at; longer input is refused rather than parsed
MAX_QUERY_CHARS = 100_000

#: node types ``check_query`` may return (a ``SHOW name`` comes back as the
#: equivalent ``Describe``; sqlglot has no node of its own for it)
READ_STATEMENT_TYPES: tuple[type[exp.Expression], ...] = (
    exp.Select,
    exp.Union,
    exp.Intersect,
    exp.Except,
    exp.Values,
    exp.Describe,
    exp.Show,
    exp.Summarize,
    exp.Pivot,
    exp.Subquery,
)

#: table functions that may appear in FROM: generators and read-only catalog listings
#: Table macros the store itself installs (e.g. fit_fade_break(x)); users cannot create
#: macros through the query command, so a name of this shape is one of ours.
STORE_TABLE_MACRO = re.compile(r"^fit_[a-z0-9_]+_break$")

ALLOWED_TABLE_FUNCTIONS = frozenset(
    {
        "range",
        "generate_series",
        "unnest",
        "duckdb_views",
        "duckdb_tables",
        "duckdb_columns",
        "duckdb_functions",
        "duckdb_schemas",
        "duckdb_types",
        "duckdb_constraints",
    }
)

_READS_FILES = "reads files or URLs"
_RUNS_SQL = "runs SQL held in a string"
_OTHER_DB = "reaches another database"
_SETTINGS = "reads or changes connection settings"
_WRITES = "changes the store or the session"
_EXTENSIONS = "installs or loads extensions"

# Function names refused wherever they appear. An entry ending in "*" is a prefix.
_FUNCTION_RULES: tuple[tuple[str, str], ...] = (
    ("read_*", _READS_FILES),
    ("parquet_*", _READS_FILES),
    ("iceberg_*", _READS_FILES),
    ("delta_*", _READS_FILES),
    ("glob", _READS_FILES),
    ("sniff_csv", _READS_FILES),
    ("st_read*", _READS_FILES),
    ("http_*", _READS_FILES),
    ("arrow_scan*", _READS_FILES),
    ("pandas_scan", _READS_FILES),
    ("pg_read*", _READS_FILES),
    ("pg_ls_dir", _READS_FILES),
    ("pg_stat_file", _READS_FILES),
    ("query", _RUNS_SQL),
    ("query_table", _RUNS_SQL),
    ("json_execute_serialized_sql", _RUNS_SQL),
    ("from_substrait*", _RUNS_SQL),
    ("sqlite_*", _OTHER_DB),
    ("postgres_*", _OTHER_DB),
    ("mysql_*", _OTHER_DB),
    ("ducklake_*", _OTHER_DB),
    ("getenv", _SETTINGS),
    ("current_setting", _SETTINGS),
    ("pragma_*", _SETTINGS),
    ("enable_*", _SETTINGS),
    ("disable_*", _SETTINGS),
    ("set_*", _SETTINGS),
    ("duckdb_secrets", _SETTINGS),
    ("duckdb_settings", _SETTINGS),
    ("which_secret", _SETTINGS),
    ("system", _SETTINGS),
    ("shell", _SETTINGS),
    ("setseed", _WRITES),
    ("nextval", _WRITES),
    ("setval", _WRITES),
    ("checkpoint", _WRITES),
    ("force_checkpoint", _WRITES),
    ("load_*", _EXTENSIONS),
    ("install_*", _EXTENSIONS),
)

# Harmless functions that a prefix rule above would otherwise catch.
_FUNCTION_EXCEPTIONS = frozenset({"set_bit"})

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

# Statement-like nodes that must not appear anywhere inside an accepted tree.
_CHANGE_NODES: tuple[tuple[type[exp.Expr], str], ...] = (
    (exp.Insert, "INSERT"),
    (exp.Update, "UPDATE"),
    (exp.Delete, "DELETE"),
    (exp.Merge, "MERGE"),
    (exp.Copy, "COPY"),
    (exp.Create, "CREATE"),
    (exp.Drop, "DROP"),
    (exp.Alter, "ALTER"),
    (exp.TruncateTable, "TRUNCATE"),
    (exp.Into, "SELECT ... INTO"),
    (exp.Returning, "RETURNING"),
    (exp.Pragma, "PRAGMA"),
    (exp.Set, "SET"),
    (exp.SetItem, "SET"),
    (exp.Attach, "ATTACH"),
    (exp.Detach, "DETACH"),
    (exp.Use, "USE"),
    (exp.Install, "INSTALL"),
    (exp.Export, "EXPORT"),
    (exp.LoadData, "LOAD DATA"),
    (exp.Transaction, "BEGIN"),
    (exp.Commit, "COMMIT"),
    (exp.Rollback, "ROLLBACK"),
    (exp.Analyze, "ANALYZE"),
    (exp.Comment, "COMMENT"),
    (exp.Grant, "GRANT"),
    (exp.Revoke, "REVOKE"),
    (exp.Cache, "CACHE"),
    (exp.Refresh, "REFRESH"),
    (exp.Kill, "KILL"),
    (exp.Declare, "DECLARE"),
    (exp.Execute, "EXECUTE"),
    (exp.NextValueFor, "NEXT VALUE FOR"),
    (exp.Block, "a block of statements"),
    (exp.DDL, "DDL"),
    (exp.DML, "DML"),
)

# Characters that turn a table name into a file path, a URL or a glob for DuckDB.
_PATH_CHARACTERS = frozenset("./\\:*?~")

# Built-in views (readable without parentheses) that list settings or attached files.
_SETTINGS_VIEWS = frozenset({"pg_settings"})

# SHOW forms DuckDB treats specially; we support only SHOW TABLES and SHOW <table>.
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

# Query and table-reference node types DuckDB's serialised tree may contain.
_DUCK_QUERY_NODES = frozenset(
    {"SELECT_NODE", "SET_OPERATION_NODE", "RECURSIVE_CTE_NODE", "CTE_NODE"}
)
_DUCK_TABLE_REFS = frozenset(
    {
        "BASE_TABLE",
        "JOIN",
        "SUBQUERY",
        "TABLE_FUNCTION",
        "EXPRESSION_LIST",
        "EMPTY",
        "EMPTY_FROM",
        "SHOW_REF",
        "PIVOT",
    }
)
_UNKNOWN_LOCATION = 2**64 - 1


# --------------------------------------------------------------------------- queries


def check_query(sql: str, catalog: str | None = None) -> exp.Expression:
    """Return the parsed tree of ``sql`` if it is one pure read, else raise QueryRefused.

    Why so strict: the text comes from a user and runs on the real store, and
    DuckDB can read files, reach the network and run SQL strings from inside an
    innocent-looking SELECT. Only shapes we understand completely get through.

    If ``catalog`` is given, tables qualified with any other catalog are
    refused, so a query cannot reach a database other than the store.
    ``$name`` placeholders are allowed (see ``parameter_names``); positional
    ``?`` and ``$1`` are not, because the CLI binds parameters by name.

    Both the text itself and the returned tree's DuckDB rendering (comments
    dropped) pass DuckDB's own parser and the same rules, so a caller may run
    either. Running ``sql`` as given keeps exactly what the user wrote.
    """
    if not isinstance(sql, str):
        raise QueryRefused(f"refused: the query must be text, not {type(sql).__name__}")
    if len(sql) > MAX_QUERY_CHARS:
        raise QueryRefused(
            f"refused: the query is {len(sql)} characters long; the limit is {MAX_QUERY_CHARS}"
        )
    tokens = _tokenize(sql, what="the query")
    statements = _split_statements(tokens)
    if not statements:
        raise QueryRefused(
            "refused: the query is empty; pass exactly one statement",
            hint="for example: SELECT * FROM fit_fade",
        )
    if len(statements) > 1:
        second = statements[1][0]
        raise QueryRefused(
            f"refused: {len(statements)} statements; pass exactly one "
            f"(the second begins with {_statement_label(statements[1]) or second.text!r})",
            line=second.line,
            column=_token_column(second),
            hint="a ';' separates statements; only a trailing one is allowed",
        )
    _check_first_word(statements[0])

    tree = _parse_one_statement(sql)
    if isinstance(tree, exp.Command):
        tree = _command_as_read(tree, statements[0])
    if not isinstance(tree, READ_STATEMENT_TYPES):
        raise QueryRefused(
            f"refused: {_describe_node(tree)} is not a read statement",
            line=statements[0][0].line,
            column=_token_column(statements[0][0]),
            hint="only SELECT, WITH, VALUES, DESCRIBE, SHOW and SUMMARIZE are allowed",
        )
    _check_tree(tree, sql, catalog)
    _check_with_duckdb(sql, tree, catalog)
    for node in tree.walk():
        node.comments = None
    try:
        rendered = tree.sql(dialect=DIALECT)
    except Exception as error:
        raise QueryRefused(f"refused: cannot render the query: {first_line(error)}") from None
    _check_with_duckdb(rendered, tree, catalog, rendered=True)
    return tree


def parameter_names(tree: exp.Expression) -> set[str]:
    """The ``$name`` placeholders used in ``tree``, spelled as written.

    The CLI needs them to check that every ``--param`` is used and every
    placeholder has a value before anything runs.
    """
    names: set[str] = set()
    for node in tree.find_all(exp.Placeholder):
        name = node.name
        if node.this is not None and not name.isdigit():
            names.add(name)
    return names


def check_params(tree: exp.Expression, params: Mapping[str, object]) -> None:
    """Refuse unless ``params`` gives a value to every placeholder and nothing else.

    DuckDB matches parameter names without regard to case, so we do too. An
    unused value is refused as well: it is nearly always a typo, and running the
    query without it would give a silently different answer.
    """
    wanted = {name.casefold(): name for name in parameter_names(tree)}
    given = {str(name).casefold(): str(name) for name in params}
    missing = sorted(wanted[key] for key in wanted.keys() - given.keys())
    if missing:
        listed = ", ".join(f"${name}" for name in missing)
        raise QueryRefused(
            f"refused: no value for parameter {listed}",
            hint=f"pass --param {missing[0]}=VALUE",
        )
    unused = sorted(given[key] for key in given.keys() - wanted.keys())
    if unused:
        listed = ", ".join(unused)
        if wanted:
            close = difflib.get_close_matches(unused[0], sorted(wanted.values()), n=1)
            uses = ", ".join(f"${name}" for name in sorted(wanted.values()))
            hint = f"did you mean {close[0]}?" if close else f"the query uses {uses}"
        else:
            hint = "the query has no $name placeholders"
        raise QueryRefused(f"refused: parameter {listed} is not used by the query", hint=hint)


# --------------------------------------------------------------------------- --where


_WHERE_PREDICATES: tuple[type[exp.Expr], ...] = (
    exp.EQ,
    exp.NEQ,
    exp.LT,
    exp.LTE,
    exp.GT,
    exp.GTE,
    exp.Is,
    exp.NullSafeEQ,
    exp.NullSafeNEQ,
    exp.And,
    exp.Or,
    exp.Not,
    exp.In,
    exp.Between,
    exp.Like,
    exp.ILike,
)
_WHERE_VALUES: tuple[type[exp.Expr], ...] = (
    exp.Column,
    exp.Identifier,
    exp.Literal,
    exp.Boolean,
    exp.Null,
    exp.Add,
    exp.Sub,
    exp.Mul,
    exp.Div,
    exp.Mod,
    exp.Neg,
    exp.Paren,
    exp.Cast,
    exp.DataType,
    exp.DataTypeParam,
)
_PLAIN_TYPES = frozenset(
    {
        exp.DataType.Type.TINYINT,
        exp.DataType.Type.SMALLINT,
        exp.DataType.Type.INT,
        exp.DataType.Type.BIGINT,
        exp.DataType.Type.INT128,
        exp.DataType.Type.FLOAT,
        exp.DataType.Type.DOUBLE,
        exp.DataType.Type.DECIMAL,
        exp.DataType.Type.VARCHAR,
        exp.DataType.Type.TEXT,
        exp.DataType.Type.BOOLEAN,
        exp.DataType.Type.DATE,
        exp.DataType.Type.TIMESTAMP,
    }
)


def check_where(text: str, columns: Collection[str]) -> exp.Expression:
    """Parse a ``--where`` condition and return it with every column quoted.

    Why so narrow: the condition is spliced into a WHERE clause of our own
    SQL, so it must not be able to do anything but compare values. Allowed are
    column names from ``columns``, literals, comparisons (including IS [NOT]
    NULL and IS [NOT] DISTINCT FROM), AND/OR/NOT, IN with a list of literals,
    BETWEEN, LIKE/ILIKE, arithmetic, parentheses and a CAST to a plain type.
    Function calls, subqueries, parameters and ``*`` are refused.

    Every column in the returned tree is a quoted identifier with the exact
    spelling from ``columns``, and comments are dropped, so rendering it with
    ``.sql(dialect="duckdb")`` gives safe text.
    """
    if not isinstance(text, str) or not text.strip():
        raise QueryRefused("refused: the --where condition is empty", hint="for example: r2 > 0.9")
    if len(text) > MAX_QUERY_CHARS:
        raise QueryRefused(f"refused: the --where condition is {len(text)} characters long")
    tokens = _tokenize(text, what="the --where condition")
    for token in tokens:
        if token.token_type == TokenType.SEMICOLON:
            raise QueryRefused(
                "refused: ';' in the --where condition; pass one condition, not statements",
                line=token.line,
                column=_token_column(token),
            )
    try:
        with _quiet_sqlglot():
            parsed = sqlglot.parse_one(text, read=DIALECT)
    except Exception as error:  # any parser failure means "no"
        line, column = _error_position(error)
        raise QueryRefused(
            f"refused: cannot parse the --where condition: {first_line(error)}",
            line=line,
            column=column,
        ) from None
    if not isinstance(parsed, exp.Expression):
        raise QueryRefused("refused: the --where condition is empty")

    for node in parsed.walk():
        _check_where_node(node)
    root = parsed.unnest() if isinstance(parsed, exp.Paren) else parsed
    if not isinstance(root, (*_WHERE_PREDICATES, exp.Boolean, exp.Column)):
        raise QueryRefused(
            f"refused: --where needs a condition, not {_describe_node(root)}",
            hint="compare a column with a value, for example: slope < 0",
        )

    known = list(columns)
    tree = parsed
    for reference in list(tree.find_all(exp.Column)):
        quoted = exp.column(_resolve_column(reference, known), quoted=True)
        if reference is tree:
            tree = quoted
        else:
            reference.replace(quoted)
    for node in tree.walk():
        node.comments = None
    return tree


def _check_where_node(node: exp.Expr) -> None:
    """Refuse one node of a --where tree unless it is on the short allowed list.

    The order matters: sqlglot models AND, OR and CAST as functions, so the
    allowed shapes are recognised before the general "no functions" rule.
    """
    line, column = _node_position(node)
    if isinstance(node, exp.Star) or (isinstance(node, exp.Column) and node.is_star):
        raise QueryRefused(
            "refused: * (star) in the --where condition; name the columns",
            line=line,
            column=column,
        )
    if isinstance(node, exp.Column):
        if node.table or node.args.get("db") or node.args.get("catalog"):
            raise QueryRefused(
                f"refused: qualified column {node.sql(dialect=DIALECT)} in --where; "
                "use the bare column name",
                line=line,
                column=column,
            )
        return
    if isinstance(node, exp.Identifier):
        if not isinstance(node.parent, exp.Column):
            raise QueryRefused(
                f"refused: name {node.name!r} in a place where --where allows none",
                line=line,
                column=column,
            )
        return
    if isinstance(node, exp.In):
        _check_where_in(node)
        return
    if isinstance(node, exp.Cast):
        extras = [key for key, value in node.args.items() if value and key not in ("this", "to")]
        if extras:
            raise QueryRefused(
                f"refused: CAST with {', '.join(extras)} in the --where condition",
                line=line,
                column=column,
            )
        return
    if isinstance(node, exp.DataType):
        if node.this not in _PLAIN_TYPES or any(
            not isinstance(param, exp.DataTypeParam) for param in node.expressions
        ):
            raise QueryRefused(
                f"refused: cast to {node.sql(dialect=DIALECT)} in the --where condition; "
                "only plain number, text, boolean, date and timestamp types are allowed",
                line=line,
                column=column,
            )
        return
    if isinstance(node, exp.DataTypeParam):
        if not (isinstance(node.this, exp.Literal) and not node.this.is_string):
            raise QueryRefused("refused: unusual type parameter in the --where condition")
        return
    if isinstance(node, (*_WHERE_PREDICATES, *_WHERE_VALUES)):
        return
    if isinstance(node, exp.Func):
        raise QueryRefused(
            f"refused: function {_function_label(node)} in the --where condition; "
            "only columns, literals, comparisons and arithmetic are allowed",
            line=line,
            column=column,
        )
    if isinstance(node, (exp.Subquery, exp.Query)):
        raise QueryRefused(
            "refused: subquery in the --where condition; only columns and literals are allowed",
            line=line,
            column=column,
        )
    if isinstance(node, exp.Placeholder):
        raise QueryRefused(
            f"refused: parameter ${node.name} in the --where condition; write the value itself",
            line=line,
            column=column,
        )
    raise QueryRefused(
        f"refused: {_describe_node(node)} in the --where condition",
        line=line,
        column=column,
        hint="allowed: columns, literals, = <> < <= > >=, IS [NOT] NULL, IS [NOT] DISTINCT "
        "FROM, AND, OR, NOT, IN (...), BETWEEN, LIKE, ILIKE, + - * / %, CAST",
    )


def _check_where_in(node: exp.In) -> None:
    """IN is fine only with a non-empty list of literal values."""
    for key in ("query", "unnest", "field"):
        if node.args.get(key) is not None:
            raise QueryRefused(
                "refused: IN with a subquery or expression list in the --where condition; "
                "list literal values instead"
            )
    values = node.expressions
    if not values:
        raise QueryRefused("refused: IN () with no values in the --where condition")
    for value in values:
        if not _is_literal_value(value):
            raise QueryRefused(
                f"refused: {value.sql(dialect=DIALECT)} inside IN (...) in the --where "
                "condition; only literal values may be listed"
            )


def _is_literal_value(node: exp.Expr) -> bool:
    """A literal, NULL, boolean, negated number or a literal cast to a plain type."""
    if isinstance(node, (exp.Literal, exp.Boolean, exp.Null)):
        return True
    if isinstance(node, (exp.Neg, exp.Paren)):
        return _is_literal_value(node.this)
    if isinstance(node, exp.Cast):
        return _is_literal_value(node.this)
    return False


def _resolve_column(column: exp.Column, known: list[str]) -> str:
    """The spelling from ``known`` that ``column`` names, matching case like DuckDB does."""
    name = column.name
    if name in known:
        return name
    folded = [candidate for candidate in known if candidate.casefold() == name.casefold()]
    if len(folded) == 1:
        return folded[0]
    close = difflib.get_close_matches(name, known, n=1, cutoff=0.5)
    if not close:
        by_fold = {candidate.casefold(): candidate for candidate in known}
        folded_close = difflib.get_close_matches(name.casefold(), list(by_fold), n=1, cutoff=0.5)
        close = [by_fold[match] for match in folded_close]
    if close:
        hint = f"did you mean {close[0]}?"
    else:
        hint = "known columns: " + ", ".join(known) if known else "the view has no columns"
    line, position = _node_position(column)
    raise QueryRefused(
        f"refused: unknown column {name!r} in the --where condition",
        line=line,
        column=position,
        hint=hint,
    )


# --------------------------------------------------------------------------- tokens


def _tokenize(text: str, what: str) -> list[Token]:
    """sqlglot's DuckDB tokens for ``text``; anything it cannot tokenise is refused."""
    try:
        return list(sqlglot.Dialect.get_or_raise(DIALECT).tokenize(text))
    except Exception as error:  # unterminated strings, comments and the like
        raise QueryRefused(f"refused: cannot read {what}: {first_line(error)}") from None


def _split_statements(tokens: list[Token]) -> list[list[Token]]:
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


def _token_column(token: Token) -> int:
    """1-based column where ``token`` starts (sqlglot records where it ends)."""
    return max(1, token.col - len(token.text) + 1)


def _token_word(token: Token) -> str | None:
    """The upper-case word a token spells, or None for quoted names, strings and symbols."""
    if token.token_type in (TokenType.IDENTIFIER, TokenType.STRING):
        return None
    text = token.text
    return text.upper() if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", text) else None


def _statement_label(tokens: list[Token]) -> str:
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


def _check_first_word(tokens: list[Token]) -> None:
    """Refuse a statement whose first word shows it is not a read, naming that word."""
    first = tokens[0]
    if first.token_type == TokenType.L_PAREN:
        return
    word = _token_word(first)
    if word in _READ_STARTERS:
        return
    label = _statement_label(tokens)
    line, column = first.line, _token_column(first)
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
def _quiet_sqlglot() -> Iterator[None]:
    logger = logging.getLogger("sqlglot")
    logger.addFilter(_FALLBACK_FILTER)
    try:
        yield
    finally:
        logger.removeFilter(_FALLBACK_FILTER)


def _parse_one_statement(sql: str) -> exp.Expression:
    """Parse with sqlglot; a parse failure of any kind is a refusal."""
    try:
        with _quiet_sqlglot():
            parsed = [tree for tree in sqlglot.parse(sql, read=DIALECT) if tree is not None]
    except Exception as error:  # ParseError, but also any sqlglot bug: fail closed
        line, column = _error_position(error)
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


def _command_as_read(command: exp.Command, tokens: list[Token]) -> exp.Expression:
    """Turn the one read that sqlglot leaves as a Command, ``SHOW <table>``, into DESCRIBE.

    Every other Command is refused: it is sqlglot saying it does not know
    what the statement does.
    """
    keyword = str(command.this).upper()
    rest = command.expression
    rest_text = rest.name if isinstance(rest, exp.Expression) else str(rest or "")
    line, column = tokens[0].line, _token_column(tokens[0])
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
        with _quiet_sqlglot():
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


# --------------------------------------------------------------------------- tree rules


def _check_tree(tree: exp.Expression, sql: str, catalog: str | None) -> None:
    """Visit every node of the sqlglot tree and refuse anything that is not a pure read."""
    for node in tree.walk():
        for kind, label in _CHANGE_NODES:
            if isinstance(node, kind):
                line, column = _node_position(node, sql, label)
                raise QueryRefused(
                    f"refused: {label} inside the query; only reads are allowed",
                    line=line,
                    column=column,
                )
        if isinstance(node, exp.Command):
            raise QueryRefused(
                f"refused: {str(node.this).upper()} inside the query is not understood"
            )
        if isinstance(node, exp.Placeholder):
            _check_placeholder(node, sql)
        elif isinstance(node, exp.Table):
            _check_table(node, sql, catalog)
        elif isinstance(node, exp.Func):
            _check_function(node, sql)
        elif isinstance(node, exp.Summarize) and not isinstance(
            node.this, (exp.Table, exp.Query, exp.Subquery)
        ):
            raise QueryRefused(
                f"refused: SUMMARIZE of {node.this.sql(dialect=DIALECT)} reads a file",
                hint="SUMMARIZE a table, a view or a (SELECT ...)",
            )
        elif isinstance(node, exp.Describe) and not isinstance(
            node.this, (exp.Table, exp.Query, exp.Subquery)
        ):
            raise QueryRefused(
                f"refused: DESCRIBE of {node.this.sql(dialect=DIALECT)} is not a table or query",
                hint="DESCRIBE a table, a view or a SELECT",
            )


def _check_placeholder(node: exp.Placeholder, sql: str) -> None:
    """Only named parameters are allowed: the CLI binds by name."""
    if node.this is None or node.name.isdigit():
        shown = "?" if node.this is None else f"${node.name}"
        line, column = _node_position(node, sql, shown)
        raise QueryRefused(
            f"refused: positional parameter {shown}; use named parameters like $cell",
            line=line,
            column=column,
        )


def _check_table(table: exp.Table, sql: str, catalog: str | None) -> None:
    """A table reference must name a table, a view or an allowed table function."""
    if catalog is not None and table.catalog and table.catalog.casefold() != catalog.casefold():
        line, column = _node_position(table, sql, table.catalog)
        raise QueryRefused(
            f"refused: table {table.sql(dialect=DIALECT)} is in catalog {table.catalog!r}, "
            "not in the store",
            line=line,
            column=column,
            hint="leave table names unqualified",
        )
    target = table.this
    if isinstance(target, exp.Func):
        return  # checked as a table function by _check_function
    if not isinstance(target, exp.Identifier):
        shown = target.sql(dialect=DIALECT) if isinstance(target, exp.Expression) else target
        raise QueryRefused(f"refused: unsupported table reference {shown}")
    _check_table_name(target.name, sql, target)


def _check_table_name(name: str, sql: str, node: exp.Expr | None = None) -> None:
    """Refuse names DuckDB would read as a file, URL or settings listing.

    A bare name never calls a function in DuckDB, so names like ``query`` (a
    common CTE name) are fine here; only DuckDB's built-in system views matter.
    """
    line, column = _node_position(node, sql, name) if node is not None else (None, None)
    if any(character in _PATH_CHARACTERS for character in name):
        raise QueryRefused(
            f"refused: table name {name!r} looks like a file path or URL, "
            "which DuckDB would read directly",
            line=line,
            column=column,
            hint="query the tables and views in the store",
        )
    lowered = name.casefold()
    if lowered.startswith("duckdb_") and lowered not in ALLOWED_TABLE_FUNCTIONS:
        raise QueryRefused(
            f"refused: system listing {name}; only "
            + ", ".join(sorted(n for n in ALLOWED_TABLE_FUNCTIONS if n.startswith("duckdb_")))
            + " may be read",
            line=line,
            column=column,
        )
    if lowered.startswith("pragma_") or lowered in _SETTINGS_VIEWS:
        raise QueryRefused(
            f"refused: system view {name} {_SETTINGS}",
            line=line,
            column=column,
        )


def _check_function(func: exp.Func, sql: str) -> None:
    """Refuse file, network, settings and SQL-running functions; allow-list table functions."""
    names = _function_names(func)
    label = _function_label(func)
    line, column = _node_position(func, sql, label)
    for name in sorted(names):
        reason = _refusal_reason(name)
        if reason is not None:
            raise QueryRefused(
                f"refused: function {name} {reason}",
                line=line,
                column=column,
            )
    ours = {n for n in names if STORE_TABLE_MACRO.match(n)}
    if _in_table_position(func) and not names - ours <= ALLOWED_TABLE_FUNCTIONS:
        raise QueryRefused(
            f"refused: table function {label}; only "
            + ", ".join(sorted(ALLOWED_TABLE_FUNCTIONS))
            + " may be used in FROM",
            line=line,
            column=column,
        )


def _in_table_position(func: exp.Func) -> bool:
    """True when the function stands where a table would (FROM, JOIN, LATERAL)."""
    parent = func.parent
    return isinstance(parent, (exp.Table, exp.Lateral, exp.From, exp.Join)) and (
        func.arg_key == "this"
    )


def _function_names(func: exp.Func) -> set[str]:
    """Every name the function may go by: as written, sqlglot's own, and as rendered.

    sqlglot maps some calls to typed nodes (``read_csv`` becomes ``ReadCSV``,
    ``range`` becomes ``GenerateSeries``), so both spellings are checked. The
    rendered spelling is only needed where the table-function allow-list
    applies; elsewhere DuckDB's own tree is checked by name as well, and
    rendering every operator node would cost time on long conditions.
    """
    names = {_function_label(func).casefold()}
    if not isinstance(func, exp.Anonymous):
        names.add(func.sql_name().casefold())
    if _in_table_position(func):
        try:
            rendered = func.sql(dialect=DIALECT)
        except Exception:
            raise QueryRefused(
                f"refused: cannot check table function {_function_label(func)}"
            ) from None
        head = rendered.split("(", 1)[0].strip()
        if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_.\"]*", head):
            names.add(head.split(".")[-1].strip('"').casefold())
    return names


def _function_label(func: exp.Func) -> str:
    """The function's name as the user most likely wrote it."""
    if isinstance(func, exp.Anonymous):
        return func.name
    return func.sql_name().lower()


def _refusal_reason(name: str) -> str | None:
    """Why a function (or system listing) of this name is refused, or None if it is fine."""
    lowered = name.casefold()
    if lowered in _FUNCTION_EXCEPTIONS:
        return None
    for pattern, reason in _FUNCTION_RULES:
        if pattern.endswith("*"):
            if lowered.startswith(pattern[:-1]):
                return reason
        elif lowered == pattern:
            return reason
    return None


# --------------------------------------------------------------------------- DuckDB's view


_duck_lock = threading.Lock()
_duck_connection: duckdb.DuckDBPyConnection | None = None


def _parser_connection() -> duckdb.DuckDBPyConnection:
    """A private in-memory connection used only to parse, never to read data."""
    global _duck_connection
    if _duck_connection is None:
        _duck_connection = duckdb.connect(
            ":memory:",
            config={
                "enable_external_access": False,
                "autoinstall_known_extensions": False,
                "autoload_known_extensions": False,
            },
        )
    return _duck_connection


def _check_with_duckdb(
    sql: str, tree: exp.Expression, catalog: str | None, rendered: bool = False
) -> None:
    """Ask DuckDB's own parser what the text is, and apply the same rules to its tree.

    With ``rendered`` the text is sqlglot's rendering of the tree; if DuckDB
    reads that differently from the user's text, the query is refused too.
    """
    try:
        _check_duckdb_view(sql, tree, catalog)
    except QueryRefused as refusal:
        if not rendered:
            raise
        raise QueryRefused(
            "refused: the query does not survive being rewritten by sqlglot "
            f"({refusal.message.removeprefix('refused: ')})",
            hint="write it more plainly",
        ) from None


def _check_duckdb_view(sql: str, tree: exp.Expression, catalog: str | None) -> None:
    with _duck_lock:
        connection = _parser_connection()
        try:
            statements = connection.extract_statements(sql)
        except Exception as error:
            raise QueryRefused(
                f"refused: DuckDB cannot parse the query: {first_line(error)}"
            ) from None
        if len(statements) != 1:
            raise QueryRefused(
                f"refused: DuckDB reads {len(statements)} statements here; pass exactly one"
            )
        statement = statements[0]
        if statement.type != duckdb.StatementType.SELECT:
            kind = str(statement.type).rsplit(".", 1)[-1]
            if kind == "MULTI" and tree.find(exp.Pivot) is not None:
                raise QueryRefused(
                    "refused: PIVOT without an IN (...) list runs more than one statement",
                    hint="list the pivot values: PIVOT t ON col IN ('a', 'b') USING ...",
                )
            raise QueryRefused(f"refused: DuckDB reads this as a {kind} statement, not a read")
        try:
            row = connection.execute("SELECT json_serialize_sql($text)", {"text": sql}).fetchone()
            serialised = json.loads(row[0]) if row else None
        except Exception as error:
            raise QueryRefused(
                f"refused: DuckDB cannot check the query: {first_line(error)}"
            ) from None
    if not isinstance(serialised, dict) or serialised.get("error") is not False:
        message = serialised.get("error_message") if isinstance(serialised, dict) else None
        raise QueryRefused(f"refused: DuckDB cannot check the query: {message or 'no tree'}")

    ours = {name.casefold() for name in parameter_names(tree)}
    theirs = {str(name).casefold() for name in statement.named_parameters}
    if ours != theirs:
        raise QueryRefused(
            "refused: sqlglot and DuckDB disagree about the $name parameters in the query"
        )
    try:
        for node in _json_dicts(serialised):
            _check_duck_node(node, sql, catalog)
    except RecursionError:
        raise QueryRefused("refused: the query is nested too deeply to check") from None


def _json_dicts(value: Any) -> Iterator[dict[str, Any]]:
    """Every dict inside a JSON value, visited without recursion."""
    stack = [value]
    while stack:
        item = stack.pop()
        if isinstance(item, dict):
            yield item
            stack.extend(item.values())
        elif isinstance(item, list):
            stack.extend(item)


def _check_duck_node(node: dict[str, Any], sql: str, catalog: str | None) -> None:
    """Apply the function, table and statement rules to one node of DuckDB's tree."""
    line, column = _offset_position(sql, node.get("query_location"))
    kind = node.get("type")
    name = node.get("function_name")
    if isinstance(name, str):
        reason = _refusal_reason(name)
        if reason is not None:
            raise QueryRefused(f"refused: function {name} {reason}", line=line, column=column)
    if not isinstance(kind, str) or "class" in node:
        return
    if kind.endswith("_NODE") and kind not in _DUCK_QUERY_NODES:
        shown = kind.removesuffix("_NODE").removesuffix("_QUERY").replace("_", " ")
        raise QueryRefused(
            f"refused: {shown} inside the query; only reads are allowed", line=line, column=column
        )
    if "alias" not in node or "sample" not in node:
        return  # not a table reference
    if kind not in _DUCK_TABLE_REFS:
        raise QueryRefused(f"refused: DuckDB reads {kind} here, which is not a table or view")
    if kind == "BASE_TABLE":
        _check_table_name(str(node.get("table_name", "")), sql)
        _check_duck_catalog(str(node.get("catalog_name") or ""), node, catalog)
    elif kind == "TABLE_FUNCTION":
        function = node.get("function")
        called = function.get("function_name") if isinstance(function, dict) else None
        if not isinstance(called, str) or (
            called.casefold() not in ALLOWED_TABLE_FUNCTIONS
            and not STORE_TABLE_MACRO.match(called.casefold())
        ):
            raise QueryRefused(
                f"refused: table function {called}; only "
                + ", ".join(sorted(ALLOWED_TABLE_FUNCTIONS))
                + " may be used in FROM",
                line=line,
                column=column,
            )
        if isinstance(function, dict):
            _check_duck_catalog(str(function.get("catalog") or ""), node, catalog)
    elif kind == "SHOW_REF":
        shown = str(node.get("table_name") or "").strip('"')
        if shown:
            _check_table_name(shown, sql)


def _check_duck_catalog(found: str, node: dict[str, Any], catalog: str | None) -> None:
    if catalog is not None and found and found.casefold() != catalog.casefold():
        name = node.get("table_name") or "a table function"
        raise QueryRefused(
            f"refused: {name} is read from catalog {found!r}, not from the store",
            hint="leave table names unqualified",
        )


# --------------------------------------------------------------------------- messages


def _describe_node(node: exp.Expr) -> str:
    """A short human name for a node, used in refusal messages."""
    if isinstance(node, exp.Column):
        return f"the bare name {node.sql(dialect=DIALECT)}"
    if isinstance(node, exp.Func):
        return f"function {_function_label(node)}"
    if isinstance(node, exp.Command):
        return f"{str(node.this).upper()} statement"
    for kind, label in _CHANGE_NODES:
        if isinstance(node, kind):
            return f"{label} statement"
    if isinstance(node, exp.Literal):
        return f"the literal {node.sql(dialect=DIALECT)}"
    words = re.sub(r"(?<=[a-z])(?=[A-Z])", " ", type(node).__name__).upper()
    return words


def _error_position(error: BaseException) -> tuple[int | None, int | None]:
    """Line and column from a sqlglot ParseError, when it has them."""
    details = getattr(error, "errors", None)
    if isinstance(details, list) and details and isinstance(details[0], dict):
        line, column = details[0].get("line"), details[0].get("col")
        if isinstance(line, int) and isinstance(column, int):
            return line, column
    return None, None


def _node_position(
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
            return _offset_position(sql, found.start())
    return None, None


def _offset_position(sql: str, offset: object) -> tuple[int | None, int | None]:
    """Turn a 0-based character offset into a 1-based line and column."""
    if not isinstance(offset, int) or offset < 0 or offset >= _UNKNOWN_LOCATION:
        return None, None
    if offset > len(sql):
        return None, None
    before = sql[:offset]
    line = before.count("\n") + 1
    column = offset - (before.rfind("\n") + 1) + 1
    return line, column
