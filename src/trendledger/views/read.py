"""Read the fit views from Python: filters, sorting, a row limit."""

from __future__ import annotations

import duckdb
import pandas as pd
from sqlglot import exp

from trendledger.errors import QueryRefused
from trendledger.query.guard import check_where
from trendledger.spec import did_you_mean


def view_columns(con: duckdb.DuckDBPyConnection, view: str) -> list[str]:
    rows = con.execute(
        "SELECT column_name FROM duckdb_columns() WHERE table_name = ? ORDER BY column_index",
        [view],
    ).fetchall()
    return [r[0] for r in rows]


def installed_views(con: duckdb.DuckDBPyConnection) -> list[str]:
    return [r[0] for r in con.execute("SELECT view_name FROM duckdb_views() "
                                      "WHERE NOT internal ORDER BY view_name").fetchall()]


def read(
    con: duckdb.DuckDBPyConnection,
    view: str,
    *,
    where: str | None = None,
    sort: str | None = None,
    desc: bool = False,
    limit: int | None = None,
) -> pd.DataFrame:
    """Rows of ``view``; ``where`` is a plain boolean expression over its columns."""
    columns = view_columns(con, view)
    if not columns:
        raise QueryRefused(f"no view named {view!r}",
                           hint=did_you_mean(view, installed_views(con)))
    query = exp.select("*").from_(exp.to_table(exp.to_identifier(view, quoted=True).sql()))
    if where:
        query = query.where(check_where(where, columns))
    if sort:
        if sort not in columns:
            raise QueryRefused(f"cannot sort by {sort!r}: not a column of {view}",
                               hint=did_you_mean(sort, columns))
        query = query.order_by(
            exp.Ordered(this=exp.column(sort, quoted=True), desc=desc, nulls_first=False)
        )
    if limit is not None:
        if limit < 0:
            raise QueryRefused("--limit must be zero or more")
        query = query.limit(limit)
    return con.execute(query.sql(dialect="duckdb")).df()
