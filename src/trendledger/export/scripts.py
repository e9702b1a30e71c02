"""The SQL files of an export: sources, functions and every view, per engine.

``views/<dialect>.sql`` makes the exported tables visible under their store names (Parquet
folders for Spark, Trino and DuckDB; tables to load for PostgreSQL), defines the
functions the views need there and every view of the store, re-rendered from the
templates (``views.plan(recompute=True)``) and translated by :mod:`trendledger.dialects`.
"""

from __future__ import annotations

import functools
import hashlib
import json
import shlex
import sys
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any

import sqlglot
from sqlglot import exp

from trendledger.export import dialects, lowering
from trendledger.export.layout import DATA, Column, ExportError, Layout, connection, layout
from trendledger.trace import Writer
from trendledger.version import __version__
from trendledger.views import install as views
from trendledger.views.watch import CAUTION

#: Layout version of an export folder; a different one is rewritten whole.
FORMAT = 1


# -- SQL for the engines ------------------------------------------------------------------------


def sql_ident(name: str, dialect: str) -> str:
    return exp.to_identifier(name, quoted=True).sql(dialect)


def sql_string(text: str, dialect: str) -> str:
    return exp.Literal.string(text).sql(dialect)


def _under(location: str, name: str) -> str:
    """``location/name`` for a path or a URI."""
    if "://" in location:
        return location.rstrip("/") + "/" + name
    return str(PurePosixPath(location) / name)


def _columns_sql(columns: tuple[Column, ...], dialect: str) -> str:
    return ", ".join(f"{sql_ident(c.name, dialect)} {dialects.column_type(c.type, dialect)}"
                     for c in columns)


def _sources(lay: Layout, dialect: str, location: str) -> list[str]:
    """Statements that make the exported tables visible under their store names."""
    out: list[str] = []
    data = _under(location, DATA)
    field_name = lay.partition_by
    if dialect == "duckdb":
        names = ", ".join(sql_ident(c.name, "duckdb") for c in lay.columns)
        hive_types = exp.Struct(expressions=[exp.PropertyEQ(
            this=exp.Literal.string(field_name),
            expression=exp.Literal.string(lay.partition_column.type))]).sql("duckdb")
        glob = sql_string(_under(data, "*/*.parquet"), "duckdb")
        out.append(f"CREATE OR REPLACE VIEW {sql_ident(DATA, 'duckdb')} AS SELECT {names} FROM "
                   f"read_parquet({glob}, hive_partitioning = true, hive_types = {hive_types})")
        for table in lay.tables:
            glob = sql_string(_under(_under(location, table), "*.parquet"), "duckdb")
            out.append(f"CREATE OR REPLACE VIEW {sql_ident(table, 'duckdb')} AS "
                       f"SELECT * FROM read_parquet({glob})")
    elif dialect == "spark":
        out.append(f"CREATE OR REPLACE TEMPORARY VIEW {sql_ident(DATA, 'spark')} "
                   f"({_columns_sql(lay.ordered_columns, 'spark')}) USING parquet "
                   f"OPTIONS (path {sql_string(data, 'spark')})")
        for table, columns in lay.tables.items():
            out.append(f"CREATE OR REPLACE TEMPORARY VIEW {sql_ident(table, 'spark')} "
                       f"({_columns_sql(columns, 'spark')}) USING parquet "
                       f"OPTIONS (path {sql_string(_under(location, table), 'spark')})")
    elif dialect == "postgres":
        out.append(f"CREATE TABLE IF NOT EXISTS {sql_ident(DATA, 'postgres')} "
                   f"({_columns_sql(lay.columns, 'postgres')})")
        for table, columns in lay.tables.items():
            out.append(f"CREATE TABLE IF NOT EXISTS {sql_ident(table, 'postgres')} "
                       f"({_columns_sql(columns, 'postgres')})")
    elif dialect == "trino":
        partition = exp.Array(expressions=[exp.Literal.string(field_name)]).sql("trino")
        out.append(f"CREATE TABLE IF NOT EXISTS {sql_ident(DATA, 'trino')} "
                   f"({_columns_sql(lay.ordered_columns, 'trino')}) WITH (format = 'PARQUET', "
                   f"external_location = {sql_string(data, 'trino')}, "
                   f"partitioned_by = {partition})")
        for table, columns in lay.tables.items():
            out.append(f"CREATE TABLE IF NOT EXISTS {sql_ident(table, 'trino')} "
                       f"({_columns_sql(columns, 'trino')}) WITH (format = 'PARQUET', "
                       f"external_location = {sql_string(_under(location, table), 'trino')})")
    return out


def load_commands(lay: Layout, location: str) -> list[str]:
    """Shell commands that load the exported Parquet files into the PostgreSQL tables.

    PostgreSQL does not read Parquet; the DuckDB command line turns each table into CSV
    on a pipe, and psql empties the table and copies it in, in one transaction (its
    connection comes from the usual PG* variables): loading again after a new export
    replaces the rows, never adds them twice. The columns are listed on both sides, so
    their order never depends on the reader.
    """
    out = []
    for table, columns, glob, hive in (
        (DATA, lay.columns, _under(_under(location, DATA), "*/*.parquet"), True),
        *((t, c, _under(_under(location, t), "*.parquet"), False) for t, c in lay.tables.items()),
    ):
        names = ", ".join(sql_ident(c.name, "duckdb") for c in columns)
        source = (f"read_parquet({sql_string(glob, 'duckdb')}"
                  + (", hive_partitioning = true" if hive else "") + ")")
        reader = f"COPY (SELECT {names} FROM {source}) TO '/dev/stdout' (FORMAT csv, HEADER)"
        pg_names = ", ".join(sql_ident(c.name, "postgres") for c in columns)
        writer = (f"\\copy {sql_ident(table, 'postgres')} ({pg_names}) FROM STDIN "
                  "(FORMAT csv, HEADER)")
        empty = f"TRUNCATE {sql_ident(table, 'postgres')}"
        out.append(f"duckdb -c {shlex.quote(reader)} | psql -v ON_ERROR_STOP=1 -1 "
                   f"-c {shlex.quote(empty)} -c {shlex.quote(writer)}")
    return out


_NOTES = {
    "duckdb": [
        "DuckDB: the store's own macros and views, reading the exported Parquet files.",
    ],
    "spark": [
        "Spark SQL (4.x): run in one session, e.g. spark-sql -i spark.sql -e 'SELECT ...', or "
        "statement by statement from PySpark. Sources and views are TEMPORARY, the "
        "t-distribution macros become temporary SQL functions. The expressions are long: "
        "defining the views takes Spark tens of seconds, and it runs them faster with "
        "spark.sql.codegen.wholeStage=false (on one machine also give the driver 3g and "
        "set spark.sql.autoBroadcastJoinThreshold=-1).",
        "Differences from DuckDB: a division by zero gives NULL (DuckDB: an infinity or NaN), "
        "compensated sums (fsum) are plain sums.",
        "No bend views: the crossing and alerts views project from the whole-history line "
        "(basis 'whole', no 'bent' alerts), where DuckDB and PostgreSQL project from the line "
        "since the last significant bend.",
    ],
    "postgres": [
        "PostgreSQL (tested with 15): tables to load the Parquet files into (see below), the "
        "t-distribution macros as SQL functions, and the views.",
        "Differences from DuckDB: a division by zero gives NULL, exp() below 1e-308 gives 0, "
        "compensated sums (fsum) are plain sums, and PostgreSQL raises an error where a value "
        "overflows (groups DuckDB reports as out_of_range make the query fail).",
    ],
    "trino": [
        "Trino (Hive connector over the export folder): external tables, then the views with "
        "the t-distribution macros expanded in place. Register the partitions after creating "
        "the tables: CALL system.sync_partition_metadata('<schema>', 'measurements', 'FULL').",
        "Not run against a Trino server here; the file is checked to parse as Trino SQL.",
    ],
}


@dataclass
class Script:
    """One engine's SQL file."""

    dialect: str
    text: str
    unavailable: dict[str, str] = field(default_factory=dict)  # view -> why
    commands: tuple[str, ...] = ()  # shell commands that load the data (PostgreSQL)


@functools.cache
def _translator() -> str:
    """Digest of the translating code, so a changed translator rewrites the SQL files."""
    code = b"".join(Path(m.__file__).read_bytes()
                    for m in (lowering, dialects, sys.modules[__name__]) if m.__file__)
    return hashlib.sha256(code).hexdigest()


def digest(lay: Layout, dialect: str, location: str) -> str:
    parts = [
        str(FORMAT), __version__, _translator(), dialect, location, lay.partition_by,
        [[c.name, c.type] for c in lay.columns],
        {t: [[c.name, c.type] for c in cols] for t, cols in lay.tables.items()},
        [[p.name, p.kind, list(p.statements)] for p in lay.planned],
    ]
    return hashlib.sha256(json.dumps(parts, sort_keys=True).encode()).hexdigest()


@dataclass(frozen=True)
class _Translation:
    functions: tuple[str, ...]
    views: tuple[str, ...]  # lines: comments and statements
    unavailable: dict[str, str]


_TRANSLATIONS: dict[str, _Translation] = {}

#: View kinds an engine cannot run, and why. The views that read them are planned without
#: them (views.plan(without=...)): the crossing and alerts views read the whole-history line.
_LEFT_OUT: dict[str, tuple[frozenset[str], str]] = {
    "spark": (frozenset({"bend_rounds", "bend"}),
              "the bend search nests three rounds of one query, and planning it exhausts the "
              "Spark driver's memory (Java OutOfMemoryError with 3 GB), so the crossing and "
              "alerts views here project from the whole-history line"),
}


def _planned(lay: Layout, dialect: str) -> tuple[list[views.Planned], dict[str, str]]:
    """The views to translate for ``dialect``, and the ones left out with the reason."""
    if dialect not in _LEFT_OUT:
        return [p for p in lay.planned if p.kind != "macro"], {}
    kinds, why = _LEFT_OUT[dialect]
    names = {p.name for p in lay.planned}
    left_out = {p.name: why for p in lay.planned if p.kind in kinds}
    items = [p for p in views.plan(lay.spec, recompute=True, without=kinds)
             if p.kind != "macro" and p.name in names]
    return items, left_out


def _reads(statements: tuple[str, ...]) -> set[str]:
    """Names of the tables and views the statements read."""
    names: set[str] = set()
    for text in statements:
        for stmt in sqlglot.parse(text, read="duckdb"):
            if stmt is not None:
                names.update(t.name for t in stmt.find_all(exp.Table))
    return names


def _translate(lay: Layout, dialect: str) -> _Translation:
    """Functions and views for ``dialect`` (the slow part, shared by every location)."""
    key = digest(lay, dialect, "")
    if key in _TRANSLATIONS:
        return _TRANSLATIONS[key]
    macros = [s for p in lay.planned if p.kind == "macro" for s in p.statements]
    items, left_out = _planned(lay, dialect)
    functions = dialects.double_macros(macros) if dialect in ("spark", "postgres") else set()
    porter = dialects.Porter(dialect, macros, functions=functions)
    translated = [porter.view(p.name, p.statements) for p in items]
    unavailable: dict[str, str] = dict(left_out)
    lines: list[str] = [_comment(f"{name}: not available in {dialect}: {why}")
                        for name, why in left_out.items()]
    for item, done in zip(items, translated, strict=True):
        reads = _reads(item.statements) & set(unavailable)
        if reads and not done.unsupported:
            done = dialects.Translated(done.name, (), f"it reads {', '.join(sorted(reads))}, "
                                       "which is not available")
        if done.unsupported:
            unavailable[item.name] = done.unsupported
            lines.append(_comment(f"{item.name}: not available in {dialect}: {done.unsupported}"))
            continue
        lines.append(_comment(f"{item.name} ({item.kind}): {item.description}"))
        lines.extend(s + ";" for s in done.statements)
    found = _Translation(
        tuple(macros) if dialect == "duckdb" else tuple(porter.functions()),
        tuple(lines), unavailable,
    )
    if len(_TRANSLATIONS) >= 16:  # a long-lived process exporting many stores
        _TRANSLATIONS.clear()
    _TRANSLATIONS[key] = found
    return found


def script(lay: Layout, dialect: str, location: str) -> Script:
    """The SQL file for ``dialect`` with the export folder at ``location`` (path or URI)."""
    if dialect not in dialects.DIALECTS:
        raise ExportError(f"unknown dialect {dialect!r}",
                          hint="choose one of " + ", ".join(dialects.DIALECTS))
    done = _translate(lay, dialect)
    header = [
        f"trendledger {__version__}: the store's views for {dialect}, over an export at "
        f"{location}",
        f"spec {lay.spec.digest[:16]}, data partitioned by {lay.partition_by}",
        *_NOTES[dialect],
        f"The crossing views: {CAUTION}",
    ]
    if done.unavailable:
        header.append("Not available here: " + ", ".join(
            f"{name} ({why})" for name, why in done.unavailable.items()))
    commands: list[str] = []
    if dialect == "postgres":
        commands = load_commands(lay, location)
        header.append("PostgreSQL does not read Parquet: once the tables below exist, load "
                      "them from a shell (psql connects as the PG* variables say):")
        header.extend("  " + c for c in commands)
    text = "\n".join(
        ["\n".join(_comment(line) for line in header), "",
         "-- sources", *(s + ";" for s in _sources(lay, dialect, location)), ""]
        + (["-- functions", *(s + ";" for s in done.functions), ""] if done.functions else [])
        + ["-- views", *done.views, ""]
    )
    return Script(dialect, text, dict(done.unavailable), tuple(commands))


def _comment(line: str) -> str:
    # no semicolon even in a comment: some command-line clients split statements on it
    return "\n".join("-- " + part.replace(";", ",") for part in line.splitlines())


def split_script(text: str) -> list[str]:
    """The statements of an exported SQL file, without comments or the final semicolons.

    For clients that run one statement at a time (PySpark's ``spark.sql``, psycopg). A
    semicolon ends a statement unless it stands in a string, a quoted name or a comment;
    a backslash escapes the next character inside a string (Spark SQL's strings; the
    exported files hold none).
    """
    out: list[str] = []
    current: list[str] = []
    i, n = 0, len(text)
    while i < n:
        ch = text[i]
        if ch == "-" and text.startswith("--", i):  # a comment: up to the end of the line
            end = text.find("\n", i)
            i = n if end < 0 else end
            continue
        if ch in "'\"`":
            j = i + 1
            while j < n:
                if text[j] == "\\" and ch == "'":
                    j += 2
                    continue
                if text[j] == ch:
                    if text.startswith(ch * 2, j):  # a doubled quote stands for itself
                        j += 2
                        continue
                    break
                j += 1
            current.append(text[i:j + 1])
            i = j + 1
            continue
        if ch == ";":
            statement = "".join(current).strip()
            if statement:
                out.append(statement)
            current = []
        else:
            current.append(ch)
        i += 1
    statement = "".join(current).strip()
    if statement:
        out.append(statement)
    return out


def sql(source: Any, dialect: str, location: str = ".", *, wait: float = 5.0,
        trace: Writer | None = None) -> Script:
    """The SQL file for ``dialect``; ``source`` is a store path, a Ledger or a connection."""
    with connection(source, wait=wait, write_files=False, trace=trace) as con:
        return script(layout(con), dialect, location)
