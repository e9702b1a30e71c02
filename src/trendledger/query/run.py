"""Run one user statement against the store, read-only by construction.

Two layers: :mod:`guard` accepts only a single read statement and refuses
every construct that writes or reaches files; the CLI also opens the store
read-only with external access disabled and the configuration locked.
"""

from __future__ import annotations

from typing import Any

import duckdb
import pandas as pd

from trendledger.errors import QueryRefused
from trendledger.query.guard import check_params, check_query


def run(con: duckdb.DuckDBPyConnection, sql: str, params: dict[str, Any]) -> pd.DataFrame:
    """Validate, then execute the text as written, with bound parameters.

    The text is run as the user wrote it (not sqlglot's rewrite of it), since a
    rewrite can change meaning; the guard has checked both forms.
    """
    tree = check_query(sql)
    check_params(tree, params)
    try:
        return con.execute(sql, params or None).df()
    except duckdb.Error as err:
        first = str(err).strip().splitlines()[0]
        raise QueryRefused(f"the query failed: {first}") from err
