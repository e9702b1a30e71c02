"""Layer 3 of the guard: every table a query names must be one of the store's own.

A name in FROM, JOIN, a CTE body, DESCRIBE, SHOW, SUMMARIZE or PIVOT is looked
up in a :class:`Scope`: the store's catalog, its tables and views, and the
CTEs the query itself defines. Anything else is refused before DuckDB sees
it, because DuckDB turns an unknown name into a file read (a "replacement
scan"): ``FROM 'data.csv'``, ``FROM "data.csv"``, and also a name split by a
dot, ``FROM "folder/name".csv``, which DuckDB joins back into a path.

What it stops that the locked read-only connection alone does not (measured by
``bench/guard_layers.py``: 6 of the corpus): a file inside DuckDB's own temporary folder, which
``enable_external_access = false`` still lets DuckDB read (the read connection
now gets a private, empty temporary folder as well, see :mod:`trendledger.store.sandbox`),
and the built-in listings (``pg_settings``, ``pragma_database_list``,
``duckdb_databases``), which show settings and the paths of attached files.
"""

from __future__ import annotations

import difflib
from collections.abc import Collection
from dataclasses import dataclass, field

from sqlglot import exp

from trendledger.errors import QueryRefused
from trendledger.query.positions import node_position

#: Characters that turn a table name into a file path, a URL or a glob for DuckDB.
PATH_CHARACTERS = frozenset("./\\:*?~")
#: The only schema the store's tables and views live in.
STORE_SCHEMA = "main"


@dataclass
class Scope:
    """What a query may name: the store's catalog and its tables and views.

    ``names`` None means the names are not known (a query checked without a
    store); then only the shape of each name is checked.
    """

    catalog: str | None = None
    names: frozenset[str] | None = None
    ctes: set[str] = field(default_factory=set)

    @classmethod
    def of(cls, catalog: str | None, names: Collection[str] | None) -> Scope:
        return cls(catalog, None if names is None else frozenset(n.casefold() for n in names))

    def with_ctes(self, tree: exp.Expression) -> Scope:
        """This scope plus the CTE names ``tree`` defines (one set for the whole query:
        a name shadowed in one subquery and used in another is still the query's own)."""
        ctes = {cte.alias.casefold() for cte in tree.find_all(exp.CTE) if cte.alias}
        return Scope(self.catalog, self.names, ctes)


def check_reference(
    catalog: str, schema: str, name: str, scope: Scope, sql: str, node: exp.Expr | None = None
) -> None:
    """Refuse a table reference unless it names a table, view or CTE of the store."""
    line, column = node_position(node, sql, name) if node is not None else (None, None)
    for part in (catalog, schema, name):
        if any(character in PATH_CHARACTERS for character in part):
            raise QueryRefused(
                f"refused: table name {_dotted(catalog, schema, name)!r} looks like a file "
                "path or URL, which DuckDB would read directly",
                line=line,
                column=column,
                hint="query the tables and views in the store",
            )
    if catalog and (scope.catalog is None or catalog.casefold() != scope.catalog.casefold()):
        raise QueryRefused(
            f"refused: table {_dotted(catalog, schema, name)} is in catalog {catalog!r}, "
            "not in the store",
            line=line,
            column=column,
            hint="leave table names unqualified",
        )
    if schema and schema.casefold() != STORE_SCHEMA:
        raise QueryRefused(
            f"refused: table {_dotted(catalog, schema, name)} names schema {schema!r}; "
            "the store's tables and views are unqualified names",
            line=line,
            column=column,
            hint="leave table names unqualified",
        )
    if scope.names is None:
        return
    lowered = name.casefold()
    if lowered in scope.names or (not schema and lowered in scope.ctes):
        return
    close = difflib.get_close_matches(lowered, sorted(scope.names), n=1)
    raise QueryRefused(
        f"refused: no table or view named {name!r} in the store",
        line=line,
        column=column,
        hint=f"did you mean {close[0]}?" if close else "SHOW TABLES lists them",
    )


def _dotted(*parts: str) -> str:
    return ".".join(p for p in parts if p)
