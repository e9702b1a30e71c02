"""Layer 2 of the guard: every node of sqlglot's tree, checked against fixed rules.

No statement that changes anything may hide inside a read (a CTE, a subquery,
a scalar position, a lateral join); named ``$parameters`` only; table
functions come from an allow-list; functions that reach files, the network,
settings or other SQL are refused by name wherever they stand.

What it stops that the locked read-only connection alone does not (measured by
``bench/guard_layers.py``: 8 of the corpus): ``query()`` and ``query_table()`` (run SQL held in
a string, which would slip past layer 1), ``current_setting()`` and
``duckdb_settings()`` (read the settings), ``pragma_*`` functions and
``duckdb_databases()`` (list the attached files), ``test_all_types()``.
File readers (``read_csv`` and friends), ``getenv``, ``COPY`` and ``ATTACH``
are also stopped by ``enable_external_access = false``; refusing them here
gives a message that names the function and its position, and keeps them out
if the connection's settings ever change.
"""

from __future__ import annotations

import re

from sqlglot import exp

from trendledger.errors import QueryRefused
from trendledger.query.catalog import Scope, check_reference
from trendledger.query.positions import node_position
from trendledger.query.statements import DIALECT

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

# Built-in views (readable without parentheses) that list settings or attached files.
_SETTINGS_VIEWS = frozenset({"pg_settings"})


# --------------------------------------------------------------------------- tree rules


def check_tree(tree: exp.Expression, sql: str, scope: Scope) -> None:
    """Visit every node of the sqlglot tree and refuse anything that is not a pure read."""
    scope = scope.with_ctes(tree)
    for node in tree.walk():
        for kind, label in _CHANGE_NODES:
            if isinstance(node, kind):
                line, column = node_position(node, sql, label)
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
            _check_table(node, sql, scope)
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
        line, column = node_position(node, sql, shown)
        raise QueryRefused(
            f"refused: positional parameter {shown}; use named parameters like $cell",
            line=line,
            column=column,
        )


def _check_table(table: exp.Table, sql: str, scope: Scope) -> None:
    """A table reference must name a table, a view, a CTE or an allowed table function."""
    target = table.this
    if isinstance(target, exp.Func):
        if table.catalog and (scope.catalog is None
                              or table.catalog.casefold() != scope.catalog.casefold()):
            line, column = node_position(table, sql, table.catalog)
            raise QueryRefused(
                f"refused: table {table.sql(dialect=DIALECT)} is in catalog "
                f"{table.catalog!r}, not in the store",
                line=line,
                column=column,
                hint="leave table names unqualified",
            )
        return  # the function itself is checked by _check_function
    if not isinstance(target, exp.Identifier):
        shown = target.sql(dialect=DIALECT) if isinstance(target, exp.Expression) else target
        raise QueryRefused(f"refused: unsupported table reference {shown}")
    check_reference(table.catalog, table.db, target.name, scope, sql, target)
    check_table_name(target.name, sql, target)


def check_table_name(name: str, sql: str, node: exp.Expr | None = None) -> None:
    """Refuse the names of DuckDB's built-in listings of settings and attached files.

    A bare name never calls a function in DuckDB, so names like ``query`` (a
    common CTE name) are fine here; only DuckDB's built-in system views matter.
    """
    line, column = node_position(node, sql, name) if node is not None else (None, None)
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
    label = function_label(func)
    line, column = node_position(func, sql, label)
    for name in sorted(names):
        reason = refusal_reason(name)
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
    names = {function_label(func).casefold()}
    if not isinstance(func, exp.Anonymous):
        names.add(func.sql_name().casefold())
    if _in_table_position(func):
        try:
            rendered = func.sql(dialect=DIALECT)
        except Exception:
            raise QueryRefused(
                f"refused: cannot check table function {function_label(func)}"
            ) from None
        head = rendered.split("(", 1)[0].strip()
        if re.fullmatch(r"[A-Za-z_][A-Za-z0-9_.\"]*", head):
            names.add(head.split(".")[-1].strip('"').casefold())
    return names


def function_label(func: exp.Func) -> str:
    """The function's name as the user most likely wrote it."""
    if isinstance(func, exp.Anonymous):
        return func.name
    return func.sql_name().lower()


def refusal_reason(name: str) -> str | None:
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



def describe_node(node: exp.Expr) -> str:
    """A short human name for a node, used in refusal messages."""
    if isinstance(node, exp.Column):
        return f"the bare name {node.sql(dialect=DIALECT)}"
    if isinstance(node, exp.Func):
        return f"function {function_label(node)}"
    if isinstance(node, exp.Command):
        return f"{str(node.this).upper()} statement"
    for kind, label in _CHANGE_NODES:
        if isinstance(node, kind):
            return f"{label} statement"
    if isinstance(node, exp.Literal):
        return f"the literal {node.sql(dialect=DIALECT)}"
    words = re.sub(r"(?<=[a-z])(?=[A-Z])", " ", type(node).__name__).upper()
    return words
