"""Decide whether a piece of user SQL may run against the store.

The ``query`` command lets people type their own SQL, and ``fits --where`` lets
them type a condition. Both reach a real DuckDB connection, and DuckDB is a
very capable engine: one statement can read any file on disk or on the web
(``FROM 'x.csv'``, ``read_csv(...)``), run another SQL string (``query(...)``),
change settings, attach other databases or write files.

Who stops what (each module's comment says what it adds; ``bench/guard_layers.py``
runs the hostile-query corpus of ``tests/test_guard.py`` against each layer):

* the connection: opened read-only with external access off, extensions off,
  the configuration locked, a private empty temporary folder and a memory
  limit (:mod:`trendledger.store.sandbox`). Of the 117 hostile queries of the
  corpus the connection alone (as it was, temporary folder beside the store)
  runs 29, with the private temporary folder 25; the guard refuses all 117;
* :mod:`statements` (layer 1): one statement, and a read by its first word;
* :mod:`rules` (layer 2): every node of sqlglot's tree: no hidden writes,
  named parameters only, an allow-list of table functions, a deny-list of
  functions that reach files, settings or other SQL;
* :mod:`catalog` (layer 3): every table named is one of the store's tables,
  views or the query's own CTEs; dotted, quoted and split names included;
* :mod:`duckview` (layer 4): DuckDB's own parser must agree, and its tree
  passes layers 2 and 3 again;
* :mod:`where`: the much narrower ``fits --where`` condition;
* a time limit, a row limit and the memory limit bound what an accepted read
  may cost (:mod:`run`).

The rules fail closed: anything not understood is refused.
"""

from __future__ import annotations

from collections.abc import Collection

from sqlglot import exp

from trendledger.errors import QueryRefused, first_line
from trendledger.query.catalog import Scope
from trendledger.query.duckview import check_with_duckdb
from trendledger.query.params import check_params, collect_params, parameter_names
from trendledger.query.positions import token_column
from trendledger.query.rules import ALLOWED_TABLE_FUNCTIONS, check_tree, describe_node
from trendledger.query.statements import (
    DIALECT,
    MAX_QUERY_CHARS,
    check_first_word,
    command_as_read,
    parse_one_statement,
    split_statements,
    statement_label,
    tokenize,
)
from trendledger.query.where import check_where

__all__ = [
    "ALLOWED_TABLE_FUNCTIONS",
    "READ_STATEMENT_TYPES",
    "check_params",
    "check_query",
    "check_where",
    "collect_params",
    "parameter_names",
]

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


def check_query(
    sql: str, catalog: str | None = None, names: Collection[str] | None = None
) -> exp.Expression:
    """Return the parsed tree of ``sql`` if it is one pure read, else raise QueryRefused.

    Why so strict: the text comes from a user and runs on the real store, and
    DuckDB can read files, reach the network and run SQL strings from inside an
    innocent-looking SELECT. Only shapes we understand completely get through.

    If ``catalog`` is given, tables qualified with any other catalog are
    refused, so a query cannot reach a database other than the store. If
    ``names`` (the store's tables and views) is given, every table the query
    names must be one of them or one of its own CTEs.
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
    tokens = tokenize(sql, what="the query")
    statements = split_statements(tokens)
    if not statements:
        raise QueryRefused(
            "refused: the query is empty; pass exactly one statement",
            hint="for example: SELECT * FROM fit_fade",
        )
    if len(statements) > 1:
        second = statements[1][0]
        raise QueryRefused(
            f"refused: {len(statements)} statements; pass exactly one "
            f"(the second begins with {statement_label(statements[1]) or second.text!r})",
            line=second.line,
            column=token_column(second),
            hint="a ';' separates statements; only a trailing one is allowed",
        )
    check_first_word(statements[0])

    tree = parse_one_statement(sql)
    if isinstance(tree, exp.Command):
        tree = command_as_read(tree, statements[0])
    if not isinstance(tree, READ_STATEMENT_TYPES):
        raise QueryRefused(
            f"refused: {describe_node(tree)} is not a read statement",
            line=statements[0][0].line,
            column=token_column(statements[0][0]),
            hint="only SELECT, WITH, VALUES, DESCRIBE, SHOW and SUMMARIZE are allowed",
        )
    scope = Scope.of(catalog, names)
    check_tree(tree, sql, scope)
    check_with_duckdb(sql, tree, scope)
    for node in tree.walk():
        node.comments = None
    try:
        rendered = tree.sql(dialect=DIALECT)
    except Exception as error:
        raise QueryRefused(f"refused: cannot render the query: {first_line(error)}") from None
    check_with_duckdb(rendered, tree, scope, rendered=True)
    return tree
