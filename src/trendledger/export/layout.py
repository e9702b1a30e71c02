"""What an export of the store holds: the data's columns, its partition field, the other
tables and the views, read from the store without writing anything.

Shared by :mod:`trendledger.export` (the Parquet files) and :mod:`trendledger.export_sql`
(the SQL files for other engines).
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import duckdb
import sqlglot
from sqlglot import exp

from trendledger.errors import TrendledgerError
from trendledger.spec import Spec
from trendledger.store import db as store
from trendledger.trace import Writer, unwrap
from trendledger.views import install as views

DATA = "measurements"
LINEAGE = ("ingest_batches", "ingest_files")


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


# -- connections --------------------------------------------------------------------------------


@contextlib.contextmanager
def connection(source: Any, *, wait: float, write_files: bool, trace: Writer | None = None
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
