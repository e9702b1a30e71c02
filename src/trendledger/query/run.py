"""Run one user statement against the store, read-only by construction.

Layers (see :mod:`trendledger.query.guard`): the guard accepts only a single
read statement naming the store's own tables and refuses every construct that
writes or reaches files; the connection is opened read-only with external
access disabled, the configuration locked, a private temporary folder and a
memory limit; :mod:`limits` bounds the time and the rows fetched.
"""

from __future__ import annotations

from typing import Any

import duckdb
import pandas as pd

from trendledger.errors import QueryRefused, first_line
from trendledger.query.guard import check_params, check_query
from trendledger.query.limits import fetch, time_limit


def store_names(con: duckdb.DuckDBPyConnection) -> tuple[str, list[str]]:
    """The store's catalog name and the names of its own tables and views."""
    catalog = con.execute("SELECT current_database()").fetchall()[0][0]
    rows = con.execute(
        "SELECT table_name FROM duckdb_tables() WHERE database_name = $db AND NOT internal "
        "UNION ALL SELECT view_name FROM duckdb_views() WHERE database_name = $db "
        "AND NOT internal",
        {"db": catalog},
    ).fetchall()
    return str(catalog), [str(r[0]) for r in rows]


def run(
    con: duckdb.DuckDBPyConnection,
    sql: str,
    params: dict[str, Any],
    *,
    timeout: float | None = None,
    max_rows: int | None = None,
) -> pd.DataFrame:
    """Validate, then execute the text as written, with bound parameters.

    The text is run as the user wrote it (not sqlglot's rewrite of it), since a
    rewrite can change meaning; the guard has checked both forms.
    """
    catalog, names = store_names(con)
    tree = check_query(sql, catalog=catalog, names=names)
    check_params(tree, params)
    if max_rows is not None and max_rows < 0:
        raise QueryRefused("--max-rows must be zero or more (zero: no limit)")
    try:
        with time_limit(con, timeout):
            result = con.execute(sql, params or None)
            return fetch(result, max_rows or None)
    except duckdb.Error as err:
        raise QueryRefused(f"the query failed: {first_line(err)}") from err
