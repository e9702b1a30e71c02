"""Hand the store to other engines: Parquet files plus the views in each engine's SQL.

``export(source, folder)`` writes::

    folder/
      manifest.json                     what the export holds (see below)
      measurements/<field>=<value>/     the data, one Hive partition per value of a field
      ingest_batches/data.parquet       the lineage
      ingest_files/data.parquet
      <table>/data.parquet              any other store table a view reads (none today: the
                                        views recompute the fits from the rows, see
                                        views.RECOMPUTED)
      views/{duckdb,spark,postgres,trino}.sql

Spark, Trino and DuckDB read the Parquet folders where they are; PostgreSQL gets tables
to load them into. Each ``views/<dialect>.sql`` defines the sources, the SQL functions the
views need there and every view of the store (``tl_views``), re-rendered from the
templates and translated by :mod:`trendledger.dialects`.

Exporting again is incremental and safe to repeat. The manifest keeps, per partition, a
fingerprint of what it holds: its row count, and a digest over the files whose rows it
holds (their file id, content hash, row count and a hash of their rows in the store). A
partition is rewritten only when its fingerprint changed; one whose rows are all gone
(a retracted day) is removed. New files are written to a hidden staging folder inside the
export folder and swapped in partition by partition, the old ones moved aside first, so
a reader or a crash never sees half a partition, and a stale file never survives a
rewrite (DuckDB's ``COPY ... PARTITION_BY`` would leave one behind, or duplicate rows with
``APPEND``). The manifest is written last; an export that stopped half way is finished
by the next one.

Connections. DuckDB writes the files, so the connection must be allowed to write files.
Given a store path, ``export`` opens its own read-only connection without the locked
settings a read-only :class:`~trendledger.ledger.Ledger` uses (readers are not blocked;
a writer makes it wait). A read-write Ledger's own connection works too; a read-only
Ledger's cannot write files by design and is refused with a hint.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import fcntl
import functools
import hashlib
import json
import os
import shlex
import shutil
import sys
import time
import uuid
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any
from urllib.parse import quote

import duckdb
import sqlglot
from sqlglot import exp

from . import __version__, dialects, lowering, store, views
from .errors import TrendledgerError
from .spec import Spec
from .trace import Writer, unwrap
from .watch import CAUTION

#: Layout version of an export folder; a different one is rewritten whole.
FORMAT = 1
MANIFEST = "manifest.json"
DATA = "measurements"
LINEAGE = ("ingest_batches", "ingest_files")
VIEWS = "views"
FILE = "data.parquet"
_LOCK = ".trendledger-export.lock"
_STAGING = ".staging-"
_TRASH = ".trash-"
#: Hive's folder name for a NULL partition value (Spark, Trino and DuckDB read it as NULL).
NULL_PARTITION = "__HIVE_DEFAULT_PARTITION__"


class ExportError(TrendledgerError):
    """The export folder or the connection cannot be used."""


# -- what goes out ------------------------------------------------------------------------------


@dataclass(frozen=True)
class Column:
    name: str
    type: str  # as DuckDB's DESCRIBE prints it


@dataclass(frozen=True)
class Layout:
    """What the store exports: the partitioned data, its partition field and other tables."""

    spec: Spec
    partition_by: str
    columns: tuple[Column, ...]  # of measurements, in store order
    tables: dict[str, tuple[Column, ...]]  # unpartitioned tables, name -> columns
    planned: tuple[views.Planned, ...]  # macros and views, in install order

    @property
    def data_columns(self) -> tuple[Column, ...]:
        """Columns stored inside the Parquet files (the partition field is the folder)."""
        return tuple(c for c in self.columns if c.name != self.partition_by)

    @property
    def partition_column(self) -> Column:
        return next(c for c in self.columns if c.name == self.partition_by)

    @property
    def ordered_columns(self) -> tuple[Column, ...]:
        """Data columns, then the partition field: the order Hive engines use."""
        return (*self.data_columns, self.partition_column)


def _describe(con: duckdb.DuckDBPyConnection, table: str) -> tuple[Column, ...]:
    ident = exp.to_identifier(table, quoted=True).sql("duckdb")
    return tuple(Column(r[0], r[1]) for r in con.execute(f"DESCRIBE {ident}").fetchall())


def default_partition(spec: Spec) -> str:
    """The first DATE field of the file template, else its first field."""
    fields = spec.source.fields
    for name, typ in fields.items():
        if typ == "DATE":
            return name
    return next(iter(fields))


def layout(con: duckdb.DuckDBPyConnection, partition_by: str | None = None) -> Layout:
    """Read what an export of this store holds, without writing anything."""
    spec = store.stored_spec(con)
    field_name = partition_by or default_partition(spec)
    if field_name not in spec.source.fields:
        raise ExportError(
            f"cannot partition by {field_name!r}: partitions follow a field of the file "
            "template, so that each file's rows land in one partition",
            hint="choose one of " + ", ".join(spec.source.fields),
        )
    installed = {name for name, kind in con.execute(
        "SELECT name, kind FROM tl_views").fetchall()}
    planned = tuple(p for p in views.plan(spec, recompute=True)
                    if p.kind == "macro" or p.name in installed)
    view_names = {p.name for p in planned}
    base = {r[0] for r in con.execute(
        "SELECT table_name FROM information_schema.tables "
        "WHERE table_type = 'BASE TABLE' AND table_schema = 'main'").fetchall()}
    tables: dict[str, tuple[Column, ...]] = {t: _describe(con, t) for t in LINEAGE}
    for name in _tables_read(planned, view_names):
        if name in base and name != DATA and name not in tables:
            tables[name] = _describe(con, name)
    return Layout(spec, field_name, _describe(con, DATA), tables, planned)


def _tables_read(planned: tuple[views.Planned, ...], view_names: set[str]) -> list[str]:
    """Tables the views read besides each other (e.g. a fit's stored moments)."""
    out: list[str] = []
    for item in planned:
        if item.kind == "macro":
            continue
        for text in item.statements:
            for stmt in sqlglot.parse(text, read="duckdb"):
                if stmt is None:
                    continue
                ctes = {cte.alias_or_name for cte in stmt.find_all(exp.CTE)}
                for table in stmt.find_all(exp.Table):
                    name = table.name
                    if name and name not in ctes and name not in view_names \
                            and name not in out:
                        out.append(name)
    return out


# -- SQL for the engines ------------------------------------------------------------------------


def _ident(name: str, dialect: str) -> str:
    return exp.to_identifier(name, quoted=True).sql(dialect)


def _string(text: str, dialect: str) -> str:
    return exp.Literal.string(text).sql(dialect)


def _under(location: str, name: str) -> str:
    """``location/name`` for a path or a URI."""
    if "://" in location:
        return location.rstrip("/") + "/" + name
    return str(PurePosixPath(location) / name)


def _columns_sql(columns: tuple[Column, ...], dialect: str) -> str:
    return ", ".join(f"{_ident(c.name, dialect)} {dialects.column_type(c.type, dialect)}"
                     for c in columns)


def _sources(lay: Layout, dialect: str, location: str) -> list[str]:
    """Statements that make the exported tables visible under their store names."""
    out: list[str] = []
    data = _under(location, DATA)
    field_name = lay.partition_by
    if dialect == "duckdb":
        names = ", ".join(_ident(c.name, "duckdb") for c in lay.columns)
        hive_types = exp.Struct(expressions=[exp.PropertyEQ(
            this=exp.Literal.string(field_name),
            expression=exp.Literal.string(lay.partition_column.type))]).sql("duckdb")
        glob = _string(_under(data, "*/*.parquet"), "duckdb")
        out.append(f"CREATE OR REPLACE VIEW {_ident(DATA, 'duckdb')} AS SELECT {names} FROM "
                   f"read_parquet({glob}, hive_partitioning = true, hive_types = {hive_types})")
        for table in lay.tables:
            glob = _string(_under(_under(location, table), "*.parquet"), "duckdb")
            out.append(f"CREATE OR REPLACE VIEW {_ident(table, 'duckdb')} AS "
                       f"SELECT * FROM read_parquet({glob})")
    elif dialect == "spark":
        out.append(f"CREATE OR REPLACE TEMPORARY VIEW {_ident(DATA, 'spark')} "
                   f"({_columns_sql(lay.ordered_columns, 'spark')}) USING parquet "
                   f"OPTIONS (path {_string(data, 'spark')})")
        for table, columns in lay.tables.items():
            out.append(f"CREATE OR REPLACE TEMPORARY VIEW {_ident(table, 'spark')} "
                       f"({_columns_sql(columns, 'spark')}) USING parquet "
                       f"OPTIONS (path {_string(_under(location, table), 'spark')})")
    elif dialect == "postgres":
        out.append(f"CREATE TABLE IF NOT EXISTS {_ident(DATA, 'postgres')} "
                   f"({_columns_sql(lay.columns, 'postgres')})")
        for table, columns in lay.tables.items():
            out.append(f"CREATE TABLE IF NOT EXISTS {_ident(table, 'postgres')} "
                       f"({_columns_sql(columns, 'postgres')})")
    elif dialect == "trino":
        partition = exp.Array(expressions=[exp.Literal.string(field_name)]).sql("trino")
        out.append(f"CREATE TABLE IF NOT EXISTS {_ident(DATA, 'trino')} "
                   f"({_columns_sql(lay.ordered_columns, 'trino')}) WITH (format = 'PARQUET', "
                   f"external_location = {_string(data, 'trino')}, partitioned_by = {partition})")
        for table, columns in lay.tables.items():
            out.append(f"CREATE TABLE IF NOT EXISTS {_ident(table, 'trino')} "
                       f"({_columns_sql(columns, 'trino')}) WITH (format = 'PARQUET', "
                       f"external_location = {_string(_under(location, table), 'trino')})")
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
        names = ", ".join(_ident(c.name, "duckdb") for c in columns)
        source = (f"read_parquet({_string(glob, 'duckdb')}"
                  + (", hive_partitioning = true" if hive else "") + ")")
        reader = f"COPY (SELECT {names} FROM {source}) TO '/dev/stdout' (FORMAT csv, HEADER)"
        pg_names = ", ".join(_ident(c.name, "postgres") for c in columns)
        writer = (f"\\copy {_ident(table, 'postgres')} ({pg_names}) FROM STDIN "
                  "(FORMAT csv, HEADER)")
        empty = f"TRUNCATE {_ident(table, 'postgres')}"
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
    ],
    "postgres": [
        "PostgreSQL (14 or later): tables to load the Parquet files into (see below), the "
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


def _digest(lay: Layout, dialect: str, location: str) -> str:
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


def _translate(lay: Layout, dialect: str) -> _Translation:
    """Functions and views for ``dialect`` (the slow part, shared by every location)."""
    key = _digest(lay, dialect, "")
    if key in _TRANSLATIONS:
        return _TRANSLATIONS[key]
    macros = [s for p in lay.planned if p.kind == "macro" for s in p.statements]
    items = [p for p in lay.planned if p.kind != "macro"]
    functions = dialects.double_macros(macros) if dialect in ("spark", "postgres") else set()
    porter = dialects.Porter(dialect, macros, functions=functions)
    translated = [porter.view(p.name, p.statements) for p in items]
    unavailable: dict[str, str] = {}
    lines: list[str] = []
    for item, done in zip(items, translated, strict=True):
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
    with _connection(source, wait=wait, write_files=False, trace=trace) as con:
        return script(layout(con), dialect, location)


# -- connections --------------------------------------------------------------------------------


@contextlib.contextmanager
def _connection(source: Any, *, wait: float, write_files: bool, trace: Writer | None = None
                ) -> Iterator[duckdb.DuckDBPyConnection]:
    if isinstance(source, str | Path):
        con = store.connect(Path(source), read_only=True, wait=wait, trace=trace)
        try:
            yield con
        finally:
            con.close()
        return
    given = source if isinstance(unwrap(source), duckdb.DuckDBPyConnection) \
        else getattr(source, "con", None)
    if given is None or not isinstance(unwrap(given), duckdb.DuckDBPyConnection):
        raise ExportError("export needs a store path, a Ledger or a DuckDB connection")
    if write_files:
        allowed = store.first_row(given, "SELECT current_setting('enable_external_access')")
        if not allowed or not allowed[0]:
            raise ExportError(
                "this connection may not write files (a read-only Ledger is locked that way)",
                hint="open the Ledger read-write, or pass the store's path to export()",
            )
    yield given


# -- the export ---------------------------------------------------------------------------------


def _folder_name(field_name: str, value: str | None) -> str:
    """Hive-style ``field=value`` folder name, the value percent-encoded."""
    if value is None:
        return f"{field_name}={NULL_PARTITION}"
    return f"{field_name}={quote(value, safe='')}"


def _fingerprints(con: duckdb.DuckDBPyConnection, lay: Layout) -> dict[str, dict[str, Any]]:
    """Per partition value: rows, files, batches and a digest of what it holds."""
    part = exp.column(lay.partition_by, quoted=True)
    cells = [exp.column(c.name, quoted=True) for c in lay.columns]
    query = exp.select(
        exp.alias_(exp.Cast(this=part, to=exp.DataType.build("VARCHAR")), "tl_key"),
        exp.column("file_id", quoted=True),
        exp.alias_(exp.Count(this=exp.Star()), "tl_rows"),
        exp.alias_(exp.Cast(this=exp.Sum(this=exp.Anonymous(this="hash", expressions=cells)),
                            to=exp.DataType.build("VARCHAR")), "tl_hash"),
    ).from_(exp.to_table(DATA, quoted=True)).group_by(exp.Literal.number(1),
                                                      exp.Literal.number(2))
    rows = con.execute(query.sql("duckdb")).fetchall()
    lineage = {r[0]: (r[1], r[2]) for r in con.execute(
        "SELECT file_id, sha256, batch_id FROM ingest_files").fetchall()}
    grouped: dict[str, list[tuple[Any, ...]]] = {}
    for key, file_id, n, digest in rows:
        grouped.setdefault(NULL_PARTITION if key is None else key, []).append(
            (file_id, n, digest))
    out: dict[str, dict[str, Any]] = {}
    for key, files in grouped.items():
        files.sort(key=lambda f: (f[0] is None, f[0] or 0))
        h = hashlib.sha256()
        batches: set[int] = set()
        for file_id, n, digest in files:
            sha, batch = lineage.get(file_id, ("", None))
            if batch is not None:
                batches.add(int(batch))
            h.update(f"{file_id}:{sha}:{n}:{digest}\n".encode())
        out[key] = {
            "folder": _folder_name(lay.partition_by, None if key == NULL_PARTITION else key),
            "rows": sum(f[1] for f in files),
            "files": [f[0] for f in files],
            "batches": sorted(batches),
            "fingerprint": h.hexdigest(),
        }
    return out


def _table_fingerprint(con: duckdb.DuckDBPyConnection, table: str,
                       columns: tuple[Column, ...]) -> dict[str, Any]:
    cells = [exp.column(c.name, quoted=True) for c in columns]
    query = exp.select(
        exp.Count(this=exp.Star()),
        exp.Cast(this=exp.Sum(this=exp.Anonymous(this="hash", expressions=cells)),
                 to=exp.DataType.build("VARCHAR")),
    ).from_(exp.to_table(table, quoted=True))
    found = store.first_row(con, query.sql("duckdb"))
    n, digest = found if found else (0, None)
    signature = json.dumps([[c.name, c.type] for c in columns])
    return {"rows": int(n), "fingerprint": hashlib.sha256(
        f"{signature}:{n}:{digest}".encode()).hexdigest()}


def _copy_partitions(con: duckdb.DuckDBPyConnection, lay: Layout, keys: list[str],
                     target: Path) -> None:
    """Write the rows of the given partition values to target/tl_slot=<i>/ (one COPY)."""
    slot = "tl_slot"
    while slot in {c.name for c in lay.columns}:
        slot += "_"
    names = [exp.column(c.name, table="m", quoted=True) for c in lay.data_columns]
    pairs = exp.select(
        exp.alias_(exp.Anonymous(this="unnest", expressions=[
            exp.Array(expressions=[exp.Literal.string(k) for k in keys])]), "tl_key"),
        exp.alias_(exp.Anonymous(this="unnest", expressions=[
            exp.Array(expressions=[exp.Literal.number(i) for i in range(len(keys))])]), slot),
    )
    key = exp.Coalesce(this=exp.Cast(this=exp.column(lay.partition_by, table="m", quoted=True),
                                     to=exp.DataType.build("VARCHAR")),
                       expressions=[exp.Literal.string(NULL_PARTITION)])
    query = (
        exp.select(*names, exp.column(slot, table="k"))
        .from_(exp.alias_(exp.to_table(DATA, quoted=True), "m", table=True))
        .join(exp.alias_(exp.Subquery(this=pairs), "k", table=True),
              on=exp.EQ(this=key, expression=exp.column("tl_key", table="k")))
    )
    con.execute(
        f"COPY ({query.sql('duckdb')}) TO {_string(str(target), 'duckdb')} "
        f"(FORMAT parquet, PARTITION_BY ({_ident(slot, 'duckdb')}))"
    )
    for i in range(len(keys)):  # a partition value may own no row file if COPY wrote none
        (target / f"{slot}={i}").mkdir(parents=True, exist_ok=True)
    for i, _ in enumerate(keys):
        (target / f"{slot}={i}").rename(target / f"slot-{i}")


def _copy_table(con: duckdb.DuckDBPyConnection, table: str, target: Path) -> None:
    query = exp.select(exp.Star()).from_(exp.to_table(table, quoted=True))
    con.execute(f"COPY ({query.sql('duckdb')}) TO {_string(str(target), 'duckdb')} "
                "(FORMAT parquet)")


@contextlib.contextmanager
def _locked(folder: Path) -> Iterator[None]:
    folder.mkdir(parents=True, exist_ok=True)
    with open(folder / _LOCK, "w") as handle:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as err:
            raise ExportError("another export is writing this folder", file=str(folder)) from err
        try:
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)


def _read_manifest(folder: Path) -> dict[str, Any] | None:
    path = folder / MANIFEST
    if not path.is_file():
        others = [p.name for p in folder.iterdir() if p.name != _LOCK
                  and not p.name.startswith((_STAGING, _TRASH))]
        if others:
            raise ExportError("the folder is not empty and holds no trendledger export",
                              file=str(folder), hint="export to a new or empty folder")
        return None
    try:
        found = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as err:
        raise ExportError(f"cannot read the export's manifest: {err}", file=str(path)) from err
    if not isinstance(found, dict):
        raise ExportError("the export's manifest is not a JSON object", file=str(path))
    return found


def _write_atomic(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    temporary = path.with_name(f".{path.name}.{uuid.uuid4().hex}")
    temporary.write_text(text, encoding="utf-8")
    os.replace(temporary, path)


def _clean(folder: Path) -> None:
    """Remove what an interrupted export left behind."""
    for leftover in folder.iterdir():
        if leftover.name.startswith((_STAGING, _TRASH)) and leftover.is_dir():
            shutil.rmtree(leftover, ignore_errors=True)


def export(
    source: Any,
    folder: str | Path,
    partition_by: str | None = None,
    *,
    dialects_wanted: tuple[str, ...] = dialects.DIALECTS,
    wait: float = 5.0,
    trace: Writer | None = None,
) -> dict[str, Any]:
    """Export the store to ``folder`` (see the module notes); returns what was done.

    ``source`` is a store path (opened read-only, allowed to write files), a read-write
    Ledger, or a DuckDB connection that may write files. A folder that cannot be written
    (a file of that name, no such parent, a full disk) raises :class:`ExportError`; the
    partitions already in place stay whole, and the next export finishes the job.
    """
    try:
        return _export(source, folder, partition_by, dialects_wanted, wait, trace)
    except OSError as err:
        raise ExportError(f"cannot write the export: {err.strerror or err}",
                          file=str(err.filename or folder)) from err
    except duckdb.IOException as err:
        raise ExportError(f"cannot write the export: {str(err).splitlines()[0]}",
                          file=str(folder)) from err


def _export(source: Any, folder: str | Path, partition_by: str | None,
            dialects_wanted: tuple[str, ...], wait: float, trace: Writer | None
            ) -> dict[str, Any]:
    started = time.perf_counter()
    target = Path(folder).resolve()
    with _connection(source, wait=wait, write_files=True, trace=trace) as con, _locked(target):
        old = _read_manifest(target)
        _clean(target)
        staging = target / f"{_STAGING}{uuid.uuid4().hex}"
        trash = target / f"{_TRASH}{uuid.uuid4().hex}"
        staging.mkdir()
        try:
            con.execute("BEGIN TRANSACTION")  # one snapshot for data, lineage and views
            try:
                lay = layout(con, partition_by)
                result = _export_data(con, lay, target, old, staging, trash)
            finally:
                con.execute("ROLLBACK")  # read only: nothing to keep
            location = str(target)
            scripts: dict[str, str] = {}
            unavailable: dict[str, dict[str, str]] = {}
            old_scripts = (old or {}).get("views", {})
            for dialect in dialects_wanted:
                key = _digest(lay, dialect, location)
                path = target / VIEWS / f"{dialect}.sql"
                if old_scripts.get(dialect, {}).get("digest") == key and path.is_file():
                    scripts[dialect] = key
                    unavailable[dialect] = old_scripts[dialect].get("unavailable", {})
                    continue
                made = script(lay, dialect, location)
                _write_atomic(path, made.text)
                scripts[dialect] = key
                unavailable[dialect] = made.unavailable
            manifest = {
                "format": FORMAT,
                "tool": f"trendledger {__version__}",
                "exported_at": dt.datetime.now(dt.UTC).replace(tzinfo=None)
                .isoformat(timespec="seconds"),
                "spec_hash": lay.spec.digest,
                "table": DATA,
                "partition_by": lay.partition_by,
                "columns": [[c.name, c.type] for c in lay.columns],
                "rows": result["rows"],
                "batches": result["batches"],
                "partitions": result["partitions"],
                "tables": result["tables"],
                "views": {d: {"digest": scripts[d], "unavailable": unavailable[d]}
                          for d in scripts},
            }
            _write_atomic(target / MANIFEST, json.dumps(manifest, indent=1, sort_keys=True))
        finally:
            shutil.rmtree(staging, ignore_errors=True)
            shutil.rmtree(trash, ignore_errors=True)
    return {
        "folder": str(target),
        "partition_by": lay.partition_by,
        "rows": result["rows"],
        "partitions": len(result["partitions"]),
        "written": result["written"],
        "removed": result["removed"],
        "unchanged": result["unchanged"],
        "batches": result["batches"],
        "tables": {t: v["rows"] for t, v in result["tables"].items()},
        "tables_written": result["tables_written"],
        "views": {d: str(target / VIEWS / f"{d}.sql") for d in dialects_wanted},
        "unavailable": {d: u for d, u in unavailable.items() if u},
        "seconds": round(time.perf_counter() - started, 3),
    }


def _export_data(con: duckdb.DuckDBPyConnection, lay: Layout, target: Path,
                 old: dict[str, Any] | None, staging: Path, trash: Path) -> dict[str, Any]:
    """Write what changed into staging, then swap it in; the manifest's new content."""
    data = target / DATA
    signature = [[c.name, c.type] for c in lay.columns]
    same_shape = old is not None and old.get("format") == FORMAT \
        and old.get("partition_by") == lay.partition_by and old.get("columns") == signature
    before: dict[str, dict[str, Any]] = {}
    if same_shape and old is not None:
        before = old.get("partitions", {})
    if not same_shape and data.exists():
        trash.mkdir(exist_ok=True)
        data.rename(trash / DATA)  # a new layout: nothing of the old one is kept
    now = _fingerprints(con, lay)
    changed = sorted(k for k, v in now.items()
                     if before.get(k, {}).get("fingerprint") != v["fingerprint"]
                     or not (data / v["folder"]).is_dir())
    removed = sorted(k for k in before if k not in now)
    if changed:
        _copy_partitions(con, lay, changed, staging / DATA)
    tables: dict[str, dict[str, Any]] = {}
    tables_written: list[str] = []
    old_tables = (old or {}).get("tables", {})
    for table, columns in lay.tables.items():
        found = _table_fingerprint(con, table, columns)
        tables[table] = found
        if old_tables.get(table, {}).get("fingerprint") != found["fingerprint"] \
                or not (target / table / FILE).is_file():
            _copy_table(con, table, staging / f"{table}.parquet")
            tables_written.append(table)
    # swap in: each partition folder is replaced whole, the old one moved aside first
    data.mkdir(exist_ok=True)
    trash.mkdir(exist_ok=True)
    stamp = dt.datetime.now(dt.UTC).replace(tzinfo=None).isoformat(timespec="seconds")
    for i, key in enumerate(changed):
        final = data / now[key]["folder"]
        if final.exists():
            final.rename(trash / f"old-{i}")
        (staging / DATA / f"slot-{i}").rename(final)
        now[key]["written_at"] = stamp
    for key in now:
        if key not in changed:
            now[key]["written_at"] = before[key].get("written_at", stamp)
    wanted = {v["folder"] for v in now.values()}
    for i, stale in enumerate(p for p in sorted(data.iterdir()) if p.name not in wanted):
        stale.rename(trash / f"stale-{i}")  # retracted partitions, strays of a crash
    for table in tables_written:
        (target / table).mkdir(exist_ok=True)
        os.replace(staging / f"{table}.parquet", target / table / FILE)
    for table in old_tables:
        if table not in tables and (target / table).is_dir():
            (target / table).rename(trash / f"table-{table}")
    batches = sorted({b for v in now.values() for b in v["batches"]})
    return {
        "rows": sum(v["rows"] for v in now.values()),
        "batches": batches,
        "partitions": now,
        "written": changed,
        "removed": removed,
        "unchanged": len(now) - len(changed),
        "tables": tables,
        "tables_written": tables_written,
    }
