"""Layer 4 of the guard: a second opinion from DuckDB's own parser.

``extract_statements`` and ``json_serialize_sql`` only parse, nothing runs,
on a private in-memory connection with external access off. DuckDB must agree
that the text is one SELECT-like statement, and every node of its tree passes
the same function rules (:mod:`rules`) and table rules (:mod:`catalog`). This
catches any place where sqlglot and DuckDB read the same text differently;
the text is checked as written and as sqlglot renders it, so a caller may run
either.

What it stops that the locked read-only connection alone does not (measured by
``bench/guard_layers.py``: 2 of the corpus): a PIVOT without an ``IN`` list, which DuckDB runs
as several statements, and any construct sqlglot misreads as harmless (none
of the corpus today, which is the point of a second opinion).
"""

from __future__ import annotations

import json
import threading
from collections.abc import Iterator
from typing import Any

import duckdb
from sqlglot import exp

from trendledger.errors import QueryRefused, first_line
from trendledger.query.catalog import Scope, check_reference
from trendledger.query.params import parameter_names
from trendledger.query.positions import offset_position
from trendledger.query.rules import (
    ALLOWED_TABLE_FUNCTIONS,
    STORE_TABLE_MACRO,
    check_table_name,
    refusal_reason,
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


def check_with_duckdb(
    sql: str, tree: exp.Expression, scope: Scope, rendered: bool = False
) -> None:
    """Ask DuckDB's own parser what the text is, and apply the same rules to its tree.

    With ``rendered`` the text is sqlglot's rendering of the tree; if DuckDB
    reads that differently from the user's text, the query is refused too.
    """
    try:
        _check_duckdb_view(sql, tree, scope.with_ctes(tree))
    except QueryRefused as refusal:
        if not rendered:
            raise
        raise QueryRefused(
            "refused: the query does not survive being rewritten by sqlglot "
            f"({refusal.message.removeprefix('refused: ')})",
            hint="write it more plainly",
        ) from None


def _check_duckdb_view(sql: str, tree: exp.Expression, scope: Scope) -> None:
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
            _check_duck_node(node, sql, scope)
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


def _check_duck_node(node: dict[str, Any], sql: str, scope: Scope) -> None:
    """Apply the function, table and statement rules to one node of DuckDB's tree."""
    line, column = offset_position(sql, node.get("query_location"))
    kind = node.get("type")
    name = node.get("function_name")
    if isinstance(name, str):
        reason = refusal_reason(name)
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
        name = str(node.get("table_name") or "")
        check_reference(str(node.get("catalog_name") or ""), str(node.get("schema_name") or ""),
                        name, scope, sql)
        check_table_name(name, sql)
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
            _check_duck_catalog(str(function.get("catalog") or ""), node, scope.catalog)
    elif kind == "SHOW_REF":
        shown = str(node.get("table_name") or "").strip('"')
        if shown:
            check_table_name(shown, sql)


def _check_duck_catalog(found: str, node: dict[str, Any], catalog: str | None) -> None:
    if catalog is not None and found and found.casefold() != catalog.casefold():
        name = node.get("table_name") or "a table function"
        raise QueryRefused(
            f"refused: {name} is read from catalog {found!r}, not from the store",
            hint="leave table names unqualified",
        )
